"""Stretch limits: how far one design stretches before a rule fails.

For each stress variable (speed, max excess delay, SNR, oscillator linewidth)
every rule's margin is evaluated along a grid with the same link model as
``check``: speed, delay and SNR grids in one vectorised call over a batch of
environments (``numerology.sweep``), the linewidth grid by re-evaluating the
oscillator term. The first grid interval where a rule goes from pass to
fail is narrowed, many points at a time, to 1e-6 relative; the limit is that
crossing and the rule that makes it is reported.

With a catalogue or measured profile the delay is stretched by scaling the
profile (its rms spread and max excess delay scale together).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from . import link
from .design import DesignArrays
from .requirements import Requirements

GRID_POINTS = 25
#: Points evaluated at once when narrowing the interval that holds the limit.
REFINE_POINTS = 10
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


def _crossing(key, grid, worse_up):
    """The limit from margins on a grid ordered from benign to harsh (a generator).

    It yields the points it needs evaluated and receives ``{rule: margins}`` for
    them; it returns the :class:`Limit`. First the grid; then the first grid
    interval where a rule goes from pass to fail is narrowed by evaluating
    REFINE_POINTS points inside it, repeatedly, until it is 1e-6 (relative)
    wide; the rule failing at its harsh end is reported. This also finds the
    edge of a margin that steps (a modulation-and-coding table).
    """
    margins_on_grid = yield np.asarray(grid, dtype=float)
    names = [n for n, v in margins_on_grid.items() if np.size(v) and not np.all(np.asarray(v) == np.asarray(v)[0])]
    if not names:  # no rule varies along this stress (e.g. the Shannon model without a throughput goal), or no
        # point of the grid is a valid site (a Doppler at the top of its range: every speed is beyond it)
        return Limit(key, math.inf if worse_up else -math.inf, None, float(grid[-1]))
    table = np.array([margins_on_grid[n] for n in names], dtype=float).reshape(len(names), -1)
    crossing = (table[:, :-1] >= 0) & (table[:, 1:] < 0)
    if not crossing.any():
        return Limit(key, math.inf if worse_up else -math.inf, None, float(grid[-1]))
    i = int(np.min(np.flatnonzero(crossing.any(axis=0))))
    watched = [n for n, ok in zip(names, table[:, i] >= 0) if ok]  # rules that still pass at the benign end
    low, high = float(grid[i]), float(grid[i + 1])
    failing = [n for n in watched if margins_on_grid[n][i + 1] < 0]
    for _ in range(40):
        if abs(high - low) <= RTOL * max(abs(high), abs(low), 1e-300):
            break
        inside = np.linspace(low, high, REFINE_POINTS + 2)[1:-1]
        margins = yield inside
        bad = np.array([np.asarray(margins[n]) < 0 for n in watched]).any(axis=0)
        j = int(np.argmax(bad)) if bad.any() else None
        if j is None:
            low = float(inside[-1])
        else:
            high = float(inside[j])
            low = float(inside[j - 1]) if j > 0 else low
            failing = [n for n in watched if margins[n][j] < 0]
    rule = min(failing, key=lambda n: names.index(n)) if failing else None
    return Limit(key, low, rule, float(grid[-1]))


def _run(tasks: dict, evaluate) -> dict:
    """Drive crossing generators in lockstep: each round, every pending task's points in one evaluation.

    ``tasks`` maps a key to (generator, to_values); ``evaluate(list of (to_values, points))`` returns one
    ``{rule: margins}`` per entry.
    """
    pending = {key: next(gen) for key, (gen, _) in tasks.items()}
    results = {}
    while pending:
        margins = evaluate([(tasks[key][1], points) for key, points in pending.items()])
        advanced = {}
        for (key, _), answer in zip(pending.items(), margins):
            try:
                advanced[key] = tasks[key][0].send(answer)
            except StopIteration as done:
                results[key] = done.value
        pending = advanced
    return results


SITE_FIELDS = ("max_speed_mps", "max_excess_delay_s", "rms_delay_spread_s", "snr_db")


def _sweep_evaluator(design, req):
    """Evaluate every task's points as sites of one sweep (fields a task leaves out keep the requirement's value)."""
    from .sweep import sites_from_values, sweep

    def evaluate(requests):
        parts = [to_values(np.asarray(points, dtype=float)) for to_values, points in requests]
        sizes = [len(points) for _, points in requests]
        columns = {field: np.concatenate([np.broadcast_to(np.asarray(part.get(field, np.nan), dtype=float), (n,))
                                          for part, n in zip(parts, sizes)]) for field in SITE_FIELDS}
        margin = sweep(req, design, sites_from_values(req, **columns), tabulate=False).margin  # exact: a bisection
        edges = np.cumsum([0] + sizes)
        return [{name: values[a:b] for name, values in margin.items()} for a, b in zip(edges[:-1], edges[1:])]

    return evaluate


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
        ``max_speed_mps``, ``max_excess_delay_s`` (with a profile also
        ``max_rms_delay_spread_s``: the profile stretched as a whole), ``min_snr_db``
        and ``max_oscillator_linewidth_hz`` (absent when a phase-noise mask is given).
    """
    design = designs.design(0)
    tasks = {}
    speeds = np.concatenate([[0.0], np.geomspace(1e-2, 2e4, GRID_POINTS - 1)])
    tasks["max_speed_mps"] = (_crossing("max_speed_mps", speeds, True), lambda v: {"max_speed_mps": v})

    base_delay = environment.max_excess_delay_s
    base_rms = environment.rms_delay_spread_s
    delays = np.geomspace(max(base_delay, 1e-9) * 1e-3, max(base_delay * 1e3, 1e-3), GRID_POINTS)
    speed = {"max_speed_mps": environment.speed_mps}
    env_req = req.environment
    stretch = None
    if env_req.profile is not None or env_req.profile_file is not None or env_req.max_excess_delay_s is None:
        if base_delay > 0 and base_rms > 0:  # stretch the (given or assumed) profile: rms and span scale together
            stretch = lambda t: {**speed, "rms_delay_spread_s": base_rms * t / base_delay}  # noqa: E731
    elif env_req.rms_delay_spread_s is None:
        stretch = lambda t: {**speed, "max_excess_delay_s": t}  # noqa: E731
    else:  # both bounds given: stretch both, keeping their ratio
        ratio = base_rms / base_delay if base_delay > 0 else 0.0
        stretch = lambda t: {**speed, "max_excess_delay_s": t, "rms_delay_spread_s": ratio * t}  # noqa: E731
    if stretch is not None:
        tasks["max_excess_delay_s"] = (_crossing("max_excess_delay_s", delays, True), stretch)

    snrs = np.linspace(80.0, -30.0, GRID_POINTS * 2 - 1)  # from benign to harsh
    tasks["min_snr_db"] = (_crossing("min_snr_db", snrs, False), lambda v: {**speed, "snr_db": v})
    limits = _run(tasks, _sweep_evaluator(design, req))
    if "max_excess_delay_s" in limits and (env_req.profile is not None or env_req.profile_file is not None):
        span = limits["max_excess_delay_s"]
        limits["max_rms_delay_spread_s"] = Limit("max_rms_delay_spread_s", span.value * base_rms / base_delay,
                                                 span.rule, span.searched_to * base_rms / base_delay)
    if req.radio.phase_noise is None:
        limits["max_oscillator_linewidth_hz"] = _linewidth_limit(designs, req, environment)
    order = ("max_speed_mps", "max_excess_delay_s", "max_rms_delay_spread_s", "min_snr_db",
             "max_oscillator_linewidth_hz")
    return {key: limits[key] for key in order if key in limits}


def _linewidth_limit(designs, req, environment) -> Limit:
    grid = np.concatenate([[0.0], np.geomspace(1e-3, 1e8, GRID_POINTS - 1)])

    def evaluate(requests):
        answers = []
        for _, points in requests:
            r = req.replace("radio.oscillator_linewidth", np.asarray(points, dtype=float))
            evaluation = link.evaluate(designs, environment, r)  # one call: the linewidth broadcasts
            answers.append({rule.name: np.ravel(evaluation.margin[rule.name]) for rule in evaluation.rules})
        return answers

    task = {"max_oscillator_linewidth_hz": (_crossing("max_oscillator_linewidth_hz", grid, True), None)}
    return _run(task, evaluate)["max_oscillator_linewidth_hz"]
