"""Set cover and maximum coverage (numerology.cover) against brute-force enumeration of every subset.

The matrices are random (seeded), small enough to enumerate every set of columns; the integer
programmes must reach the enumerated optimum, and the greedy plan must stay within its classical
bounds (Chvatal 1979 for set cover; Nemhauser, Wolsey & Fisher 1978 for maximum coverage).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from numerology import cover

SEEDS = range(12)


def _case(seed):
    rng = np.random.default_rng(seed)
    rows, columns = int(rng.integers(3, 11)), int(rng.integers(3, 8))
    support = rng.uniform(size=(rows, columns)) < 0.4
    value = np.round(rng.uniform(1.0, 5.0, size=(rows, columns)), 1)  # rounded: ties happen
    weight = rng.integers(1, 4, rows).astype(float)
    return support, value, weight


def _subsets(columns, k):
    return [list(s) for s in itertools.combinations(range(columns), min(k, columns))]


def _key(support, value, weight, chosen, kind):
    covered, objective = cover.plan_value(support, value, weight, chosen, kind)
    total = cover.plan_value(support, value, weight, chosen, "sum")[1]
    return (covered, objective, total) if kind == "min" else (covered, objective)


@pytest.mark.parametrize("seed", SEEDS)
def test_fewest_columns_equal_brute_force(seed):
    support, _, _ = _case(seed)
    columns = support.shape[1]
    everything = support.any(axis=1)
    fewest = next(r for r in range(columns + 1) for s in itertools.combinations(range(columns), r)
                  if np.array_equal(support[:, list(s)].any(axis=1), everything))
    found = cover.min_columns(support)
    assert found.optimal
    assert found.chosen.size == fewest
    assert np.array_equal(support[:, found.chosen].any(axis=1), everything)


@pytest.fixture(params=["enumeration", "integer programming"])
def method(request, monkeypatch):
    """Both ways to the objective's optimum: every set of k columns, or the integer programmes."""
    if request.param == "integer programming":
        monkeypatch.setattr(cover, "ENUMERATION_BUDGET", 0)
    return request.param


@pytest.mark.parametrize("seed", SEEDS)
@pytest.mark.parametrize("k", [1, 2, 3])
def test_coverage_then_objective_equal_brute_force(seed, k, method):
    support, value, weight = _case(seed)
    subsets = _subsets(support.shape[1], k)
    most = max(cover.plan_value(support, value, weight, s, "sum")[0] for s in subsets)
    solved, covered = cover.max_coverage(support, weight, k)
    assert covered == most
    for kind in cover.KINDS:
        best = max(_key(support, value, weight, s, kind) for s in subsets if _key(support, value, weight, s, kind)[0]
                   == most)
        found = cover.best_value(support, value, weight, k, covered, kind)
        assert found.chosen.size <= k
        assert_allclose(_key(support, value, weight, found.chosen, kind), best, rtol=1e-12)


@pytest.mark.parametrize("seed", SEEDS)
def test_reduction_keeps_the_optimum(seed):
    """Merged rows and dropped dominated columns: the best plan of the smaller problem is as good."""
    support, value, weight = _case(seed)
    small, small_value, small_weight, kept = cover.reduced(support, value, weight)
    assert_allclose(small_weight.sum(), weight[support.any(axis=1)].sum())
    for k in (1, 2):
        for kind in cover.KINDS:
            whole = max(_key(support, value, weight, s, kind) for s in _subsets(support.shape[1], k))
            part = max(_key(small, small_value, small_weight, s, kind) for s in _subsets(small.shape[1], k))
            assert_allclose(part, whole, rtol=1e-12)
    assert np.all(np.diff(kept) > 0)


@pytest.mark.parametrize("seed", SEEDS)
def test_greedy_within_its_classical_bounds(seed):
    support, value, weight = _case(seed)
    fewest = cover.min_columns(support).chosen.size
    greedy = cover.greedy(support, value, np.ones(weight.size), None)  # the classical greedy: sites unweighted
    biggest = int(support.sum(axis=0).max())
    harmonic = sum(1.0 / i for i in range(1, biggest + 1))
    assert fewest <= greedy.chosen.size <= math.ceil(harmonic * fewest)  # Chvatal, Math. Oper. Res. 4(3), 1979
    for k in (1, 2, 3):
        best = cover.max_coverage(support, weight, k)[1]
        got = cover.plan_value(support, value, weight, cover.greedy(support, value, weight, k).chosen, "sum")[0]
        assert (1 - 1 / math.e) * best <= got + 1e-12  # Nemhauser, Wolsey & Fisher, Math. Program. 14, 1978
        assert got <= best


def test_serving_picks_the_best_chosen_column():
    support = np.array([[True, True], [True, False], [False, False]])
    value = np.array([[1.0, 2.0], [3.0, 9.0], [5.0, 5.0]])
    served, v = cover.serving(support, value, [0, 1])
    assert served.tolist() == [1, 0, -1]
    assert_allclose(v[:2], [2.0, 3.0], rtol=0)
    assert math.isnan(v[2])


@pytest.mark.parametrize("seed", SEEDS)
def test_each_column_bound_is_the_best_set_that_holds_it(seed):
    """k_sets' bound of column j: the best objective of a set of k columns containing j (or a dominating one)."""
    support, value, weight = _case(seed)
    k = 2
    covered = cover.max_coverage(support, weight, k)[1]
    for kind in cover.KINDS:
        found = cover.k_sets(support, value, weight, k, covered, kind)
        subsets = [s for s in _subsets(support.shape[1], k) if _key(support, value, weight, s, kind)[0] == covered]
        best = max(_key(support, value, weight, s, kind)[1] for s in subsets)
        assert_allclose(found.value, best, rtol=1e-12)
        for j in range(support.shape[1]):
            holding = [_key(support, value, weight, s, kind)[1] for s in subsets if j in s]
            if np.isfinite(found.bound[j]):
                assert_allclose(found.bound[j], max(holding), rtol=1e-12)
            else:  # a dropped (dominated) column, or one in no set that serves enough
                assert not holding or max(holding) <= best
