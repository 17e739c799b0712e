"""Set cover and maximum coverage over a feasibility matrix: exact (integer programming) and greedy.

The matrix has one row per channel (a group of identical sites, with a
weight: how many sites) and one column per candidate design; ``support[i, j]``
says that design j passes every rule at channel i, and ``value[i, j]`` is
what the objective counts there (a throughput or a margin; higher is
better). A *plan* is a set of columns; each row is served by the chosen
column that passes there with the highest value.

Three questions, each answered by integer programming (HiGHS through
``scipy.optimize.milp``, with a time limit; the best solution found and its
gap are reported if the limit is hit):

* :func:`max_coverage`: the largest weight of rows k columns can serve
  (maximum coverage; every row all columns can serve when k is None);
* :func:`min_columns`: the fewest columns that serve every coverable row
  (minimum set cover);
* :func:`best_value`: among plans with at most k columns serving at least a
  given weight, the one with the best objective: the total of
  weight x value over served rows ("sum", a facility-location programme:
  binary x_j for a chosen column, continuous y_ij <= x_j for row i served
  by column j, integral at the optimum once x is), or the smallest value of
  a served row ("min": bisection over the distinct values, each step a
  maximum-coverage programme; ties broken by the total when the problem is
  small, :data:`TIE_BREAK_PAIRS`).

Each programme is first made smaller without changing its optimum
(:func:`reduced`: identical rows merged, dominated columns dropped). Where
the sets of k columns are few (:data:`ENUMERATION_BUDGET`; k of 2 or 3 among
a few dozen columns left by the reduction), :func:`best_value` tries every
one instead, which is exact too and much faster than the facility-location
programme at thousands of rows; :func:`k_sets` also gives each column the
best objective of a set holding it (for the planner's exact evaluation on
demand). With one column (k = 1) every column is simply tried.

:func:`greedy` is the classical bound beside them (Chvatal, Math. Oper. Res.
4(3), 1979: within H(max column size) of the fewest columns; Nemhauser,
Wolsey & Fisher, Math. Program. 14, 1978: at least 1 - 1/e of the maximum
coverage with k columns).

All functions are pure; matrices are dense numpy arrays (rows x columns).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np
from scipy import sparse
from scipy.optimize import Bounds, LinearConstraint, milp

#: Relative optimality gap asked of HiGHS (the objectives are sums of many terms; counts are integral anyway).
MIP_GAP = 1e-7
KINDS = ("sum", "min")
#: Largest problem (passing pairs) whose ties at the best minimum are broken by the total.
TIE_BREAK_PAIRS = 20_000
#: Largest enumeration (sets of k columns x rows, after the reduction) tried instead of integer programming.
ENUMERATION_BUDGET = 200_000_000


@dataclass(frozen=True)
class Solved:
    """One optimisation's answer: the chosen columns and how the search ended."""

    chosen: np.ndarray  # column indices, ascending
    status: str  # "optimal", "time limit" (best found, with gap) or "greedy" (no integer solution found in time)
    gap: float  # relative gap between the best found and the bound (0 when optimal)

    @property
    def optimal(self) -> bool:
        return self.status == "optimal"


def serving(support, value, chosen):
    """The chosen column that serves each row (index into ``chosen``; -1: none) and its value there (nan: none)."""
    chosen = np.asarray(chosen, dtype=np.intp)
    if chosen.size == 0:
        return np.full(support.shape[0], -1), np.full(support.shape[0], np.nan)
    sub = np.where(support[:, chosen], value[:, chosen], -np.inf)
    best = np.argmax(sub, axis=1)  # first of equal values: the lower column index
    served = support[:, chosen].any(axis=1)
    return np.where(served, best, -1), np.where(served, sub[np.arange(sub.shape[0]), best], np.nan)


def plan_value(support, value, weight, chosen, kind: str):
    """(weight served, objective) of a plan: the total weight x value over served rows, or the smallest value."""
    served, v = serving(support, value, chosen)
    on = served >= 0
    covered = float(np.sum(weight[on]))
    if kind == "sum":
        return covered, float(np.sum(weight[on] * v[on]))
    return covered, float(np.min(v[on])) if on.any() else -np.inf


