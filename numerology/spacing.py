"""The subcarrier-spacing axis: one account of what every rule allows.

A *relaxed* design is the best case of every design at a given spacing (the
shortest cyclic prefix the guard rule accepts, no pilot overhead, the densest
pilots for the aliasing rule, the shortest slot, the SINR without estimation
error); its margin for each rule bounds the margin of every real design with
that spacing from above. Evaluated on one fine log grid over every spacing a
design could have (from the bandwidth over the largest FFT to one subcarrier
filling the band), these margins are the **account** of the spacing axis, and
every statement about the axis is read from it:

* the **window**: spacings where every rule passes; its lower edge is named
  after the rule that fails just below it, its upper edge after the rule
  that fails just above it (each edge refined on that rule);
* the **conflict** of an empty window: the rule that needs the largest
  spacing and the rule that allows the smallest, when those bounds cross
  ("oscillator_ici needs >= 17.3 kHz; flat_fading allows <= 15.2 kHz"); a
  rule that passes nowhere on its own; or, failing both, a smallest set of
  rules whose allowed spacings share no point (a deletion filter on the
  grid).

All margins are computed at once (numpy, one ``link.evaluate`` per grid);
only the named edges are refined, one rule each.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import link
from .design import DesignArrays
from .environment import Environment
from .requirements import Requirements
from .units import engineering

#: Points of the account's log grid per octave of spacing (about 4.4 % apart), and of the finer grid between
#: two of them where the bounds meet.
POINTS_PER_OCTAVE = 16
FINE_POINTS = 64
#: The largest FFT a requirement may allow (requirements.SCHEMA, search.max_fft_size): no design has a spacing
#: below the bandwidth over it, since its sample rate must cover the bandwidth.
LARGEST_FFT = 2**22


# --- relaxed designs -------------------------------------------------------------


def _relaxed_overrides(spacing_hz, environment: Environment, req: Requirements) -> dict:
    """Best-case symbols of a relaxed design at each spacing (see module docstring)."""
    df = np.asarray(spacing_hz, dtype=float)
    guard_s = link.minimal_guard_s(environment, req, 1.0 / df)
    return {
        # the shortest continuous CP the guard rule accepts (the factor keeps rounding from failing it)
        "N": np.ones_like(df), "N_cp": guard_s * df * (1 + 1e-12),
        "N_u": np.floor(req.radio.occupancy * req.radio.bandwidth_hz / df + 1e-9),
        "D_f": np.full_like(df, np.inf), "D_t": np.full_like(df, np.inf), "s_p": np.zeros_like(df),
        "rho_pil": np.zeros_like(df),
        "N_slot": np.full_like(df, float(min(req.search.symbols_per_slot))),
        "R_res": np.zeros_like(df), "N_x": np.zeros_like(df), "P_x": np.full_like(df, np.inf),
        "clock_mismatch": lambda rate: np.zeros(np.shape(rate)),  # the clock is matched by the FFT size
        # Densest pilots are the best case for aliasing (no pilot overhead is the best case for the rest).
        "alias_scale": densest_pilots_alias_scale,
    }


def densest_pilots_alias_scale(d_f, d_t, s, df, ts, tau, fd):
    """The aliasing rule's best case before pilots are chosen: a pilot on every resource element."""
    del d_f, d_t, s  # the lattice is not chosen yet
    return link.pilots.aliasing_scale(1, 1, 0, df, ts, tau, fd)


def _placeholder(df) -> DesignArrays:
    one = np.ones(np.shape(df), dtype=np.int64)
    return DesignArrays(name="relaxed", subcarrier_spacing_hz=df, fft_size=one, cp_samples=0 * one,
                        used_subcarriers=one, pilot_freq_spacing=one, pilot_time_spacing=one, pilot_shift=0 * one,
                        symbols_per_slot=one)


def relaxed_margins(spacing_hz, environment: Environment, req: Requirements, ignore=(), only=None) -> dict:
    """Upper bounds on every applicable rule's margin at each spacing: name -> array."""
    df = np.asarray(spacing_hz, dtype=float)
    evaluation = link.evaluate(_placeholder(df), environment, req, estimation=False,
                               overrides=_relaxed_overrides(df, environment, req))
    out = {}
    for rule in evaluation.rules:
        if only is not None and rule.name != only:
            continue
        if rule.name in ignore or rule.gate:
            continue  # yes/no rules do not depend on the spacing (the FFT size matches the clock)
        out[rule.name] = np.broadcast_to(evaluation.margin[rule.name], df.shape)
    return out


