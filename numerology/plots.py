"""Pictures: where a design holds, and the subcarrier-spacing window against speed.

Two panels in one figure, written as PNG or SVG by :func:`write_plot`:

(a) the **operating map** of one design: relative speed across, delay spread
    up (the rms delay spread when the channel is a profile, which is then
    scaled; otherwise the max excess delay, with an assumed rms spread kept
    in proportion). The region where every rule passes is hatched; each
    stretch of its edge is drawn in the line style of the rule whose margin
    crosses zero there, and named in the legend; a star marks the
    requirement.
(b) the **spacing window**: speed across, subcarrier spacing up (log). For
    each speed the relaxed margins of ``candidates.relaxed_margins`` (upper
    bounds for any design with that spacing) give the band of spacings that
    can work; each rule's zero line is drawn where it bounds the band; the
    family's spacings are thin lines and the design's spacing at the
    required speed is marked.

The numbers come from pure functions (:func:`operating_map`,
:func:`spacing_map`, :func:`speed_limits`, :func:`delay_limits`) that
evaluate grids of environments in one call each (an
:class:`~numerology.environment.EnvironmentBatch`); matplotlib (the optional
``plot`` extra) is imported only to draw.
"""

from __future__ import annotations

import io
import math
import textwrap
from dataclasses import dataclass

import numpy as np

from . import candidates, link
from .design import Design, DesignArrays, pilot_label
from .environment import derive_environment, what_if_requirements
from .errors import InputError
from .rules import BY_NAME
from .output import optional_module, output_path, write_atomic
from .requirements import Requirements
from .units import engineering
from .sweep import site_environments, sites_from_values

KMH = 1000.0 / 3600.0  # m/s per km/h
#: Grid points (speed, delay) of the operating map and (speed, spacing) of the window panel.
DEFAULT_GRID = (64, 48)
#: Halvings of each edge bracket (of a grid step) when refining the limits.
REFINE_STEPS = 32
#: What only the picture uses is refined less, and many points at a time (an evaluation costs about as much
#: for one point as for a hundred), which keeps --plot within a few times the run without it
#: (benchmarks/bench_plot.py): (points per row and step, steps) for the limits through the requirement when the
#: check has not found them already, written in the title to 4 digits (41^-4 of a probe step of 19 %: 7e-8
#: relative). The window of panel (b) is not refined (the panel draws the edges of its grid, and its zoom leaves
#: a factor 8 of room), nor is the map's edge along each grid row and column (read off the grid: only the rule
#: beyond it is used, in the legend).
TITLE_REFINE = (40, 4)
#: Line styles for the rules, in declaration order of the rules drawn: dash pattern and a
#: colour-blind-safe colour (Okabe & Ito, "Color Universal Design", 2008), distinct in black and white.
STYLES = (("-", "#000000"), ("--", "#D55E00"), (":", "#0072B2"), ("-.", "#009E73"),
          ((0, (5, 1, 1, 1, 1, 1)), "#CC79A7"), ((0, (1, 3)), "#E69F00"), ((0, (8, 3)), "#56B4E9"),
          ((0, (3, 1, 3, 4)), "#999999"))


# --- the numbers ------------------------------------------------------------------


@dataclass(frozen=True)
class DelayAxis:
    """What the delay axis of the operating map varies, and how a site is made from a value on it."""

    key: str  # "rms_delay_spread" or "max_excess_delay"
    label: str
    required_s: float
    rms_per_max: float | None = None  # for max_excess_delay: rms spread kept in proportion (None: two rays)

    def site_values(self, delays_s) -> dict:
        """Keyword arguments of ``sites_from_values`` for these delays."""
        d = np.asarray(delays_s, dtype=float)
        if self.key == "rms_delay_spread":
            return {"rms_delay_spread_s": d}
        rms = np.nan * d if self.rms_per_max is None else d * self.rms_per_max
        return {"max_excess_delay_s": d, "rms_delay_spread_s": rms}


def delay_axis(req: Requirements) -> DelayAxis:
    """The delay variable of the map: the rms spread for profiles, else the max excess delay."""
    env = req.environment
    derived = derive_environment(req)
    if env.profile is not None or env.profile_file is not None:
        name = derived.profile_name.split(" @ ")[0]
        return DelayAxis("rms_delay_spread", f"rms delay spread (profile {name}, scaled)", derived.rms_delay_spread_s)
    if env.max_excess_delay_s is None:
        return DelayAxis("rms_delay_spread", "rms delay spread (exponential profile assumed)", env.rms_delay_spread_s)
    ratio = None if env.rms_delay_spread_s is None else env.rms_delay_spread_s / env.max_excess_delay_s
    label = "max excess delay" + ("" if ratio is None else f" (rms spread kept at {ratio:.3g} of it)")
    return DelayAxis("max_excess_delay", label, env.max_excess_delay_s, ratio)


def _evaluate(req: Requirements, design: Design, speeds_mps, axis: DelayAxis, delays_s, given_error=None,
              with_error: bool = False):
    """Normalised margins of every applicable rule at paired (speed, delay) points: name -> array.

    ``given_error`` (the estimation error at each point) replaces the exact estimation (see
    :func:`_grid_margins`); ``with_error`` also returns the error used, as ``(margins, error)``.
    """
    speeds_mps, delays_s = np.broadcast_arrays(np.asarray(speeds_mps, float), np.asarray(delays_s, float))
    shape = speeds_mps.shape
    sites = sites_from_values(req, max_speed_mps=speeds_mps.ravel(), **axis.site_values(delays_s.ravel()))
    if sites.problems:
        raise InputError("plot", f"cannot map this requirement set: {sites.problems[0][1]}")
    given = None if given_error is None else np.reshape(np.asarray(given_error, dtype=float), sites.size)
    evaluation = link.evaluate(DesignArrays.from_designs([design]), site_environments(req, sites, notes=False), req,
                               given_error=given)
    margins = {rule.name: np.broadcast_to(evaluation.normalised[rule.name], (sites.size,)).reshape(shape)
               for rule in evaluation.rules}
    if not with_error:
        return margins
    return margins, np.broadcast_to(evaluation.estimation_error, (sites.size,)).reshape(shape)