def reduced(support, value, weight):
    """An equivalent smaller problem: rows merged, dominated columns dropped.

    Rows with the same support and values become one row carrying their
    summed weight. Column j is dropped when another column k passes
    wherever j does with at least j's value there (of two equal columns the
    later one is dropped): any plan with j is then matched or beaten by the
    same plan with k instead, for coverage and for either objective, so the
    optimum is unchanged. Returns (support, value, weight, kept columns).
    """
    from .grouping import distinct_rows

    support = np.asarray(support, dtype=bool)
    value = np.where(support, np.asarray(value, dtype=float), 0.0)
    weight = np.asarray(weight, dtype=float)
    keep_rows = support.any(axis=1)
    support, value, weight = support[keep_rows], value[keep_rows], weight[keep_rows]
    columns = np.flatnonzero(support.any(axis=0))
    support, value = support[:, columns], value[:, columns]
    if support.shape[0] == 0 or columns.size == 0:
        return support, value, weight, columns
    rows = np.packbits(support, axis=1)  # 8 columns a byte: rows are told apart by their support ...
    if np.any(value):
        rows = np.concatenate([rows, value], axis=1)  # ... and their values
    index, first = distinct_rows(rows)
    weight = np.bincount(index, weights=weight, minlength=first.size)
    support, value = support[first], value[first]
    # With failing pairs set below every value, j is dominated by k exactly when v_j <= v_k row by row.
    v = np.where(support, value, float(np.min(value[support])) - 1.0)
    # A dominating column has the larger sum (rounding is monotone), and dominance is transitive: taking
    # columns by decreasing sum (equal sums: lower index first), each need only be compared with those kept.
    # A few rows first: a column that beats j there is then checked on every row.
    order = np.lexsort((np.arange(columns.size), -v.sum(axis=0)))
    sample = np.random.default_rng(0).permutation(v.shape[0])[:64]
    keep = np.zeros(columns.size, dtype=bool)
    kept = []
    for j in order:
        if kept:
            maybe = np.asarray(kept)[np.all(v[sample, j:j + 1] <= v[np.ix_(sample, kept)], axis=0)]
            if maybe.size and np.any(np.all(v[:, j:j + 1] <= v[:, maybe], axis=0)):
                continue
        keep[j] = True
        kept.append(j)
    return support[:, keep], value[:, keep], weight, columns[keep]


def _milp(c, integrality, bounds, constraints, time_limit_s):
    result = milp(c, integrality=integrality, bounds=bounds, constraints=constraints,
                  options={"time_limit": float(time_limit_s), "mip_rel_gap": MIP_GAP, "presolve": True})
    if result.x is None:
        return None, "greedy", np.inf
    gap = float(getattr(result, "mip_gap", 0.0) or 0.0)
    return result.x, ("optimal" if result.status == 0 else "time limit"), (0.0 if result.status == 0 else gap)


def _chosen(x, columns: int) -> np.ndarray:
    return np.flatnonzero(x[:columns] > 0.5)


