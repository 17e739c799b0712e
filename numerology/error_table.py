"""The channel-estimation error of many sites from a table of exact evaluations (a sweep's fast path).

Why
---
The exact estimation error of one design at one site (``numerology.estimation``:
the LMMSE over the slot or packet, every usable pilot) costs a coupled
eigenproblem or factorisation per pilot set: about a millisecond where the
pilot symbols sit on different combs. A sweep over 10^5 sites would spend
minutes there, although its sites are few *kinds* of channel: a sites file
stretches a handful of profile shapes (``numerology.sweep.site_environments``:
a site's taps are a shape's delays times a factor) and gives each site its
Doppler and its SNR.

The table
---------
Sites that share one channel (the same taps; a sites file that gives one
profile and varies the speed, or rounds its delays) differ only in Doppler
and SNR. For one design and one channel, the error at pilot noise level
``s2`` is a smooth function of the maximum Doppler ``f_D``; the exact weights
at a node ``f_D`` give the error at *every* noise level in closed form (the
eigen form, ``estimation.SpectralWeights``). So the table is over ``f_D``
alone, each site's noise level is used exactly at the two nodes around it,
and between them the logarithm of the error is interpolated linearly in
``f_D^2`` (the time correlations fall as ``1 - c (f_D t)^2`` at first, so the
error's excess over a still channel is nearly linear in ``f_D^2``).

Sites whose rms delay spreads differ (unrounded, every site a channel of its
own) stretch one profile shape by their own factor ``a`` (the taps are the
shape's delays times ``a``). The error is then a smooth function of ``a`` and
``f_D`` too, and the table is over both, interpolated bilinearly. Smooth, but
not slow: a profile stretched by a few per cent moves its taps against the
pilot comb's alias period, and the error of a staggered pattern swings by half
a decibel between sites 10 ns apart in rms delay spread (measured for the
harbour_crane example's best design; DEVELOPERS.md). So no cell is wider
across ``a`` than the error's resolution (:func:`factor_resolution`: the
latest tap's phase at the band edge turns at most half a turn), however
well its few checks agree; a family whose sites take few distinct factors
(rounded spreads) is tabulated channel by channel instead
(``numerology.link``).

The cells are refined where they need it: a cell is accepted when the
interpolated error at its centre and at the midpoints of its edges agrees
with the exact error there within :data:`TOLERANCE_DB`, at :data:`CHECK_LEVELS`
noise levels from the smallest to the largest of its sites (the deviation can
peak between them); otherwise it is halved (at most
:data:`MAX_DEPTH` times across the Doppler, :data:`MAX_SCALE_DEPTH` across the
factor), and a cell still not accepted leaves its sites to the exact
evaluation. For a smooth function, linear interpolation errs most midway
between the nodes (common practice: the error term of linear interpolation),
so the checks estimate the error of the cell. It is an estimate, not a
proof; :func:`numerology.sweep.sweep` therefore evaluates exactly every site
whose verdict, binding rule or rate could change within a guard of several
times its cell's check.

A table makes at most as many exact evaluations as its sites have distinct
(factor, Doppler) points (it gives up the cells left when the next round
would pass that); only groups with at least :data:`MIN_POINTS` distinct points
use a table (below that, the sites' own exact evaluations are cheaper than
the nodes').
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .grouping import members

#: A cell is accepted when the interpolated error at its checks is within this many dB of the exact error.
TOLERANCE_DB = 0.01
#: A cell's interpolated errors are trusted to GUARD_FACTOR times its largest check, and never closer than
#: MIN_GUARD_DB (the checks estimate the cell's error, they do not bound it; the largest error seen was 2.4
#: times its check, DEVELOPERS.md).
GUARD_FACTOR, MIN_GUARD_DB = 5.0, 0.01
#: Groups with fewer distinct (delay factor, Doppler) points than this are evaluated site by site.
MIN_POINTS = 32
#: The most halvings of the Doppler range.
MAX_DEPTH = 6
#: The most halvings of a first cell across the delay factor (at most half a turn wide: 1/4096 of it).
MAX_SCALE_DEPTH = 12
#: Noise levels at which a cell is checked: its sites' smallest and largest, and between them evenly in the
#: logarithm (the deviation need not be largest at either end; every level is a closed form at a node).
CHECK_LEVELS = 5
#: Noise levels per call of a node's weights (the separable form holds an array per level and pilot mode).
LEVEL_CHUNK = 2048


@dataclass(frozen=True)
class TableReport:
    """How a batch's estimation errors were obtained (for the report)."""

    interpolated: int  # elements (design x site) whose error is interpolated
    exact: int  # elements of tabulated groups evaluated exactly (cells the table gave up on)
    nodes: int  # exact evaluations at table nodes and checks
    intervals: int  # accepted cells (intervals of the Doppler, or rectangles of delay factor and Doppler)
    max_deviation_db: float  # largest check of an accepted cell
    tolerance_db: float = TOLERANCE_DB
    settled: int = 0  # interpolated elements evaluated exactly after all, their verdict or rate in doubt
    guard_db: float = 0.0  # the widest guard of a cell (GUARD_FACTOR times its check, at least MIN_GUARD_DB)

    def to_json(self) -> dict:
        return {"interpolated": self.interpolated, "exact": self.exact, "table_nodes": self.nodes,
                "intervals": self.intervals, "max_check_deviation_db": self.max_deviation_db,
                "tolerance_db": self.tolerance_db, "guard_db": self.guard_db, "settled_exactly": self.settled}

    def merged(self, other: "TableReport") -> "TableReport":
        return TableReport(self.interpolated + other.interpolated, self.exact + other.exact, self.nodes + other.nodes,
                           self.intervals + other.intervals, max(self.max_deviation_db, other.max_deviation_db),
                           self.tolerance_db, self.settled + other.settled, max(self.guard_db, other.guard_db))