#: The operating map computes the channel-estimation error (most of its cost) exactly on every COARSE-th grid
#: line and, by bilinear interpolation of its logarithm, between them; then exactly at every grid point next to
#: the edge of the region where the design holds, again until that edge stops moving (at most EDGE_ROUNDS
#: times). The region and its edge are then those of the exact error (tests/test_plots.py compares).
COARSE, EDGE_ROUNDS = 8, 6


def _grid_margins(req, design, axis, speeds, delays):
    """Margins over the (delay, speed) grid, the estimation error exact where the picture depends on it."""
    ny, nx = delays.size, speeds.size
    rows = np.unique(np.r_[np.arange(0, ny, COARSE), ny - 1])
    cols = np.unique(np.r_[np.arange(0, nx, COARSE), nx - 1])
    _, nodes = _evaluate(req, design, speeds[None, cols], axis, delays[rows, None], with_error=True)
    log_nodes = np.log(np.clip(nodes, 1e-300, 1.0))
    flat_y, flat_x = np.meshgrid(np.arange(ny, dtype=float), np.arange(nx, dtype=float), indexing="ij")
    error = np.exp(_bilinear(cols.astype(float), rows.astype(float), log_nodes[None], flat_x.ravel(),
                             flat_y.ravel())[0]).reshape(ny, nx)
    exact = np.zeros((ny, nx), dtype=bool)
    error[np.ix_(rows, cols)] = nodes
    exact[np.ix_(rows, cols)] = True
    speed_grid, delay_grid = np.broadcast_arrays(speeds[None, :], delays[:, None])
    for _ in range(EDGE_ROUNDS):
        margins = _evaluate(req, design, speed_grid, axis, delay_grid, given_error=error)
        passed = np.min(np.stack(list(margins.values())), axis=0) >= 0
        near = np.zeros_like(passed)
        across = passed[:, 1:] != passed[:, :-1]
        near[:, 1:] |= across
        near[:, :-1] |= across
        down = passed[1:, :] != passed[:-1, :]
        near[1:, :] |= down
        near[:-1, :] |= down
        todo = near & ~exact
        if not todo.any():
            break
        _, found = _evaluate(req, design, speed_grid[todo], axis, delay_grid[todo], with_error=True)
        error[todo] = found
        exact |= todo
    return _evaluate(req, design, speed_grid, axis, delay_grid, given_error=error)


def _edges_on_grid(values, fixed, normalised):
    """Along each row of ``normalised`` tables (rows: ``fixed`` values, columns: ``values``), the highest value
    up to which every rule passes (linear between grid points; inf: holds over the whole row, nan: fails at its
    start) and the rule with the smallest margin at the first failing point."""
    names = list(normalised)
    stack = np.stack([np.clip(normalised[k], -1e6, 1e6) for k in names])
    worst = stack.min(axis=0)
    first = _first_failure(worst >= 0)
    limit = np.where(first == -1, np.inf, np.nan)
    rule = np.full(np.shape(fixed), None, dtype=object)
    for row in np.flatnonzero(first >= 0):
        j = first[row]
        a, b = worst[row, j - 1], worst[row, j]
        limit[row] = values[j - 1] + (values[j] - values[j - 1]) * a / (a - b)
        rule[row] = names[int(np.argmin(stack[:, row, j]))]
    return limit, rule


def _first_failure(passed):
    """Index of the first failing point along the last axis after a passing start (-1: none; -2: fails at once)."""
    fails = ~passed
    first = np.argmax(fails, axis=-1)
    return np.where(~fails.any(axis=-1), -1, np.where(fails[..., 0], -2, first))


def _limits(req, design, axis, fixed, grid, along_speed, steps=REFINE_STEPS):
    """Highest value along a grid (speed or delay) up to which the design holds, refined by bisection."""
    return _limits_together(req, design, axis, [(fixed, grid, along_speed)], steps)[0]