# --- the window ------------------------------------------------------------------


@dataclass(frozen=True)
class Window:
    """The feasible subcarrier-spacing window and the rules that bound it.

    When the window is empty, ``min_hz`` is the spacing the lower-bound rule
    needs at least and ``max_hz`` the spacing the upper-bound rule allows at
    most (``min_hz > max_hz``: the bounds cross); both are infinite when one
    rule passes at no spacing.
    """

    min_hz: float
    max_hz: float
    lower_bound_rule: str | None
    upper_bound_rule: str | None
    searched_min_hz: float
    searched_max_hz: float

    @property
    def empty(self) -> bool:
        return not self.min_hz <= self.max_hz

    def contains(self, spacing_hz, rtol=1e-9):
        s = np.asarray(spacing_hz, dtype=float)
        if self.empty:
            return np.zeros(s.shape, dtype=bool)
        return (s >= self.min_hz * (1 - rtol)) & (s <= self.max_hz * (1 + rtol))

    def to_json(self) -> dict:
        def finite(x):
            return float(x) if math.isfinite(x) else None

        return {"min_subcarrier_spacing_hz": None if self.empty else self.min_hz,
                "max_subcarrier_spacing_hz": None if self.empty else self.max_hz,
                "lower_bound_rule": self.lower_bound_rule, "upper_bound_rule": self.upper_bound_rule,
                "empty": self.empty, "lower_bound_hz": finite(self.min_hz), "upper_bound_hz": finite(self.max_hz)}


@dataclass(frozen=True)
class Bound:
    """What one rule allows along the spacing axis (relaxed designs): ``low_hz`` .. ``high_hz``.

    ``None`` at an end: the rule does not bound that side within the account's range; both ``nan``: it allows
    no spacing.
    """

    rule: str
    low_hz: float | None
    high_hz: float | None

    @property
    def nowhere(self) -> bool:
        return self.low_hz is not None and math.isnan(self.low_hz)

    def __str__(self) -> str:
        if self.nowhere:
            return f"{self.rule} fails at every spacing"
        if self.high_hz is None:
            return f"{self.rule} needs >= {engineering(self.low_hz, 'Hz')}"
        if self.low_hz is None:
            return f"{self.rule} allows <= {engineering(self.high_hz, 'Hz')}"
        return f"{self.rule} allows {engineering(self.low_hz, 'Hz')} .. {engineering(self.high_hz, 'Hz')}"

    def to_json(self) -> dict:
        def value(x):
            return None if x is None or not math.isfinite(x) else float(x)

        return {"rule": self.rule, "min_subcarrier_spacing_hz": value(self.low_hz),
                "max_subcarrier_spacing_hz": value(self.high_hz), "nowhere": self.nowhere}


@dataclass(frozen=True)
class Account:
    """The spacing axis of one request (see the module docstring)."""

    spacings_hz: np.ndarray  # the log grid
    passes: dict  # rule -> bool array over spacings_hz (relaxed margin >= 0; NaN fails)
    window: Window
    conflict: tuple  # Bound of each rule in the conflict (empty while the window is open)

    def summary(self) -> str:
        """One sentence: the window and its bounding rules, or the crossing bounds."""
        w = self.window
        if not w.empty:
            lower = w.lower_bound_rule or "the largest FFT"
            upper = w.upper_bound_rule or "one subcarrier filling the band"
            return (f"{engineering(w.min_hz, 'Hz')} .. {engineering(w.max_hz, 'Hz')} "
                    f"(below: {lower}; above: {upper})")
        return "; ".join(str(b) for b in self.conflict)


def account_range(req: Requirements) -> tuple[float, float]:
    """(lowest, highest) spacing a design could have, Hz: the bandwidth over the largest FFT, and one
    subcarrier filling the usable band."""
    bandwidth = req.radio.bandwidth_hz
    return bandwidth / LARGEST_FFT, req.radio.occupancy * bandwidth