@dataclass(frozen=True)
class Tabulated:
    """A batch's table account and, per element of the evaluation, whether its error was interpolated."""

    report: TableReport
    interpolated: np.ndarray  # bool, the evaluation's shape
    guard_db: np.ndarray  # how far each interpolated error is trusted (dB); NaN where exact


def _mse_at(weights, s2):
    """``weights.mse(s2)`` in chunks of levels (bounded memory)."""
    out = np.empty(s2.size)
    for start in range(0, s2.size, LEVEL_CHUNK):
        out[start:start + LEVEL_CHUNK] = weights.mse(s2[start:start + LEVEL_CHUNK])
    return out


def _log(x):
    return np.log(np.clip(x, 1e-300, 1.0))


def tabulate(scale, f_d, s2, weights_at, budget=None, max_width=np.inf):
    """The estimation error of elements at (scale, f_D, s2) of one channel family, from a refined table.

    A family is a profile shape whose delays each site stretches by its own factor (``scale``); sites of
    one channel share one factor. The table is over the rectangle of factors and squared Dopplers its
    elements span (see the comment in the code); a cell is accepted when the bilinear interpolation of the
    logarithm of the error from its four corners agrees with the exact error at its centre and at the
    midpoints of its four edges within :data:`TOLERANCE_DB` (at :data:`CHECK_LEVELS` noise levels from its elements' smallest to their largest).
    Otherwise it is halved across the factor where an edge midpoint along the factor misses, across the
    Doppler where one along the Doppler misses, or across the one that misses more where only the centre
    does (at most :data:`MAX_DEPTH` halvings of the Doppler range and :data:`MAX_SCALE_DEPTH` of each first
    cell across the factor, :func:`factor_resolution` wide at most). Where every element has one factor the
    cells are intervals of the Doppler, and the table is one over the Doppler alone.

    Parameters
    ----------
    scale, f_d, s2 : (p,) arrays
        Each element's delay factor, maximum Doppler (Hz) and pilot noise level.
    weights_at : callable
        ``weights_at(points)``, a list of (factor, Doppler) pairs of floats: the exact weights at each
        (objects with ``mse(s2)``), computed together.
    budget : int or None
        The most exact evaluations the table may make (None: no limit). Cells still not accepted when
        the next round would pass it are given up (their elements left to the exact evaluation): a table
        never costs much more than the exact evaluations it replaces.
    max_width : float
        The widest a cell may be across the factor (see :func:`factor_resolution`): the factor's range is
        first cut into equal cells no wider, before any check, since no check of a few points can see the
        error's swings in a cell that spans whole ones.

    Returns
    -------
    error : (p,) array
        Interpolated error; NaN where the table gave up.
    guard : (p,) array
        How far each interpolated error is trusted, in dB (GUARD_FACTOR times its cell's largest check,
        at least MIN_GUARD_DB); NaN where the table gave up.
    report : TableReport
    """
    scale, f_d = np.asarray(scale, dtype=float), np.asarray(f_d, dtype=float)
    # The cells' Doppler coordinate is f_D^2: every time correlation of the model falls as 1 - c (f_D t)^2 at
    # first (Clarke/Jakes: J0(x) = 1 - x^2 / 4 + ...), so the error's excess over a still channel starts in
    # f_D^2 and is nearly linear in it, where in f_D it is a parabola that needs halving.
    square = f_d ** 2
    error, guard = np.full(f_d.size, np.nan), np.full(f_d.size, np.nan)
    nodes: dict = {}
    low, high = float(scale.min()), float(scale.max())
    count = int(np.ceil((high - low) / max_width)) if high > low and np.isfinite(max_width) else 1
    edges = low + (high - low) * np.arange(count + 1) / count  # cells no wider than max_width, unchecked
    edges[-1] = high
    column = np.clip(np.searchsorted(edges, scale, side="right") - 1, 0, count - 1)
    cells = [(float(edges[i]), float(edges[i + 1]), 0, float(square.min()), float(square.max()), 0, part)
             for i, part in enumerate(members(column, count)) if part.size]
    accepted, worst = 0, 0.0

    def logs(point, levels):
        return _log(_mse_at(nodes[point], levels))

    while cells:
        wanted = set()
        for a0, a1, _, b0, b1, _, _ in cells:
            am, bm = (a0 + a1) / 2, (b0 + b1) / 2
            wanted |= {(a0, b0), (a0, b1), (a1, b0), (a1, b1), (am, bm), (am, b0), (am, b1), (a0, bm), (a1, bm)}
        missing = sorted(x for x in wanted if x not in nodes)
        if budget is not None and len(nodes) + len(missing) > budget:
            break  # the remaining cells' elements go to the exact evaluation
        if missing:
            nodes.update(zip(missing, weights_at([(a, float(np.sqrt(b))) for a, b in missing])))
        halves = []
        for a0, a1, depth_a, b0, b1, depth_b, idx in cells:
            am, bm = (a0 + a1) / 2, (b0 + b1) / 2
            check = _levels(s2[idx].min(), s2[idx].max())
            corners = ((a0, b0), (a0, b1), (a1, b0), (a1, b1))  # all four, also where two coincide
            corner = {p: logs(p, check) for p in corners}
            along_a = max(_db_apart((corner[a0, b] + corner[a1, b]) / 2, logs((am, b), check)) for b in (b0, b1))
            along_b = max(_db_apart((corner[a, b0] + corner[a, b1]) / 2, logs((a, bm), check)) for a in (a0, a1))
            centre = _db_apart(sum(corner[p] for p in corners) / 4, logs((am, bm), check))
            deviation = max(along_a, along_b, centre)
            if deviation <= TOLERANCE_DB:
                u = (scale[idx] - a0) / (a1 - a0) if a1 > a0 else np.zeros(idx.size)
                v = (square[idx] - b0) / (b1 - b0) if b1 > b0 else np.zeros(idx.size)
                at = {p: logs(p, s2[idx]) for p in corner}
                error[idx] = np.exp((1 - u) * ((1 - v) * at[a0, b0] + v * at[a0, b1])
                                    + u * ((1 - v) * at[a1, b0] + v * at[a1, b1]))
                guard[idx] = max(GUARD_FACTOR * deviation, MIN_GUARD_DB)
                accepted, worst = accepted + 1, max(worst, deviation)
                continue
            split_a = along_a > TOLERANCE_DB or (along_b <= TOLERANCE_DB and along_a >= along_b and a1 > a0)
            split_b = along_b > TOLERANCE_DB or not split_a
            if (split_a and depth_a >= MAX_SCALE_DEPTH) or (split_b and depth_b >= MAX_DEPTH):
                continue  # given up: left to the exact evaluation
            parts = [(a0, a1, depth_a, idx)]
            if split_a:
                upper = scale[idx] >= am
                parts = [(a0, am, depth_a + 1, idx[~upper]), (am, a1, depth_a + 1, idx[upper])]
            for lo, hi, depth, part in parts:
                if split_b:
                    upper = square[part] >= bm
                    halves += [(lo, hi, depth, b0, bm, depth_b + 1, part[~upper]),
                               (lo, hi, depth, bm, b1, depth_b + 1, part[upper])]
                else:
                    halves.append((lo, hi, depth, b0, b1, depth_b, part))
        cells = [h for h in halves if h[-1].size]
    exact = int(np.count_nonzero(np.isnan(error)))
    return error, guard, TableReport(int(f_d.size - exact), exact, len(nodes), accepted, worst,
                                     guard_db=float(np.nanmax(guard)) if exact < f_d.size else 0.0)


