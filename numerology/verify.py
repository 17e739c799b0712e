"""Check the analytic link model against the Monte-Carlo simulation, with a verdict that can go either way.

:func:`verify` evaluates one design with :func:`numerology.link.evaluate`
(the prediction) and simulates it with :class:`numerology.simulate.LinkSimulation`
(the measurement, by a receiver written independently of the model) under the
same requirement set, and compares three figures:

``interference``
    Doppler + echo interference with the true channel, predicted as the
    ``doppler`` plus ``echo`` terms. Tolerance 0.5 dB: both are exact results
    for the simulated channel (the classical Doppler ICI integral of Russell
    & Stuber, Proc. IEEE VTC 1995; the echo weighting of EBU TR 024 sect. 2.4).
``estimation``
    Channel-estimation error over channel power, predicted as the model's
    error ``E`` (its ``estimation`` term is ``E / (1 - E)``). Tolerance 1 dB.
``sinr_eff``
    Effective SINR after one-tap equalisation, predicted as the model's
    ``(1 - E) / (E + N + I)``. Tolerance 1 dB: the model adds the impairments
    as independent noise powers (common practice).

Verdict of a figure, from its confidence interval (level
:data:`numerology.simulate.CONFIDENCE`) against the prediction +- tolerance:

* ``agree``: the whole interval lies within the tolerance of the prediction;
* ``disagree``: the whole interval lies outside it;
* ``inconclusive``: the interval reaches across an edge of the tolerance
  band: the run was too short, and :attr:`TermCheck.frames_needed` says about
  how many frames would decide it (the interval narrows as 1/sqrt(frames)).

A prediction of exactly 0 (no echo beyond the guard and no Doppler) agrees
when the interval stays below :data:`ZERO_FLOOR` and disagrees when it lies
above it.

Decision relevance: the measured effective SINR is compared with the
threshold of the modulation and coding the model chooses for the design
(``numerology.mcs``); the margin is *resolved* when the whole interval lies
on one side of the threshold. The overall verdict is ``disagree`` if any
figure disagrees, else ``inconclusive`` if a figure or the rate margin is
undecided, else ``agree``.

Run length: without a given number of frames, batches are simulated until
the overall verdict is decided (a figure disagrees, or every figure and the
margin are decided), up to a budget of received samples
(:data:`SAMPLE_BUDGET`); the batches and the stopping rule are deterministic,
so the same seed gives the same run.

Known differences are stated in ``notes``: phase-noise masks are not
simulated; the extra cyclic prefix of some symbols is not simulated; reserved
subcarriers (e.g. 802.11's four phase-tracking pilot tones) carry data; in a
symbol without pilots the receiver has no common-phase estimate of its own,
whereas the model's oscillator terms assume the common phase is removed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from . import budget, link, mcs
from .design import Design, DesignArrays
from .environment import derive_environment
from .errors import InputError
from .simulate import CONFIDENCE, LinkSimulation, SimulationResult

__all__ = ["TermCheck", "RateCheck", "Verification", "verify", "TOLERANCE_DB", "AGREE", "DISAGREE", "INCONCLUSIVE"]

#: Agreement tolerance per figure, dB (see the module docstring for the reasons).
TOLERANCE_DB = {"interference": 0.5, "estimation": 1.0, "sinr_eff": 1.0}
#: A measured power ratio below this counts as zero (round-off of the simulator).
ZERO_FLOOR = 1e-12
AGREE, DISAGREE, INCONCLUSIVE = "agree", "disagree", "inconclusive"
#: Received samples (frames x symbols x FFT size) a default run may spend at most ...
SAMPLE_BUDGET = 2**23
#: ... and frames it runs at least, and at most.
MIN_FRAMES = 16
MAX_FRAMES = 4000


def _db(x: float):
    """dB of a power ratio; None for 0 (JSON has no -inf) and for inf."""
    return 10.0 * math.log10(x) if 0 < x < math.inf else None


@dataclass(frozen=True)
class TermCheck:
    """One figure: measured (with its confidence interval) against predicted, and the verdict.

    ``measured``, ``ci`` and ``predicted`` are linear power ratios;
    ``frames`` is the run length behind the interval.
    """

    name: str
    measured: float
    ci: tuple
    predicted: float
    tolerance_db: float
    frames: int = 0

    @property
    def difference_db(self):
        """Measured minus predicted, dB; None when either is 0."""
        m, p = _db(self.measured), _db(self.predicted)
        return None if m is None or p is None else m - p

    def _edges_db(self):
        """The interval's edges relative to the prediction, dB (-inf, inf where it reaches 0 or no bound)."""
        p = 10.0 * math.log10(self.predicted)
        low = 10.0 * math.log10(self.ci[0]) - p if self.ci[0] > 0 else -math.inf
        high = 10.0 * math.log10(self.ci[1]) - p if math.isfinite(self.ci[1]) and self.ci[1] > 0 else math.inf
        return low, high

    @property
    def verdict(self) -> str:
        """``agree``, ``disagree`` or ``inconclusive`` (module docstring)."""
        if self.predicted == 0:
            if self.ci[1] <= ZERO_FLOOR:
                return AGREE
            return DISAGREE if self.ci[0] > ZERO_FLOOR else INCONCLUSIVE
        low, high = self._edges_db()
        tol = self.tolerance_db
        if -tol <= low and high <= tol:
            return AGREE
        if high < -tol or low > tol:
            return DISAGREE
        return INCONCLUSIVE

    @property
    def frames_needed(self):
        """About how many frames would decide an inconclusive figure (None when decided or unknown)."""
        if self.verdict != INCONCLUSIVE or self.predicted == 0 or self.frames < 2:
            return None
        low, high = self._edges_db()
        diff = self.difference_db
        if not (math.isfinite(low) and math.isfinite(high)) or diff is None:
            return None
        half = 0.5 * (high - low)
        room = abs(self.tolerance_db - abs(diff))
        if room < 1e-3:
            return None  # on the edge of the tolerance: no run length decides it
        return int(math.ceil(self.frames * (half / room) ** 2 - 1e-9))

    def to_json(self) -> dict:
        """JSON-ready dict; dB values are None where the ratio is 0 or infinite."""
        return {
            "measured_db": _db(self.measured),
            "ci_low_db": _db(self.ci[0]),
            "ci_high_db": _db(self.ci[1]),
            "predicted_db": _db(self.predicted),
            "difference_db": self.difference_db,
            "tolerance_db": self.tolerance_db,
            "verdict": self.verdict,
            "frames_needed": self.frames_needed,
        }

    def __str__(self) -> str:
        def show(x):
            v = _db(x)
            return "0" if v is None and x == 0 else ("inf" if v is None else f"{v:.2f} dB")

        diff = self.difference_db
        diff_text = "" if diff is None else f", difference {diff:+.2f} dB"
        return (f"{self.name}: measured {show(self.measured)} [{show(self.ci[0])}, {show(self.ci[1])}], "
                f"predicted {show(self.predicted)}{diff_text} (tolerance {self.tolerance_db:g} dB): {self.verdict}")


