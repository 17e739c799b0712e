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
and between them the logarithm of the error is interpolated linearly.

The intervals are refined where they need it: an interval is accepted when
the interpolated error at its midpoint agrees with the exact error there
within :data:`TOLERANCE_DB`, at the smallest and the largest noise level of its
sites; otherwise it is halved (at most :data:`MAX_DEPTH` times), and an
interval still not accepted leaves its sites to the exact evaluation. For a
smooth function, linear interpolation errs most midway between the nodes
(common practice: the error term of linear interpolation), so the midpoint
check estimates the error of the interval. It is an estimate, not a proof;
:func:`numerology.sweep.sweep` therefore evaluates exactly every site whose
verdict, binding rule or rate could change within a guard of several times
its interval's check.

Sites whose channels differ are not interpolated across: the error is not a
smooth function of the delays. A profile stretched by a few per cent moves
its taps against the pilot comb's alias period, and the error of a staggered
pattern swings by half a decibel between sites 10 ns apart in rms delay
spread (measured for the harbour_crane example's best design); see
DEVELOPERS.md.

Only channels with at least :data:`MIN_POINTS` distinct Dopplers use a table
(below that, the sites' own exact evaluations are cheaper than the nodes').
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: An interval is accepted when the interpolated error at its midpoint is within this many dB of the exact error.
TOLERANCE_DB = 0.01
#: An interval's interpolated errors are trusted to GUARD_FACTOR times its midpoint check, and never closer than
#: MIN_GUARD_DB (the check estimates the interval's error, it does not bound it; the largest error seen was 1.8
#: times its check, DEVELOPERS.md).
GUARD_FACTOR, MIN_GUARD_DB = 5.0, 0.01
#: Channels with fewer distinct Dopplers than this are evaluated site by site.
MIN_POINTS = 32
#: The most halvings of the Doppler range.
MAX_DEPTH = 6
#: Noise levels per call of a node's weights (the separable form holds an array per level and pilot mode).
LEVEL_CHUNK = 2048


@dataclass(frozen=True)
class TableReport:
    """How a batch's estimation errors were obtained (for the report)."""

    interpolated: int  # elements (design x site) whose error is interpolated
    exact: int  # elements of tabulated channels evaluated exactly (intervals the table gave up on)
    nodes: int  # exact evaluations at table nodes and interval midpoints
    intervals: int  # accepted intervals
    max_deviation_db: float  # largest midpoint check of an accepted interval
    tolerance_db: float = TOLERANCE_DB
    settled: int = 0  # interpolated elements evaluated exactly after all, their verdict or rate in doubt
    guard_db: float = 0.0  # the widest guard of an interval (GUARD_FACTOR times its check, at least MIN_GUARD_DB)

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


def tabulate(f_d, s2, weights_at):
    """The estimation error of elements at (f_D, s2) of one channel, from a refined table.

    Parameters
    ----------
    f_d, s2 : (p,) arrays
        Each element's maximum Doppler (Hz) and pilot noise level.
    weights_at : callable
        ``weights_at(dopplers)``, a list of floats: the exact weights at each (objects with ``mse(s2)``),
        computed together.

    Returns
    -------
    error : (p,) array
        Interpolated error; NaN where the table gave up.
    guard : (p,) array
        How far each interpolated error is trusted, in dB (GUARD_FACTOR times its interval's midpoint check,
        at least MIN_GUARD_DB); NaN where the table gave up.
    report : TableReport
    """
    error, guard = np.full(f_d.size, np.nan), np.full(f_d.size, np.nan)
    nodes: dict = {}
    intervals = [(float(f_d.min()), float(f_d.max()), np.arange(f_d.size))]
    accepted, worst = 0, 0.0
    for _depth in range(MAX_DEPTH + 1):
        if not intervals:
            break
        wanted = {x for low, high, _ in intervals for x in (low, high, (low + high) / 2)}
        missing = sorted(x for x in wanted if x not in nodes)
        if missing:
            nodes.update(zip(missing, weights_at(missing)))
        halves = []
        for low, high, idx in intervals:
            check = np.array([s2[idx].min(), s2[idx].max()])
            middle = (low + high) / 2
            interpolated = (_log(_mse_at(nodes[low], check)) + _log(_mse_at(nodes[high], check))) / 2
            deviation = float(np.max(np.abs(interpolated - _log(_mse_at(nodes[middle], check))))) * 10 / np.log(10)
            if deviation <= TOLERANCE_DB:
                a = (f_d[idx] - low) / (high - low) if high > low else np.zeros(idx.size)
                error[idx] = np.exp((1 - a) * _log(_mse_at(nodes[low], s2[idx]))
                                    + a * _log(_mse_at(nodes[high], s2[idx])))
                guard[idx] = max(GUARD_FACTOR * deviation, MIN_GUARD_DB)
                accepted, worst = accepted + 1, max(worst, deviation)
                continue
            upper = f_d[idx] >= middle
            halves += [(low, middle, idx[~upper]), (middle, high, idx[upper])]
        intervals = [h for h in halves if h[2].size]
    exact = int(np.count_nonzero(np.isnan(error)))
    return error, guard, TableReport(int(f_d.size - exact), exact, len(nodes), accepted, worst,
                                     guard_db=float(np.nanmax(guard)) if exact < f_d.size else 0.0)