def factor_resolution(band_hz: float, latest_delay_s: float) -> float:
    """The widest cell across the delay factor: the latest tap's phase at the band edge turns half a turn.

    A site's taps are a shape's delays times its factor ``a``; across the band ``B`` the phase of the tap at
    delay ``a tau`` spans ``2 pi B a tau``, and the error depends on the delays through such phases (the pilot
    combs' Gram matrices are Dirichlet kernels of the delay differences). Across a cell of width ``w`` the
    phase of the latest tap ``tau_max`` moves by ``2 pi B tau_max w``: half a turn at
    ``w = 1 / (2 B tau_max)``, whatever the factor, so the checks at a cell's edge midpoints sample every
    quarter turn. Wider cells can hold whole swings of the error that checks at a few points cannot see
    (a sampling argument, common practice; the measurements are in DEVELOPERS.md).
    """
    return np.inf if band_hz * latest_delay_s <= 0 else 1.0 / (2.0 * band_hz * latest_delay_s)


def _levels(smallest, largest):
    """:data:`CHECK_LEVELS` noise levels from ``smallest`` to ``largest``, evenly in the logarithm (if positive)."""
    if smallest > 0:
        return np.geomspace(smallest, largest, CHECK_LEVELS)
    return np.linspace(smallest, largest, CHECK_LEVELS)


def _db_apart(log_a, log_b) -> float:
    """The largest difference, in dB, between two arrays of natural logarithms of errors."""
    return float(np.max(np.abs(log_a - log_b))) * 10 / np.log(10)
