"""Stretch limits: how far one design stretches before a rule fails.

For each stress variable (speed, max excess delay, SNR, oscillator linewidth)
every rule's margin is evaluated along a grid with the same link model as
``check``: speed, delay and SNR grids in one vectorised call over a batch of
environments (``numerology.sweep``), the linewidth grid by re-evaluating the
oscillator term. In the first grid interval where a rule goes from pass to
fail, the crossing is refined with Brent's method to 1e-6 relative; the limit
is that crossing and the rule that makes it is reported.

With a catalogue or measured profile the delay is stretched by scaling the
profile (its rms spread and max excess delay scale together).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

from . import link
from .design import DesignArrays
from .requirements import Requirements

GRID_POINTS = 25
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


def _first_crossing(key, grid, margins_on_grid, margin_at, worse_up) -> Limit:
    """The limit from margins on a grid ordered from benign to harsh, refined by Brent's method."""
    crossings = {}
    for name, values in margins_on_grid.items():
        values = np.asarray(values, dtype=float)
        if np.all(values == values[0]):
            continue  # this rule does not depend on the stress variable
        fails = np.flatnonzero((values[:-1] >= 0) & (values[1:] < 0))
        if fails.size:
            crossings[name] = int(fails[0])
    if not crossings:
        return Limit(key, math.inf if worse_up else -math.inf, None, float(grid[-1]))
    first = min(crossings.values())
    best_x, best_rule = None, None
    for name, i in crossings.items():
        if i != first:
            continue  # a later crossing cannot set the limit
        try:
            x = brentq(lambda v: margin_at(v, name), grid[i], grid[i + 1], rtol=RTOL, xtol=1e-300)
        except ValueError:  # a step in the margin (modulation-and-coding table): the grid point is the edge
            x = grid[i]
        if best_x is None or (x < best_x if worse_up else x > best_x):
            best_x, best_rule = x, name
    return Limit(key, float(best_x), best_rule, float(grid[-1]))


def _sweep_limit(key, design, req, grid, site_values, worse_up=True) -> Limit:
    """Scan a grid of sites built by ``site_values(array) -> dict of sites_from_values arguments``."""
    from .sweep import sites_from_values, sweep

    def margins(values):
        return sweep(req, design, sites_from_values(req, **site_values(np.asarray(values, dtype=float)))).margin

    on_grid = margins(grid)
    return _first_crossing(key, grid, on_grid, lambda v, name: float(margins([v])[name][0]), worse_up)


def stretch_limits(designs: DesignArrays, req: Requirements, environment) -> dict[str, Limit]:
    """The design's stretch limits in speed, delay, SNR and oscillator linewidth.

    Parameters
    ----------
    designs : DesignArrays
        Exactly one design.
    req : Requirements
    environment : Environment
        The environment the design is checked in (its speed is kept while the delay is stretched).

    Returns
    -------
    dict
        ``max_speed_mps``, ``max_excess_delay_s``, ``min_snr_db`` and
        ``max_oscillator_linewidth_hz`` (absent when a phase-noise mask is given).
    """
    design = designs.design(0)
    limits = {}
    speeds = np.concatenate([[0.0], np.geomspace(1e-2, 2e4, GRID_POINTS - 1)])
    limits["max_speed_mps"] = _sweep_limit(
        "max_speed_mps", design, req, speeds, lambda v: {"max_speed_mps": v})

    base_delay = environment.max_excess_delay_s
    base_rms = environment.rms_delay_spread_s
    delays = np.geomspace(max(base_delay, 1e-9) * 1e-3, max(base_delay * 1e3, 1e-3), GRID_POINTS)
    speed = {"max_speed_mps": environment.speed_mps}
    if req.environment.profile is not None or req.environment.profile_file is not None:
        if base_delay > 0 and base_rms > 0:  # stretch the profile: rms and span scale together
            limits["max_excess_delay_s"] = _sweep_limit(
                "max_excess_delay_s", design, req, delays,
                lambda t: {**speed, "rms_delay_spread_s": base_rms * t / base_delay})
    elif req.environment.rms_delay_spread_s is None or req.environment.max_excess_delay_s is None:
        if req.environment.max_excess_delay_s is not None:
            limits["max_excess_delay_s"] = _sweep_limit(
                "max_excess_delay_s", design, req, delays, lambda t: {**speed, "max_excess_delay_s": t})
        elif base_delay > 0:
            limits["max_excess_delay_s"] = _sweep_limit(
                "max_excess_delay_s", design, req, delays,
                lambda t: {**speed, "rms_delay_spread_s": base_rms * t / base_delay})
    else:  # both bounds given: stretch both, keeping their ratio
        ratio = base_rms / base_delay if base_delay > 0 else 0.0
        limits["max_excess_delay_s"] = _sweep_limit(
            "max_excess_delay_s", design, req, delays,
            lambda t: {**speed, "max_excess_delay_s": t, "rms_delay_spread_s": ratio * t})

    snrs = np.linspace(80.0, -30.0, GRID_POINTS * 2 - 1)  # from benign to harsh
    limits["min_snr_db"] = _sweep_limit("min_snr_db", design, req, snrs,
                                        lambda s: {**speed, "snr_db": s}, worse_up=False)
    if req.radio.phase_noise is None:
        limits["max_oscillator_linewidth_hz"] = _linewidth_limit(designs, req, environment)
    return limits


def _linewidth_limit(designs, req, environment) -> Limit:
    grid = np.concatenate([[0.0], np.geomspace(1e-3, 1e8, GRID_POINTS - 1)])

    def margins(linewidth):
        r = req.replace("radio.oscillator_linewidth", float(linewidth))
        evaluation = link.evaluate(designs, environment, r)
        return {rule.name: float(np.ravel(evaluation.margin[rule.name])[0]) for rule in evaluation.rules}

    table = [margins(x) for x in grid]
    on_grid = {name: [row[name] for row in table] for name in table[0]}
    return _first_crossing("max_oscillator_linewidth_hz", grid, on_grid, lambda v, name: margins(v)[name], True)