def account_grid(req: Requirements) -> np.ndarray:
    low, high = account_range(req)
    points = max(int(math.ceil(math.log2(high / low) * POINTS_PER_OCTAVE)), 1) + 1
    return np.geomspace(low, high, points)


def spacing_account(environment: Environment, req: Requirements, ignore=()) -> Account:
    """Every rule's relaxed margin over the spacing axis, and the window and conflict read from it."""
    grid = account_grid(req)
    low, high = float(grid[0]), float(grid[-1])
    margins = relaxed_margins(grid, environment, req, ignore)
    passes = {name: np.asarray(m >= 0) for name, m in margins.items()}
    if not passes:
        return Account(grid, passes, Window(low, high, None, None, low, high), ())
    names = list(passes)
    table = np.stack([passes[k] for k in names])
    ok = np.all(table, axis=0)
    if not ok.any() and table.any(axis=1).all():
        # A window narrower than one grid step lies between the two grid points where the bounds meet:
        # look there on a finer grid.
        first = np.argmax(table, axis=1)
        last = grid.size - 1 - np.argmax(table[:, ::-1], axis=1)
        top, bottom = int(first.max()), int(last.min())
        if top == bottom + 1:
            fine = np.geomspace(grid[bottom], grid[top], FINE_POINTS + 2)[1:-1]
            fine_margins = relaxed_margins(fine, environment, req, ignore)
            if np.all([fine_margins[k] >= 0 for k in names], axis=0).any():
                grid = np.concatenate([grid[:top], fine, grid[top:]])
                passes = {k: np.concatenate([passes[k][:top], fine_margins[k] >= 0, passes[k][top:]]) for k in names}
                table = np.stack([passes[k] for k in names])
                ok = np.all(table, axis=0)
    if ok.any():
        return Account(grid, passes, _open_window(grid, table, names, environment, req), ())
    window, conflict = _crossing(grid, table, names, environment, req)
    return Account(grid, passes, window, conflict)


def spacing_window(environment: Environment, req: Requirements, ignore=()) -> Window:
    """The continuous window of subcarrier spacings that relaxed designs allow (:func:`spacing_account`)."""
    return spacing_account(environment, req, ignore).window


def _open_window(grid, table, names, environment, req) -> Window:
    ok = np.all(table, axis=0)
    first, last = int(np.argmax(ok)), int(ok.size - 1 - np.argmax(ok[::-1]))
    min_hz, max_hz = float(grid[first]), float(grid[last])
    lower_rule = upper_rule = None
    if first > 0:  # the rules failing just below: the one whose own edge is highest sets the window's
        edges = {names[i]: _edge(grid[first - 1], grid[first], environment, req, names[i])
                 for i in np.flatnonzero(~table[:, first - 1])}
        lower_rule = max(edges, key=edges.get)
        min_hz = edges[lower_rule]
    if last < grid.size - 1:
        edges = {names[i]: _edge(grid[last], grid[last + 1], environment, req, names[i])
                 for i in np.flatnonzero(~table[:, last + 1])}
        upper_rule = min(edges, key=edges.get)
        max_hz = edges[upper_rule]
    return Window(min_hz, max_hz, lower_rule, upper_rule, float(grid[0]), float(grid[-1]))


