"""Tests of numerology.verify: the analytic link model against a simulation with its own receiver.

The references: the project's analytic model (numerology.link, whose terms
are tested against their published sources in the tests of their modules)
where the two should agree, outside closed forms named beside each check,
and deliberately wrong predictions that a verification must reject.
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np
import pytest
import scipy.special as sp
from numpy.testing import assert_allclose

from numerology import link
from numerology.cli import main
from numerology.design import DesignArrays
from numerology.environment import derive_environment
from numerology.errors import InputError
from numerology.presets import get_preset
from numerology.requirements import load_requirements, requirements_from_mapping
from numerology.verify import AGREE, DISAGREE, INCONCLUSIVE, TOLERANCE_DB, RateCheck, TermCheck, verify

EXAMPLES = Path(__file__).resolve().parents[1] / "requirements_examples"
HARBOUR = EXAMPLES / "harbour_crane.toml"


def road_side(speed: str, snr: str = "20 dB"):
    """An invented road-side link for 802.11p: 5.9 GHz, a short delay spread (400 ns span, 100 ns rms)."""
    return requirements_from_mapping({
        "environment": {"carrier": "5.9 GHz", "max_speed": speed, "max_excess_delay": "400 ns",
                        "rms_delay_spread": "100 ns"},
        "radio": {"bandwidth": "10 MHz", "snr": snr},
    })


def model_estimation_error(req, design):
    """The model's estimation error E (its ``estimation`` term is E / (1 - E))."""
    term = float(link.evaluate(DesignArrays.from_designs([design]), derive_environment(req), req).terms["estimation"][0])
    return term / (1 + term)


# --- the done-when of the packet case ----------------------------------------------------------------


@pytest.fixture(scope="module")
def wifi_p_at_250():
    return verify(road_side("250 km/h"), get_preset("wifi-p-10").design)


def test_802_11p_at_250_kmh_is_no_better_than_the_held_preamble(wifi_p_at_250):
    """802.11p (10 MHz), 5.9 GHz, 250 km/h, 126 data symbols after two long training symbols: the measured
    estimation error is no better than the held-preamble bound, and the model (which holds the preamble too)
    agrees.

    The bound: the estimate of the two training symbols (averaged: noise halved), held and optimally scaled,
    has the error 1 - J0(2 pi f_D t)^2 / (1 + s/2) at a lag t from the last training symbol (Clarke 1968 /
    Jakes 1974 for J0; common practice for the scaling), averaged over the packet's data symbols. It is a
    bound up to the window average of each symbol (a factor 1 - O((f_D T_u)^2), here 1e-4).
    """
    result = wifi_p_at_250
    design = result.design
    f_d = derive_environment(road_side("250 km/h")).max_doppler_hz
    assert_allclose(f_d, 250 / 3.6 * 5.9e9 / 299792458.0, rtol=1e-12)
    lags = np.arange(1, design.symbols_per_slot - 1) * design.symbol_s  # SIGNAL and data: 1 .. 127 after training
    held = np.mean(1 - sp.j0(2 * np.pi * f_d * lags) ** 2 / (1 + 0.01 / 2))
    check = result.check("estimation")
    assert check.ci[1] >= held * 10 ** (-0.05 / 10)  # not better than the bound beyond the interval (+ 0.05 dB)
    assert check.verdict == AGREE
    assert 10 * math.log10(check.measured) > -1.5  # about -0.8 dB: the estimate is nearly useless by the end


def test_neighbouring_packets_assumption_would_disagree(wifi_p_at_250):
    """The old assumption, a receiver that may interpolate between neighbouring packets' training (the same
    pattern as a stream with the next packet within reach), predicts -3.4 dB: verification says disagree."""
    req = road_side("250 km/h").replace("rules.estimation_lookahead", 130).replace("rules.estimation_memory", 130)
    stream = dataclasses.replace(get_preset("wifi-p-10").design, pilot_scope="stream")
    wrong = model_estimation_error(req, stream)
    measured = wifi_p_at_250.check("estimation")
    assert 10 * math.log10(wrong) < 10 * math.log10(measured.predicted) - 2  # clearly more optimistic
    assert TermCheck("estimation", measured.measured, measured.ci, wrong, TOLERANCE_DB["estimation"],
                     measured.frames).verdict == DISAGREE


def test_at_30_kmh_the_neighbouring_packets_model_is_20_db_too_optimistic():
    """The issue's figures: at 30 km/h the held preamble gives about -8 dB, interpolation between packets
    about -27 dB (the model's own two answers; the simulation sides with the first)."""
    req = road_side("30 km/h")
    design = get_preset("wifi-p-10").design
    held = model_estimation_error(req, design)
    wide = req.replace("rules.estimation_lookahead", 130).replace("rules.estimation_memory", 130)
    interpolated = model_estimation_error(wide, dataclasses.replace(design, pilot_scope="stream"))
    assert_allclose(10 * math.log10(held), -7.85, atol=0.1)
    assert_allclose(10 * math.log10(interpolated), -27.2, atol=0.2)
    result = verify(req, design, frames=96)
    check = result.check("estimation")
    assert check.verdict == AGREE
    assert TermCheck("estimation", check.measured, check.ci, interpolated, 1.0, check.frames).verdict == DISAGREE