@dataclass(frozen=True)
class RateCheck:
    """The measured effective SINR against the threshold of the modulation and coding the model chooses."""

    name: str  # the entry's name
    required_sinr_db: float
    measured_db: float
    ci_db: tuple  # (low, high), dB; None for an unbounded edge

    @property
    def margin_db(self) -> float:
        """Measured SINR minus the threshold, dB."""
        return self.measured_db - self.required_sinr_db

    @property
    def resolved(self) -> bool:
        """True when the whole interval lies on one side of the threshold."""
        low, high = self.ci_db
        return (low is not None and low > self.required_sinr_db) or (high is not None and high < self.required_sinr_db)

    @property
    def holds(self) -> bool:
        """True when the whole interval lies above the threshold (the rate works in the simulation)."""
        return self.ci_db[0] is not None and self.ci_db[0] > self.required_sinr_db

    def to_json(self) -> dict:
        return {"name": self.name, "required_sinr_db": self.required_sinr_db, "measured_sinr_db": self.measured_db,
                "ci_low_db": self.ci_db[0], "ci_high_db": self.ci_db[1], "margin_db": self.margin_db,
                "resolved": self.resolved, "holds": self.holds}


@dataclass(frozen=True)
class Verification:
    """Result of :func:`verify`: the figures, the rate margin, the rules, the verdict and notes."""

    design: Design
    checks: tuple  # TermCheck: interference, estimation, sinr_eff
    rate: RateCheck | None
    predicted_terms: dict  # the model's terms (linear ratios to the useful power)
    simulation: SimulationResult
    failing_rules: tuple  # (name, margin, convention) of every rule the design fails
    interrupted: bool
    seed: int
    what_if: dict = field(default_factory=dict)
    notes: tuple = ()

    @property
    def verdict(self) -> str:
        """The overall verdict from what was measured (an interrupted run too: its exit status says so)."""
        verdicts = [check.verdict for check in self.checks]
        if DISAGREE in verdicts:
            return DISAGREE
        if INCONCLUSIVE in verdicts or (self.rate is not None and not self.rate.resolved):
            return INCONCLUSIVE
        return AGREE

    @property
    def agree(self) -> bool:
        return self.verdict == AGREE

    @property
    def rules_passed(self) -> bool:
        return not self.failing_rules

    @property
    def frames_needed(self):
        """About how many frames would decide every undecided figure (None when decided or unknown)."""
        needs = [check.frames_needed for check in self.checks if check.verdict == INCONCLUSIVE]
        if self.rate is not None and not self.rate.resolved:
            sinr = self.check("sinr_eff")
            low, high = self.rate.ci_db
            if low is not None and high is not None and abs(self.rate.margin_db) > 1e-3:
                needs.append(int(math.ceil(sinr.frames * (0.5 * (high - low) / abs(self.rate.margin_db)) ** 2)))
            else:
                needs.append(None)
        if not needs or any(n is None for n in needs):
            return None
        return max(needs)

    def check(self, name: str) -> TermCheck:
        for item in self.checks:
            if item.name == name:
                return item
        raise KeyError(name)

    def to_json(self) -> dict:
        sim = self.simulation
        return {
            "design": self.design.to_json(),
            "seed": self.seed,
            "what_if": dict(self.what_if),
            "verdict": self.verdict,
            "interrupted": self.interrupted,
            "frames": sim.frames,
            "frames_needed": self.frames_needed,
            "data_resource_elements": sim.frames * sim.data_per_frame,
            "confidence": sim.confidence,
            "figures": {check.name: check.to_json() for check in self.checks},
            "rate": None if self.rate is None else self.rate.to_json(),
            "rules_passed": self.rules_passed,
            "failing_rules": [{"name": name, "margin": margin if math.isfinite(margin) else None,
                               "convention": convention} for name, margin, convention in self.failing_rules],
            "predicted_terms_db": {f"{name}_db": _db(value) for name, value in self.predicted_terms.items()},
            "bit_error_ratio": sim.bit_error_ratio,
            "estimator": sim.estimator,
            "notes": list(self.notes),
        }

    def __str__(self) -> str:
        rules = "" if self.rules_passed else f"; fails {', '.join(r[0] for r in self.failing_rules)}"
        return f"{self.design.name}: model and simulation {self.verdict} ({self.simulation.frames} frames){rules}"