def max_coverage(support, weight, k: int | None, time_limit_s: float = 20.0) -> tuple[Solved, float]:
    """At most ``k`` columns serving the largest weight of rows (all coverable rows when ``k`` is None).

    Returns the answer and the weight it serves. With ``k`` None no
    programme is solved: every row with a passing column is coverable, and
    the chosen columns are left empty (see :func:`min_columns`).
    """
    support = np.asarray(support, dtype=bool)
    weight_in = weight = np.asarray(weight, dtype=float)
    coverable = support.any(axis=1)
    if k is None:
        return Solved(np.zeros(0, dtype=np.intp), "optimal", 0.0), float(np.sum(weight[coverable]))
    if k >= support.shape[1]:
        return Solved(np.flatnonzero(support.any(axis=0)), "optimal", 0.0), float(np.sum(weight[coverable]))
    if k == 1:
        best = _one_column(support, np.zeros(support.shape), weight, 0.0, "sum")
        return best, plan_value(support, np.zeros(support.shape), weight, best.chosen, "sum")[0]
    full = support
    support, _, weight, kept = reduced(support, np.zeros(support.shape), weight)
    rows, columns = support.shape
    a = sparse.csr_array(support.astype(float))
    # variables: x (columns, binary), z (rows, 0..1): z_i <= sum_j a_ij x_j, sum_j x_j <= k; maximise sum_i w_i z_i
    serve = LinearConstraint(sparse.hstack([-a, sparse.eye_array(rows)], format="csr"), -np.inf, 0.0)
    count = LinearConstraint(sparse.csr_array(np.concatenate([np.ones(columns), np.zeros(rows)])[None, :]), 0, k)
    c = np.concatenate([np.zeros(columns), -weight])
    integrality = np.concatenate([np.ones(columns), np.zeros(rows)])
    x, status, gap = _milp(c, integrality, Bounds(0, 1), [serve, count], time_limit_s)
    chosen = greedy(support, np.zeros(support.shape), weight, k).chosen if x is None else _chosen(x, columns)
    solved = Solved(kept[chosen], "greedy" if x is None else status, gap)
    return solved, plan_value(full, np.zeros(full.shape), np.asarray(weight_in, dtype=float), solved.chosen, "sum")[0]


def min_columns(support, time_limit_s: float = 20.0) -> Solved:
    """The fewest columns that serve every row some column serves (minimum set cover)."""
    support = np.asarray(support, dtype=bool)
    support, _, weight, kept = reduced(support, np.zeros(support.shape), np.ones(support.shape[0]))
    columns = support.shape[1]
    if support.shape[0] == 0:
        return Solved(np.zeros(0, dtype=np.intp), "optimal", 0.0)
    constraint = LinearConstraint(sparse.csr_array(support.astype(float)), 1.0, np.inf)
    x, status, gap = _milp(np.ones(columns), np.ones(columns), Bounds(0, 1), [constraint], time_limit_s)
    if x is None:
        return Solved(kept[greedy(support, np.zeros(support.shape), weight, None).chosen], "greedy", np.inf)
    return Solved(kept[_chosen(x, columns)], status, gap)


def best_value(support, value, weight, k: int, covered_at_least: float, kind: str,
               time_limit_s: float = 20.0) -> Solved:
    """At most ``k`` columns serving at least ``covered_at_least`` of the weight, with the best objective.

    ``kind`` "sum" maximises sum_i w_i v_i over served rows (v_i the
    serving column's value) in one programme (:func:`_best_total`). "min"
    maximises the smallest v_i of a served row by bisection over the
    distinct values (each step a maximum-coverage programme on the pairs
    with a value at least the threshold), then the sum at the best
    threshold.
    """
    if kind not in KINDS:
        raise ValueError(kind)
    support = np.asarray(support, dtype=bool)
    weight = np.asarray(weight, dtype=float)
    value = np.asarray(value, dtype=float)
    support, value, weight, kept = reduced(support, value, weight)
    if support.shape[0] == 0:
        return Solved(np.zeros(0, dtype=np.intp), "optimal", 0.0)
    found = _enumerated(support, value, weight, k, covered_at_least, kind)
    if found is not None:
        return Solved(kept[found[0]], "optimal", 0.0)
    if kind == "sum":
        solved = _best_total(support, value, weight, k, covered_at_least, time_limit_s)
        return Solved(kept[solved.chosen], solved.status, solved.gap)
    thresholds = np.unique(value[support])
    low, high = 0, thresholds.size - 1  # the plan of stage one reaches thresholds[0]: no pair is dropped
    found, statuses, gaps = None, [], []
    while low < high:
        middle = (low + high + 1) // 2
        solved, covered = max_coverage(support & (value >= thresholds[middle]), weight, k, time_limit_s)
        statuses.append(solved.status)
        gaps.append(solved.gap)
        if covered >= covered_at_least * (1 - 1e-12):
            low, found = middle, solved
        else:
            high = middle - 1
    support = support & (value >= thresholds[low])
    if np.count_nonzero(support) <= TIE_BREAK_PAIRS:  # ties broken by the total
        found = _best_total(support, value, weight, k, covered_at_least, time_limit_s)
        statuses.append(found.status)
        gaps.append(found.gap)
    elif found is None:
        found, _ = max_coverage(support, weight, k, time_limit_s)
    status = "optimal" if all(s == "optimal" for s in statuses) else "time limit"
    return Solved(kept[found.chosen], status, max(gaps, default=0.0))


