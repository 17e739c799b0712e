"""Mode plans: the fewest designs (modes) that serve every site of a deployment, and why.

Data flow (pure functions)::

    Requirements + Sites -> channels, anchors, candidates, feasibility matrix   (numerology.feasibility)
        -> optimisation, exact where it matters                                  (numerology.cover, here)
        -> explanation: modes, hardest sites, one mode fewer or more, one design  (here)
        -> renderers (render_terminal.plan, note.plan_section, plan_plot, JSON)

**What is optimised.** Without a mode count: first the sites served (every
site some candidate serves), then the fewest modes that serve them (minimum
set cover), then the objective among those plans. With ``modes=K``: first
the sites K modes can serve (maximum coverage), then the objective among
plans that serve as many, then the fewest modes that do as well. The objective is the total net throughput over the
served sites, the smallest net throughput of a served site, or the smallest
worst normalised margin of a served site (the last two break ties by the
total). Each stage is one integer programme (``numerology.cover``), a
lexicographic order solved stage by stage: a later stage keeps the earlier
optimum as a constraint.

**Exact where it matters.** The matrix starts from the cheap rules (upper
bounds of the SINR rules, throughput and margins). Each stage is solved on
the matrix as it stands, with exact rows for the candidates evaluated
exactly so far and upper bounds for the others: a relaxation. If every
chosen mode's row is exact, the answer is optimal for the exact matrix (no
plan can do better than its upper bound, and this one meets its own);
otherwise the chosen rows are made exact (with the integer programmes, from
the second round on also the next best by their upper bound, a batch that
doubles each round; where every set of modes is enumerated, a round is cheap
and only the chosen rows are) and the stage is solved again.
The optimum is exact; only the candidates the optimisation reaches for are
evaluated in full.

Every site's mode is re-evaluated by the same ``link.evaluate`` that
``check`` uses: a site's figures are those of ``check`` on the requirement
file edited to the site's values.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field, replace

import numpy as np

from . import cover
from .design import Design
from .errors import InputError
from .feasibility import MAX_OWN_ANCHORS, Matrix, _designs, plan_space, with_own_anchors
from .requirements import Requirements
from .sweep import Sites

#: objective name -> (figure, kind): the figure is the net throughput or the worst normalised margin of a pair.
OBJECTIVES = {
    "weakest-margin": ("margin", "min"),
    "weakest-throughput": ("rate", "min"),
    "total-throughput": ("rate", "sum"),
}
#: What each objective asks, in words (reports).
OBJECTIVE_WORDS = {
    "weakest-margin": "the smallest worst margin of a served site, as large as possible",
    "weakest-throughput": "the smallest net throughput of a served site, as large as possible",
    "total-throughput": "the total net throughput over the served sites, as large as possible",
}
DEFAULT_OBJECTIVE = "weakest-margin"
#: Time limit of each integer programme (s); the best plan found and its gap are reported if it is hit.
TIME_LIMIT_S = 20.0
#: Rows' worth of pairs (this many times the channels) made exact besides the chosen rows in the second
#: refinement round of an integer programme (the first makes the chosen rows alone exact; the budget then
#: doubles each round). A pair's exact evaluation is mostly the channel-estimation error,
#: from a few milliseconds to a second for long echoes and dense pilot clusters: few rows at a time.
FIRST_ROWS = 4
MODE_LETTERS = "ABCDEFGHIJKLMNOPQRSTUVWXYZ"


# --- results -------------------------------------------------------------------------


@dataclass(frozen=True)
class Figures:
    """What a plan achieves over the sites (the served ones for throughput and margin)."""

    modes: int
    sites: int
    served: int
    total_throughput_bps: float
    min_throughput_bps: float | None
    weakest_margin: float | None  # smallest worst normalised margin (capacity/demand - 1) of a served site
    mean_overhead: float | None  # cyclic prefix and pilots, averaged over the served sites

    @property
    def unserved(self) -> int:
        return self.sites - self.served

    def to_json(self) -> dict:
        return {"modes": self.modes, "sites": self.sites, "sites_served": self.served,
                "sites_unserved": self.unserved, "total_throughput_bps": self.total_throughput_bps,
                "min_throughput_bps": self.min_throughput_bps, "weakest_normalised_margin": self.weakest_margin,
                "mean_overhead": self.mean_overhead}


@dataclass(frozen=True)
class Mode:
    """One design of the plan and the sites it serves."""

    design: Design
    sites: int  # sites it serves
    only_here: int  # sites no other mode of the plan serves
    total_throughput_bps: float
    min_throughput_bps: float
    overhead: float
    hardest_site: str  # the served site with the smallest margin ...
    hardest_line: int | None
    hardest_rule: str  # ... the rule that binds there ...
    hardest_margin: float  # ... and its normalised margin

    @property
    def name(self) -> str:
        return self.design.name

    def to_json(self) -> dict:
        return {"name": self.name, "design": self.design.to_json(), "sites_served": self.sites,
                "sites_only_this_mode_serves": self.only_here, "total_throughput_bps": self.total_throughput_bps,
                "min_throughput_bps": self.min_throughput_bps, "overhead": self.overhead,
                "hardest_site": {"site": self.hardest_site, "line": self.hardest_line, "binding_rule": self.hardest_rule,
                                 "normalised_margin": _finite(self.hardest_margin)}}


@dataclass(frozen=True)
class Unserved:
    """A site no mode of the plan serves: the closest mode and the rule that fails there."""

    site: str
    line: int | None
    closest_mode: str | None
    rule: str | None
    margin: float | None  # normalised margin of that rule for the closest mode (negative)
    servable: bool  # some design in the candidate space serves it (another mode would)
    reason: str

    def to_json(self) -> dict:
        return {"site": self.site, "line": self.line, "closest_mode": self.closest_mode, "binding_rule": self.rule,
                "normalised_margin": _finite(self.margin), "servable": self.servable, "reason": self.reason}


@dataclass(frozen=True)
class Optimisation:
    """How the optimisation ended, with the greedy plan beside it."""

    status: str  # "optimal", or "time limit" (best found; see gap)
    gap: float
    method: str  # how the sites served and the modes were found, then the objective
    greedy_modes: int
    greedy_served: int
    greedy_objective: float | None
    time_limit_s: float
    seconds: float

    def to_json(self) -> dict:
        return {"status": self.status, "gap": _finite(self.gap), "method": self.method,
                "greedy_modes": self.greedy_modes,
                "greedy_sites_served": self.greedy_served, "greedy_objective": _finite(self.greedy_objective),
                "time_limit_s": self.time_limit_s}


@dataclass(frozen=True)
class SearchFigures:
    """The size of the problem: sites, channels, anchors, candidates, exact evaluations."""

    sites: int
    channels: int
    anchors: int
    candidates: int
    candidates_serving_a_site: int
    exact_rows: int
    exact_pairs: int

    def to_json(self) -> dict:
        return {"sites": self.sites, "channels": self.channels, "anchors": self.anchors,
                "candidates": self.candidates, "candidates_serving_a_site": self.candidates_serving_a_site,
                "candidates_evaluated_exactly": self.exact_rows, "pairs_evaluated_exactly": self.exact_pairs}


@dataclass(frozen=True)
class PlanResult:
    """A mode plan for a set of sites, explained."""

    requirements_path: str
    sites: Sites
    objective: str
    modes_asked: int | None
    modes: tuple  # Mode, most sites first
    site_mode: np.ndarray  # (sites,) index into modes, -1 unserved
    site_throughput_bps: np.ndarray  # nan where unserved
    site_margin: np.ndarray  # worst normalised margin with the serving mode (nan where unserved)
    site_rule: np.ndarray  # object: binding rule with the serving mode (None where unserved)
    unserved: tuple  # Unserved, in site order
    figures: Figures
    single: Figures  # the best single design, by the same machinery (one mode)
    fewer: Figures | None  # one mode fewer
    more: Figures | None  # one mode more
    fewest_for_all: int  # modes that serve every servable site
    optimisation: Optimisation
    search: SearchFigures
    single_design: Design | None = None
    notes: tuple = field(default_factory=tuple)

    @property
    def served_all(self) -> bool:
        return self.figures.unserved == 0

    def __str__(self) -> str:
        names = ", ".join(f"{m.name} ({m.sites} sites)" for m in self.modes)
        text = f"{len(self.modes)} modes serve {self.figures.served} of {self.figures.sites} sites"
        return text + (f": {names}" if names else "")

    def to_json(self) -> dict:
        names = [m.name for m in self.modes]
        rows = []
        for i in range(self.sites.size):
            k = int(self.site_mode[i])
            rows.append({"site": str(self.sites.names[i]), "line": int(self.sites.lines[i]) or None,
                         "mode": names[k] if k >= 0 else None,
                         "net_throughput_bps": _finite(self.site_throughput_bps[i]),
                         "normalised_margin": _finite(self.site_margin[i]), "binding_rule": self.site_rule[i]})
        return {
            "requirements": self.requirements_path,
            "sites_file": self.sites.path,
            "objective": self.objective,
            "modes_asked": self.modes_asked,
            "served_all": self.served_all,
            "modes": [m.to_json() for m in self.modes],
            "sites": rows,
            "unserved": [u.to_json() for u in self.unserved],
            "comparison": {"plan": self.figures.to_json(), "single_design": self.single.to_json(),
                           "one_mode_fewer": self.fewer.to_json() if self.fewer else None,
                           "one_mode_more": self.more.to_json() if self.more else None,
                           "fewest_modes_serving_every_servable_site": self.fewest_for_all},
            "optimisation": self.optimisation.to_json(),
            "search": self.search.to_json(),
            "problems": [{"line": line, "message": message} for line, message in self.sites.problems],
            "notes": list(self.notes),
        }


def _finite(x):
    return None if x is None or not math.isfinite(float(x)) else float(x)


# --- the optimisation -----------------------------------------------------------------


#: How each stage reached its answer (reports).
INTEGER_PROGRAMMING, EVERY_SET = "integer programming", "every set of modes tried"


@dataclass(frozen=True)
class _Choice:
    rows: np.ndarray  # matrix rows chosen
    covered: float
    status: str
    gap: float
    method: str = INTEGER_PROGRAMMING


class _Planner:
    """The optimisation stages over one matrix (which fills in exact rows as they are needed)."""

    def __init__(self, matrix: Matrix, objective: str, time_limit_s: float):
        self.matrix = matrix
        self.figure, self.kind = OBJECTIVES[objective]
        self.weight = matrix.channels.weight
        self.time_limit_s = time_limit_s

    def value(self) -> np.ndarray:
        m = self.matrix
        return (m.rate_bps if self.figure == "rate" else m.margin).T  # a view: channels x candidates

    def _refine(self, chosen, key, pairs: int) -> None:
        """Make the chosen rows exact, and the next best by ``key`` (those above -inf) up to about ``pairs`` pairs."""
        m = self.matrix
        chosen = np.asarray(chosen, dtype=np.intp)
        pending = np.flatnonzero(~m.exact & m.passed.any(axis=1) & (key > -np.inf))
        pending = pending[~np.isin(pending, chosen)]
        order = pending[np.argsort(-key[pending], kind="stable")]
        cost = np.cumsum(np.count_nonzero(m.passed[order], axis=1))
        room = pairs - int(np.count_nonzero(m.passed[chosen[~m.exact[chosen]]]))
        m.make_exact(np.concatenate([chosen, order[:int(np.searchsorted(cost, room, side="right"))]]))

    def coverage(self, k: int | None) -> _Choice:
        """Stage 1: the most sites served with at most k modes (k None: every servable site, fewest modes)."""
        batch = 0  # the first round: the chosen rows alone (the cheap bounds usually hold)
        while True:
            m = self.matrix
            support = m.passed.T
            if k is None:
                covered = float(np.sum(self.weight[support.any(axis=1)]))
                solved = cover.min_columns(support, self.time_limit_s)
            else:
                solved, covered = cover.max_coverage(support, self.weight, k, self.time_limit_s)
            if m.exact[solved.chosen].all():
                return _Choice(solved.chosen, covered, solved.status, solved.gap)
            self._refine(solved.chosen, self.weight @ support, batch)
            batch = 2 * batch or FIRST_ROWS * max(1, m.channels.size)

    def best(self, count: int, covered: float) -> _Choice:
        """Stage 2: the best objective with at most ``count`` modes serving at least ``covered`` sites.

        Where every set of ``count`` candidates can be tried (``cover.k_sets``), each candidate's bound
        (the best upper bound of a set holding it) is compared with the best set of exact rows: only
        candidates whose bound beats it can matter; when none is left, that set is optimal (for the
        weakest objectives, ties at the optimum are broken by the total among the rows made exact).
        While some can, the best set's rows are made exact, and only they: enumeration is cheap, exact
        rows are not (on 10^4 port sites, rows on speculation were 9 of 18 exact rows and 40 % of the
        plan's time). Otherwise the integer programmes, with the chosen rows made exact, as in stage 1.
        """
        batch = 0
        while True:
            m = self.matrix
            support, value = m.passed.T, self.value()
            found = cover.k_sets(support, value, self.weight, count, covered, self.kind)
            if found is None:
                solved = cover.best_value(support, value, self.weight, count, covered, self.kind,
                                          self.time_limit_s)
                if m.exact[solved.chosen].all():
                    return _Choice(solved.chosen, covered, solved.status, solved.gap)
                self._refine(solved.chosen, self.weight @ np.where(support, value, 0.0), batch)
            else:
                if m.exact[found.chosen].all():
                    return _Choice(found.chosen, covered, "optimal", 0.0, EVERY_SET)
                exact = np.flatnonzero(m.exact)
                known = cover.k_sets(support[:, exact], value[:, exact], self.weight, count, covered, self.kind)
                floor = known.value if known is not None else -np.inf
                if not np.any(~m.exact & (found.bound > floor)):
                    return _Choice(exact[known.chosen], covered, "optimal", 0.0, EVERY_SET)
                m.make_exact(found.chosen)  # enumeration is cheap: another round rather than rows on speculation
            batch = 2 * batch or FIRST_ROWS * max(1, m.channels.size)

    def plan(self, k: int | None) -> tuple[_Choice, _Choice]:
        first = self.coverage(k)
        count = first.rows.size if k is None else k
        if first.covered <= 0:
            return first, first
        return first, self.best(count, first.covered)

    def fewest_alike(self, first: _Choice, chosen: _Choice) -> _Choice:
        """The plan with the fewest modes that serves as many sites with an objective as good as ``chosen``'s."""
        m = self.matrix
        goal = cover.plan_value(m.passed.T, self.value(), self.weight, chosen.rows, self.kind)[1]
        for k in range(1, chosen.rows.size):
            fewer_first, fewer = self.plan(k)
            if fewer_first.covered < first.covered:
                continue
            got = cover.plan_value(m.passed.T, self.value(), self.weight, fewer.rows, self.kind)[1]
            if got >= goal - 1e-12 * abs(goal):
                return fewer
        return chosen

    def worse(self, a: _Choice, b: _Choice) -> bool:
        """Whether plan ``a`` serves fewer sites than ``b``, or as many with a worse objective."""
        m = self.matrix
        served_a, value_a = cover.plan_value(m.passed.T, self.value(), self.weight, a.rows, self.kind)
        served_b, value_b = cover.plan_value(m.passed.T, self.value(), self.weight, b.rows, self.kind)
        return (served_a, value_a) < (served_b, value_b)

    def greedy(self, k: int | None) -> cover.Solved:
        """The greedy plan over the exactly evaluated candidates (a bound beside the exact optimum)."""
        m = self.matrix
        rows = np.flatnonzero(m.exact)
        solved = cover.greedy(m.passed[rows].T, self.value()[:, rows], self.weight, k)
        return cover.Solved(rows[solved.chosen], solved.status, solved.gap)


# --- the plan ----------------------------------------------------------------------------


def plan(req: Requirements, sites: Sites, *, modes: int | None = None, objective: str = DEFAULT_OBJECTIVE,
         time_limit_s: float = TIME_LIMIT_S) -> PlanResult:
    """The fewest modes (or the best ``modes`` modes) that serve the sites, explained.

    Parameters
    ----------
    req : Requirements
        Goals, radio, rules and search space; the sites were read against it.
    sites : Sites
        From ``sweep.load_sites`` or ``sweep.sites_from_values``.
    modes : int, optional
        At most this many modes: those that serve the most sites, then the
        best objective, then as few as give both. Default: the fewest modes
        that serve every site some design serves.
    objective : str
        One of :data:`OBJECTIVES`.
    time_limit_s : float
        Time limit of each integer programme.

    Returns
    -------
    PlanResult
    """
    if objective not in OBJECTIVES:
        raise InputError("objective", f"expected one of {', '.join(OBJECTIVES)}, got {objective!r}")
    if modes is not None and not modes >= 1:
        raise InputError("modes", f"expected a whole number of modes from 1 up, got {modes}")
    started = time.perf_counter()
    space = plan_space(req, sites)
    matrix, channels, anchors = space.matrix, space.matrix.channels, space.anchors
    planner = _Planner(matrix, objective, time_limit_s)

    everything_first, everything = planner.plan(None)
    # Channels the cheap rules let some candidate serve but none serves exactly: anchors of their own too
    unserved = np.flatnonzero(~matrix.passed[everything_first.rows].any(axis=0))
    wider = with_own_anchors(req, space, unserved)
    if len(wider.anchors) > len(space.anchors):
        everything_first, everything = planner.plan(None)
    space, anchors = wider, wider.anchors
    fewest = int(everything_first.rows.size)
    if modes is None:
        first, chosen = everything_first, everything
    else:  # at most `modes`: no more of them than the sites and the objective need
        first, chosen = planner.plan(modes)
        chosen = planner.fewest_alike(first, chosen)
    count = chosen.rows.size
    single = planner.plan(1)[1]
    single_rows = single.rows
    fewer = (single if count == 2 else planner.plan(count - 1)[1]) if count >= 2 else None
    more = planner.plan(count + 1)[1] if count + 1 <= matrix.size and fewest > 0 else None
    if more is not None and planner.worse(more, chosen):
        more = chosen  # a programme stopped by its time limit: the plan itself is a plan of one mode more
    greedy = planner.greedy(modes)

    status = "optimal" if first.status == chosen.status == "optimal" else "time limit"
    gap = max(first.gap, chosen.gap)
    seconds = time.perf_counter() - started
    g_served, g_value = cover.plan_value(matrix.passed.T, planner.value(), channels.weight, greedy.chosen,
                                         planner.kind)
    method = first.method if chosen.method == first.method else f"{first.method}, then {chosen.method}"
    optimisation = Optimisation(status, gap, method, int(greedy.chosen.size), int(round(g_served)),
                                g_value if greedy.chosen.size else None, time_limit_s, seconds)
    search = SearchFigures(sites.size, channels.size, len(anchors), matrix.size,
                           int(np.count_nonzero(matrix.passed.any(axis=1))), int(np.count_nonzero(matrix.exact)),
                           matrix.exact_pairs)
    servable = matrix.passed[everything.rows].any(axis=0)  # what the fewest modes for all serve
    return _explain(req, sites, channels, matrix, planner, objective, modes, chosen.rows, single_rows,
                    fewer.rows if fewer else None, more.rows if more else None, fewest, servable,
                    space, optimisation, search)


def _figures(planner: "_Planner", rows, sites: int) -> Figures:
    """What the modes at ``rows`` achieve, each channel served by the mode with the best objective figure."""
    matrix, channels = planner.matrix, planner.matrix.channels
    rows = _most_sites_first(planner, rows)
    serve, _ = cover.serving(matrix.passed.T, planner.value(), rows)
    on = serve >= 0
    w = channels.weight
    served = float(np.sum(w[on]))
    row = rows[serve[on]] if rows.size else np.zeros(0, dtype=np.intp)
    where = np.flatnonzero(on)
    rate = np.full(channels.size, np.nan)
    margin = np.full(channels.size, np.nan)
    rate[where] = matrix.rate_bps[row, where]
    margin[where] = matrix.margin[row, where]
    overhead = matrix.overhead[row]
    return Figures(
        modes=int(len(rows)), sites=sites, served=int(round(served)),
        total_throughput_bps=float(np.sum(w[on] * rate[on])),
        min_throughput_bps=float(np.min(rate[on])) if on.any() else None,
        weakest_margin=float(np.min(margin[on])) if on.any() else None,
        mean_overhead=float(np.sum(w[on] * overhead) / served) if served else None)


def _explain(req, sites, channels, matrix, planner, objective, modes_asked, rows, single_rows, fewer_rows,
             more_rows, fewest, servable, space, optimisation, search) -> PlanResult:
    n = sites.size
    ch = channels.of_site
    rows = _most_sites_first(planner, rows)
    serve, _ = cover.serving(matrix.passed.T, planner.value(), rows)  # by the objective's figure
    site_mode = serve[ch]
    served = site_mode >= 0
    row_of_site = rows[site_mode[served]]
    rate, margin = np.full(n, np.nan), np.full(n, np.nan)
    rule = np.full(n, None, dtype=object)
    rate[served] = matrix.rate_bps[row_of_site, ch[served]]
    margin[served] = matrix.margin[row_of_site, ch[served]]
    rule[served] = [matrix.rule_name(b) for b in matrix.binding[row_of_site, ch[served]]]
    alone = matrix.passed[rows][:, ch].sum(axis=0) == 1  # sites only one mode of the plan serves
    mode_list = []
    for k, j in enumerate(rows):
        mine = np.flatnonzero(site_mode == k)
        hardest = mine[np.lexsort((mine, margin[mine]))[0]]
        design = replace(_designs(matrix.grid, [j]).design(0), name=f"mode {MODE_LETTERS[k % 26]}"
                         + ("" if k < 26 else str(k // 26)), source="numerology plan")
        mode_list.append(Mode(design, int(mine.size), int(np.count_nonzero(alone[mine])),
                              float(np.sum(rate[mine])), float(np.min(rate[mine])), float(matrix.overhead[j]),
                              str(sites.names[hardest]), int(sites.lines[hardest]) or None, str(rule[hardest]),
                              float(margin[hardest])))
    single_design = None
    if single_rows.size:
        single_design = replace(_designs(matrix.grid, single_rows).design(0), name="best single design",
                                source="numerology plan")
    notes = []
    if search.candidates_serving_a_site == 0:
        notes.append("no candidate design passes every rule at any site")
    if space.untried:
        notes.append(f"{space.untried} site channels that no candidate passes were not searched on their own "
                     f"(the first {MAX_OWN_ANCHORS} were): a design of their own may serve some of them")
    return PlanResult(
        requirements_path=req.path, sites=sites, objective=objective, modes_asked=modes_asked,
        modes=tuple(mode_list), site_mode=site_mode, site_throughput_bps=rate, site_margin=margin, site_rule=rule,
        unserved=_unserved(sites, channels, matrix, rows, mode_list, site_mode, servable, space.ruled_out),
        figures=_figures(planner, rows, n), single=_figures(planner, single_rows, n),
        fewer=_figures(planner, fewer_rows, n) if fewer_rows is not None else None,
        more=_figures(planner, more_rows, n) if more_rows is not None else None,
        fewest_for_all=fewest, optimisation=optimisation, search=search, single_design=single_design,
        notes=tuple(notes))


def _most_sites_first(planner: "_Planner", rows) -> np.ndarray:
    """The chosen rows that serve a site, ordered by the sites each serves (most first), then by spacing.

    A chosen mode that another chosen mode beats at every site it passes serves none (a set of K modes
    where fewer do as well): it is left out.
    """
    matrix = planner.matrix
    rows = np.asarray(rows, dtype=np.intp)
    serve, _ = cover.serving(matrix.passed.T, planner.value(), rows)
    sites = np.bincount(serve[serve >= 0], weights=matrix.channels.weight[serve >= 0], minlength=rows.size)
    order = np.lexsort((np.arange(rows.size), matrix.grid.spacing_hz[rows], -sites))
    return rows[order[sites[order] > 0]]


def _unserved(sites, channels, matrix, rows, mode_list, site_mode, servable, relaxed_rules) -> tuple:
    out = []
    for i in np.flatnonzero(site_mode < 0):
        c = int(channels.of_site[i])
        can = bool(servable[c])
        if len(rows):  # the closest mode: the largest worst margin at this site
            k = int(np.argmax(matrix.margin[rows, c]))
            closest, j = mode_list[k].name, rows[k]
        else:
            j = int(np.argmax(matrix.margin[:, c])) if matrix.size else None
            closest = None
        rule = matrix.rule_name(matrix.binding[j, c]) if j is not None else None
        margin = float(matrix.margin[j, c]) if j is not None else None
        if can:
            reason = "another mode would serve it"
        elif relaxed_rules.get(c):
            reason = "no design can (the most lenient fails at every spacing)"
            if not len(rows):
                rule, margin = relaxed_rules[c], None
        else:
            reason = "no candidate design passes here"
        out.append(Unserved(str(sites.names[i]), int(sites.lines[i]) or None, closest, rule, margin, can, reason))
    return tuple(out)
