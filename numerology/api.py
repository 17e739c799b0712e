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
from dataclasses import dataclass

import numpy as np

from . import link
from .design import Design, DesignArrays, load_design
from .environment import Environment, derive_environment
from .errors import InputError
from .limits import Limit, stretch_limits
from .requirements import Requirements, load_requirements
from .units import db, engineering


def load(path) -> Requirements:
    """Read a requirement file (see ``numerology.requirements``)."""
    return load_requirements(path)


def design_from(design=None, preset: str | None = None, path: str | None = None) -> Design:
    """A design given as an object, a preset name or a design file."""
    if isinstance(design, Design):
        return design
    if preset is not None:
        from .presets import get_preset

        try:
            return get_preset(preset).design
        except ValueError as exc:
            raise InputError("--preset", str(exc)) from None
    if path is not None:
        return load_design(path)
    raise InputError("design", "expected a design, a preset name or a design file")


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

    def to_json(self) -> dict:
        return {"name": self.name, "margin": _finite(self.margin), "passed": self.passed,
                "convention": self.convention, "capacity": _finite(self.capacity), "demand": _finite(self.demand),
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

    def to_json(self) -> dict:
        return {
            "design": self.design.to_json(),
            "passed": self.passed,
            "binding_rule": self.binding_rule.name,
            "constraints": [r.to_json() for r in self.rules],
            "sinr_terms_db": {k: _finite(10 * math.log10(v)) if v > 0 else None for k, v in self.sinr_terms.items()},
            "effective_sinr_db": self.effective_sinr_db,
            "spectral_efficiency": self.efficiency,
            "net_throughput_bps": self.net_throughput_bps,
            "overhead": self.overhead,
            "limits": {k: v.to_json() for k, v in self.limits.items()},
        }


def _show_margin(rule: RuleResult) -> str:
    if rule.convention == "db":
        return db(rule.margin)
    return f"{100 * rule.margin:+.1f} %"


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
    """
    chosen = design_from(design, preset, design_file)
    environment = derive_environment(req, speed_mps=speed_mps, max_excess_delay_s=max_excess_delay_s)
    arrays = DesignArrays.from_designs([chosen])
    evaluation = link.evaluate(arrays, environment, req)
    limits = {}
    if with_limits:
        if speed_mps is not None:
            req = req.replace("environment.max_speed", speed_mps).replace("environment.max_doppler", None)
        limits = stretch_limits(arrays, req, environment)
    return CheckResult(
        design=chosen, environment=environment, rules=results_from_evaluation(evaluation, 0),
        sinr_terms={k: float(np.ravel(v)[0]) for k, v in evaluation.terms.items()},
        effective_sinr_db=float(evaluation.sinr_eff_db[0]), efficiency=float(evaluation.efficiency[0]),
        net_throughput_bps=float(evaluation.rate_bps[0]), overhead=float(evaluation.overhead[0]), limits=limits)


__all__ = ["load", "check", "CheckResult", "RuleResult", "Limit", "design_from"]
