"""Why a request is infeasible, and what to relax.

Two answers, both found with the solver itself as the oracle:

* the **conflict**: a smallest set of rules and goals that cannot hold
  together (a deletion filter: drop each one in turn and keep it out while the
  rest stays infeasible; what remains is irreducible);
* the **relaxations**: for each goal or bound the user could move, the nearest
  value (bisection on that key alone, the rest as required) at which the
  request becomes feasible; every suggestion is re-solved and kept only if it
  really is feasible.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import link
from .environment import derive_environment
from .errors import InputError
from .requirements import Requirements
from .units import engineering

#: Relative precision of a suggested value.
RELAX_RTOL = 0.01
MAX_STEPS = 24


@dataclass(frozen=True)
class Relaxation:
    key: str  # dotted requirement key
    value: str  # quantity string ready to paste
    value_si: float
    current_si: float
    direction: str  # "at most" / "at least"
    dimension: str = "ratio"  # how to show the values (see RELAXABLE)

    @property
    def current(self) -> str:
        """The value the requirement file has now, written as the suggestion is."""
        return quantity_string(self.current_si, self.dimension)

    def to_json(self) -> dict:
        return {"key": self.key, "value": self.value, "value_si": self.value_si, "current_si": self.current_si}

    def __str__(self) -> str:
        return f"{self.key} {self.direction} {self.value}"


def _feasible(req: Requirements, ignore=()) -> bool:
    from .solver import any_feasible

    try:
        environment = derive_environment(req)
    except (InputError, ValueError):  # a trial value outside what the environment model accepts
        return False
    return any_feasible(req, environment, ignore)


def conflict_set(req: Requirements) -> tuple[str, ...]:
    """A smallest set of rules (goals included) that conflict (deletion filter)."""
    names = [rule.name for rule in link.applicable_rules(req) if not rule.gate]
    if not _feasible(req, ignore=tuple(names)):
        # Even with every graded rule left out nothing fits: the yes/no rules conflict.
        return tuple(rule.name for rule in link.applicable_rules(req) if rule.gate)
    keep = list(names)
    for name in names:
        trial = [n for n in keep if n != name]
        ignore = tuple(n for n in names if n not in trial)
        if not _feasible(req, ignore=ignore):
            keep = trial  # still infeasible without it: it is not needed for the conflict
    return tuple(keep)


#: Keys a user may move: (dotted key, dimension for display, worse-to-better direction, bound).
#: direction +1: raising the value helps; -1: lowering it helps.
RELAXABLE = (
    ("goals.throughput", "bitrate", -1),
    ("goals.max_latency", "time", +1),
    ("goals.max_overhead", "ratio", +1),
    ("environment.max_speed", "speed", -1),
    ("environment.max_doppler", "frequency", -1),
    ("environment.max_excess_delay", "time", -1),
    ("environment.rms_delay_spread", "time", -1),
    ("radio.snr", "db", +1),
)

def quantity_string(value: float, dimension: str) -> str:
    if dimension == "speed":
        return f"{value * 3.6:.4g} km/h"
    if dimension == "db":
        return f"{value:.4g} dB"
    if dimension == "ratio":
        return f"{value:.4g}"
    unit = {"bitrate": "bit/s", "time": "s", "frequency": "Hz"}[dimension]
    text = engineering(value, unit)
    return text.replace("us", "us")


def _parse_back(text: str, dimension: str) -> float:
    """The SI value a user gets by pasting the suggested string (rounding included)."""
    from .units import parse_db, parse_quantity

    if dimension == "db":
        return parse_db(text, "relaxation")
    if dimension == "ratio":
        return float(text)
    return parse_quantity(text, dimension, "relaxation")


def relaxations(req: Requirements) -> list[Relaxation]:
    """For each movable key, the nearest value that makes the request feasible."""
    out = []
    for key, dimension, direction in RELAXABLE:
        current = req.value(key)
        if current is None:
            continue
        if key == "goals.throughput" and not current > 0:
            continue
        if key == "goals.max_overhead" and not current < 1:
            continue
        found = _relax_one(req, key, dimension, direction, float(current))
        if found is not None:
            out.append(found)
    return out


def _candidate_values(key, current, direction):
    """The extreme value to try first for a key (the most relaxed sensible value)."""
    if key == "goals.max_overhead":
        return 0.999
    if key == "radio.snr":
        return min(current + 40.0, 80.0)
    if direction < 0:
        if key.startswith("environment."):
            return current * 1e-3  # a thousandth of the speed or delay: any relief there is this side of it
        return current * 1e-6 if current > 0 else 0.0
    return current * 1e3


#: Goals whose nearest feasible value is an optimum: the best value of the goal's own quantity among
#: the designs that meet everything else (one search instead of a bisection).
GOAL_OBJECTIVES = {"goals.throughput": ("throughput", "throughput", 1.0),
                   "goals.max_latency": ("latency", "latency", -1.0),
                   "goals.max_overhead": ("overhead", "overhead", -1.0)}


def _goal_optimum(req, key):
    """The goal's best achievable value with the goal itself left out (None if nothing fits even then)."""
    from .solver import search

    rule, objective, sign = GOAL_OBJECTIVES[key]
    try:
        environment = derive_environment(req)
    except (InputError, ValueError):
        return None
    found = search(req, environment, objective=objective, top=1, ignore=(rule,), pareto=False)
    return sign * float(found.ranked.keys[0]) if found.feasible else None