def _limits_together(req, design, axis, tasks, steps, initial=None, points=1):
    """:func:`_limits` for several ``(fixed, grid, along_speed)`` tasks in lockstep.

    Each step of every task is one evaluation of all their points: ``points`` equally spaced
    points inside each row's bracket (1: bisection), which shrinks it ``points + 1`` times.
    ``initial`` gives tables of the tasks' grids already evaluated (rows: fixed values); the
    result is one (limits, rules) pair per task.
    """
    tasks = [(np.asarray(fixed, dtype=float), np.asarray(grid, dtype=float), along) for fixed, grid, along in tasks]

    def evaluate(parts):
        """Margins at (values along, fixed values) pairs of each part, in one call; one table per part."""
        speeds, delays, shapes = [], [], []
        for values, fixed_values, along_speed in parts:
            values, fixed_values = np.broadcast_arrays(values, fixed_values)
            speeds.append((values if along_speed else fixed_values).ravel())
            delays.append((fixed_values if along_speed else values).ravel())
            shapes.append(values.shape)
        sizes = [int(np.prod(shape)) for shape in shapes]
        if not sum(sizes):
            return [{} for _ in parts]
        table = _evaluate(req, design, np.concatenate(speeds), axis, np.concatenate(delays))
        edges = np.cumsum([0] + sizes)
        return [{k: m[a:b].reshape(shape) for k, m in table.items()} for a, b, shape in zip(edges, edges[1:], shapes)]

    tables = initial or evaluate([(grid[None, :], fixed[:, None], along) for fixed, grid, along in tasks])
    states = []
    for (fixed, grid, along), table in zip(tasks, tables):
        first = _first_failure(np.min(np.stack(list(table.values())), axis=0) >= 0)
        rows = np.flatnonzero(first >= 0)
        states.append({"rows": rows, "lo": grid[first[rows] - 1], "hi": grid[first[rows]],
                       "limit": np.where(first == -1, np.inf, np.nan), "rule": np.full(fixed.size, None, dtype=object)})
    fractions = np.arange(1, points + 1) / (points + 1)
    for _ in range(steps):  # vectorised over the rows with an edge, all tasks at once
        inside = [0.5 * (state["lo"] + state["hi"])[:, None] if points == 1 else  # bisection as written elsewhere
                  state["lo"][:, None] + (state["hi"] - state["lo"])[:, None] * fractions for state in states]
        answers = evaluate([(values, fixed[state["rows"]][:, None], along) for values, state, (fixed, _, along)
                            in zip(inside, states, tasks)])
        for values, state, answer in zip(inside, states, answers):
            if state["rows"].size:
                fails = np.min(np.stack(list(answer.values())), axis=0) < 0  # (rows, points)
                j = np.argmax(fails, axis=1)  # the first point that fails (0 where none does)
                some = fails.any(axis=1)
                at = np.arange(values.shape[0])
                state["hi"] = np.where(some, values[at, j], state["hi"])
                state["lo"] = np.where(some, np.where(j > 0, values[at, j - 1], state["lo"]), values[:, -1])
    at_edges = evaluate([(state["hi"], fixed[state["rows"]], along) for state, (fixed, _, along) in zip(states, tasks)])
    results = []
    for state, at_edge in zip(states, at_edges):
        rows = state["rows"]
        if rows.size:
            names = list(at_edge)
            state["rule"][rows] = np.array(names, dtype=object)[np.argmin(np.stack([at_edge[k] for k in names]),
                                                                          axis=0)]
            state["limit"][rows] = 0.5 * (state["lo"] + state["hi"])
        results.append((state["limit"], state["rule"]))
    return results


def speed_limits(req: Requirements, design: Design, delays_s, speed_grid_mps):
    """For each delay, the highest speed at which the design still holds, and the rule that fails beyond it.

    Parameters
    ----------
    req : Requirements
    design : Design
    delays_s : array_like
        Values of the map's delay variable (see :func:`delay_axis`), in s.
    speed_grid_mps : array_like
        Ascending speeds in m/s scanned for the first failure; the crossing is
        then refined by bisection to 2^-32 of a grid step.

    Returns
    -------
    limits_mps : ndarray
        ``inf`` where the design holds over the whole grid, ``nan`` where it
        fails at the grid's first speed.
    rules : ndarray of object
        The rule with the smallest margin just beyond the limit (None where
        there is no limit).
    """
    return _limits(req, design, delay_axis(req), delays_s, speed_grid_mps, along_speed=True)


def delay_limits(req: Requirements, design: Design, speeds_mps, delay_grid_s):
    """For each speed, the largest delay (the map's delay variable) the design holds, and the rule beyond it."""
    return _limits(req, design, delay_axis(req), speeds_mps, delay_grid_s, along_speed=False)


@dataclass(frozen=True)
class OperatingMap:
    """Rule margins of one design over a grid of speeds and delays."""

    design: Design
    axis: DelayAxis
    speeds_mps: np.ndarray  # (nx,)
    delays_s: np.ndarray  # (ny,)
    normalised: dict  # rule -> (ny, nx) capacity/demand - 1
    required_speed_mps: float
    speed_limit_mps: np.ndarray  # (ny,) as speed_limits, linear between the grid's points
    speed_limit_rule: np.ndarray
    delay_limit_s: np.ndarray  # (nx,) see delay_limits
    delay_limit_rule: np.ndarray
    limits_at_requirement: tuple = ()  # (speed limit m/s, its rule, delay limit s, its rule) through the requirement
    file_point: tuple | None = None  # (speed m/s, delay s) of the requirement file when the map is of a what-if

    @property
    def passed(self) -> np.ndarray:
        return np.min(np.stack(list(self.normalised.values())), axis=0) >= 0

    @property
    def boundary_rules(self) -> tuple:
        """The rules that end the region along the grid lines (speed or delay growing), in declaration order."""
        found = set(self.speed_limit_rule[np.not_equal(self.speed_limit_rule, None)].tolist())
        found |= set(self.delay_limit_rule[np.not_equal(self.delay_limit_rule, None)].tolist())
        return tuple(name for name in self.normalised if name in found)


#: The map shows at most this many times the required speed and delay (a limit beyond is stated in words).
MAX_ZOOM_OUT = 10.0