@dataclass(frozen=True)
class Enumerated:
    """Every set of k columns tried: the best, its objective, and a bound per column."""

    chosen: np.ndarray  # column indices, ascending (empty when no set serves enough)
    value: float  # its objective (-inf when none)
    bound: np.ndarray  # per column: the best objective of a set that holds it (-inf for dropped columns)


def k_sets(support, value, weight, k: int, covered_at_least: float, kind: str) -> Enumerated | None:
    """Every set of at most ``k`` columns serving at least the given weight, when there are few enough.

    Exact like :func:`best_value` (after the same reduction), and it also
    gives, for each column, the best objective of a set containing it: a
    bound that tells which columns can still matter when the values are
    upper bounds (``numerology.plan``). None when the sets times the rows
    exceed :data:`ENUMERATION_BUDGET` (use :func:`best_value`).
    """
    if kind not in KINDS:
        raise ValueError(kind)
    support = np.asarray(support, dtype=bool)
    bound = np.full(support.shape[1], -np.inf)
    small, small_value, small_weight, kept = reduced(support, np.asarray(value, dtype=float),
                                                     np.asarray(weight, dtype=float))
    if small.shape[0] == 0:
        return Enumerated(np.zeros(0, dtype=np.intp), -np.inf, bound)
    found = _enumerated(small, small_value, small_weight, k, covered_at_least, kind)
    if found is None:
        return None
    chosen, objective, column_bound = found
    bound[kept] = column_bound
    return Enumerated(kept[chosen], objective, bound)


def _enumerated(support, value, weight, k: int, covered_at_least: float, kind: str):
    """(best set, its objective, per-column bound) over every set of min(k, columns) columns, or None if too many.

    Sets are taken in lexicographic order; the best is the first with the
    largest objective (for "min", then the largest total). A set of the
    first k - 1 columns is extended by every later column at once.
    """
    rows, columns = support.shape
    k = min(k, columns)
    if k < 1 or math.comb(columns, k) * rows > ENUMERATION_BUDGET:
        return None
    v = np.where(support, value, -np.inf)
    need = covered_at_least * (1 - 1e-12)
    bound = np.full(columns, -np.inf)
    best, best_key = np.zeros(0, dtype=np.intp), (-np.inf, -np.inf)
    for base in itertools.combinations(range(columns), k - 1):
        start = base[-1] + 1 if base else 0
        if start >= columns:
            continue
        served = np.maximum(v[:, list(base)].max(axis=1)[:, None], v[:, start:]) if base else v[:, start:]
        on = served > -np.inf
        total = weight @ np.where(on, served, 0.0)
        if kind == "sum":
            objective = total
        else:
            objective = np.where(on.any(axis=0), np.min(np.where(on, served, np.inf), axis=0), -np.inf)
        objective = np.where(weight @ on >= need, objective, -np.inf)
        bound[start:] = np.maximum(bound[start:], objective)
        top = float(objective.max())
        if base:
            bound[list(base)] = np.maximum(bound[list(base)], top)
        if top == -np.inf:
            continue
        ties = np.flatnonzero(objective == top)
        i = int(ties[np.argmax(total[ties])]) if kind == "min" else int(ties[0])  # first of the largest totals
        key = (top, float(total[i]) if kind == "min" else 0.0)
        if key > best_key:
            best, best_key = np.array(base + (start + i,), dtype=np.intp), key
    return best, best_key[0], bound


