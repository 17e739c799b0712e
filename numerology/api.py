"""The Python API for notebooks and scripts: load, check, solve.

>>> from numerology import api                                    # doctest: +SKIP
>>> req = api.load("requirements_examples/rail_corridor.toml")    # doctest: +SKIP
>>> result = api.check(req, preset="lte-20-normal")               # doctest: +SKIP
>>> print(result)                                                 # doctest: +SKIP

Every result object is frozen, prints a one-line summary, and has
``to_json()`` giving the same dictionary as the command's ``--json``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from . import link
from .design import Design, DesignArrays, load_design
from .environment import Environment, derive_environment, what_if_requirements
from .errors import InputError
from .limits import Limit, stretch_limits
from .requirements import Requirements, checked, load_requirements
from .units import db, engineering


def load(path) -> Requirements:
    """Read a requirement file (see ``numerology.requirements``).

    Raises
    ------
    InputError
        For a path that is not a file name, an unreadable file, or any problem in it. Every function of
        this module raises InputError (a ValueError) for a bad argument, and nothing else.
    """
    return load_requirements(path)


def design_from(design=None, preset: str | None = None, path: str | None = None,
                bandwidth_hz: float | None = None) -> Design:
    """A design given as an object, a preset name or a design file.

    A preset is taken for the channel bandwidth ``bandwidth_hz`` where its
    standard defines one (``presets.preset_for``).

    Raises
    ------
    InputError
        For anything else.
    """
    return resolve_design(design, preset, path, bandwidth_hz)[0]


def resolve_design(design=None, preset: str | None = None, path: str | None = None,
                   bandwidth_hz: float | None = None) -> tuple[Design, tuple]:
    """:func:`design_from` and the notes on how a preset was chosen for the bandwidth."""
    if isinstance(design, Design):
        return design, ()
    if design is not None:
        raise InputError("design", f"expected a numerology.design.Design, got {type(design).__name__}")
    if preset is not None:
        from .presets import get_preset, preset_for

        if not isinstance(preset, str):
            raise InputError("preset", f"expected a preset name such as 'nr-mu1', got {preset!r}")
        if bandwidth_hz is None:
            return get_preset(preset, place="--preset").design, ()
        chosen, note = preset_for(preset, bandwidth_hz, place="--preset")
        return chosen.design, (note,) if note else ()
    if path is not None:
        return load_design(path), ()
    raise InputError("design", "expected a design, a preset name or a design file")


def _flag(value, name: str) -> bool:
    if not isinstance(value, bool):
        raise InputError(name, f"expected True or False, got {value!r}")
    return value


def _optional_si(value, name: str, low: float, high: float, unit: str):
    """An optional what-if value in SI: None, or a real number from low to high."""
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)) \
            or not low <= value <= high:  # written so that NaN fails too
        raise InputError(name, f"expected a number from {low:g} to {high:g} {unit}, got {value!r}")
    return float(value)


@dataclass(frozen=True)
class RuleResult:
    name: str
    statement: str
    source: str
    convention: str
    capacity: float
    demand: float
    margin: float
    normalised: float

    @property
    def passed(self) -> bool:
        return self.margin >= 0

    @property
    def comparison(self) -> str:
        """``"<="`` when the design's value must stay at most the limit, ``">="`` at least."""
        from .rules import BY_NAME

        return BY_NAME[self.name].comparison

    @property
    def value(self) -> float:
        """The design's own quantity (the echo interference, the prefix, the throughput, ...)."""
        from .rules import BY_NAME

        return BY_NAME[self.name].value_and_limit(self.capacity, self.demand)[0]

    @property
    def limit(self) -> float:
        """What the value is held to (the budget, the delay to cover, the goal, ...)."""
        from .rules import BY_NAME

        return BY_NAME[self.name].value_and_limit(self.capacity, self.demand)[1]

    def to_json(self) -> dict:
        return {"name": self.name, "margin": _finite(self.margin), "passed": self.passed,
                "convention": self.convention, "value": _finite(self.value), "comparison": self.comparison,
                "limit": _finite(self.limit), "capacity": _finite(self.capacity), "demand": _finite(self.demand),
                "statement": self.statement, "source": self.source}