def _extent(req, design, axis, speed_mps, delay_s, known=None):
    """Axis ends showing the requirement and the design's limits through it, and those limits.

    ``known`` gives the limits through the requirement when they were already worked out (the stretch limits
    of ``check``: :func:`limits_from_check`); else they are found here.
    """
    if known is None:
        speed_ref = max(speed_mps, 1.0)
        delay_ref = max(delay_s, 1e-9)
        probe = np.geomspace(1.0 / 64, 64.0, 49)
        points, steps = TITLE_REFINE
        (v_lim, v_rule), (d_lim, d_rule) = _limits_together(
            req, design, axis, [([delay_s], speed_ref * probe, True), ([speed_mps], delay_ref * probe, False)],
            steps, points=points)
        known = (float(v_lim[0]), v_rule[0], float(d_lim[0]), d_rule[0])
    v_lim, _, d_lim, _ = known
    x_max = 1.5 * max(v_lim if math.isfinite(v_lim) else 2.0 * speed_mps, speed_mps)
    x_max = min(x_max, MAX_ZOOM_OUT * speed_mps) if speed_mps > 0 else x_max
    y_max = 1.5 * max(d_lim if math.isfinite(d_lim) else 2.0 * delay_s, delay_s)
    y_max = min(y_max, MAX_ZOOM_OUT * delay_s) if delay_s > 0 else y_max
    x_max = x_max if x_max > 0 else 10 * KMH  # a requirement at rest with no speed limit in sight
    return min(x_max, 2e4), min(max(y_max, 1e-9), 1.0), known


def limits_from_check(check, axis: DelayAxis, environment):
    """(speed limit, its rule, delay limit on the map's axis, its rule) from a check's stretch limits, or None.

    The stretch limits (``numerology.limits``) are found through the point the check analysed, each stress
    alone, as the map's limits through it: the picture's title then says what the note's table says. None when
    the check has no limits, or the design fails there (a limit then is not a crossing from pass to fail).
    """
    limits = getattr(check, "limits", None) or {}
    if not check.passed or "max_speed_mps" not in limits or "max_excess_delay_s" not in limits:
        return None
    speed, span = limits["max_speed_mps"], limits["max_excess_delay_s"]
    if axis.key == "rms_delay_spread":
        stretched = limits.get("max_rms_delay_spread_s")
        if stretched is None:  # an assumed profile stretched as a whole: its rms spread in proportion
            if not environment.max_excess_delay_s > 0:
                return None
            scale = environment.rms_delay_spread_s / environment.max_excess_delay_s
            return speed.value, speed.rule, span.value * scale, span.rule
        return speed.value, speed.rule, stretched.value, stretched.rule
    return speed.value, speed.rule, span.value, span.rule


def operating_map(req: Requirements, design: Design, grid=DEFAULT_GRID, speed_max_mps=None,
                  delay_max_s=None, *, limits=None, file_req: Requirements | None = None) -> OperatingMap:
    """Evaluate a design over a (speed, delay) grid, with its speed and delay limits along the grid lines.

    Parameters
    ----------
    req : Requirements
        The requirement set analysed (a what-if's: ``environment.what_if_requirements``).
    design : Design
    grid : (int, int)
        Points across (speed) and up (delay).
    speed_max_mps, delay_max_s : float, optional
        Axis ends; by default 1.5 times the larger of the requirement and the
        design's limit through it, at most :data:`MAX_ZOOM_OUT` times the
        requirement.
    limits : tuple, optional
        The limits through the requirement if known (:func:`limits_from_check`).
    file_req : Requirements, optional
        The requirement file's own set when ``req`` is a what-if's: its point is marked too.

    Returns
    -------
    OperatingMap
    """
    axis = delay_axis(req)
    speed_req = derive_environment(req).speed_mps
    x_max, y_max, at_requirement = _extent(req, design, axis, speed_req, axis.required_s, limits)
    file_point = None
    if file_req is not None:
        file_point = (derive_environment(file_req).speed_mps, delay_axis(file_req).required_s)
        x_max = max(x_max, min(1.1 * file_point[0], 2e4))
        y_max = max(y_max, min(1.1 * file_point[1], 1.0))
    speed_max_mps = speed_max_mps or x_max
    delay_max_s = delay_max_s or y_max
    nx, ny = grid
    speeds = np.linspace(0.0, speed_max_mps, nx)
    delays = np.linspace(delay_max_s / 1000, delay_max_s, ny)  # a profile cannot be scaled to 0
    normalised = _grid_margins(req, design, axis, speeds, delays)
    v_lim, v_rule = _edges_on_grid(speeds, delays, normalised)
    d_lim, d_rule = _edges_on_grid(delays, speeds, {k: m.T for k, m in normalised.items()})
    return OperatingMap(design, axis, speeds, delays, normalised, speed_req, v_lim, v_rule, d_lim, d_rule,
                        at_requirement, file_point)


def edge_segments(x, y, normalised: dict) -> list:
    """Pieces of the edge of the region where every margin is >= 0, each with the rule that draws it.

    Parameters
    ----------
    x, y : ndarray
        Grid coordinates, (nx,) and (ny,), ascending.
    normalised : dict
        Rule name -> (ny, nx) normalised margin (capacity / demand - 1).

    Returns
    -------
    list of (str, ndarray)
        (rule, vertices (n, 2) in x, y units): the zero line of the smallest
        margin (linear interpolation between grid points), cut where the rule
        with the smallest margin changes; neighbouring pieces share a vertex.
    """
    import contourpy

    names = list(normalised)
    stack = np.clip(np.stack([normalised[k] for k in names]), -1e6, 1e6)  # unbounded margins are far from 0
    worst = stack.min(axis=0)
    if worst.max() < 0 or worst.min() >= 0:
        return []
    out = []
    for line in contourpy.contour_generator(x, y, worst).lines(0.0):
        if len(line) < 2:
            continue
        values = _bilinear(x, y, stack, line[:, 0], line[:, 1])
        which = np.argmin(values, axis=0)
        cuts = np.flatnonzero(np.diff(which)) + 1
        for start, stop in zip(np.concatenate([[0], cuts]), np.concatenate([cuts, [len(line)]])):
            out.append((names[which[start]], line[max(start - 1, 0):stop]))
    return out


