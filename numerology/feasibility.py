"""The feasibility matrix of a mode plan: candidate designs x site channels.

Data flow (pure functions; the matrix object only fills itself in)::

    Sites -> Channels (identical site channels grouped, one EnvironmentBatch)
          -> anchors (the harsh corner of each group of channels)
          -> candidate_designs (the solver's screened candidates at each anchor)
          -> Matrix: every (candidate, channel) pair by the cheap rules,
                     rows made exact (full link model) on demand

**Channels.** Sites that share every value the link model reads (Doppler,
coherence time and bandwidth, taps, SNR, frequency error) are one channel,
weighted by its number of sites; everything below works on channels.

**Candidates.** :func:`candidate_designs` is the one place the planner meets
the solver: it asks ``solver._screen`` for its candidates (numerologies,
pilot arrangements and slots that the rules without estimation error cannot
reject) at a few *anchor* environments, and keeps of them designs that pass
every rule there by the full model (:func:`anchor_designs`: a bounded
number of exact evaluations per anchor; the screen's best bounds belong to
the sparsest pilots, which the exact estimation error often rejects). An
anchor is the harsh corner of a group of channels (highest Doppler, longest
delay and lowest coherence bandwidth in the group, the lowest SNR, the
largest frequency error): a design that passes there is meant for the whole
group, cyclic prefix sized to the group's longest echo included. Groups are
the channels in each octave of Doppler and of max excess delay (wider bins
when that makes more than :data:`MAX_GROUP_ANCHORS` groups), and all
channels together. A channel that no candidate passes, and that the relaxed
rules do not rule out (``candidates.relaxed_margins``), becomes an anchor of
its own in a second round (at most :data:`MAX_OWN_ANCHORS`); so does a
channel that the cheap rules let a candidate serve but that no candidate
serves once the plan has made the rows exact (``plan`` asks for that round).
An anchor of its own takes the solver's ranked designs, whose search is
exact: a channel that some design of the search space serves is served.

**The matrix.** Every pair is first evaluated by ``link.evaluate`` with
``estimation=False, error_floor=True`` (the estimation error replaced by its
time-interpolation floor, ``link.estimation_floor``): the rules that do not
depend on the SINR are then exact, and the SINR rules, the throughput and the
margins are upper bounds (the exact estimation error is at least the floor
and only lowers the SINR). A row (one candidate at every
channel) is made exact by evaluating, with the full model, the pairs that
passed the cheap rules. The planner asks for exact rows only for the
candidates its optimisation picks (see ``numerology.plan``).

Memory: the matrix holds a boolean, two float64 and an int8 per pair
(18 bytes; :data:`MAX_PAIRS` pairs at most, 110 MB); ``link.evaluate`` is
called on at most :data:`CHUNK_PAIRS` pairs at a time.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from . import candidates as cand
from . import link
from .design import DesignArrays
from .environment import Environment, EnvironmentBatch
from .errors import InputError
from .grouping import distinct_rows, members as group_members
from .requirements import Requirements
from .sweep import Sites, site_environments, site_requirements

#: (candidate, channel) pairs per call of link.evaluate: each call holds a few dozen arrays of this many
#: floats, times the taps for the echo term (about 100 MB at 24 taps).
CHUNK_PAIRS = 1 << 16
#: Largest matrix: candidates x channels (18 bytes per pair).
MAX_PAIRS = 6_000_000
#: Channels of a second round that become anchors of their own, at most (most sites first).
MAX_OWN_ANCHORS = 8
#: Group anchors, at most: the (Doppler, max excess delay) bins widen from one octave to 2, 4, ... octaves
#: until there are no more groups than this.
MAX_GROUP_ANCHORS = 8
#: At each anchor, the numerologies whose pilot arrangements are evaluated exactly: the best this many by the
#: bound of each objective (throughput, robustness).
NUMEROLOGIES_PER_ANCHOR = 3
#: Pilot arrangements (each with its slot) of one numerology evaluated exactly at an anchor in each of two
#: rounds: spread over the numerology's candidates in order of their throughput bound, then between the last
#: that failed and the first that passed.
LADDER = 6
#: Exact evaluations of each search at an anchor of its own, at most once a design that serves it is found
#: (``solver.search(..., max_exact=)``): such a channel needs a design that serves it, and the best found
#: within this many (the searches' bounds are loose at the hardest channels: a full proof took 250-430
#: exact evaluations each on the 10^4-site port benchmark, most of a plan's search time).
OWN_ANCHOR_EXACT = 64


# --- channels ----------------------------------------------------------------------


@dataclass(frozen=True)
class Channels:
    """The distinct channels of a set of sites (one entry per channel unless stated)."""

    environment: EnvironmentBatch
    snr_db: np.ndarray
    frequency_error_hz: np.ndarray
    weight: np.ndarray  # number of sites
    of_site: np.ndarray  # (sites,) the channel of each site

    @property
    def size(self) -> int:
        return int(self.snr_db.size)

    def requirements(self, req: Requirements, index) -> Requirements:
        """``req`` with the SNR and frequency error of the channels at ``index`` (arrays, as link.evaluate takes)."""
        return (req.replace("radio.snr", self.snr_db[index])
                .replace("radio.frequency_error", self.frequency_error_hz[index]))


def channels_of(req: Requirements, sites: Sites) -> Channels:
    """Group the sites into distinct channels (in order of each channel's first site)."""
    batch = site_environments(req, sites, notes=False)
    n = sites.size
    site_req = site_requirements(req, sites)
    snr = np.broadcast_to(np.asarray(site_req.radio.snr_db, dtype=float), (n,))
    error = np.broadcast_to(np.asarray(site_req.radio.frequency_error_hz, dtype=float), (n,))
    numeric = [np.asarray(getattr(batch, key), dtype=float) for key in EnvironmentBatch.PER_SITE
               if np.asarray(getattr(batch, key)).dtype != object]
    table = np.column_stack(numeric + [batch.delays_s, batch.powers, snr, error])
    index, first = distinct_rows(table) if n else (np.zeros(0, dtype=np.intp), np.zeros(0, dtype=np.intp))
    order = np.argsort(first, kind="stable")  # channels in order of their first site
    renumber = np.empty_like(order)
    renumber[order] = np.arange(order.size)
    of_site = renumber[index]
    first = first[order]
    return Channels(batch.take(first), snr[first], error[first],
                    np.bincount(of_site, minlength=first.size).astype(float), of_site)


# --- anchors and candidates ----------------------------------------------------------


@dataclass(frozen=True)
class Anchor:
    """An environment the solver is asked for candidates at, with its SNR and frequency error."""

    environment: Environment
    snr_db: float
    frequency_error_hz: float
    channels: np.ndarray  # the channels it stands for
    ranked: bool = False  # also take the designs the solver ranks best here (exactly evaluated)
    own: bool = False  # one channel's own anchor: the solver's best design of each objective there

    def requirements(self, req: Requirements) -> Requirements:
        return req.replace("radio.snr", self.snr_db).replace("radio.frequency_error", self.frequency_error_hz)


def corner(channels: Channels, members) -> Anchor:
    """The harsh corner of a group of channels: each quantity at its worst over the group.

    The taps (and max excess delay) are those of the member with the longest
    echo; Doppler, coherence time and spread those of the fastest member;
    the coherence bandwidth the smallest; the SNR the lowest; the frequency
    error the largest.
    """
    env = channels.environment
    members = np.asarray(members, dtype=np.intp)
    longest = members[np.argmax(env.max_excess_delay_s[members])]
    fastest = members[np.argmax(env.max_doppler_hz[members])]
    base = env.at(int(longest))
    fast = env.at(int(fastest))
    harsh = dataclasses.replace(
        base, speed_mps=fast.speed_mps, max_doppler_hz=fast.max_doppler_hz,
        doppler_centroid_hz=fast.doppler_centroid_hz, doppler_spread_hz=fast.doppler_spread_hz,
        coherence_time_s=fast.coherence_time_s,
        coherence_bandwidth_hz=float(np.min(env.coherence_bandwidth_hz[members])), notes=())
    return Anchor(harsh, float(np.min(channels.snr_db[members])),
                  float(np.max(channels.frequency_error_hz[members])), members)


def group_anchors(channels: Channels) -> list[Anchor]:
    """Corners of all channels together and of each (Doppler, max excess delay) group.

    Groups are the channels in one octave of each; when that makes more than
    :data:`MAX_GROUP_ANCHORS` groups, bins of 2, 4, ... octaves instead.
    """
    env = channels.environment
    if channels.size == 0:
        return []
    doppler_octave = np.floor(np.log2(np.maximum(env.max_doppler_hz, 1.0))).astype(np.int64)
    delay_octave = np.floor(np.log2(np.maximum(env.max_excess_delay_s, 1e-9) / 1e-9)).astype(np.int64)
    out = [dataclasses.replace(corner(channels, np.arange(channels.size)), ranked=True)]
    width = 1
    while True:
        keys, group = np.unique(np.stack([doppler_octave // width, delay_octave // width], axis=1), axis=0,
                                return_inverse=True)
        if keys.shape[0] <= MAX_GROUP_ANCHORS:
            break
        width *= 2
    group = np.ravel(group)
    if keys.shape[0] > 1:
        out += [corner(channels, np.flatnonzero(group == g)) for g in range(keys.shape[0])]
    return out


def own_anchors(channels: Channels, index) -> list[Anchor]:
    """Each channel at ``index`` as its own anchor: the best design of each objective the solver finds there.

    These channels are those no first-round candidate passes; the bounded
    exact ladder of :func:`anchor_designs` looks only at a few numerologies
    and can miss the one design that serves such a channel, while the
    solver's search finds one if any exists (its work bound,
    :data:`OWN_ANCHOR_EXACT`, counts only once one is found). One
    design per objective (a search for the best key alone, no Pareto front):
    a channel of its own needs a design that serves it, not a ranking.
    """
    return [dataclasses.replace(corner(channels, [i]), own=True) for i in np.asarray(index, dtype=np.intp)]


GRID_FIELDS = tuple(f.name for f in dataclasses.fields(cand.Grid))


def candidate_designs(req: Requirements, anchors) -> cand.Grid:
    """The plan's candidate space: at each anchor, designs that pass every rule there; each design once.

    At each anchor the solver screens its candidates (``solver._screen`` over
    the whole spacing family, as ``solver.any_feasible`` does). The screen's
    bounds leave the channel-estimation error out, so the arrangement with
    the best bound of a numerology is its sparsest, which the exact model
    often rejects; an anchor's candidates are therefore chosen exactly
    (:func:`anchor_designs`). At a ``ranked`` anchor (the corner of all sites)
    the designs ``solve`` would rank first there are added (``solver.search``,
    exact, for both objectives), so that one mode is never worse than
    ``solve`` on the sites' worst case. This is the only function that knows
    how the solver builds, screens and ranks candidates; when that changes,
    only this changes.
    """
    from . import solver

    family = cand.spacing_family(req)
    parts = []
    for anchor in anchors:
        anchor_req = anchor.requirements(req)
        grid, bound, _ = solver._screen(anchor_req, anchor.environment, family, ())
        parts.append(anchor_designs(anchor_req, anchor.environment, grid, bound))
        if anchor.ranked or anchor.own:
            for objective in ("throughput", "robustness"):
                found = solver.search(anchor_req, anchor.environment, objective=objective,
                                      **({"top": 1, "pareto": False, "max_exact": OWN_ANCHOR_EXACT}
                                         if anchor.own else {}))
                if found.feasible:
                    parts.append(found.witness if anchor.own else _grid_of(found.ranked.designs))
    if not parts:
        return cand.Grid.empty()
    grid = cand.Grid(*(np.concatenate([getattr(p, f) for p in parts]) for f in GRID_FIELDS))
    if grid.size == 0:
        return grid
    _, first = distinct_rows(np.stack([np.asarray(getattr(grid, f), dtype=float) for f in GRID_FIELDS], axis=1))
    return grid.take(np.sort(first))  # each design once, in order of first appearance


def anchor_designs(req: Requirements, environment: Environment, grid: cand.Grid, bound: dict) -> cand.Grid:
    """Screened candidates that pass every rule at one anchor, found with a bounded number of exact evaluations.

    The numerologies (spacing, FFT size, CP) with the best :data:`NUMEROLOGIES_PER_ANCHOR`
    bounds of each objective are taken. The candidates of each, in order of
    their throughput bound (sparse pilots and long slots first), are evaluated
    exactly at :data:`LADDER` ranks spread over that order, then at ranks
    between the last failure before the first pass and that pass: the sparsest
    arrangement that carries the estimation is found to within a few ranks.
    Of each numerology the passing design with the best exact throughput and
    the one with the best exact robustness are kept. At most
    ``2 x NUMEROLOGIES_PER_ANCHOR x 2 x LADDER`` exact evaluations per anchor.
    """
    if grid.size == 0:
        return grid
    numerology, _ = distinct_rows(np.stack([grid.spacing_hz, grid.fft_size, grid.cp_samples], axis=1))
    count = int(numerology.max()) + 1
    chosen = set()
    for objective in ("throughput", "robustness"):
        best = np.full(count, -np.inf)
        np.maximum.at(best, numerology, bound[objective])
        chosen |= set(np.argsort(-best, kind="stable")[:NUMEROLOGIES_PER_ANCHOR].tolist())
    by_bound = np.lexsort((np.arange(grid.size), -bound["throughput"], numerology))  # best bound first in each
    of_numerology = group_members(numerology, count, by_bound)
    in_turn = [of_numerology[k] for k in sorted(chosen)]  # a few numerologies: a short loop
    positions = [_ladder(0, m.size - 1) for m in in_turn]
    first_round = [m[p] for m, p in zip(in_turn, positions)]
    passed, rate, robust = _exact_at(req, environment, grid, np.concatenate(first_round))
    second_round, at = [], 0
    for m, p in zip(in_turn, positions):
        ok = passed[at:at + p.size]
        at += p.size
        if ok.any() and not ok[0]:  # between the last failure before the first pass and that pass
            hit = int(np.argmax(ok))
            second_round.append(m[_ladder(int(p[hit - 1]) + 1, int(p[hit]) - 1)])
    tried = np.concatenate(first_round + second_round)
    if second_round:
        more = _exact_at(req, environment, grid, np.concatenate(second_round))
        passed, rate, robust = (np.concatenate([a, b]) for a, b in zip((passed, rate, robust), more))
    keep = []
    for figure in (rate, robust):  # per numerology, the passing design with the best exact figure
        good = np.flatnonzero(passed)
        pick = good[np.lexsort((good, -figure[good], numerology[tried[good]]))]
        lead = np.ones(pick.size, dtype=bool)
        lead[1:] = numerology[tried[pick]][1:] != numerology[tried[pick]][:-1]
        keep.append(tried[pick[lead]])
    return grid.take(np.unique(np.concatenate(keep)))


def _ladder(low: int, high: int) -> np.ndarray:
    """At most :data:`LADDER` ranks from ``low`` to ``high`` (both included), evenly spread; none if high < low."""
    if high < low:
        return np.zeros(0, dtype=np.intp)
    return np.unique(np.round(np.linspace(low, high, min(LADDER, high - low + 1))).astype(np.intp))


def _exact_at(req: Requirements, environment: Environment, grid: cand.Grid, index):
    """Pass, net throughput and robustness of the candidates at ``index`` by the full link model."""
    ev = link.evaluate(_designs(grid, index), environment, req)
    shape = np.shape(index)
    return (np.broadcast_to(ev.passed, shape).copy(), np.broadcast_to(ev.rate_bps, shape).astype(float),
            np.broadcast_to(ev.robustness, shape).astype(float))


def _grid_of(d: DesignArrays) -> cand.Grid:
    """Design arrays as a candidate grid."""
    return cand.Grid(*(np.asarray(x) for x in (
        d.subcarrier_spacing_hz, d.fft_size, d.cp_samples, d.used_subcarriers, d.pilot_freq_spacing,
        d.pilot_time_spacing, d.pilot_shift, d.symbols_per_slot, d.pilot_scope, d.pilot_symbols, d.pilot_period,
        d.pilot_data_shared.astype(np.int64))))


def merged(a: cand.Grid, b: cand.Grid) -> tuple[cand.Grid, np.ndarray]:
    """``a`` followed by the designs of ``b`` not in ``a``; and the indices of those in ``b``."""
    both = cand.Grid(*(np.concatenate([getattr(a, f), getattr(b, f)]) for f in GRID_FIELDS))
    index, first = distinct_rows(np.stack([np.asarray(getattr(both, f), dtype=float) for f in GRID_FIELDS], axis=1))
    new = np.flatnonzero(np.isin(np.arange(b.size) + a.size, first) & ~np.isin(index[a.size:], index[:a.size]))
    return cand.Grid(*(np.concatenate([getattr(a, f), getattr(b, f)[new]]) for f in GRID_FIELDS)), new


def relaxed_failure(req: Requirements, channels: Channels, index):
    """For the channels at ``index``: whether the relaxed rules rule out every spacing, and the rule that does.

    The relaxed design at each spacing of the family (``candidates.relaxed_margins``)
    bounds every real design's margins from above; a channel where no
    spacing passes can be served by no design. Returns (ruled out, rule name
    or None) arrays.
    """
    index = np.asarray(index, dtype=np.intp)
    family = cand.spacing_family(req)
    env = channels.environment.take(index).reshape((index.size, 1))
    spacings = np.broadcast_to(family[None, :], (index.size, family.size))
    margins = cand.relaxed_margins(spacings, env, channels.requirements(req, index[:, None]))
    if not margins:
        return np.zeros(index.size, dtype=bool), np.full(index.size, None, dtype=object)
    names = list(margins)
    stack = np.stack([np.broadcast_to(margins[k], (index.size, family.size)) for k in names])  # rule, channel, spacing
    ok = np.all(stack >= 0, axis=0)
    out = ~ok.any(axis=1)
    # the rule failing at the spacing where the fewest fail (as the solver's window names it)
    fails = np.sum(stack < 0, axis=0)
    best = np.argmin(fails, axis=1)
    worst_rule = np.argmin(stack[:, np.arange(index.size), best], axis=0)
    return out, np.where(out, np.array(names, dtype=object)[worst_rule], None)


# --- the matrix -----------------------------------------------------------------------


def _designs(grid: cand.Grid, index, shape=None) -> DesignArrays:
    """The candidates at ``index`` (any shape) as design arrays: numerology, pilot arrangement and slot."""
    index = np.asarray(index, dtype=np.intp)
    sub = grid.take(index.ravel()).designs()
    shape = index.shape if shape is None else shape
    values = {f.name: getattr(sub, f.name) for f in dataclasses.fields(sub)}
    values = {key: np.reshape(v, shape) if np.ndim(v) and np.size(v) == index.size else v
              for key, v in values.items()}
    return DesignArrays(**{**values, "name": "candidate", "source": "numerology plan"})


class Matrix:
    """Candidates x channels: pass/fail, net throughput, worst normalised margin and binding rule of each pair.

    Rows start as the cheap evaluation (upper bounds of the SINR rules) and
    become exact with :meth:`make_exact`. Pairs that fail hold rate 0 and
    their (negative) margin.
    """

    def __init__(self, req: Requirements, channels: Channels, grid: cand.Grid):
        self.req = req
        self.channels = channels
        self.rules = link.applicable_rules(req)
        self.grid = grid
        d = channels.size
        self.passed = np.zeros((0, d), dtype=bool)
        self.rate_bps = np.zeros((0, d), dtype=float)
        self.margin = np.zeros((0, d), dtype=float)
        self.binding = np.zeros((0, d), dtype=np.int8)
        self.exact = np.zeros(0, dtype=bool)
        self.overhead = np.zeros(0)
        self.exact_pairs = 0
        self._append(grid)

    @property
    def size(self) -> int:
        return int(self.exact.size)

    def add(self, grid: cand.Grid) -> np.ndarray:
        """Append the designs of ``grid`` not already present; returns their row indices."""
        self.grid, new = merged(self.grid, grid)
        start = self.size
        self._append(self.grid.take(np.arange(start, self.grid.size)))
        return np.arange(start, self.size)

    def _append(self, grid: cand.Grid) -> None:
        m, d = grid.size, self.channels.size
        if (self.size + m) * d > MAX_PAIRS:
            raise InputError("plan", f"{self.size + m:,} candidate designs x {d:,} distinct site channels is more than "
                                     f"{MAX_PAIRS:,} pairs; round the sites' values (fewer distinct channels) or "
                                     "narrow the [search] table")
        passed = np.zeros((m, d), dtype=bool)
        rate = np.zeros((m, d), dtype=float)
        margin = np.zeros((m, d), dtype=float)
        binding = np.zeros((m, d), dtype=np.int8)
        overhead = np.zeros(m)
        rows = max(1, CHUNK_PAIRS // max(d, 1))
        cols = max(1, min(d, CHUNK_PAIRS))
        for r0 in range(0, m, rows):
            r = np.arange(r0, min(m, r0 + rows))
            for c0 in range(0, d, cols):
                c = np.arange(c0, min(d, c0 + cols))
                ev = link.evaluate(_designs(grid, r[:, None]), self.channels.environment.take(c),
                                   self.channels.requirements(self.req, c), estimation=False, error_floor=True)
                block = np.ix_(r, c)
                passed[block], rate[block], margin[block], binding[block] = self._figures(ev, (r.size, c.size))
                overhead[r] = np.broadcast_to(ev.overhead, (r.size, c.size))[:, 0]
        self.passed = np.concatenate([self.passed, passed])
        self.rate_bps = np.concatenate([self.rate_bps, rate])
        self.margin = np.concatenate([self.margin, margin])
        self.binding = np.concatenate([self.binding, binding])
        self.exact = np.concatenate([self.exact, np.zeros(m, dtype=bool)])
        self.overhead = np.concatenate([self.overhead, overhead])

    def _figures(self, ev, shape):
        passed = np.broadcast_to(ev.passed, shape)
        rate = np.where(passed, np.broadcast_to(ev.rate_bps, shape), 0.0)
        return passed, rate, np.broadcast_to(ev.worst_normalised, shape), np.broadcast_to(ev.binding, shape)

    def make_exact(self, rows) -> None:
        """Evaluate the given rows with the full link model (only the pairs that passed the cheap rules)."""
        rows = np.asarray(rows, dtype=np.intp)
        rows = rows[~self.exact[rows]]
        if rows.size == 0:
            return
        j, i = np.nonzero(self.passed[rows])
        j = rows[j]
        for start in range(0, j.size, CHUNK_PAIRS):
            jj, ii = j[start:start + CHUNK_PAIRS], i[start:start + CHUNK_PAIRS]
            ev = link.evaluate(_designs(self.grid, jj), self.channels.environment.take(ii),
                               self.channels.requirements(self.req, ii))
            figures = self._figures(ev, jj.shape)
            for target, values in zip((self.passed, self.rate_bps, self.margin, self.binding), figures):
                target[jj, ii] = values
        self.exact[rows] = True
        self.exact_pairs += int(j.size)

    def rule_name(self, index) -> str:
        return self.rules[int(index)].name


# --- the whole space ----------------------------------------------------------------------


@dataclass(frozen=True)
class Space:
    """The candidates and channels of a plan, their matrix, and the channels no design can serve."""

    matrix: Matrix
    anchors: tuple
    ruled_out: dict  # channel -> the rule that rules out every spacing there (relaxed rules)
    untried: int = 0  # channels no candidate passes that were not made anchors of their own (over the limit)


def plan_space(req: Requirements, sites: Sites) -> Space:
    """Channels, anchors, candidates and the cheap matrix of a plan (see the module docstring).

    Channels no candidate passes even by the cheap rules, and that the
    relaxed rules do not rule out, become anchors of their own in a second
    round (at most :data:`MAX_OWN_ANCHORS`, most sites first).
    """
    channels = channels_of(req, sites)
    anchors = group_anchors(channels)
    matrix = Matrix(req, channels, candidate_designs(req, anchors))
    space = Space(matrix, tuple(anchors), {})
    return with_own_anchors(req, space, np.flatnonzero(~matrix.passed.any(axis=0)))


def with_own_anchors(req: Requirements, space: Space, bare) -> Space:
    """``space`` with the channels at ``bare`` (no candidate serves them) tried as anchors of their own.

    Channels the relaxed rules rule out are recorded with their rule and not
    tried; of the others, at most :data:`MAX_OWN_ANCHORS` in all (most sites
    first, channels already anchors of their own left out) are added, their
    candidates appended to the matrix (which fills in place).
    """
    bare = np.asarray(bare, dtype=np.intp)
    bare = bare[~np.isin(bare, list(space.ruled_out))]
    tried = [int(a.channels[0]) for a in space.anchors if a.own]
    bare = bare[~np.isin(bare, tried)]
    if not bare.size:
        return space
    matrix, channels = space.matrix, space.matrix.channels
    out, rule = relaxed_failure(req, channels, bare)
    ruled_out = {**space.ruled_out, **{int(c): str(r) for c, r in zip(bare[out], rule[out])}}
    retry = bare[~out]
    room = max(0, MAX_OWN_ANCHORS - len(tried))
    retry = retry[np.argsort(-channels.weight[retry], kind="stable")]
    untried = max(0, retry.size - room)
    extra = own_anchors(channels, retry[:room])
    if extra:
        matrix.add(candidate_designs(req, extra))
    return Space(matrix, space.anchors + tuple(extra), ruled_out, untried)