def _finite(x):
    return None if (x is None or math.isinf(x) or math.isnan(x)) else float(x)


@dataclass(frozen=True)
class CheckResult:
    """One design evaluated against one environment."""

    design: Design
    environment: Environment
    rules: tuple  # RuleResult, declaration order
    sinr_terms: dict  # name -> linear ratio to the signal
    effective_sinr_db: float
    efficiency: float
    net_throughput_bps: float
    overhead: float
    limits: dict  # name -> Limit
    notes: tuple = ()  # how the design was chosen (a preset's bandwidth), beside the environment's notes
    modulation: str = ""  # the modulation and coding the SINR supports
    step_margin_db: float = math.inf  # SINR above that entry's threshold (inf for the Shannon-gap model)
    goal_margin_db: float | None = None  # SINR above what the throughput goal needs (None without a goal)
    what_if: dict = field(default_factory=dict)  # values analysed in place of the file's: speed_mps, max_excess_delay_s
    origin: str = ""  # what was checked, in words: "preset nr-mu1", "design file d.toml", "rank 1 of the search"

    @property
    def passed(self) -> bool:
        return all(r.passed for r in self.rules)

    @property
    def binding_rule(self) -> RuleResult:
        """The rule with the smallest normalised margin."""
        return min(self.rules, key=lambda r: r.normalised)

    def __str__(self) -> str:
        verdict = "passes" if self.passed else "FAILS"
        b = self.binding_rule
        return (f"{self.design.name}: {verdict}; binding {b.name} (margin {_show_margin(b)}); "
                f"SINR {self.effective_sinr_db:.1f} dB; {engineering(self.net_throughput_bps, 'bit/s')}")

    @property
    def constraints(self) -> tuple:
        """Deprecated name of :attr:`rules` (the JSON key ``constraints`` is likewise an alias of ``rules``)."""
        import warnings

        warnings.warn("CheckResult.constraints is deprecated; use CheckResult.rules", DeprecationWarning,
                      stacklevel=2)
        return self.rules

    def to_json(self) -> dict:
        rules = [r.to_json() for r in self.rules]
        return {
            "design": self.design.to_json(),
            "passed": self.passed,
            "binding_rule": self.binding_rule.name,
            "rules": rules,
            "constraints": rules,  # deprecated alias of "rules" (schema 2.x), to be removed in 3.0
            "sinr_terms_db": {k: _finite(10 * math.log10(v)) if v > 0 else None for k, v in self.sinr_terms.items()},
            "effective_sinr_db": self.effective_sinr_db,
            "spectral_efficiency": self.efficiency,
            "net_throughput_bps": self.net_throughput_bps,
            "overhead": self.overhead,
            "modulation": self.modulation,
            "step_margin_db": _finite(self.step_margin_db),
            "goal_margin_db": _finite(self.goal_margin_db),
            "limits": {k: v.to_json() for k, v in self.limits.items()},
            "notes": list(self.notes),
            "what_if": dict(self.what_if),
            "origin": self.origin,
        }


def _show_margin(rule: RuleResult) -> str:
    if rule.convention == "db":
        return db(rule.margin)
    return f"{100 * rule.margin:+.1f} %"


def modulation_at(req: Requirements, sinr_eff_db: float) -> str:
    """The name of the modulation and coding an effective SINR supports ("" below the table)."""
    if req.rules.efficiency_model == "shannon":
        return f"Shannon capacity less a {req.rules.shannon_gap_db:g} dB gap"
    from . import mcs

    table = link.mcs_table(req)
    index = int(mcs.selected_entry_index(sinr_eff_db, table))
    return table[index].name if index >= 0 else ""


def results_from_evaluation(evaluation: link.Evaluation, index) -> tuple:
    """RuleResult objects for one entry of an evaluation."""
    out = []
    for rule in evaluation.rules:
        out.append(RuleResult(rule.name, rule.statement, rule.source, rule.convention,
                              float(evaluation.capacity[rule.name][index]), float(evaluation.demand[rule.name][index]),
                              float(evaluation.margin[rule.name][index]), float(evaluation.normalised[rule.name][index])))
    return tuple(out)


