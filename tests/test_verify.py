"""Tests of numerology.verify: the analytic link model against the Monte-Carlo simulator.

The end-to-end cases run shipped requirement examples with published
numerologies (presets); the reference for each figure is the project's own
analytic model (numerology.link), whose terms are each tested against their
published sources in the tests of their modules. Agreement is the module's
stated rule (tolerance in dB or prediction inside the 95 % interval).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from numerology import link
from numerology.design import Design, DesignArrays
from numerology.environment import derive_environment
from numerology.errors import InputError
from numerology.presets import get_preset
from numerology.requirements import load_requirements, requirements_from_mapping
from numerology.verify import TOLERANCE_DB, ZERO_FLOOR, TermCheck, verify

EXAMPLES = Path(__file__).resolve().parents[1] / "requirements_examples"


def predicted_terms(req, design):
    evaluation = link.evaluate(DesignArrays.from_designs([design]), derive_environment(req), req)
    return {name: float(np.ravel(value)[0]) for name, value in evaluation.terms.items()}, float(
        np.ravel(evaluation.sinr_eff)[0])


def assert_db_keys(mapping, unit_given=False):
    """Every float in the JSON carries a _db suffix, on its own key or on the table holding it
    (``tolerance_db``); other keys hold counts, flags, text or the confidence level."""
    for key, value in mapping.items():
        if isinstance(value, dict):
            assert_db_keys(value, unit_given or key.endswith("_db"))
        elif isinstance(value, float) and key != "confidence":
            assert unit_given or key.endswith("_db"), key


@pytest.mark.xfail(reason="the simulator still estimates with the old lattice window; its independent receiver is being written", strict=False)
def test_harbour_crane_with_nr_numerology_agrees():
    """harbour_crane.toml (10 measured taps, classical Doppler 137 Hz, Wiener phase noise, CFO) with NR mu = 1.

    Reference: numerology.link.evaluate for the same design and requirements.
    """
    req = load_requirements(EXAMPLES / "harbour_crane.toml")
    design = get_preset("nr-mu1").design
    result = verify(req, design)
    terms, sinr = predicted_terms(req, design)
    assert result.predicted_terms == terms
    assert_allclose(result.check("sinr_eff").predicted, sinr, rtol=1e-12)  # no mask: the model's own SINR
    assert_allclose(result.check("interference").predicted, terms["echo"] + terms["doppler"], rtol=1e-15)
    assert_allclose(result.check("estimation").predicted, terms["estimation"], rtol=1e-15)
    for check in result.checks:
        assert check.agree, str(check)
        assert check.ci_half_width_db < check.tolerance_db  # the run resolves the tolerance
    assert result.agree
    assert any("common phase" in note for note in result.notes)
    assert any("extra cyclic prefix" in note for note in result.notes)


@pytest.mark.xfail(reason="the simulator still estimates with the old lattice window; its independent receiver is being written", strict=False)
def test_rail_corridor_with_lte_numerology_agrees():
    """rail_corridor.toml (TDL-D at 120 ns, tracked Rician spectrum, K = 9 dB, 528 Hz) with LTE 20 MHz.

    Reference: numerology.link.evaluate (tracked-spectrum Doppler ICI by
    Gauss-Chebyshev quadrature, LMMSE on the staggered 6x4/3 lattice).
    """
    req = load_requirements(EXAMPLES / "rail_corridor.toml")
    result = verify(req, get_preset("lte-20-normal").design, frames=96)
    for check in result.checks:
        assert check.agree, str(check)


def test_json_has_unit_suffixed_values():
    req = load_requirements(EXAMPLES / "harbour_crane.toml")
    result = verify(req, get_preset("nr-mu1").design, frames=4)
    data = result.to_json()
    text = json.dumps(data, allow_nan=False)  # JSON proper: no NaN or infinity
    assert json.loads(text) == data
    assert set(data) >= {"measured", "predicted", "agree", "tolerance_db", "terms", "notes"}
    assert set(data["terms"]) == {"interference", "estimation", "sinr_eff"}
    assert data["tolerance_db"] == TOLERANCE_DB
    assert data["measured"]["evm_db"] == pytest.approx(-data["measured"]["sinr_eff_db"], abs=1e-9)
    assert data["predicted"]["terms_db"]["echo_db"] is None  # no echo beyond the guard: 0, not -inf
    assert data["agree"] == all(term["agree"] for term in data["terms"].values())
    assert_db_keys(data)
    assert str(result).startswith("nr-mu1: model and simulation ")


def test_static_channel_within_guard_predicts_and_measures_zero_interference():
    """No Doppler and both rays inside the guard: the model predicts 0, the simulator measures round-off."""
    req = requirements_from_mapping({
        "environment": {"carrier": "2 GHz", "max_speed": "0 km/h", "max_excess_delay": "1 us"},
        "radio": {"bandwidth": "5 MHz", "snr": "20 dB"},
    })
    design = Design("small", 15e3, 512, 36, 300, 6, 2, 3, 14)  # CP 36 samples = 4.69 us > 1 us
    result = verify(req, design, frames=8)
    check = result.check("interference")
    assert check.predicted == 0
    assert check.measured < ZERO_FLOOR
    assert check.difference_db is None
    assert check.agree
    assert any("predicted 0" in note for note in result.notes)


def test_phase_noise_mask_is_left_out_and_noted():
    """factory_robots.toml gives a phase-noise mask, which is not simulated: the note says so and the
    predicted SINR leaves that term out."""
    req = load_requirements(EXAMPLES / "factory_robots.toml")
    design = get_preset("nr-mu2").design
    result = verify(req, design, frames=2)
    terms, _ = predicted_terms(req, design)
    without = sum(value for name, value in terms.items() if name != "phase_noise")
    assert_allclose(result.check("sinr_eff").predicted, 1 / without, rtol=1e-12)
    assert any("phase-noise mask is not simulated" in note for note in result.notes)
    assert result.simulation.linewidth_hz == 0.0


@pytest.mark.parametrize("measured, ci, predicted, expected", [
    (1.0e-3, (0.9e-3, 1.1e-3), 1.05e-3, True),  # inside the interval
    (1.0e-3, (0.99e-3, 1.01e-3), 1.1e-3, True),  # outside the interval, 0.41 dB < 0.5 dB
    (1.0e-3, (0.99e-3, 1.01e-3), 1.2e-3, False),  # 0.79 dB
    (1.0e-3, (0.1e-3, 5e-3), 4e-3, True),  # inconclusive run: prediction inside a wide interval
    (1e-14, (0.0, 2e-14), 0.0, True),  # zero predicted, round-off measured
    (1e-6, (0.5e-6, 2e-6), 0.0, False),  # zero predicted, something measured
])
def test_agreement_rule(measured, ci, predicted, expected):
    check = TermCheck("interference", measured, ci, predicted, 0.5)
    assert check.agree is expected
    if predicted > 0:
        assert_allclose(check.difference_db, 10 * math.log10(measured / predicted), rtol=1e-12)


def test_term_check_text():
    check = TermCheck("estimation", 1e-2, (0.9e-2, 1.1e-2), 1e-2, 1.0)
    assert str(check) == ("estimation: measured -20.00 dB [-20.46 dB, -19.59 dB], predicted -20.00 dB, "
                          "difference +0.00 dB (tolerance 1 dB): agrees")


def test_design_must_be_a_design():
    req = load_requirements(EXAMPLES / "harbour_crane.toml")
    with pytest.raises(InputError) as caught:
        verify(req, "nr-mu1")
    assert caught.value.place == "design"
