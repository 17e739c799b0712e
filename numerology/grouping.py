"""Grouping identical rows of numbers: one mechanism for every "compute once per distinct value".

Candidates share lattices and numerologies, sites share channels; the models
compute each distinct case once and scatter the results back. ``np.unique``
over rows sorts whole rows (slow for wide or long tables); here each row is
told apart by one random projection (a sort of floats), and the grouping is
then checked exactly.
"""

from __future__ import annotations

import numpy as np


def distinct_rows(rows):
    """An index per row of ``rows`` (..., m), equal exactly for identical rows, and a flat row of each index.

    Returns ``(index, first)``: ``index`` has the leading shape of ``rows``;
    ``first[g]`` is the flat position of a row of group ``g``, so
    ``rows.reshape(-1, m)[first][index]`` rebuilds ``rows``. Whole rows are
    compared as bytes instead when two different rows share a projection (or
    a row holds NaN, which equals nothing).

    Examples
    --------
    >>> index, first = distinct_rows(np.array([[1, 2], [3, 4], [1, 2]]))
    >>> bool(index[0] == index[2] != index[1]), len(first)
    (True, 2)
    """
    rows = np.asarray(rows)
    flat = np.ascontiguousarray(rows.reshape(-1, rows.shape[-1]), dtype=float)
    projection = flat @ np.random.default_rng(0).uniform(1.0, 2.0, flat.shape[1])
    _, first, inverse = np.unique(projection, return_index=True, return_inverse=True)
    inverse = np.ravel(inverse)
    if not np.array_equal(flat[first][inverse], flat):  # a collision, or NaN: compare whole rows
        keys = flat.view(np.dtype((np.void, flat.dtype.itemsize * flat.shape[1]))).ravel()
        _, first, inverse = np.unique(keys, return_index=True, return_inverse=True)
        inverse = np.ravel(inverse)
    return inverse.reshape(rows.shape[:-1]), first


def members(index, count: int, order=None) -> list:
    """The positions of each group ``0 .. count - 1`` of ``index``: a list of ``count`` integer arrays.

    ``order``, optional: the positions already sorted by group (a stable sort by ``index`` and whatever
    order is wanted within a group); by default positions ascend within a group.

    Examples
    --------
    >>> [m.tolist() for m in members(np.array([1, 0, 1, 2]), 3)]
    [[1], [0, 2], [3]]
    """
    index = np.ravel(index)
    order = np.argsort(index, kind="stable") if order is None else np.asarray(order)
    edges = np.searchsorted(index[order], np.arange(count + 1))
    return [order[edges[g]:edges[g + 1]] for g in range(count)]


def remembered(store: dict, keys, compute, limit: int = 100_000) -> list:
    """The values of ``keys`` kept in ``store``, the missing ones worked out by one call of ``compute``.

    ``compute(missing)`` gets the distinct missing keys in first-seen order and returns their values in
    that order, each worked out on its own (so a remembered value has the digits a fresh one would have:
    the same input gives the same output whatever was asked before). ``store`` is emptied first when it
    would hold more than ``limit`` values.

    Examples
    --------
    >>> store = {}
    >>> remembered(store, [2, 3, 2], lambda missing: [k * k for k in missing])
    [4, 9, 4]
    >>> remembered(store, [3], lambda missing: 1 / 0)  # known: not worked out again
    [9]
    """
    missing = [k for k in dict.fromkeys(keys) if k not in store]
    if missing and len(store) + len(missing) > limit:
        store.clear()
        missing = list(dict.fromkeys(keys))
    if missing:
        store.update(zip(missing, compute(missing)))
    return [store[k] for k in keys]