def _relax_one(req, key, dimension, direction, current) -> Relaxation | None:
    if key in GOAL_OBJECTIVES:
        best = _goal_optimum(req, key)
        if best is None:
            return None
        # The optimum is feasible; a value just past it on the other side is the boundary to round towards.
        bad, good = current, best
    else:
        extreme = _candidate_values(key, current, direction)
        if not _feasible(req.replace(key, extreme)):
            return None
        bad, good = _bisect(req, key, dimension, current, extreme)
    # Round toward the feasible side and check that the pasted value really works.
    for digits in (3, 4, 6):
        text = _round_towards(good, bad, dimension, digits)
        value = _parse_back(text, dimension)
        if _feasible(req.replace(key, value)):
            return Relaxation(key, text, value, current, "at least" if direction > 0 else "at most", dimension)
    return None


def _bisect(req, key, dimension, current, extreme):
    """(infeasible, feasible) values bracketing the boundary to RELAX_RTOL."""
    bad, good = current, extreme
    log = dimension not in ("db", "ratio") and bad > 0 and good > 0
    for _ in range(MAX_STEPS):
        mid = math.sqrt(bad * good) if log else 0.5 * (bad + good)
        if _feasible(req.replace(key, mid)):
            good = mid
        else:
            bad = mid
        if abs(good - bad) <= RELAX_RTOL * abs(good) or (dimension in ("db", "ratio") and abs(good - bad) < 0.05):
            break
    return bad, good


def _round_towards(good: float, bad: float, dimension: str, digits: int) -> str:
    """A short quantity string on the feasible side of the boundary."""
    if dimension == "ratio":
        step = 10.0 ** -(digits - 1)
        value = math.ceil(good / step) * step if good > bad else math.floor(good / step) * step
        return f"{min(value, 1.0):.{digits}g}"
    if dimension == "db":
        step = 0.1
        value = math.ceil(good / step) * step if good > bad else math.floor(good / step) * step
        return f"{value:.1f} dB"
    scale = 3.6 if dimension == "speed" else 1.0
    x = good * scale
    if x <= 0:
        return quantity_string(0.0, dimension)
    exponent = math.floor(math.log10(abs(x))) - (digits - 1)
    step = 10.0**exponent
    x = math.ceil(x / step) * step if good > bad else math.floor(x / step) * step
    return quantity_string(x / scale, dimension)


@dataclass(frozen=True)
class Diagnosis:
    conflict: tuple
    relaxations: tuple

    def to_json(self) -> dict:
        return {"conflict": list(self.conflict), "relaxations": [r.to_json() for r in self.relaxations]}


def diagnose(req: Requirements) -> Diagnosis:
    """The conflict and the relaxations for an infeasible request."""
    return Diagnosis(conflict_set(req), tuple(relaxations(req)))


__all__ = ["Diagnosis", "Relaxation", "diagnose", "conflict_set", "relaxations", "np"]