def _bilinear(x, y, tables, px, py):
    """Tables (k, ny, nx) on an ascending grid, interpolated linearly in x and y at the points (px, py).

    The same as ``scipy.interpolate.RegularGridInterpolator`` (linear) on points clipped to the grid,
    without importing scipy.interpolate (a large part of a --plot run).
    """
    px = np.clip(px, x[0], x[-1])
    py = np.clip(py, y[0], y[-1])
    i = np.clip(np.searchsorted(x, px, side="right") - 1, 0, x.size - 2)
    j = np.clip(np.searchsorted(y, py, side="right") - 1, 0, y.size - 2)
    tx = (px - x[i]) / (x[i + 1] - x[i])
    ty = (py - y[j]) / (y[j + 1] - y[j])
    return ((1 - ty) * ((1 - tx) * tables[:, j, i] + tx * tables[:, j, i + 1])
            + ty * ((1 - tx) * tables[:, j + 1, i] + tx * tables[:, j + 1, i + 1]))


@dataclass(frozen=True)
class SpacingMap:
    """Relaxed rule margins over a grid of speeds and subcarrier spacings (the spacing window against speed)."""

    speeds_mps: np.ndarray  # (nv,)
    spacings_hz: np.ndarray  # (ns,)
    normalised: dict  # rule -> (nv, ns) relaxed capacity / demand - 1 (>= 0 passes)
    lower_hz: np.ndarray  # (nv,) refined lower edge of the window (nan: empty)
    upper_hz: np.ndarray
    lower_rule: np.ndarray  # object: the rule that bounds the window from below
    upper_rule: np.ndarray

    @property
    def feasible(self) -> np.ndarray:
        return np.all(np.stack([m >= 0 for m in self.normalised.values()]), axis=0)

    @property
    def boundary_rules(self) -> tuple:
        found = set(self.lower_rule[np.not_equal(self.lower_rule, None)].tolist())
        found |= set(self.upper_rule[np.not_equal(self.upper_rule, None)].tolist())
        return tuple(name for name in self.normalised if name in found)


def spacing_map(req: Requirements, speeds_mps, spacings_hz, steps: int = REFINE_STEPS) -> SpacingMap:
    """The spacing window at each speed, from relaxed margins on a (speed, spacing) grid.

    Parameters
    ----------
    req : Requirements
    speeds_mps : array_like
        Speeds in m/s (the requirement's speed is replaced by each).
    spacings_hz : array_like
        Ascending subcarrier spacings in Hz (a log grid).
    steps : int
        Halvings of the grid step that holds each edge.

    Returns
    -------
    SpacingMap
        Edges refined by bisection in log spacing; they agree with
        ``candidates.spacing_window`` at each speed.

    References
    ----------
    ``numerology.candidates`` (the relaxed design and its window).
    """
    speeds = np.asarray(speeds_mps, dtype=float)
    spacings = np.asarray(spacings_hz, dtype=float)
    environment = site_environments(req, sites_from_values(req, max_speed_mps=speeds), notes=False)
    environment = environment.reshape((speeds.size, 1))

    def margins_at(df):  # on one scale, capacity / demand - 1: dB margins are converted (same zero)
        margins = candidates.relaxed_margins(df, environment, req)
        with np.errstate(over="ignore"):
            return {k: (10 ** (m / 10) - 1 if BY_NAME[k].convention == "db" else m) for k, m in margins.items()}

    table = margins_at(np.broadcast_to(spacings[None, :], (speeds.size, spacings.size)))
    # A rule whose relaxed margin is zero by construction (the relaxed cyclic prefix covers the delay
    # exactly) bounds nothing: leave it out.
    table = {k: m for k, m in table.items() if not np.all(np.abs(m) <= 1e-9)}
    names = list(table)
    stack = np.stack([table[k] for k in names])
    ok = np.all(stack >= 0, axis=0)
    has = ok.any(axis=1)
    first = np.argmax(ok, axis=1)
    last = spacings.size - 1 - np.argmax(ok[:, ::-1], axis=1)
    lower = np.where(has, spacings[first], np.nan)
    upper = np.where(has, spacings[last], np.nan)
    lower_rule = np.full(speeds.size, None, dtype=object)
    upper_rule = np.full(speeds.size, None, dtype=object)
    for index, step, out, rules in ((first, -1, lower, lower_rule), (last, +1, upper, upper_rule)):
        outside = index + step
        rows = np.flatnonzero(has & (outside >= 0) & (outside < spacings.size))
        if not rows.size:
            continue
        inside_hz, outside_hz = np.log(spacings[index[rows]]), np.log(spacings[outside[rows]])
        for _ in range(steps):  # bisection in log spacing, vectorised over speeds
            mid = 0.5 * (inside_hz + outside_hz)
            m = margins_at(_column(mid, rows, speeds.size))
            holds = np.all(np.stack([m[k][rows, 0] >= 0 for k in names]), axis=0)
            inside_hz, outside_hz = np.where(holds, mid, inside_hz), np.where(holds, outside_hz, mid)
        beyond = margins_at(_column(outside_hz, rows, speeds.size))
        rules[rows] = np.array(names, dtype=object)[np.argmin(np.stack([beyond[k][rows, 0] for k in names]), axis=0)]
        out[rows] = np.exp(0.5 * (inside_hz + outside_hz))
    return SpacingMap(speeds, spacings, table, lower, upper, lower_rule, upper_rule)