# --- agreement where the model and the receiver are the same, and a real gap ------------------------------


@pytest.mark.parametrize("example, preset", [("harbour_crane", "nr-mu1"), ("rail_corridor", "lte-20-normal")])
def test_shipped_examples_agree_without_the_oscillator(example, preset):
    """harbour_crane (10 measured taps, classical 137 Hz) with NR DM-RS slot pilots, and rail_corridor (EVA,
    tracked Rician K = 9 dB, 528 Hz) with LTE cell reference signals: without the oscillator every figure
    agrees and the run decides. Reference: numerology.link.evaluate for the same design and requirements."""
    req = load_requirements(EXAMPLES / f"{example}.toml")
    req = req.replace("radio.frequency_error", 0.0).replace("radio.oscillator_linewidth", 0.0)
    result = verify(req, get_preset(preset).design)
    for check in result.checks:
        assert check.verdict == AGREE, str(check)
    assert result.verdict == AGREE
    assert any("extra cyclic prefix" in note for note in result.notes)


def test_phase_noise_between_pilot_symbols_is_counted():
    """harbour_crane's 100 Hz Wiener linewidth with NR slot pilots (symbols 2 and 11 only): the receiver has
    no common-phase estimate in the other symbols, the phase wanders between the pilots (a Brownian bridge of
    variance about 2 pi beta T / 4 = 0.05 rad^2 over the 321 us between them: -13 dB; Wiener phase noise,
    common practice). The simulation found this gap in an earlier model (which assumed the common phase
    removed and predicted -41 dB); the model now carries the phase's autocorrelation exp(-pi beta |tau|) in
    the estimate's statistics. The two now meet to about 1 dB, the model on the pessimistic side (a difference
    not yet pinned down: recorded here rather than hidden by a wider tolerance elsewhere)."""
    req = load_requirements(HARBOUR).replace("radio.frequency_error", 0.0)
    result = verify(req, get_preset("nr-mu1").design)
    check = result.check("estimation")
    assert -18 < 10 * math.log10(check.measured) < -12
    assert 0.0 <= 10 * math.log10(check.predicted / check.measured) < 1.5
    assert any("common-phase estimate" in note for note in result.notes)


# --- the verdict ------------------------------------------------------------------------------------------


def test_a_run_too_short_is_inconclusive_not_agree():
    """Three frames of a case that agrees in a long run: the interval is wider than the tolerance."""
    req = load_requirements(EXAMPLES / "rail_corridor.toml")
    req = req.replace("radio.frequency_error", 0.0).replace("radio.oscillator_linewidth", 0.0)
    result = verify(req, get_preset("lte-20-normal").design, frames=3)
    assert result.verdict == INCONCLUSIVE
    assert INCONCLUSIVE in {check.verdict for check in result.checks}
    assert DISAGREE not in {check.verdict for check in result.checks}
    assert result.frames_needed is None or result.frames_needed > 3


@pytest.mark.parametrize("ci, predicted, expected", [
    ((0.9e-3, 1.1e-3), 1.0e-3, AGREE),  # inside +-0.5 dB
    ((0.95e-3, 1.2e-3), 1.0e-3, INCONCLUSIVE),  # reaches beyond +0.5 dB (0.79 dB)
    ((1.2e-3, 1.3e-3), 1.0e-3, DISAGREE),  # wholly beyond
    ((0.1e-3, 5e-3), 1.0e-3, INCONCLUSIVE),  # a wide interval around the prediction is not agreement
    ((0.0, 2e-14), 0.0, AGREE),  # zero predicted, round-off measured
    ((0.5e-6, 2e-6), 0.0, DISAGREE),  # zero predicted, something measured
])
def test_verdict_rule(ci, predicted, expected):
    check = TermCheck("interference", math.sqrt(ci[0] * ci[1]), ci, predicted, 0.5, 100)
    assert check.verdict == expected


def test_frames_needed_follows_one_over_root_frames():
    """Half-width 1 dB about a difference of 0.2 dB with tolerance 1 dB: the half-width must shrink to 0.8 dB,
    so (1 / 0.8)^2 = 1.5625 times the frames."""
    check = TermCheck("estimation", 10 ** 0.02, (10 ** -0.08, 10 ** 0.12), 1.0, 1.0, 64)
    assert check.verdict == INCONCLUSIVE
    assert check.frames_needed == math.ceil(64 * (1.0 / 0.8) ** 2)


def test_rate_margin_resolved_only_when_the_interval_clears_the_threshold():
    assert RateCheck("16-QAM 3/4", 13.45, 14.0, (13.6, 14.4)).resolved
    assert RateCheck("16-QAM 3/4", 13.45, 14.0, (13.6, 14.4)).holds
    assert not RateCheck("16-QAM 3/4", 13.45, 13.6, (13.2, 14.0)).resolved
    short = RateCheck("16-QAM 3/4", 13.45, 12.0, (11.5, 12.5))
    assert short.resolved and not short.holds
    assert_allclose(short.margin_db, -1.45, rtol=1e-12)