def check(req: Requirements, design=None, *, preset: str | None = None, design_file: str | None = None,
          speed_mps: float | None = None, max_excess_delay_s: float | None = None,
          with_limits: bool = True) -> CheckResult:
    """Evaluate one fixed design against the requirement set.

    Parameters
    ----------
    req : Requirements
    design : Design, optional
        Or give ``preset`` (a name from ``numerology presets``) or ``design_file``.
    speed_mps, max_excess_delay_s : float, optional
        What-if overrides of the environment.
    with_limits : bool
        Compute the stretch limits (the slow part).

    Raises
    ------
    InputError
        For a bad argument: requirements that are not loaded ones or hold a value out of range, no
        design or an unknown preset, a what-if outside 0..20 km/s or 0..1 s.
    """
    req = checked(req)
    speed_mps = _optional_si(speed_mps, "speed_mps", 0.0, 2e4, "m/s")
    max_excess_delay_s = _optional_si(max_excess_delay_s, "max_excess_delay_s", 0.0, 1.0, "s")
    with_limits = _flag(with_limits, "with_limits")
    chosen, notes = resolve_design(design, preset, design_file, req.radio.bandwidth_hz)
    environment = derive_environment(req, speed_mps=speed_mps, max_excess_delay_s=max_excess_delay_s)
    arrays = DesignArrays.from_designs([chosen])
    evaluation = link.evaluate(arrays, environment, req)
    what_if = {key: value for key, value in (("speed_mps", speed_mps), ("max_excess_delay_s", max_excess_delay_s))
               if value is not None}
    limits = {}
    if with_limits:  # through the point analysed: the requirement set with the what-ifs in place
        analysed = what_if_requirements(req, speed_mps=speed_mps, max_excess_delay_s=max_excess_delay_s)
        limits = stretch_limits(arrays, analysed, environment)
    return CheckResult(
        design=chosen, environment=environment, rules=results_from_evaluation(evaluation, 0),
        sinr_terms={k: float(np.ravel(v)[0]) for k, v in evaluation.terms.items()},
        effective_sinr_db=float(evaluation.sinr_eff_db[0]), efficiency=float(evaluation.efficiency[0]),
        net_throughput_bps=float(evaluation.rate_bps[0]), overhead=float(evaluation.overhead[0]), limits=limits,
        notes=notes, modulation=modulation_at(req, float(evaluation.sinr_eff_db[0])),
        step_margin_db=float(np.ravel(evaluation.step_margin_db)[0]), goal_margin_db=_goal_margin(evaluation, 0),
        what_if=what_if, origin=describe_origin(chosen, preset, design_file))


def describe_origin(design: Design, preset: str | None = None, design_file=None) -> str:
    """What a check evaluates, in words, for reports and the design note: the preset or design file named."""
    if preset is not None:
        return f"preset {preset}" + (f" (taken as {design.name})" if design.name != preset else "")
    if design_file is not None:
        return f"design file {design_file}"
    return f"design {design.name!r}" + (f" ({design.source})" if design.source else "")


__all__ = ["load", "check", "CheckResult", "RuleResult", "Limit", "design_from"]


# --- solve ---------------------------------------------------------------------

#: How far each setting is relaxed to show what it would buy: (key, kind, step).
RELAX_STEPS = {
    "rules.max_doppler_ici": ("add_db", 3.0),
    "rules.max_oscillator_ici": ("add_db", 3.0),
    "rules.max_echo_interference": ("add_db", 3.0),
    "rules.quasi_static_factor": ("scale", 0.8),
    "rules.flat_fading_factor": ("scale", 0.8),
    "rules.pilot_oversampling": ("scale", 0.8),
    "rules.cp_allowance": ("scale", 0.5),
    "goals.max_overhead": ("add", 0.05),
    "goals.throughput": ("scale", 0.9),
    "goals.max_latency": ("scale", 1.25),
}


@dataclass(frozen=True)
class Relaxed:
    """What relaxing one setting by a stated step would buy."""

    key: str
    from_si: float
    to_si: float
    objective: str
    best_before: float
    best_after: float | None  # None: still infeasible

    def to_json(self) -> dict:
        return {"key": self.key, "from_si": self.from_si, "to_si": self.to_si, "objective": self.objective,
                "best_before": self.best_before, "best_after": self.best_after}