def _column(log_values, rows, n):
    """A (n, 1) spacing column holding exp(log_values) at ``rows`` (1 Hz elsewhere, unused)."""
    column = np.ones((n, 1))
    column[rows, 0] = np.exp(log_values)
    return column


# --- the picture -----------------------------------------------------------------


def write_plot(path, req: Requirements, check=None, solution=None, *, grid=DEFAULT_GRID) -> None:
    """Draw the operating map and the spacing window to a PNG or SVG file, atomically.

    Parameters
    ----------
    path : str or Path
        Ends in ``.png`` or ``.svg``; checked before any work.
    req : Requirements
    check : api.CheckResult, optional
        Map its design.
    solution : api.SolveResult, optional
        Map its best design (when there is no ``check``); an infeasible
        solution leaves panel (a) with a note.
    grid : (int, int)
        Points across and up in each panel.

    Raises
    ------
    InputError
        Without matplotlib (``--plot``: install the ``plot`` extra), or for a
        bad path.
    """
    from .requirements import checked

    req = checked(req)
    if not (isinstance(grid, tuple) and len(grid) == 2
            and all(isinstance(n, int) and not isinstance(n, bool) and 2 <= n <= 1000 for n in grid)):
        raise InputError("grid", f"expected (points across, points up), each from 2 to 1000, got {grid!r}")
    optional_module("matplotlib", "--plot", "plot")
    target = output_path(path, "--plot", (".png", ".svg"), req)
    write_atomic(target, plot_bytes(req, target.suffix.lower().lstrip("."), check, solution, grid=grid))


@dataclass(frozen=True)
class Picture:
    """Everything :func:`plot_bytes` draws, worked out (matplotlib is only needed to draw it)."""

    requirements: Requirements  # the set analysed: a check's what-ifs in place of the file's values
    environment: object
    design: Design | None
    operating: OperatingMap | None
    window: SpacingMap
    family: np.ndarray
    what_if: bool
    diagnosis: object = None  # an infeasible solve's diagnosis: the window panel names its crossing rules


def picture(req: Requirements, check=None, solution=None, *, grid=DEFAULT_GRID) -> Picture:
    """The numbers of the picture: the operating map of the design and the spacing window.

    A check with what-ifs (``check.what_if``) is mapped at the point it analysed, the requirement file's
    point beside it; the limits through that point are the check's stretch limits when it has them.
    """
    design, source = None, None
    if check is not None:
        design, source = check.design, check
    elif solution is not None and solution.feasible:
        source = solution.designs[0].check
        design = source.design
    what_if = dict(getattr(check, "what_if", None) or {})
    analysed = what_if_requirements(req, speed_mps=what_if.get("speed_mps"),
                                    max_excess_delay_s=what_if.get("max_excess_delay_s"))
    environment = derive_environment(analysed)
    omap = None
    if design is not None:
        known = limits_from_check(source, delay_axis(analysed), environment)
        omap = operating_map(analysed, design, grid, limits=known, file_req=req if what_if else None)
    if omap is not None:
        speed_max = float(omap.speeds_mps[-1])
    else:
        speed_max = max(3.0 * environment.speed_mps, 10 * KMH)
    family = candidates.spacing_family(analysed, environment)
    speeds = np.linspace(0.0, speed_max, grid[0])
    # the zoom: the window's extremes over the speeds shown, on a coarser grid of speeds, to a grid step (a
    # factor 8 of room is left beyond them anyway)
    coarse = speeds[np.unique(np.r_[np.arange(0, speeds.size, 4), speeds.size - 1])]
    smap = spacing_map(analysed, coarse, np.geomspace(family[0] / 4, family[-1] * 4, 4 * grid[1]), steps=0)
    low, high = np.nanmin(smap.lower_hz, initial=np.inf), np.nanmax(smap.upper_hz, initial=-np.inf)
    if design is not None:
        low, high = min(low, design.subcarrier_spacing_hz), max(high, design.subcarrier_spacing_hz)
    spacings = np.geomspace(family[0] / 4, family[-1] * 4, 4 * grid[1])
    if low <= high:  # zoom on the window: a factor 8 beyond its extremes, within the searched range
        spacings = np.geomspace(max(low / 8, family[0] / 4), min(high * 8, family[-1] * 4), 4 * grid[1])
    smap = spacing_map(analysed, speeds, spacings, steps=0)  # the panel draws the edges of its grid
    diagnosis = solution.diagnosis if solution is not None and not solution.feasible else None
    return Picture(analysed, environment, design, omap, smap, family, bool(what_if), diagnosis)


def plot_bytes(req: Requirements, fmt: str, check=None, solution=None, *, grid=DEFAULT_GRID) -> bytes:
    """The picture of :func:`write_plot` as the bytes of a ``png`` or ``svg`` file (matplotlib needed)."""
    p = picture(req, check, solution, grid=grid)
    return _render(p.requirements, p.environment, p.design, p.operating, p.window, p.family, fmt, p.what_if,
                   p.diagnosis)


def _delay_unit(value_s):
    """(scale in s, unit label) for a delay axis ending at value_s."""
    for scale, unit in ((1e-9, "ns"), (1e-6, "\u00b5s"), (1e-3, "ms")):
        if value_s < scale * 2000:
            return scale, unit
    return 1.0, "s"