def test_same_seed_gives_byte_identical_json(capsys):
    argv = ["verify", str(HARBOUR), "--preset", "nr-mu1", "--frames", "4", "--json"]
    outputs = []
    for seed in ("7", "7", "8"):
        main(argv + ["--seed", seed])
        outputs.append(capsys.readouterr().out)
    assert outputs[0] == outputs[1]
    assert outputs[0] != outputs[2]
    data = json.loads(outputs[0])
    assert data["schema_version"] == "2.0" and data["seed"] == 7 and data["frames"] == 4


@pytest.mark.parametrize("extra, status", [
    ([], 1),  # the harbour example's oscillator rules fail for NR mu = 1 (and estimation disagrees)
    (["--frames", "2"], 1),  # failing rules make exit 1 even when the run is too short to decide
])
def test_exit_status_names_the_failing_rules(capsys, extra, status):
    assert main(["verify", str(HARBOUR), "--preset", "nr-mu1", "--json", *extra]) == status
    data = json.loads(capsys.readouterr().out)
    assert not data["rules_passed"]
    assert {rule["name"] for rule in data["failing_rules"]} >= {"oscillator_ici"}


def test_inconclusive_run_exits_3(tmp_path, capsys, write_toml):
    req = {"environment": {"carrier": "1.9 GHz", "max_speed": "300 km/h", "doppler_spectrum": "tracked",
                           "k_factor": "9 dB", "profile": "EVA"},
           "radio": {"bandwidth": "20 MHz", "snr": "15 dB"}, "goals": {"max_overhead": 0.5}}  # every rule passes
    status = main(["verify", str(write_toml(req)), "--preset", "lte-20-normal", "--frames", "3"])
    out = capsys.readouterr().out
    assert status == 3
    assert "INCONCLUSIVE" in out and "Inconclusive: the run is too short to decide" in out


def test_what_ifs_change_the_channel(capsys):
    """--speed and --delay act as in check: the model's Doppler and echo terms follow them."""
    main(["verify", str(HARBOUR), "--preset", "nr-mu1", "--frames", "2", "--json", "--speed", "120 km/h",
          "--delay", "4 us"])
    data = json.loads(capsys.readouterr().out)
    assert_allclose(data["what_if"]["speed_mps"], 120 / 3.6, rtol=1e-12)
    assert_allclose(data["what_if"]["max_excess_delay_s"], 4e-6, rtol=1e-12)
    main(["verify", str(HARBOUR), "--preset", "nr-mu1", "--frames", "2", "--json"])
    plain = json.loads(capsys.readouterr().out)
    assert data["predicted_terms_db"]["doppler_db"] > plain["predicted_terms_db"]["doppler_db"] + 9  # 3x speed
    assert data["predicted_terms_db"]["echo_db"] is not None and plain["predicted_terms_db"]["echo_db"] is None


def test_ctrl_c_keeps_what_was_measured(monkeypatch, capsys):
    """A KeyboardInterrupt after the first batch: the report shows those frames, marked interrupted, exit 130."""
    calls = []

    def interrupt(done, total):
        calls.append(done)
        if len(calls) == 2:
            raise KeyboardInterrupt

    req = load_requirements(HARBOUR)
    result = verify(req, get_preset("nr-mu1").design, frames=200, progress=interrupt)
    assert result.interrupted and result.simulation.frames == calls[1]

    from numerology import verify as module

    real = module.verify
    monkeypatch.setattr(module, "verify", lambda *a, **k: real(*a, **{**k, "progress": interrupt}))
    calls.clear()
    assert main(["verify", str(HARBOUR), "--preset", "nr-mu1", "--frames", "200", "--json"]) == 130
    assert json.loads(capsys.readouterr().out)["interrupted"] is True


def test_phase_noise_mask_is_left_out_and_noted():
    """factory_robots.toml gives a phase-noise mask, which is not simulated: the note says so and the
    predicted SINR leaves that term out."""
    req = load_requirements(EXAMPLES / "factory_robots.toml")
    design = get_preset("nr-mu2").design
    result = verify(req, design, frames=2)
    terms = result.predicted_terms
    mse = terms["estimation"] / (1 + terms["estimation"])
    without = sum(value for name, value in terms.items() if name not in ("phase_noise", "estimation"))
    assert_allclose(result.check("sinr_eff").predicted, (1 - mse) / (mse + without), rtol=1e-12)
    assert any("phase-noise mask is not simulated" in note for note in result.notes)
    assert result.simulation.linewidth_hz == 0.0


def test_design_must_be_a_design():
    with pytest.raises(InputError) as caught:
        verify(load_requirements(HARBOUR), "nr-mu1")
    assert caught.value.place == "design"