@dataclass(frozen=True)
class Neighbour:
    """A design one step away from a ranked design, and why it is rejected (or not)."""

    change: str
    design: Design
    failing_rule: str | None
    margin: float | None

    def to_json(self) -> dict:
        return {"change": self.change, "design": self.design.to_json(), "failing_rule": self.failing_rule,
                "margin": _finite(self.margin) if self.margin is not None else None}


@dataclass(frozen=True)
class RankedDesign:
    rank: int | None  # 1 = best numerology; None for a Pareto design outside the top N
    check: CheckResult
    pareto: bool

    def to_json(self) -> dict:
        return {"rank": self.rank, "pareto": self.pareto, **self.check.to_json()}


@dataclass(frozen=True)
class SolveResult:
    """The answer to a requirement set."""

    requirements: Requirements
    environment: Environment
    objective: str
    window: object  # candidates.Window
    designs: tuple  # RankedDesign, best first (the top N)
    pareto: tuple  # RankedDesign on the Pareto front (may overlap designs)
    stats: object  # solver.SearchStats
    relaxed: Relaxed | None = None
    neighbours: tuple = ()
    diagnosis: object = None  # diagnosis.Diagnosis when infeasible

    @property
    def feasible(self) -> bool:
        return bool(self.designs)

    def __str__(self) -> str:
        if not self.feasible:
            if self.diagnosis is None:
                return "infeasible (no diagnosis run)"
            tips = "; ".join(str(r) for r in self.diagnosis.relaxations)
            pairs = "; ".join(" and ".join(str(r) for r in pair) for pair in self.diagnosis.pairs)
            return f"infeasible: {self.diagnosis.statement}" + (f"; feasible if {tips}" if tips else "") + (
                f"; feasible if both {pairs}" if pairs else "")
        best = self.designs[0].check
        return f"{len(self.designs)} designs; best {best.design}: binding {best.binding_rule.name}"

    def to_json(self) -> dict:
        body = {
            "feasible": self.feasible,
            "objective": self.objective,
            "environment": self.environment.to_json(),
            "window": self.window.to_json(),
            "designs": [d.to_json() for d in self.designs],
            "pareto": [d.to_json()["design"] | {"rank": d.rank} for d in self.pareto],
            "search": {
                "spacings_in_family": self.stats.spacings_in_family,
                "spacings_in_window": self.stats.spacings_in_window,
                "candidates": self.stats.candidates,
                "after_cheap_rules": self.stats.after_cheap_rules,
                "evaluated_exactly": self.stats.evaluated_exactly,
                "feasible_found": self.stats.feasible_found,
                "stopped_at_budget": self.stats.stopped_at_budget,
            },
            "relaxed": self.relaxed.to_json() if self.relaxed else None,
            "neighbours": [n.to_json() for n in self.neighbours],
        }
        if not self.feasible and self.diagnosis is not None:
            diagnosis = self.diagnosis.to_json()
            body["conflict"] = diagnosis.pop("conflict")
            body["relaxations"] = diagnosis.pop("relaxations")
            body["relaxation_pairs"] = diagnosis.pop("relaxation_pairs")
            body["diagnosis"] = diagnosis
        return body


def _check_from(evaluation, designs: DesignArrays, index: int, environment, req, limits=None) -> CheckResult:
    return CheckResult(
        design=designs.design(index), environment=environment, rules=results_from_evaluation(evaluation, index),
        sinr_terms={k: float(np.ravel(v)[index]) for k, v in evaluation.terms.items()},
        effective_sinr_db=float(evaluation.sinr_eff_db[index]), efficiency=float(evaluation.efficiency[index]),
        net_throughput_bps=float(evaluation.rate_bps[index]), overhead=float(evaluation.overhead[index]),
        limits=limits or {}, modulation=modulation_at(req, float(evaluation.sinr_eff_db[index])),
        step_margin_db=float(np.ravel(evaluation.step_margin_db)[index]), goal_margin_db=_goal_margin(evaluation, index))