def _render(req, environment, design, omap, smap, family, fmt, what_if=False, diagnosis=None) -> bytes:
    from matplotlib.figure import Figure

    fig = Figure(figsize=(7.5, 10.5), layout="constrained")
    top, bottom = fig.subplots(2, 1)
    map_edges = []
    if omap is not None:
        scale, unit = _delay_unit(float(omap.delays_s[-1]))
        map_edges = edge_segments(omap.speeds_mps / KMH, omap.delays_s / scale, omap.normalised)
    middle = math.sqrt(smap.spacings_hz[0] * smap.spacings_hz[-1])
    hz_scale, hz_unit = (1.0, "Hz") if middle < 2e3 else ((1e3, "kHz") if middle < 2e6 else (1e6, "MHz"))
    window_edges = edge_segments(smap.speeds_mps / KMH, smap.spacings_hz / hz_scale,
                                 {k: v.T for k, v in smap.normalised.items()})
    drawn = {rule for rule, _ in map_edges + window_edges}
    order = [name for name in BY_NAME if name in drawn]  # one style per rule in both panels
    styles = {name: STYLES[i % len(STYLES)] for i, name in enumerate(order)}
    if omap is None:
        why = ("(run numerology solve for the diagnosis)" if diagnosis is None
               else "\n".join(textwrap.wrap(("conflict: " if diagnosis.cause == "rules" else "the candidate space: ")
                                             + diagnosis.statement, 70)))
        top.text(0.5, 0.5, f"no design to map: the request is infeasible\n{why}",
                 ha="center", va="center", transform=top.transAxes, fontsize=9)
        top.set_axis_off()
    else:
        _draw_map(top, omap, map_edges, styles, scale, unit, what_if)
    _draw_window(bottom, environment, design, smap, window_edges, family, styles, hz_scale, hz_unit, what_if,
                 explained=diagnosis is not None and bool(diagnosis.bounds))
    if diagnosis is not None and diagnosis.bounds:
        _draw_conflict(bottom, environment, diagnosis.bounds, hz_scale)
    buffer = io.BytesIO()
    metadata = {"Date": None} if fmt == "svg" else {"Software": None}
    fig.savefig(buffer, format=fmt, dpi=150, metadata=metadata)
    return buffer.getvalue()


def _draw_edges(ax, edges, styles, what):
    """Each piece of the edge in its rule's style; legend handles, one per rule."""
    from matplotlib.lines import Line2D

    for rule, vertices in edges:
        linestyle, colour = styles[rule]
        ax.plot(vertices[:, 0], vertices[:, 1], linestyle=linestyle, color=colour, linewidth=2.2)
    rules = [name for name in styles if any(rule == name for rule, _ in edges)]
    return [Line2D([], [], linestyle=styles[name][0], color=styles[name][1], linewidth=2.2, label=f"{what} {name}")
            for name in rules]


def _shade(ax, x, y, normalised, hatch):
    """Hatch where every margin is >= 0 (the same zero line that edge_segments follows)."""
    worst = np.clip(np.min(np.stack(list(normalised.values())), axis=0), -1e6, 1e6)
    if worst.max() >= 0:
        ax.contourf(x, y, worst, levels=[0.0, 2e6], colors=["#dddddd"], hatches=[hatch])


def _patch(label, hatch):
    from matplotlib.patches import Patch

    return Patch(facecolor="#dddddd", edgecolor="black", hatch=hatch, label=label)


def _speed_text(value_mps):
    return f"{value_mps / KMH:.4g} km/h"


def _draw_map(ax, omap: OperatingMap, edges, styles, scale, unit, what_if=False):
    from matplotlib.lines import Line2D

    design = omap.design
    x = omap.speeds_mps / KMH
    y = omap.delays_s / scale
    _shade(ax, x, y, omap.normalised, "//")
    handles = [_patch("design holds (every rule passes)", "//")]
    handles += _draw_edges(ax, edges, styles, "edge set by")
    required = (omap.required_speed_mps / KMH, omap.axis.required_s / scale)
    ax.plot(*required, marker="*", markersize=15, color="black", markeredgecolor="white", linestyle="none")
    where = "analysed (what-if)" if what_if else "requirement"
    handles.append(Line2D([], [], marker="*", markersize=12, color="black", linestyle="none",
                          label=f"{where}: {_speed_text(omap.required_speed_mps)}, {required[1]:.4g} {unit}"))
    if omap.file_point is not None:
        speed, delay_s = omap.file_point
        ax.plot([speed / KMH], [delay_s / scale], marker="*", markersize=15, color="white", markeredgecolor="black",
                linestyle="none")
        handles.append(Line2D([], [], marker="*", markersize=12, color="white", markeredgecolor="black",
                              linestyle="none",
                              label=f"requirement file: {_speed_text(speed)}, {delay_s / scale:.4g} {unit}"))
    empty = _nowhere_text(omap.normalised, f"{design.name} holds at no point shown")
    if empty:
        ax.text(0.5, 0.5, empty, ha="center", va="center", transform=ax.transAxes, fontsize=9,
                bbox={"facecolor": "white", "edgecolor": "black"})
    ax.set_xlim(0, x[-1])
    ax.set_ylim(0, y[-1])
    ax.set_xlabel("relative speed (km/h)")
    label = omap.axis.label
    ax.set_ylabel(label.replace(" (", f" ({unit})\n(", 1) if " (" in label else f"{label} ({unit})")
    title = (f"(a) where {design.name} holds: {engineering(design.subcarrier_spacing_hz, 'Hz')} spacing, "
             f"CP {engineering(design.cp_s, 's')}, {pilot_label(design)}")
    if omap.limits_at_requirement:
        v_lim, v_rule, d_lim, d_rule = omap.limits_at_requirement
        parts = []
        if math.isfinite(v_lim):
            parts.append(f"{_speed_text(v_lim)} ({v_rule})")
        if math.isfinite(d_lim):
            parts.append(f"{d_lim / scale:.4g} {unit} ({d_rule})")
        if parts:
            title += f"\nlimits through the {'analysed point' if what_if else 'requirement'}: " + ", ".join(parts)
    ax.set_title(title, fontsize=9.5)
    ax.legend(handles=handles, loc="best", fontsize=8, framealpha=0.92)
    ax.grid(True, color="#bbbbbb", linewidth=0.5)


