"""Stretch limits: how far one design stretches before a rule fails.

For each stress variable (speed, max excess delay, rms delay spread, SNR,
oscillator linewidth) the environment is re-derived along a grid and every
rule's margin evaluated with the same link model as ``check``. Where a rule's
margin crosses zero (from pass to fail as the stress grows) the crossing is
refined with Brent's method to 1e-6 relative; the limit is the first crossing
and the rule that makes it is reported.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

from . import link
from .design import DesignArrays
from .environment import derive_environment
from .requirements import Requirements

GRID_POINTS = 21
RTOL = 1e-6


@dataclass(frozen=True)
class Limit:
    """The largest (or, for SNR, smallest) value the design tolerates."""

    key: str  # JSON key with unit suffix, e.g. "max_speed_mps"
    value: float  # inf where no rule ever fails in the searched range
    rule: str | None  # the rule that fails first beyond the limit
    searched_to: float

    def to_json(self) -> dict:
        return {"value": None if math.isinf(self.value) else self.value, "rule": self.rule}


def _margins(design: DesignArrays, req: Requirements, env) -> dict:
    evaluation = link.evaluate(design, env, req)
    return {rule.name: float(np.ravel(evaluation.margin[rule.name])[0]) for rule in evaluation.rules}


def _limit(key, design, req, make, low, high, log, worse_up) -> Limit:
    """Scan ``make(x) -> (env, req)`` over [low, high] and find the first pass-to-fail crossing."""
    grid = np.geomspace(low, high, GRID_POINTS) if log else np.linspace(low, high, GRID_POINTS)
    if not worse_up:
        grid = grid[::-1]

    def margins_at(x):
        env, r = make(x)
        return _margins(design, r, env)

    table = [margins_at(x) for x in grid]
    # The first grid interval where some rule goes from pass to fail holds the limit; only the rules
    # crossing there need refining.
    crossings = {}
    for name in table[0]:
        values = np.array([m[name] for m in table])
        if np.all(values == values[0]):
            continue  # this rule does not depend on the stress variable
        fails = np.flatnonzero((values[:-1] >= 0) & (values[1:] < 0))
        if fails.size:
            crossings[name] = int(fails[0])
    best_x, best_rule = None, None
    if crossings:
        first = min(crossings.values())
        for name, i in crossings.items():
            if i != first:
                continue
            try:
                x = brentq(lambda v: margins_at(v)[name], grid[i], grid[i + 1], rtol=RTOL, xtol=1e-300)
            except ValueError:
                x = grid[i]
            if best_x is None or (x < best_x if worse_up else x > best_x):
                best_x, best_rule = x, name
    if best_x is None:
        return Limit(key, math.inf if worse_up else -math.inf, None, float(grid[-1]))
    return Limit(key, float(best_x), best_rule, float(grid[-1]))


def stretch_limits(design: DesignArrays, req: Requirements, environment) -> dict[str, Limit]:
    """The design's stretch limits in speed, delay, SNR and oscillator linewidth.

    Returns
    -------
    dict
        ``max_speed_mps``, ``max_excess_delay_s``, ``min_snr_db`` and
        ``max_oscillator_linewidth_hz`` (absent when a phase-noise mask is given).
    """
    limits = {}
    limits["max_speed_mps"] = _limit(
        "max_speed_mps", design, req, lambda v: (derive_environment(req, speed_mps=v), req),
        1e-3, 2e4, True, True)
    base_delay = max(environment.max_excess_delay_s, 1e-9)
    limits["max_excess_delay_s"] = _limit(
        "max_excess_delay_s", design, req,
        lambda t: (derive_environment(req, speed_mps=environment.speed_mps, max_excess_delay_s=t), req),
        base_delay * 1e-3, max(base_delay * 1e3, 1e-3), True, True)

    def at_snr(snr_db):
        r = req.replace("radio.snr", snr_db)
        return environment, r

    limits["min_snr_db"] = _limit("min_snr_db", design, req, at_snr, -30.0, 80.0, False, False)
    if req.radio.phase_noise is None:
        def at_linewidth(lw):
            return environment, req.replace("radio.oscillator_linewidth", lw)

        limits["max_oscillator_linewidth_hz"] = _limit(
            "max_oscillator_linewidth_hz", design, req, at_linewidth, 1e-3, 1e8, True, True)
    return limits