def _goal_margin(evaluation, index):
    return None if evaluation.goal_margin_db is None else float(np.ravel(evaluation.goal_margin_db)[index])


def solve(req: Requirements, *, objective: str | None = None, top: int = 5, explain: bool = True,
          with_limits: bool = True) -> SolveResult:
    """Search the design space, rank the feasible designs and explain them.

    Parameters
    ----------
    req : Requirements
    objective : str, optional
        ``throughput``, ``robustness``, ``overhead`` or ``latency``; default ``goals.objective``.
    top : int
        How many designs to return.
    explain : bool
        Work out what relaxing the binding setting would buy and the rejected neighbours
        (infeasible requests: the conflict and the relaxations).
    with_limits : bool
        Stretch limits of the best design.

    Raises
    ------
    InputError
        For a bad argument (an unknown objective, ``top`` outside 1..100, requirements with a value out of
        range) or a search beyond the work budget (``numerology.budget.check_search``).
    """
    from . import budget, solver

    req = checked(req)
    if objective is not None and objective not in solver.OBJECTIVES:
        raise InputError("objective", f"unknown objective {objective!r}; expected one of: "
                                      f"{', '.join(solver.OBJECTIVES)}")
    if isinstance(top, bool) or not isinstance(top, (int, np.integer)) or not 1 <= top <= 100:
        raise InputError("top", f"expected a whole number from 1 to 100, got {top!r}")
    explain, with_limits = _flag(explain, "explain"), _flag(with_limits, "with_limits")
    objective = objective or req.goals.objective
    environment = derive_environment(req)
    # before the search: a search beyond the budget says what to narrow (the automatic family's size is
    # known once the environment is)
    budget.check_search(req, spacings=_family_size(req, environment))
    found = solver.search(req, environment, objective=objective, top=top)
    if not found.feasible:
        diagnosis = None
        if explain:
            from .diagnosis import diagnose

            diagnosis = diagnose(req)
        return SolveResult(req, environment, objective, found.window, (), (), found.stats, diagnosis=diagnosis)
    ranked = found.ranked
    checks = []
    for i in range(ranked.keys.size):
        limits = None
        if with_limits and ranked.position[i] == 0:
            limits = stretch_limits(DesignArrays.from_designs([ranked.designs.design(i)]), req, environment)
        check_result = _check_from(ranked.evaluation, ranked.designs, i, environment, req, limits)
        leader = ranked.position[i] < top
        rank = int(ranked.position[i]) + 1 if leader else None
        import dataclasses

        name = f"design {rank}" if leader else f"Pareto design {i + 1}"
        check_result = dataclasses.replace(check_result, design=dataclasses.replace(
            check_result.design, name=name, source="numerology solve"),
            origin=f"rank {rank} of the search" if leader else "a design on the Pareto front of the search")
        checks.append(RankedDesign(rank, check_result, bool(ranked.pareto[i])))
    designs = tuple(sorted((c for c in checks if c.rank is not None), key=lambda c: c.rank))
    pareto = tuple(c for c in checks if c.pareto)
    relaxed, neighbours = None, ()
    if explain and designs:
        best = designs[0].check
        relaxed = _what_relaxing_buys(req, environment, objective, best, float(ranked.keys[0]))
        neighbours = _neighbours(req, environment, best.design)
    return SolveResult(req, environment, objective, found.window, designs, pareto, found.stats, relaxed, neighbours)


def _family_size(req, environment) -> int | None:
    """The number of spacings of an automatic family (None for the others: counted from the request)."""
    if req.search.spacing_family != "auto":
        return None
    from .candidates import spacing_family

    return int(spacing_family(req, environment).size)