def _one_column(support, value, weight, covered_at_least: float, kind: str) -> Solved:
    """One column: each is tried (the most weight served, then the objective, then the lower index)."""
    covered = weight @ support
    total = weight @ np.where(support, value, 0.0)
    key = total if kind == "sum" else np.min(np.where(support, value, np.inf), axis=0)
    ok = covered >= covered_at_least * (1 - 1e-12)
    order = np.lexsort((np.arange(support.shape[1]), -total, -key, -covered))
    order = order[ok[order]]
    if order.size == 0 or covered[order[0]] <= 0:
        return Solved(np.zeros(0, dtype=np.intp), "optimal", 0.0)
    return Solved(order[:1], "optimal", 0.0)


def _best_total(support, value, weight, k: int, covered_at_least: float, time_limit_s: float) -> Solved:
    """Most sum_i w_i v_i with at most k columns serving at least the given weight (facility location).

    Binary x_j (column chosen), continuous y_ij <= x_j (row i served by
    column j), sum_j y_ij <= 1 (= 1 when every row must be served), and
    sum_i w_i sum_j y_ij >= the weight to serve. With x integral an optimal
    y is integral (each row takes its best chosen column).
    """
    rows, columns = support.shape
    i, j = np.nonzero(support)
    pairs = i.size
    gain = weight[i] * value[i, j]
    n = columns + pairs
    p = np.arange(pairs)
    link_rows = sparse.csr_array((np.concatenate([np.ones(pairs), -np.ones(pairs)]),
                                  (np.concatenate([p, p]), np.concatenate([columns + p, j]))), shape=(pairs, n))
    one_each = sparse.csr_array((np.ones(pairs), (i, columns + p)), shape=(rows, n))
    head = np.zeros((2, n))
    head[0, :columns] = 1.0
    head[1, columns:] = weight[i]
    everything = covered_at_least >= float(np.sum(weight)) * (1 - 1e-12)
    constraint = LinearConstraint(
        sparse.vstack([link_rows, one_each, sparse.csr_array(head)], format="csr"),
        np.concatenate([np.full(pairs, -np.inf), np.ones(rows) if everything else np.zeros(rows),
                        [0.0, covered_at_least * (1 - 1e-9)]]),
        np.concatenate([np.zeros(pairs), np.ones(rows), [float(k), np.inf]]))
    c = np.concatenate([np.zeros(columns), -gain / max(float(np.sum(np.abs(gain))), 1e-300)])
    integrality = np.concatenate([np.ones(columns), np.zeros(pairs)])
    x, status, gap = _milp(c, integrality, Bounds(0, 1), [constraint], time_limit_s)
    if x is None:
        return Solved(greedy(support, value, weight, k).chosen, "greedy", np.inf)
    return Solved(_chosen(x, columns), status, gap)


def greedy(support, value, weight, k: int | None) -> Solved:
    """The greedy plan: repeatedly the column serving the most weight not yet served (ties: the best value).

    With ``k`` None it stops when every coverable row is served (greedy set
    cover), else after ``k`` columns or when no column serves more.
    """
    support = np.asarray(support, dtype=bool)
    weight = np.asarray(weight, dtype=float)
    tie = np.where(support, weight[:, None] * np.nan_to_num(np.asarray(value, dtype=float)), 0.0).sum(axis=0)
    open_rows = support.any(axis=1)
    chosen: list[int] = []
    limit = support.shape[1] if k is None else k
    while open_rows.any() and len(chosen) < limit:
        gain = weight[open_rows] @ support[open_rows]
        best = np.flatnonzero(gain == gain.max())
        pick = int(best[np.argmax(tie[best])])
        if gain[pick] <= 0:
            break
        chosen.append(pick)
        open_rows &= ~support[:, pick]
    return Solved(np.sort(np.array(chosen, dtype=np.intp)), "greedy", np.nan)