def _draw_window(ax, environment, design, smap: SpacingMap, edges, family, styles, hz_scale, hz_unit, what_if=False,
                 explained: bool = False):
    from matplotlib.lines import Line2D

    x = smap.speeds_mps / KMH
    y = smap.spacings_hz / hz_scale
    _shade(ax, x, y, {k: v.T for k, v in smap.normalised.items()}, "\\\\")
    handles = [_patch("spacings a design may use (relaxed bounds)", "\\\\")]
    handles += _draw_edges(ax, edges, styles, "bound set by")
    shown = [f / hz_scale for f in family if y[0] <= f / hz_scale <= y[-1]]
    if 2 <= len(shown) <= 12:  # the spacings a design can take, as labelled grid lines
        from matplotlib.ticker import NullFormatter, NullLocator

        ax.set_yscale("log")
        ax.yaxis.set_minor_locator(NullLocator())
        ax.yaxis.set_minor_formatter(NullFormatter())
        ax.set_yticks(shown, [f"{v:.4g}" for v in shown])
        ax.grid(True, axis="y", color="#999999", linewidth=0.6, linestyle=(0, (1, 3)))
        handles.append(Line2D([], [], color="#999999", linewidth=0.6, linestyle=(0, (1, 3)),
                              label="spacings of the search family"))
    else:
        from matplotlib.ticker import FuncFormatter, LogLocator, NullLocator

        ax.set_yscale("log")
        ax.yaxis.set_major_locator(LogLocator(subs=(1.0, 2.0, 5.0)))
        ax.yaxis.set_minor_locator(NullLocator())
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
        ax.grid(True, axis="y", which="major", color="#bbbbbb", linewidth=0.5)
    ax.grid(True, axis="x", color="#bbbbbb", linewidth=0.5)
    if design is not None:
        ax.plot([environment.speed_mps / KMH], [design.subcarrier_spacing_hz / hz_scale], marker="o", markersize=9,
                color="black", markerfacecolor="white", markeredgewidth=2, linestyle="none")
        handles.append(Line2D([], [], marker="o", markersize=8, color="black", markerfacecolor="white",
                              markeredgewidth=2, linestyle="none",
                              label=f"{design.name} at the {'analysed' if what_if else 'required'} speed"))
    empty = "" if explained else _nowhere_text(smap.normalised, "no spacing passes every rule at any speed shown")
    if empty:
        ax.text(0.5, 0.5, empty, ha="center", va="center", transform=ax.transAxes, fontsize=9,
                bbox={"facecolor": "white", "edgecolor": "black"})
    ax.set_xlim(0, x[-1])
    ax.set_ylim(y[0], y[-1])
    ax.set_xlabel("relative speed (km/h)")
    ax.set_ylabel(f"subcarrier spacing ({hz_unit}, log scale)")
    ax.set_title("(b) subcarrier-spacing window against speed (each rule at its most lenient design)", fontsize=9.5)
    ax.legend(handles=handles, loc="best", fontsize=8, framealpha=0.92)


def _draw_conflict(ax, environment, bounds, hz_scale):
    """The crossing bounds at the required speed: what each rule needs or allows, named in the legend."""
    from matplotlib.lines import Line2D

    speed = environment.speed_mps / KMH
    handles = list(ax.get_legend().legend_handles) if ax.get_legend() else []
    for bound in bounds:
        for value, marker, word in ((bound.low_hz, "^", "needs >="), (bound.high_hz, "v", "allows <=")):
            if value is None or not math.isfinite(value):
                continue
            ax.plot([speed], [value / hz_scale], marker=marker, markersize=11, color="#c0392b",
                    markeredgecolor="black", linestyle="none")
            handles.append(Line2D([], [], marker=marker, markersize=9, color="#c0392b", markeredgecolor="black",
                                  linestyle="none", label=f"{bound.rule} {word} {engineering(value, 'Hz')}"))
    if any(b.nowhere for b in bounds):
        handles.append(Line2D([], [], linestyle="none", label=", ".join(b.rule for b in bounds if b.nowhere)
                              + " fails at every spacing"))
    ax.set_title(ax.get_title() + "\nconflict at the required speed: " + "; ".join(str(b) for b in bounds),
                 fontsize=9.5)
    ax.legend(handles=handles, loc="best", fontsize=8, framealpha=0.92)


def _nowhere_text(normalised: dict, headline: str) -> str:
    """A sentence for a map where no point passes every rule (else "")."""
    fails = {k: m < 0 for k, m in normalised.items()}
    count = np.sum(np.stack(list(fails.values())), axis=0)
    if np.any(count == 0):
        return ""
    everywhere = [k for k, f in fails.items() if f.all()]
    if everywhere:
        verb = " fails" if len(everywhere) == 1 else " fail"
        return f"{headline}:\n" + ", ".join(everywhere) + verb + " everywhere"
    point = np.unravel_index(np.argmin(count), count.shape)
    return f"{headline}:\n" + " and ".join(k for k, f in fails.items() if f[point]) + " exclude each other"