def _what_relaxing_buys(req, environment, objective, best: CheckResult, best_key: float) -> Relaxed | None:
    from . import solver
    from .rules import BY_NAME

    graded = [r for r in best.rules if BY_NAME[r.name].setting in RELAX_STEPS]
    if not graded:
        return None
    binding = min(graded, key=lambda r: r.normalised)
    key = BY_NAME[binding.name].setting
    kind, step = RELAX_STEPS[key]
    current = req.value(key)
    if current is None:
        from .link import cp_allowance_s

        current = cp_allowance_s(req) if key == "rules.cp_allowance" else None
    if current is None:
        return None
    new = current + step if kind in ("add", "add_db") else current * step
    if key == "goals.max_overhead":
        new = min(new, 1.0)
    if key == "rules.pilot_oversampling":
        new = max(new, 1.0)
    if key in ("rules.max_doppler_ici", "rules.max_oscillator_ici", "rules.max_echo_interference"):
        new = min(new, 0.0)
    relaxed_req = req.replace(key, new)
    found = solver.search(relaxed_req, derive_environment(relaxed_req), objective=objective, top=1, pareto=False)
    # the best value found (branch and bound makes it exact), not the tie-broken first design, which depends
    # on which of the designs within the tie tolerance the search happened to evaluate
    after = float(found.best_key) if found.feasible else None
    if after is not None and abs(after - best_key) <= float(solver.tie_tolerance(objective, best_key)):
        return None  # it would buy nothing visible: not worth a line
    return Relaxed(key, float(current), float(new), objective, best_key, after)


def _neighbours(req, environment, design: Design) -> tuple:
    """Designs one step away: spacing up and down (same sample rate), CP one sample shorter, sparser pilots."""
    import dataclasses

    from .candidates import spacing_family

    family = spacing_family(req, environment)
    variants = []
    i = int(np.argmin(np.abs(family - design.subcarrier_spacing_hz)))
    for j, label in ((i + 1, "next larger spacing"), (i - 1, "next smaller spacing")):
        if 0 <= j < family.size:
            ratio = design.subcarrier_spacing_hz / family[j]
            fft = max(int(round(design.fft_size * ratio)), 8)
            used = int(np.floor(req.radio.occupancy * req.radio.bandwidth_hz / family[j] + 1e-9))
            used = min(used, fft - 1)
            cp = max(int(round(design.cp_samples * fft / design.fft_size)), 0)
            if used >= 1 and cp < fft:
                variants.append((label, dataclasses.replace(
                    design, subcarrier_spacing_hz=float(family[j]), fft_size=fft, used_subcarriers=used, cp_samples=cp,
                    sample_rate_hz=None)))
    if design.cp_samples > 0:
        variants.append(("cyclic prefix one sample shorter", dataclasses.replace(design, cp_samples=design.cp_samples - 1)))
    if design.pilot_scope != "differential":
        variants.append(("pilots one subcarrier sparser", dataclasses.replace(
            design, pilot_freq_spacing=design.pilot_freq_spacing + 1,
            pilot_shift=0 if design.pilot_shift == 0 else design.pilot_shift)))
        sparser = _sparser_in_time(design)
        if sparser is not None:
            variants.append(sparser)
    out = []
    for label, variant in variants:
        variant = dataclasses.replace(variant, name=label)
        evaluation = link.evaluate(DesignArrays.from_designs([variant]), environment, req)
        results = results_from_evaluation(evaluation, 0)
        failing = [r for r in results if not r.passed]
        worst = min(failing, key=lambda r: r.normalised) if failing else None
        out.append(Neighbour(label, variant, worst.name if worst else None, worst.margin if worst else None))
    return tuple(out)


def _sparser_in_time(design: Design):
    """(label, design) with pilots one step sparser in time: a lattice one symbol longer, a slot one pilot fewer."""
    import dataclasses

    from . import arrangement

    if design.is_lattice:
        spacing = design.pilot_time_spacing + 1
        return "pilots one symbol sparser", dataclasses.replace(design, pilot_time_spacing=spacing,
                                                                  pilot_period=spacing)
    symbols = arrangement.symbols_of(design.pilot_symbols)
    if design.pilot_scope == "slot" and len(symbols) > 1:
        mask = arrangement.evenly_spread(len(symbols) - 1, design.symbols_per_slot)
        return "one pilot-bearing symbol fewer per slot", dataclasses.replace(
            design, pilot_symbols=mask, pilot_time_spacing=int(arrangement.max_gap(mask, design.pilot_period)))
    return None


__all__ += ["solve", "SolveResult", "RankedDesign", "Relaxed", "Neighbour"]
