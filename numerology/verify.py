"""Check the analytic link model against the Monte-Carlo simulator, term by term.

:func:`verify` evaluates one design with :func:`numerology.link.evaluate`
(the prediction) and with :func:`numerology.simulate.simulate_link` (the
measurement) under the same requirement set, and compares three figures:

``interference``
    Doppler + echo interference with perfect channel knowledge, predicted as
    the ``doppler`` plus ``echo`` terms. Tolerance 0.5 dB: both are exact
    results for the simulated channel (Russell & Stuber's ICI integral, the
    EBU echo weighting), so only Monte-Carlo error and small, stated effects
    (band edges, the ICI normalisation below) separate them.
``estimation``
    Normalised channel-estimation MSE of the pilot lattice with the model's
    estimator and weights. Tolerance 1 dB: the model treats the interference
    on pilots as white noise and the lattice as unbounded.
``sinr_eff``
    Effective SINR after one-tap equalisation, predicted as
    ``1 / sum(terms)``; the channel-weighted EVM is ``1/sqrt(SINR)`` and is
    reported beside it. Tolerance 1 dB: the model adds the impairments as
    independent noise powers (common practice), which holds to first order.

A figure *agrees* when the measured and predicted values differ by at most
the tolerance in dB, or when the prediction lies inside the measured
confidence interval (so that a run too short to resolve the tolerance is
not reported as a disagreement; a note then says the run is inconclusive).
A predicted value of exactly 0 (no echo beyond the guard and no Doppler)
agrees when the measurement is below :data:`ZERO_FLOOR`.

Known differences are reported in ``notes`` rather than hidden: phase-noise
masks are not simulated; the extra cyclic prefix of some symbols is not
simulated. (The model's interference terms, like the measurement, are
relative to the useful power.)

References
----------
M. Russell, G. L. Stuber, Proc. IEEE VTC 1995 (Doppler ICI); EBU TR 024
sect. 2.4 (echoes beyond the guard interval); P. Hoeher, S. Kaiser,
P. Robertson, Proc. IEEE ICASSP 1997 (pilot-aided estimation).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import budget, link
from .design import Design, DesignArrays
from .environment import derive_environment
from .errors import InputError
from .simulate import SimulationResult, simulate_link

__all__ = ["TermCheck", "Verification", "verify", "TOLERANCE_DB"]

#: Agreement tolerance per figure, dB (see the module docstring for the reasons).
TOLERANCE_DB = {"interference": 0.5, "estimation": 1.0, "sinr_eff": 1.0}

#: A measured power ratio below this counts as zero (numerical round-off of the simulator).
ZERO_FLOOR = 1e-12

def _db(x: float):
    """dB of a power ratio; None for 0 (JSON has no -inf) and for inf."""
    return 10.0 * math.log10(x) if 0 < x < math.inf else None


@dataclass(frozen=True)
class TermCheck:
    """One figure: measured (with its confidence interval) against predicted.

    Attributes
    ----------
    name : str
        ``interference``, ``estimation`` or ``sinr_eff``.
    measured : float
        Measured linear power ratio.
    ci : tuple of float
        Confidence interval (low, high) of ``measured``.
    predicted : float
        Analytic model's linear power ratio.
    tolerance_db : float
        Largest difference that counts as agreement, dB.
    """

    name: str
    measured: float
    ci: tuple
    predicted: float
    tolerance_db: float

    @property
    def difference_db(self):
        """Measured minus predicted, dB; None when either is 0."""
        m, p = _db(self.measured), _db(self.predicted)
        return None if m is None or p is None else m - p

    @property
    def within_ci(self) -> bool:
        """True when the prediction lies inside the measured confidence interval."""
        return self.ci[0] <= self.predicted <= self.ci[1]

    @property
    def agree(self) -> bool:
        """Within the tolerance, or inside the confidence interval, or both zero."""
        if self.predicted == 0:
            return self.measured <= ZERO_FLOOR
        diff = self.difference_db
        return self.within_ci or (diff is not None and abs(diff) <= self.tolerance_db)

    @property
    def ci_half_width_db(self):
        """Half the width of the confidence interval in dB (None if it reaches 0)."""
        low, high = _db(self.ci[0]), _db(self.ci[1])
        return None if low is None or high is None else 0.5 * (high - low)

    def to_json(self) -> dict:
        """JSON-ready dict; dB values are None where the ratio is 0 or infinite."""
        return {
            "measured_db": _db(self.measured),
            "ci_low_db": _db(self.ci[0]),
            "ci_high_db": _db(self.ci[1]),
            "predicted_db": _db(self.predicted),
            "difference_db": self.difference_db,
            "tolerance_db": self.tolerance_db,
            "within_ci": self.within_ci,
            "agree": self.agree,
        }

    def __str__(self) -> str:
        def show(x):
            v = _db(x)
            return "0" if v is None and x == 0 else ("inf" if v is None else f"{v:.2f} dB")

        diff = self.difference_db
        diff_text = "" if diff is None else f", difference {diff:+.2f} dB"
        verdict = "agrees" if self.agree else "DISAGREES"
        return (f"{self.name}: measured {show(self.measured)} [{show(self.ci[0])}, {show(self.ci[1])}], "
                f"predicted {show(self.predicted)}{diff_text} (tolerance {self.tolerance_db:g} dB): {verdict}")


@dataclass(frozen=True)
class Verification:
    """Result of :func:`verify`.

    Attributes
    ----------
    design_name : str
    checks : tuple of TermCheck
        ``interference``, ``estimation`` and ``sinr_eff``, in that order.
    predicted_terms : dict
        The analytic model's terms (linear power ratios) as ``link.evaluate`` gives them.
    simulation : SimulationResult
        The full measurement.
    notes : tuple of str
        Known reasons for differences, and what was not simulated.
    """

    design_name: str
    checks: tuple
    predicted_terms: dict
    simulation: SimulationResult
    notes: tuple

    @property
    def agree(self) -> bool:
        """True when every figure agrees."""
        return all(check.agree for check in self.checks)

    def check(self, name: str) -> TermCheck:
        """The :class:`TermCheck` of one figure by name."""
        for item in self.checks:
            if item.name == name:
                return item
        raise KeyError(name)

    def to_json(self) -> dict:
        """JSON-ready dict: measured and predicted values in dB, agreement, per-term details, notes."""
        sim = self.simulation
        sinr = self.check("sinr_eff")
        measured = {
            "interference_db": _db(sim.interference),
            "estimation_mse_db": _db(sim.estimation_mse),
            "sinr_eff_db": _db(sim.sinr_eff),
            "evm_db": _db(sim.evm ** 2),
        }
        predicted = {
            "interference_db": _db(self.check("interference").predicted),
            "estimation_mse_db": _db(self.check("estimation").predicted),
            "sinr_eff_db": _db(sinr.predicted),
            "evm_db": _db(1.0 / sinr.predicted),
            "terms_db": {f"{name}_db": _db(value) for name, value in self.predicted_terms.items()},
        }
        return {
            "design": self.design_name,
            "measured": measured,
            "predicted": predicted,
            "agree": self.agree,
            "tolerance_db": {check.name: check.tolerance_db for check in self.checks},
            "terms": {check.name: check.to_json() for check in self.checks},
            "confidence": sim.confidence,
            "frames": sim.frames,
            "resource_elements": sim.frames * sim.measured_per_frame,
            "seed": sim.seed,
            "notes": list(self.notes),
        }

    def __str__(self) -> str:
        verdict = "model and simulation agree" if self.agree else "model and simulation DISAGREE"
        return f"{self.design_name}: {verdict} ({self.simulation.frames} frames)"


def verify(req, design: Design, *, seed=0, frames=None, progress=None) -> Verification:
    """Compare the analytic link model with a Monte-Carlo simulation for one design.

    Parameters
    ----------
    req : Requirements
        A loaded requirement set (environment, SNR, oscillator, estimator).
    design : Design
        The numerology to check.
    seed : int, optional
        Seed of the simulation.
    frames : int, optional
        Frames to simulate (default: chosen by :func:`~numerology.simulate.simulate_link`
        from the frame size, 48 to 256).
    progress : callable, optional
        ``progress(done, total)`` after each block of frames.

    Returns
    -------
    Verification

    Raises
    ------
    InputError
        For a bad argument (requirements with a value out of range, a design that is not a
        :class:`Design`, frames below 2, a negative seed), a simulation beyond the work budget
        (``numerology.budget.check_simulation``), or one that cannot run (see
        :func:`numerology.simulate.simulate_link`).

    References
    ----------
    See the module docstring.
    """
    from .requirements import checked

    req = checked(req)
    if not isinstance(design, Design):
        raise InputError("design", f"expected a numerology.design.Design, got {type(design).__name__}")
    if frames is not None and (isinstance(frames, bool) or not isinstance(frames, (int, np.integer)) or frames < 2):
        raise InputError("frames", f"expected a whole number of frames, at least 2, got {frames!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or not 0 <= seed < 2**63:
        raise InputError("seed", f"expected a whole number from 0 to 2^63 - 1, got {seed!r}")
    if progress is not None and not callable(progress):
        raise InputError("progress", "expected a callable progress(done, total) or None")
    environment = derive_environment(req)
    budget.check_simulation(design, environment, frames)  # before any work: what would fit, if it would not
    evaluation = link.evaluate(DesignArrays.from_designs([design]), environment, req)
    terms = {name: float(np.ravel(value)[0]) for name, value in evaluation.terms.items()}
    radio = req.radio
    notes = []
    linewidth_hz = radio.oscillator_linewidth_hz or 0.0
    counted = dict(terms)
    if radio.phase_noise is not None:
        counted.pop("phase_noise")
        notes.append("a phase-noise mask is not simulated (only Wiener phase noise is): the simulation runs "
                     "without phase noise and the predicted SINR below leaves the phase_noise term "
                     f"({_db(terms['phase_noise']) or float('-inf'):.1f} dB) out; the estimator's pilot SINR still "
                     "differs slightly from the model's")
    simulation = simulate_link(design, environment, radio.snr_db, frequency_offset_hz=radio.frequency_error_hz or 0.0,
                               linewidth_hz=linewidth_hz, estimator=req.rules.estimator,
                               frames=frames, seed=seed, progress=progress)
    checks = (
        TermCheck("interference", simulation.interference, simulation.interference_ci,
                  terms["echo"] + terms["doppler"], TOLERANCE_DB["interference"]),
        TermCheck("estimation", simulation.estimation_mse, simulation.estimation_mse_ci, terms["estimation"],
                  TOLERANCE_DB["estimation"]),
        TermCheck("sinr_eff", simulation.sinr_eff, simulation.sinr_eff_ci, 1.0 / sum(counted.values()),
                  TOLERANCE_DB["sinr_eff"]),
    )
    if design.cp_extra_samples and design.cp_extra_period_s:
        notes.append(f"the extra cyclic prefix ({design.cp_extra_samples} samples once per "
                     f"{design.cp_extra_period_s * 1e3:g} ms) is not simulated: every symbol has the ordinary prefix, "
                     "as in the model's echo term")
    if design.reserved_subcarriers:
        notes.append("reserved subcarriers are simulated as data (they do not change the measured ratios)")
    if terms["phase_noise"] > 0 or terms["frequency_offset"] > 0:
        notes.append("the receiver corrects the common phase of each symbol ideally, as the model's oscillator "
                     "terms assume (a pilot-based estimate would add its own error)")
    for check in checks:
        half = check.ci_half_width_db
        if check.predicted > 0 and (half is None or half > check.tolerance_db):
            shown = "unbounded" if half is None else f"+-{half:.2f} dB"
            notes.append(f"{check.name}: the Monte-Carlo interval ({shown}) is wider than the tolerance; the "
                         "comparison is inconclusive, simulate more frames")
        if check.predicted == 0:
            notes.append(f"{check.name}: predicted 0 (every tap within the guard and no Doppler); the measurement "
                         f"{check.measured:.3g} is compared with the round-off floor {ZERO_FLOOR:g}")
    total = sum(counted.values())
    small = [name for name in ("echo", "doppler") if 0 < terms[name] < 0.01 * total]
    if small:
        notes.append(f"{' and '.join(small)} below 1 % of the total impairment: checked through the perfect-CSI "
                     "interference only (no effect on the SINR comparison)")
    return Verification(design_name=design.name, checks=checks, predicted_terms=terms, simulation=simulation,
                        notes=tuple(notes))