def _crossing(grid, table, names, environment, req):
    """(window, conflict) of an account whose grid has no spacing where every rule passes."""
    low, high = float(grid[0]), float(grid[-1])
    nowhere = [names[i] for i in range(len(names)) if not table[i].any()]
    if nowhere:  # a rule no spacing satisfies is a conflict on its own
        bounds = tuple(Bound(name, math.nan, math.nan) for name in nowhere)
        return Window(math.inf, -math.inf, nowhere[0], nowhere[-1], low, high), bounds
    first = np.argmax(table, axis=1)  # each rule's lowest passing grid point
    last = grid.size - 1 - np.argmax(table[:, ::-1], axis=1)
    top, bottom = int(first.max()), int(last.min())
    if top > bottom:
        # The bounds cross: the rule needing the largest spacing against the rule allowing the smallest.
        needs = {names[i]: _edge(grid[top - 1], grid[top], environment, req, names[i])
                 for i in np.flatnonzero(first == top)}
        allows = {names[i]: _edge(grid[bottom], grid[bottom + 1], environment, req, names[i])
                  for i in np.flatnonzero(last == bottom)}
        lower_rule = max(needs, key=needs.get)
        upper_rule = min(allows, key=allows.get)
        if lower_rule != upper_rule and needs[lower_rule] > allows[upper_rule]:
            bounds = (Bound(lower_rule, needs[lower_rule], None), Bound(upper_rule, None, allows[upper_rule]))
            return Window(needs[lower_rule], allows[upper_rule], lower_rule, upper_rule, low, high), bounds
    # Every pair of rules overlaps, yet no spacing passes them all (a rule allowing two separate ranges):
    # a smallest set of rules whose allowed spacings share no grid point.
    keep = list(range(len(names)))
    for i in range(len(names)):
        trial = [j for j in keep if j != i]
        if trial and not np.all(table[trial], axis=0).any():
            keep = trial
    bounds = tuple(Bound(names[i], float(grid[first[i]]) if first[i] > 0 else None,
                         float(grid[last[i]]) if last[i] < grid.size - 1 else None) for i in keep)
    lower = max(keep, key=lambda i: first[i])
    upper = min(keep, key=lambda i: last[i])
    return Window(float(grid[first[lower]]), float(grid[last[upper]]), names[lower], names[upper], low, high), bounds


#: Points evaluated at once while narrowing a window edge.
EDGE_POINTS = 40
#: Bracket width (in log spacing) below which an edge is finished one point at a time.
EDGE_FINE_BELOW = 1e-3
#: Final width of an edge's bracket (in log spacing, i.e. relative).
EDGE_RTOL = 1e-10


def _edge(a, b, environment, req, rule_name) -> float:
    """The spacing between grid points a < b where the bounding rule's relaxed margin changes sign.

    The bracket is narrowed ``EDGE_POINTS`` points at a time (log scale) to
    ``EDGE_FINE_BELOW``, then one point at a time by the Illinois variant of
    regula falsi on the margin itself (superlinear where the margin is smooth;
    a bisection step whenever a step gains too little, as where the margin
    jumps) to ``EDGE_RTOL`` relative: a few single evaluations, which matters
    for rules that are costly per spacing (a phase-noise mask). The passing
    end is returned (so the window's edges pass).
    """
    def margin(log_x):
        x = np.exp(np.atleast_1d(log_x))
        return relaxed_margins(x, environment, req, only=rule_name)[rule_name]

    lo, hi = np.log(a), np.log(b)
    lo_passes = bool(margin(lo)[0] >= 0)
    while hi - lo > EDGE_FINE_BELOW:
        inside = np.linspace(lo, hi, EDGE_POINTS + 2)[1:-1]
        ok = margin(inside) >= 0
        change = np.flatnonzero(ok != lo_passes)
        if change.size == 0:
            lo = inside[-1]
        else:
            j = int(change[0])
            hi = inside[j]
            lo = inside[j - 1] if j > 0 else lo
    f_lo, f_hi = float(margin(lo)[0]), float(margin(hi)[0])
    kept = 0  # the end the last step kept: +1 hi, -1 lo (Illinois halves a value kept twice)
    widths = [np.inf, np.inf]  # the bracket two steps back must at least halve, else bisect
    while hi - lo > EDGE_RTOL:
        width = hi - lo
        x = np.nan
        if width < 0.5 * widths[0] and np.isfinite(f_lo - f_hi) and f_lo != f_hi:
            x = lo + f_lo * width / (f_lo - f_hi)
        if not lo < x < hi:
            x = 0.5 * (lo + hi)
        widths = [widths[1], width]
        f_x = float(margin(x)[0])
        if (f_x >= 0) == lo_passes:
            lo, f_lo = x, f_x
            f_hi = f_hi / 2 if kept == +1 else f_hi
            kept = +1
        else:
            hi, f_hi = x, f_x
            f_lo = f_lo / 2 if kept == -1 else f_lo
            kept = -1
    return float(np.exp(lo if lo_passes else hi))
