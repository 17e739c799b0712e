"""The solver: from environment bounds and goals to ranked, explained designs.

Data flow (all pure functions)::

    Requirements -> Environment -> window of spacings -> candidate grid
        -> cheap rules (no estimation error)  -> bound on the SINR-dependent rules
        -> exact link model on the survivors, best-first (branch and bound)
        -> ranking, Pareto set, explanations

Every returned design was evaluated by :func:`numerology.link.evaluate`, the
function ``check`` uses, and passes every rule. The stages only discard
candidates that provably fail: the estimation error only lowers the SINR, so
throughput and link margins computed without it are upper bounds.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from . import candidates as cand
from . import link
from .design import DesignArrays
from .environment import Environment, derive_environment
from .grouping import distinct_rows
from .requirements import Requirements

OBJECTIVES = ("throughput", "robustness", "overhead", "latency")
#: Rules a faster channel stresses, and rules a longer echo stresses (for the Pareto axes).
SPEED_RULES = ("doppler_ici", "quasi_static", "pilot_aliasing")
DELAY_RULES = ("guard_interval", "cp_covers_delay", "flat_fading", "pilot_aliasing")
#: Candidates evaluated exactly in the first round of the branch and bound, and at most per round
#: (rounds double in between).
FIRST_BATCH = 256
BATCH = 4096
#: The first round of a what-if search (one best key): its best-bound candidates usually settle it, and
#: with the estimation floor in the bounds they are usually the answer.
WHAT_IF_FIRST_BATCH = 16
#: Unrefined candidates given their comb bound together in a what-if search, at most (the best bounds first):
#: one call for many, where each round's exact evaluations take only the best few.
WHAT_IF_REFINE = 512
#: Objective values this close (relative) count as equal: a bound and the exact value of the same design
#: may differ in the last bits, as they are computed along different paths.
KEY_RTOL = 1e-9
#: Candidates of each open numerology evaluated exactly in the first breadth-first round (doubling after).
PER_NUMEROLOGY = 1
#: Pareto designs carried into the result beyond the top N.
PARETO_SHOWN = 20
#: Rules whose margins depend on the estimation error (through the SINR).
SINR_RULES = ("link_closes", "throughput")


@dataclass(frozen=True)
class SearchStats:
    spacings_in_family: int
    spacings_in_window: int
    candidates: int  # size of the unpruned space
    after_cheap_rules: int
    evaluated_exactly: int
    feasible_found: int
    top: int = 5
    stopped_at_budget: bool = False  # the exact evaluation reached MAX_EXACT_EVALUATIONS: best found, not proven


@dataclass(frozen=True)
class Ranked:
    """The exactly evaluated feasible designs, best first."""

    designs: DesignArrays
    evaluation: link.Evaluation
    keys: np.ndarray  # objective value (higher is better)
    pareto: np.ndarray  # on the Pareto front over (throughput, speed margin, delay margin)
    position: np.ndarray  # rank among the distinct numerologies (0 = best); a huge value for other designs


@dataclass(frozen=True)
class Search:
    """Outcome of one search (no explanations yet)."""

    window: cand.Window
    ranked: Ranked | None
    stats: SearchStats
    rejected_by: dict = field(default_factory=dict)  # rule -> number of candidates it rejected in the cheap stage
    best_key: float = -np.inf  # the best objective value found (before ties go to the smaller FFT)
    witness: object = None  # the best design's candidate (a candidates.Grid of one), when feasible

    @property
    def feasible(self) -> bool:
        return self.ranked is not None and self.ranked.keys.size > 0


def objective_key(objective: str, evaluation: link.Evaluation, designs: DesignArrays) -> np.ndarray:
    """Higher is better, for each objective."""
    if objective == "throughput":
        return np.asarray(evaluation.rate_bps, dtype=float)
    if objective == "robustness":
        return np.asarray(evaluation.robustness, dtype=float)
    if objective == "overhead":
        return -np.asarray(evaluation.overhead, dtype=float)
    if objective == "latency":
        return -np.asarray(designs.slot_s, dtype=float)
    raise ValueError(objective)


#: Candidates built and screened at a time (bounds memory), and in a feasibility test (early exit).
CHUNK = 1 << 20
FEASIBILITY_CHUNK = 1 << 13


def _relaxed_pilots(req: Requirements) -> dict:
    """Namespace overrides for a numerology before its pilots and slot are chosen (best case of each)."""
    return {
        "D_f": np.inf, "D_t": np.inf, "s_p": 0.0, "rho_pil": 0.0,  # no pilot overhead ...
        "alias_scale": cand.densest_pilots_alias_scale,
        "N_slot": float(min(req.search.symbols_per_slot)),
    }


def _cheap_stage(grid: cand.Grid, environment: Environment, req: Requirements, ignore, overrides=None,
                 error_floor: bool = False):
    """Every rule with the estimation error left out: exact for most rules, an upper bound for the SINR rules.

    ``overrides`` replaces symbols by best-case values (used to screen numerologies before pilots,
    and pilot arrangements before slot lengths). ``error_floor`` puts the estimation error's lower
    bound (``link.estimation_floor``) in its place: still an upper bound, and a tight one.
    Returns (passes, objective bounds, rejections per rule).
    """
    evaluation = link.evaluate(grid.designs(), environment, req, estimation=False, overrides=overrides,
                               error_floor=error_floor)
    ok = np.ones(grid.size, dtype=bool)
    rejected = {}
    normalised = []
    for rule in evaluation.rules:
        if rule.name in ignore:
            continue
        fail = evaluation.margin[rule.name] < 0
        rejected[rule.name] = int(np.count_nonzero(fail & ok))
        ok &= ~fail
        normalised.append(evaluation.normalised[rule.name])
    if evaluation.goal_margin_db is not None:  # the SINR margin of the throughput goal: monotone in the SINR
        normalised.append(10 ** (np.asarray(evaluation.goal_margin_db) / 10) - 1.0)
    bound = {
        "throughput": evaluation.rate_bps,
        "robustness": np.min(np.stack(normalised), axis=0) if normalised else np.zeros(ok.shape),
        "overhead": -evaluation.overhead,
        "latency": -evaluation.slot_s,
    }
    return ok, bound, rejected


def search(req: Requirements, environment: Environment | None = None, objective: str | None = None,
           top: int = 5, ignore=(), first_feasible_only: bool = False, spacings_hz=None,
           pareto: bool = True, max_exact: int | None = None) -> Search:
    """Search the candidate space.

    Parameters
    ----------
    req : Requirements
    environment : Environment, optional
        Derived from ``req`` when not given.
    objective : str, optional
        One of :data:`OBJECTIVES`; default ``goals.objective``.
    top : int
        How many best designs are guaranteed exact (the branch and bound
        stops once these are certain).
    ignore : iterable of str
        Rule names left out (for the infeasibility diagnosis).
    first_feasible_only : bool
        Stop at the first feasible design (a feasibility test).
    spacings_hz : array, optional
        Use these spacings instead of the family within the window (brute force).
    pareto : bool
        Find the Pareto front (False: only the ranking is wanted, as for a what-if).
    max_exact : int, optional
        Exact evaluations at most once a feasible design is found (default :data:`MAX_EXACT_EVALUATIONS`);
        beyond, the best found so far, marked ``stats.stopped_at_budget``.
    """
    max_exact = MAX_EXACT_EVALUATIONS if max_exact is None else max_exact
    environment = environment or derive_environment(req)
    objective = objective or req.goals.objective
    window = cand.spacing_window(environment, req, ignore)
    family = cand.spacing_family(req, environment, ignore)
    if spacings_hz is None:
        spacings_hz = family[window.contains(family)] if not window.empty else family[:0]
    full_size = _space_size(req, environment, family)
    grid, bound, rejected = _screen(req, environment, spacings_hz, ignore)
    key_bound = np.array(bound[objective], dtype=float)  # tightened in place as candidates are refined
    refined = np.zeros(key_bound.size, dtype=bool)
    order = np.argsort(-key_bound, kind="stable")
    numerology = distinct_rows(np.stack([grid.spacing_hz, grid.fft_size, grid.cp_samples], axis=1))[0]
    best = np.full(int(numerology.max()) + 1 if numerology.size else 0, -np.inf)  # best exact key per numerology
    settled = np.zeros(best.size, dtype=bool)
    # A numerology whose best exact key already beats every remaining bound needs no more candidates,
    # unless every feasible design is asked for (top >= the space: brute-force comparisons).
    exhaustive = top >= order.size
    records = {k: [] for k in ("index", "key", "robust", "rate", "speed", "delay")}
    pending = order
    per_numerology = PER_NUMEROLOGY
    # One best key and no Pareto front (a what-if): strictly best bound first, so that only the candidates
    # whose bound beats the best key are evaluated (breadth first would settle every numerology).
    what_if = top == 1 and not pareto and not exhaustive and not first_feasible_only
    evaluated, batch_size = 0, WHAT_IF_FIRST_BATCH if what_if else FIRST_BATCH
    # Thousands of numerologies (a fine spacing range with many FFT sizes): settling each one would cost
    # an exact evaluation per numerology; best first stops once the `top` best are certain.
    crowded = best.size > BREADTH_FIRST_NUMEROLOGIES
    best_first = exhaustive or first_feasible_only or what_if or crowded
    stopped = False
    while pending.size:
        if evaluated >= max_exact and records["index"] and not exhaustive:
            stopped = True  # bounded work: the best found so far, said so in the report
            break
        if records["index"]:
            batch_size = min(batch_size, max(max_exact - evaluated, FIRST_BATCH))
        if what_if:
            # the best bounds first, each refined before it is evaluated: the unrefined among the best bounds
            # in blocks (one call), until the round's candidates all carry their tighter bound
            while pending.size and not refined[pending[:WHAT_IF_FIRST_BATCH]].all():
                fresh = pending[~refined[pending]][:WHAT_IF_REFINE]
                _tighten(fresh, key_bound, refined, grid, environment, req, objective, ignore)
                pending = pending[(key_bound[pending] > -np.inf)
                                  & ~_reaches(best[numerology[pending]], key_bound[pending])]
                pending = pending[np.argsort(-key_bound[pending], kind="stable")]
            if not pending.size:
                break
        if best_first:
            batch, pending = pending[:batch_size], pending[batch_size:]
        else:  # breadth first: the best few of every open numerology, so that each is settled early
            batch, pending = _breadth_first(pending, numerology, per_numerology, batch_size)
            per_numerology *= 2
        if not exhaustive:
            batch, pending = _refine(batch, pending, key_bound, refined, best, numerology, grid, environment, req,
                                     objective, ignore)
            if not batch.size:
                continue
            if what_if and batch.size > WHAT_IF_FIRST_BATCH:
                # Only the best key is wanted: the refined candidates with the best bounds first, the rest back
                # in the queue, where those the best exact key then beats are dropped unevaluated.
                batch = batch[np.argsort(-key_bound[batch], kind="stable")]
                batch, rest = batch[:WHAT_IF_FIRST_BATCH], batch[WHAT_IF_FIRST_BATCH:]
                pending = np.concatenate([rest, pending])
                pending = pending[np.argsort(-key_bound[pending], kind="stable")]
        designs = grid.take(batch).designs()
        evaluation = link.evaluate(designs, environment, req)
        evaluated += batch.size
        passed = _passed(evaluation, ignore)
        if passed.any():
            idx = np.flatnonzero(passed)
            keys = objective_key(objective, evaluation, designs)[idx]
            for name, values in (("index", batch[idx]), ("key", keys),
                                 ("robust", evaluation.robustness[idx]), ("rate", evaluation.rate_bps[idx]),
                                 ("speed", axis_margins(evaluation, SPEED_RULES)[idx]),
                                 ("delay", axis_margins(evaluation, DELAY_RULES)[idx])):
                records[name].append(np.asarray(values))
            np.maximum.at(best, numerology[batch[idx]], keys)
            if first_feasible_only:
                break
        batch_size = min(batch_size * 2, FIRST_BATCH if what_if else BATCH)  # a what-if stops soon: small steps
        if not pareto and not exhaustive and pending.size and np.count_nonzero(np.isfinite(best)) >= top:
            # Only the best keys are wanted (no Pareto front): a candidate whose bound is below the top-th
            # numerology's best exact key can neither enter the top nor change a key in it.
            kth = np.sort(best)[-top]
            pending = pending[_reaches(key_bound[pending], kth)]
        next_bound = key_bound[pending[0]] if pending.size else -np.inf
        reached = _reaches(best, next_bound)
        if np.count_nonzero(reached) >= top:
            break  # no unevaluated candidate can change the best `top` numerologies
        if not exhaustive and pending.size:
            # a numerology is settled once its best exact key reaches the best bound it has left
            left = np.full(best.size, -np.inf)
            np.maximum.at(left, numerology[pending], key_bound[pending])
            settled |= _reaches(best, left)
            pending = pending[~settled[numerology[pending]]]
    found = {k: np.concatenate(v) if v else np.empty(0) for k, v in records.items()}
    stats = SearchStats(family.size, int(len(spacings_hz)), full_size, int(grid.size), evaluated,
                        int(found["index"].size), top, stopped)
    if not found["index"].size:
        return Search(window, None, stats, rejected)
    # Best first; objective values within the tie tolerance count as equal, and then the smaller FFT, the
    # lower sample rate and the larger worst margin win (enumeration order last: deterministic).
    chosen_index = found["index"].astype(np.int64)
    tier = tie_tiers(objective, found["key"])
    rate_hz = grid.fft_size[chosen_index] * grid.spacing_hz[chosen_index]
    rank = np.lexsort((found["index"], -found["robust"], rate_hz, grid.fft_size[chosen_index], tier))
    if pareto:
        on_front = pareto_mask(found["rate"], found["speed"], found["delay"])[rank]
    else:
        on_front = np.zeros(rank.size, dtype=bool)
    chosen = found["index"][rank].astype(np.int64)
    # The ranking lists each numerology (spacing, FFT size, CP) once, with its best pilots and slot.
    numerology_table = np.stack([grid.spacing_hz[chosen], grid.fft_size[chosen], grid.cp_samples[chosen]], axis=1)
    _, first = np.unique(numerology_table, axis=0, return_index=True)
    leaders = np.sort(first)
    position = np.full(chosen.size, np.iinfo(np.int64).max)
    position[leaders] = np.arange(leaders.size)
    show = np.unique(np.concatenate([leaders[:top], np.flatnonzero(on_front)[:PARETO_SHOWN]]))
    designs = grid.take(chosen[show]).designs()
    evaluation = link.evaluate(designs, environment, req)
    ranked = Ranked(designs, evaluation, found["key"][rank][show], on_front[show], position[show])
    return Search(window, ranked, stats, rejected, float(np.max(found["key"])), grid.take(chosen[:1]))


#: Exact evaluations of one search, at most, once a feasible design is found (work bound: a fine spacing range
#: with every FFT size can leave 10^5 candidates whose bound beats the best design's exact value); the report
#: then says that the designs listed are the best found, not proven best.
MAX_EXACT_EVALUATIONS = 16384
#: Most numerologies the search settles one by one (breadth first); beyond, it goes best first.
BREADTH_FIRST_NUMEROLOGIES = 512


#: Objective values closer than this count as equal in the ranking: relative for throughput and latency,
#: absolute for the robustness margin and the overhead fraction (both already fractions).
TIE_TOLERANCE = {"throughput": ("relative", 0.005), "latency": ("relative", 0.005),
                 "robustness": ("absolute", 0.005), "overhead": ("absolute", 0.001)}


def tie_tolerance(objective: str, key):
    """How far below ``key`` another value still ties with it (see :data:`TIE_TOLERANCE`)."""
    kind, amount = TIE_TOLERANCE[objective]
    key = np.asarray(key, dtype=float)
    return amount * np.abs(np.where(np.isfinite(key), key, 0.0)) if kind == "relative" else np.full(key.shape, amount)


def tie_tiers(objective: str, keys) -> np.ndarray:
    """Tier of each key, best first: a tier holds the keys within the tolerance of its best one."""
    keys = np.asarray(keys, dtype=float)
    order = np.argsort(-keys, kind="stable")
    tiers = np.empty(keys.size, dtype=np.int64)
    tier, top = -1, np.inf
    for position in order:  # found designs: a few hundred at most
        if not keys[position] >= top - float(tie_tolerance(objective, top)) or tier < 0:
            tier, top = tier + 1, keys[position]
        tiers[position] = tier
    return tiers


def _refine(batch, pending, key_bound, refined, best, numerology, grid, environment, req, objective, ignore):
    """(batch, pending): the batch's candidates worth an exact evaluation now, the others back in the queue.

    A candidate whose pilot symbols sit on different combs costs an exact
    evaluation many times that of the others (a coupled eigenproblem over
    its pilot symbols); its bound from the screening leaves the estimation
    error out, or holds only its time-interpolation floor. Before its exact
    evaluation it is evaluated once with the estimation error's lower bound
    (``link.evaluate(..., comb_bound=True)``, exact for every other
    arrangement). Its key bound becomes that tighter bound (``key_bound`` and
    ``refined`` are updated in place). It is dropped when it then fails a
    rule or cannot raise its numerology's best exact key, and goes back to
    the queue when the tighter bound falls below the best bound left in its
    numerology (the queue stays in decreasing order of bound).
    """
    fresh = batch[~refined[batch]]
    _tighten(fresh, key_bound, refined, grid, environment, req, objective, ignore)
    b = key_bound[batch]
    useful = (b > -np.inf) & ~_reaches(best[numerology[batch]], b)
    left = np.full(best.size, -np.inf)
    np.maximum.at(left, numerology[pending], key_bound[pending])
    later = useful & np.isin(batch, fresh) & (b < left[numerology[batch]])
    if later.any():
        pending = np.concatenate([pending, batch[later]])
        pending = pending[np.argsort(-key_bound[pending], kind="stable")]
    return batch[useful & ~later], pending


def _reaches(key, bound):
    """Whether an exact key reaches a bound, to the tie tolerance between them (:data:`KEY_RTOL`)."""
    return key >= bound - KEY_RTOL * np.abs(bound)


def _tighten(fresh, key_bound, refined, grid, environment, req, objective, ignore) -> None:
    """Give the candidates ``fresh`` their key bound with the estimation error's lower bound (in place).

    ``link.evaluate(..., comb_bound=True)``: the comb bound for pilot symbols on different combs, the exact
    error otherwise; a candidate that then fails a rule gets -inf.
    """
    if not fresh.size:
        return
    designs = grid.take(fresh).designs()
    evaluation = link.evaluate(designs, environment, req, comb_bound=True)
    tight = np.where(_passed(evaluation, ignore), objective_key(objective, evaluation, designs), -np.inf)
    key_bound[fresh] = np.minimum(key_bound[fresh], tight)
    refined[fresh] = True


def _breadth_first(pending, numerology, per_numerology: int, limit: int):
    """(batch, rest): the first ``per_numerology`` pending candidates of each numerology, at most ``limit``.

    ``pending`` is in decreasing order of bound; the batch and the rest keep that order.
    """
    ids = numerology[pending]
    order = np.argsort(ids, kind="stable")
    sorted_ids = ids[order]
    starts = np.flatnonzero(np.r_[True, sorted_ids[1:] != sorted_ids[:-1]])
    rank_sorted = np.arange(order.size) - np.repeat(starts, np.diff(np.r_[starts, order.size]))
    rank = np.empty_like(rank_sorted)
    rank[order] = rank_sorted
    take = np.flatnonzero(rank < per_numerology)[:limit]
    rest = np.ones(pending.size, dtype=bool)
    rest[take] = False
    return pending[take], pending[rest]


def _screen_chunks(req: Requirements, environment: Environment, spacings_hz, ignore, chunk: int = CHUNK):
    """Build the candidates stage by stage; yield, chunk by chunk, those the cheap rules cannot reject.

    Each item is (surviving candidates, objective bounds, rejections per rule);
    the first item carries the numerology stage's rejections too.
    """
    df, n, used, cp = cand.numerologies(spacings_hz, environment, req)
    pilots = cand.pilot_arrangements(req)
    slots = np.asarray(req.search.symbols_per_slot, dtype=np.int64)
    numerologies = cand.Grid.of_numerologies(df, n, cp, used)
    rejected = {}
    if numerologies.size:
        ok, _, rejected = _cheap_stage(numerologies, environment, req, ignore, _relaxed_pilots(req))
        numerologies = numerologies.take(np.flatnonzero(ok))
    # Arrangements sorted by the cell D_f D_t of their sampling lattice: each numerology takes the slice
    # its density bounds allow.
    order = np.argsort(pilots.freq * pilots.time, kind="stable")
    pilots = pilots.take(order)
    cell = pilots.freq * pilots.time
    low, high = _cell_bounds(numerologies, environment, req, ignore)
    first = np.searchsorted(cell, low, side="left")
    counts = np.maximum(np.searchsorted(cell, high, side="right") - first, 0)
    any_slot = {"N_slot": float(min(slots))}  # the shortest slot is the best case for latency ...
    chunk = max(1, chunk // slots.size)  # lattice rows per chunk: each becomes one candidate per slot length
    blocks = np.searchsorted(np.cumsum(counts), np.arange(chunk, counts.sum() + chunk, chunk))
    edges = np.unique(np.concatenate([[0], np.minimum(blocks + 1, numerologies.size), [numerologies.size]]))
    for start, end in zip(edges[:-1], edges[1:]):
        # Arrangements first, with the slot of stream pilots left open (-1), then slot lengths crossed in.
        rows = np.repeat(np.arange(start, end), counts[start:end])
        if rows.size == 0:
            continue
        offsets = np.arange(rows.size) - np.repeat(np.cumsum(counts[start:end]) - counts[start:end], counts[start:end])
        chosen = pilots.take(first[rows] + offsets)
        base = numerologies.take(rows)
        with_pilots = cand.Grid(base.spacing_hz, base.fft_size, base.cp_samples, base.used, chosen.freq,
                                chosen.time, chosen.shift, chosen.slot, chosen.scope, chosen.symbols, chosen.period,
                                chosen.shared)
        ok, _, _ = _cheap_stage(with_pilots, environment, req, ignore, any_slot)
        candidates = cand.with_slots(with_pilots.take(np.flatnonzero(ok)), slots)
        ok, _, rejections = _cheap_stage(candidates, environment, req, ignore)
        # The survivors again with the estimation error's lower bound (time interpolation alone): the SINR
        # rules and the bounds tighten, and a candidate that fails now fails exactly too.
        candidates = candidates.take(np.flatnonzero(ok))
        ok, bound, floor_rejections = _cheap_stage(candidates, environment, req, ignore, error_floor=True)
        for name, count in (*rejections.items(), *floor_rejections.items()):
            rejected[name] = rejected.get(name, 0) + count
        keep = np.flatnonzero(ok)
        yield candidates.take(keep), {k: np.asarray(bound[k])[keep] for k in OBJECTIVES}, rejected
        rejected = {}


def _screen(req: Requirements, environment: Environment, spacings_hz, ignore):
    """All candidates the cheap rules cannot reject, their objective bounds, and rejections per rule."""
    parts, bounds, rejected = [], {k: [] for k in OBJECTIVES}, {}
    for part, bound, rejections in _screen_chunks(req, environment, spacings_hz, ignore):
        parts.append(part)
        for k in OBJECTIVES:
            bounds[k].append(bound[k])
        for name, count in rejections.items():
            rejected[name] = rejected.get(name, 0) + count
    if not parts:
        return cand.Grid.empty(), {k: np.zeros(0) for k in OBJECTIVES}, rejected
    grid = cand.Grid(*(np.concatenate([getattr(p, f) for p in parts]) for f in cand.Grid.__dataclass_fields__))
    return grid, {k: np.concatenate(v) for k, v in bounds.items()}, rejected


def any_feasible(req: Requirements, environment: Environment, ignore=(), max_exact: int | None = None):
    """Whether any candidate passes every rule not ignored (stops at the first one found).

    Screens in small chunks and evaluates each chunk's survivors exactly, best bound
    first, so a feasible request is answered without building the whole space.

    Parameters
    ----------
    max_exact : int, optional
        At most this many candidates evaluated exactly (the costly part); beyond it
        the answer is None: not known.
    """
    return first_feasible(req, environment, ignore, max_exact)[0]


def first_feasible(req: Requirements, environment: Environment, ignore=(), max_exact: int | None = None):
    """(:func:`any_feasible`'s answer, the feasible candidate found as a ``candidates.Grid`` of one, or None)."""
    spacings = screened_spacings(req, environment, ignore)
    if spacings.size == 0:
        return False, None
    evaluated = 0
    for part, bound, _ in _screen_chunks(req, environment, spacings, ignore, chunk=FEASIBILITY_CHUNK):
        order = np.argsort(-bound["robustness"], kind="stable")
        step = FIRST_BATCH if max_exact is None else max(1, min(FIRST_BATCH, max_exact))
        for start in range(0, order.size, step):
            if max_exact is not None and evaluated >= max_exact:
                return None, None
            index = order[start:start + step]
            evaluated += index.size
            passed = _passing(part.take(index), environment, req, ignore)
            if passed.size:
                return True, part.take(index[passed[:1]])
    return False, None


def _passing(grid: cand.Grid, environment: Environment, req: Requirements, ignore=()) -> np.ndarray:
    """Indices of the candidates of ``grid`` that pass every rule by the full model.

    Each is first evaluated with the estimation error's lower bound for pilot symbols on different
    combs (``link.evaluate(..., comb_bound=True)``, exact for the others): one that fails then fails
    exactly too and costs no exact evaluation, and one that passes needs an exact evaluation only if its
    error was the bound.
    """
    evaluation = link.evaluate(grid.designs(), environment, req, comb_bound=True)
    maybe = np.flatnonzero(_passed(evaluation, ignore))
    bounded = maybe[evaluation.bounded[maybe]]
    if not bounded.size:
        return maybe
    fails = bounded[~_passed(link.evaluate(grid.take(bounded).designs(), environment, req), ignore)]
    return maybe[~np.isin(maybe, fails)]


def transferred(req: Requirements, environment: Environment, row: cand.Grid, ignore=()):
    """A feasible candidate of ``req`` like ``row`` (a ``candidates.Grid`` of one), or None.

    The same spacing, pilot arrangement and slot length, with every FFT size and cyclic prefix that
    ``req``'s search space has at that spacing, evaluated at once. A feasible design found for one request
    is then a witness for another at the cost of one evaluation: if one of these passes every rule of
    ``req``, the search of ``req`` finds a feasible design too.
    """
    spacing = float(row.spacing_hz[0])
    family = cand.spacing_family(req, environment, ignore)
    if not np.any(np.abs(family - spacing) <= 1e-12 * spacing) or int(row.slot[0]) not in req.search.symbols_per_slot:
        return None
    df, n, used, cp = cand.numerologies(np.array([spacing]), environment, req)
    p = cand.pilot_arrangements(req)
    same = ((p.scope == row.scope[0]) & (p.freq == row.pilot_f[0]) & (p.time == row.pilot_t[0])
            & (p.shift == row.pilot_s[0]) & (p.symbols == row.symbols[0]) & (p.period == row.period[0])
            & (p.shared == row.shared[0]) & ((p.slot < 0) | (p.slot == row.slot[0])))
    if df.size == 0 or not same.any():
        return None
    one = np.ones(df.size, dtype=np.int64)
    grid = cand.Grid(df, n, cp, used, *(one * int(getattr(row, k)[0]) for k in
                                         ("pilot_f", "pilot_t", "pilot_s", "slot", "scope", "symbols", "period",
                                          "shared")))
    # the cheap rules with the estimation floor first (necessary): only their survivors cost an exact evaluation
    grid = grid.take(np.flatnonzero(_passed(link.evaluate(grid.designs(), environment, req, estimation=False,
                                                          error_floor=True), ignore)))
    if grid.size == 0:
        return None
    passed = _passing(grid, environment, req, ignore)
    return grid.take(passed[:1]) if passed.size else None


def screened_spacings(req: Requirements, environment: Environment, ignore=()) -> np.ndarray:
    """The family's spacings that relaxed designs allow (a necessary condition of any candidate passing).

    Only the family's own spacings matter here, not the window's edges: one evaluation instead of the edge
    refinement of ``spacing_window``.
    """
    family, allowed = cand.family_allowed(req, environment, ignore)
    if allowed is None:
        margins = cand.relaxed_margins(family, environment, req, ignore)
        allowed = np.all([m >= 0 for m in margins.values()], axis=0) if margins else np.ones(family.shape, bool)
    return family[allowed]


def numerologies_pass(req: Requirements, environment: Environment, ignore=()) -> bool:
    """Whether some numerology (spacing, FFT size, CP) passes the rules with its best pilots and slot.

    A necessary condition of feasibility without any exact evaluation: the first stage of the screening.
    """
    spacings = screened_spacings(req, environment, ignore)
    if spacings.size == 0:
        return False
    df, n, used, cp = cand.numerologies(spacings, environment, req)
    if df.size == 0:
        return False
    ok, _, _ = _cheap_stage(cand.Grid.of_numerologies(df, n, cp, used), environment, req, ignore,
                            _relaxed_pilots(req))
    return bool(ok.any())


def _cell_bounds(numerologies: cand.Grid, environment: Environment, req: Requirements, ignore):
    """Necessary bounds on the pilot cell size D_f D_t of each numerology.

    Above: the delay-Doppler support grown by the oversampling must fit in one
    cell of the reciprocal lattice (translates that do not overlap cannot
    cover more than the whole plane), so rho^2 tau_max 2 f_D <= 1 / (D_f D_t df T_s)
    (Hoeher, Kaiser & Robertson 1997; a packing argument). Below: the
    pilots must leave the overhead goal room after the cyclic prefix.
    """
    df = numerologies.spacing_hz
    t_u = 1.0 / df
    t_s = t_u + numerologies.cp_samples / (numerologies.fft_size * df)
    rho = req.rules.pilot_oversampling
    area = environment.max_excess_delay_s * 2.0 * environment.max_doppler_hz
    with np.errstate(divide="ignore"):
        high = np.where(area > 0, 1.0 / (rho**2 * area * df * t_s), np.inf)
    if "pilot_aliasing" in ignore:
        high = np.full(df.shape, np.inf)
    low = np.ones(df.shape)
    if req.goals.max_overhead < 1 and "overhead" not in ignore:
        room = 1.0 - (1.0 - req.goals.max_overhead) * t_s / t_u  # pilot fraction the goal leaves (no extra CP)
        with np.errstate(divide="ignore"):
            low = np.where(room > 0, 1.0 / room, np.inf)
    return np.ceil(low * (1 - 1e-12)), np.floor(np.minimum(high, 2**40) * (1 + 1e-12))


def _passed(evaluation: link.Evaluation, ignore) -> np.ndarray:
    ok = np.ones(np.shape(evaluation.sinr_eff), dtype=bool)
    for rule in evaluation.rules:
        if rule.name not in ignore:
            ok &= evaluation.margin[rule.name] >= 0
    return ok


def _space_size(req: Requirements, environment: Environment, family) -> int:
    """Size of the unpruned candidate space over the whole family."""
    df, *_ = cand.numerologies(family, environment, req)
    pilots = cand.pilot_arrangements(req)
    per_numerology = int(np.sum(pilots.slot < 0)) * len(req.search.symbols_per_slot) + int(np.sum(pilots.slot >= 0))
    return int(df.size * per_numerology)


def brute_force(req: Requirements, environment: Environment | None = None, ignore=()) -> tuple[cand.Grid, np.ndarray]:
    """Evaluate every candidate of the whole family with the exact link model (small spaces only).

    Returns the grid and a boolean array of which candidates pass.
    """
    environment = environment or derive_environment(req)
    grid = cand.enumerate_grid(req, environment, cand.spacing_family(req, environment, ignore))
    evaluation = link.evaluate(grid.designs(), environment, req)
    return grid, _passed(evaluation, ignore)


def pareto_mask(rate, speed_margin, delay_margin) -> np.ndarray:
    """True for designs no other design beats on all three axes (and strictly on one).

    Points are visited in decreasing lexicographic order, so no later point can
    dominate an earlier one; a point is dominated exactly when an earlier point
    dominates it, and then also a point of the front (dominance is
    transitive), so each block of points is compared with the front found so
    far and with the block's earlier points.
    """
    points = np.stack([rate, speed_margin, delay_margin], axis=1).astype(float)
    if points.shape[0] == 0:
        return np.zeros(0, dtype=bool)
    # Equal points never dominate one another, so they share a verdict: decide each distinct point once.
    points, inverse = np.unique(points, axis=0, return_inverse=True)
    return _front_of_distinct(points)[np.ravel(inverse)]


def _front_of_distinct(points) -> np.ndarray:
    """pareto_mask for distinct points (rows of ``points``)."""
    order = np.lexsort((-points[:, 2], -points[:, 1], -points[:, 0]))
    keep = np.zeros(points.shape[0], dtype=bool)
    front = np.empty((0, 3))
    for start in range(0, order.size, 64):  # blocks: compared with the front and with earlier points of the block
        block = order[start:start + 64]
        p = points[block]
        candidates = np.concatenate([front, p])  # the block's own points count only when earlier in it
        ge = np.all(candidates[None, :, :] >= p[:, None, :], axis=2)
        gt = np.any(candidates[None, :, :] > p[:, None, :], axis=2)
        earlier = np.concatenate([np.ones((len(block), len(front)), dtype=bool),
                                  np.tri(len(block), k=-1, dtype=bool)], axis=1)
        winners = ~np.any(ge & gt & earlier, axis=1)
        keep[block[winners]] = True
        front = np.concatenate([front, p[winners]])
    return keep


def axis_margins(evaluation: link.Evaluation, names) -> np.ndarray:
    present = [evaluation.normalised[n] for n in names if n in evaluation.normalised]
    return np.min(np.stack(present), axis=0)