def _default_frames(simulation: LinkSimulation) -> tuple[int, int]:
    """(frames at least, frames at most) of a run whose length is not given."""
    plan = simulation.plan
    samples = plan.total * (plan.n + plan.ncp)
    most = int(np.clip(SAMPLE_BUDGET // max(samples, 1), MIN_FRAMES, MAX_FRAMES))
    least = min(most, max(MIN_FRAMES, 2 * plan.batch))
    return least, most


def verify(req, design: Design, *, seed=0, frames=None, speed_mps=None, max_excess_delay_s=None, progress=None,
           qam_order=4) -> Verification:
    """Compare the analytic link model with a Monte-Carlo simulation of one design.

    Parameters
    ----------
    req : Requirements
        A loaded requirement set (environment, SNR, oscillator, estimator, receiver allowance).
    design : Design
    seed : int, optional
    frames : int, optional
        Frames to simulate; default: until every figure is decided, within :data:`SAMPLE_BUDGET`.
    speed_mps, max_excess_delay_s : float, optional
        What-ifs, as ``numerology check --speed/--delay``.
    progress : callable, optional
        ``progress(done, total)`` after each batch of frames.
    qam_order : int, optional
        Square QAM order of the simulated data.

    Returns
    -------
    Verification
        With ``interrupted`` set when a KeyboardInterrupt stopped the run
        (what was measured until then is kept).

    Raises
    ------
    InputError
        For a bad argument (requirements with a value out of range, a design that is not a
        :class:`Design`, frames below 2, a negative seed), a simulation beyond the work budget
        (``numerology.budget.check_simulation``), or one that cannot run.
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
    environment = derive_environment(req, speed_mps=speed_mps, max_excess_delay_s=max_excess_delay_s)
    budget.check_simulation(design, environment, frames, req.rules)  # before any work: what would fit, if it would not
    evaluation = link.evaluate(DesignArrays.from_designs([design]), environment, req)
    terms = {name: float(np.ravel(value)[0]) for name, value in evaluation.terms.items()}
    failing = tuple((rule.name, float(np.ravel(evaluation.margin[rule.name])[0]), rule.convention)
                    for rule in evaluation.rules if float(np.ravel(evaluation.margin[rule.name])[0]) < 0)
    radio, rules = req.radio, req.rules
    notes = []
    t_est = terms["estimation"]
    mse = t_est / (1.0 + t_est) if math.isfinite(t_est) else 1.0
    others = {name: value for name, value in terms.items() if name != "estimation"}
    if radio.phase_noise is not None:
        others.pop("phase_noise")
        notes.append("a phase-noise mask is not simulated (only Wiener phase noise is): the simulation runs "
                     "without phase noise and the predicted SINR leaves the phase_noise term "
                     f"({_db(terms['phase_noise']) or float('-inf'):.1f} dB) out")
    sinr_predicted = max(1.0 - mse, 0.0) / (mse + sum(others.values()))
    simulation = LinkSimulation(design, environment, radio.snr_db, frequency_offset_hz=radio.frequency_error_hz or 0.0,
                                linewidth_hz=radio.oscillator_linewidth_hz or 0.0, estimator=rules.estimator,
                                lookahead=rules.estimation_lookahead, memory=rules.estimation_memory,
                                qam_order=qam_order, seed=seed)
    table = None if rules.efficiency_model == "shannon" else link.mcs_table(req)
    predicted = {"interference": terms["echo"] + terms["doppler"], "estimation": mse, "sinr_eff": sinr_predicted}

    def judge(result):
        checks = (
            TermCheck("interference", result.interference, result.interference_ci, predicted["interference"],
                      TOLERANCE_DB["interference"], result.frames),
            TermCheck("estimation", result.estimation_mse, result.estimation_mse_ci, predicted["estimation"],
                      TOLERANCE_DB["estimation"], result.frames),
            TermCheck("sinr_eff", result.sinr_eff, result.sinr_eff_ci, predicted["sinr_eff"], TOLERANCE_DB["sinr_eff"],
                      result.frames),
        )
        rate = None
        if table is not None:
            index = mcs.selected_entry_index(10 * math.log10(sinr_predicted) if sinr_predicted > 0 else -math.inf,
                                             table)
            entry = table[index] if index >= 0 else min(table, key=lambda e: e.required_sinr_db)
            rate = RateCheck(entry.name, entry.required_sinr_db, _db(result.sinr_eff) or -math.inf,
                             (_db(result.sinr_eff_ci[0]), _db(result.sinr_eff_ci[1])))
        return checks, rate

    interrupted = False
    try:
        if frames is not None:
            simulation.run(max(int(frames), 2), progress)
        else:
            least, most = _default_frames(simulation)
            simulation.run(least, _scaled(progress, most))
            while simulation.frames < most:
                checks, rate = judge(simulation.result())
                verdicts = {c.verdict for c in checks}
                if DISAGREE in verdicts or (INCONCLUSIVE not in verdicts and (rate is None or rate.resolved)):
                    break  # the overall verdict is decided
                simulation.run(min(simulation.batch_frames, most - simulation.frames), _scaled(progress, most))
    except KeyboardInterrupt:
        interrupted = True
        if simulation.frames < 2:
            raise
    result = simulation.result()
    checks, rate = judge(result)
    notes += _notes(design, terms, simulation, req)
    what_if = {}
    if speed_mps is not None:
        what_if["speed_mps"] = float(speed_mps)
    if max_excess_delay_s is not None:
        what_if["max_excess_delay_s"] = float(max_excess_delay_s)
    return Verification(design=design, checks=checks, rate=rate, predicted_terms=terms, simulation=result,
                        failing_rules=failing, interrupted=interrupted, seed=seed, what_if=what_if,
                        notes=tuple(notes))


def _scaled(progress, most):
    """A progress callback that reports against the run's frame budget."""
    if progress is None:
        return None
    return lambda done, _total: progress(done, most)


def _notes(design, terms, simulation, req) -> list[str]:
    notes = []
    plan = simulation.plan
    if design.cp_extra_samples and design.cp_extra_period_s:
        notes.append(f"the extra cyclic prefix ({design.cp_extra_samples} samples once per "
                     f"{design.cp_extra_period_s * 1e3:g} ms) is not simulated: every symbol has the ordinary prefix, "
                     "as in the model's echo term")
    if design.reserved_subcarriers:
        notes.append("reserved subcarriers carry data in the simulation (802.11's four phase-tracking pilot tones "
                     "included: the receiver does not track the common phase on them)")
    if plan.oscillator and any(t.data_offset < 0 for t in plan.targets) and design.pilot_scope != "differential":
        notes.append("data symbols without pilots have no common-phase estimate of their own: the oscillator's "
                     "phase drift since the nearest pilots counts as estimation error (the receiver's LMMSE knows "
                     "the drift's statistics; the model counts it through the phase's autocorrelation at the "
                     "symbol centres, the simulation through the window-averaged phase)")
    notes.append("receiver: " + {
        "lmmse": "LMMSE over the usable pilots, tap domain, with the simulated channel's second-order statistics",
        "linear": "least squares at the pilots, linear interpolation in frequency and then in time",
    }[simulation.estimator] + ("" if design.pilot_scope != "differential"
                               else "; differential: the previous symbol as reference, with its Wiener scaling"))
    return notes
