"""Pareto dominance and hypervolume of minimised objective vectors.
"""

from __future__ import annotations

import numpy as np


def nondominated_mask(points: np.ndarray, *, chunk: int = 1024) -> np.ndarray:
    """Which points no other point dominates (all objectives minimised).

    ``a`` dominates ``b`` when ``a <= b`` in every objective and ``a < b`` in one.
    Equal points do not dominate each other: duplicates are all kept. Rows with a
    non-finite value are never on the front.

    Method: duplicates are merged and the distinct points sorted lexicographically, so
    that a point can only be dominated by one before it. Two objectives: one sweep with
    the running minimum of the second objective, O(n log n). More: the points are
    compared in sorted blocks against the front found so far only (the "simple cull" of
    Kung, Luccio & Preparata, J. ACM 22, 469, 1975, blocked for numpy), O(n·f) for a
    front of f points instead of O(n²).

    Parameters
    ----------
    points : ndarray, shape (n, m)

    Returns
    -------
    ndarray of bool, shape (n,)
    """
    points = np.asarray(points, dtype=float)
    n = len(points)
    keep = np.all(np.isfinite(points), axis=1) if n else np.zeros(0, bool)
    if np.count_nonzero(keep) < 2:
        return keep
    finite = points[keep]
    # Lexicographic order (first objective first); np.lexsort takes the last key first.
    order = np.lexsort(finite.T[::-1])
    ordered = finite[order]
    new_point = np.concatenate([[True], np.any(ordered[1:] != ordered[:-1], axis=1)])
    distinct = ordered[new_point]
    group = np.cumsum(new_point) - 1  # distinct index of every sorted point
    if distinct.shape[1] == 1:
        on_front = distinct[:, 0] == distinct[0, 0]
    elif distinct.shape[1] == 2:
        # Sorted by (x, y): an earlier distinct point has x_j <= x_i, so it dominates
        # point i exactly when y_j <= y_i.
        best_before = np.concatenate([[np.inf], np.minimum.accumulate(distinct[:-1, 1])])
        on_front = distinct[:, 1] < best_before
    else:
        on_front = np.zeros(len(distinct), bool)
        front = distinct[:0]
        for start in range(0, len(distinct), chunk):
            block = distinct[start:start + chunk]
            alive = np.flatnonzero(~_dominated_by(front, block))
            # Within the block only earlier points can dominate later ones (sorted), and
            # a point the front dominates cannot dominate a survivor it does not.
            survivors = block[alive]
            alive = alive[~_dominated_by(survivors, survivors)]
            on_front[start + alive] = True
            front = np.concatenate([front, block[alive]])
    inverse = np.empty(len(finite), dtype=int)
    inverse[order] = group
    keep[np.flatnonzero(keep)] = on_front[inverse]
    return keep


def _dominated_by(reference: np.ndarray, points: np.ndarray) -> np.ndarray:
    """Which ``points`` some row of ``reference`` dominates, shape (len(points),)."""
    if len(reference) == 0 or len(points) == 0:
        return np.zeros(len(points), bool)
    no_worse = np.all(reference[:, None, :] <= points[None, :, :], axis=-1)
    better = np.any(reference[:, None, :] < points[None, :, :], axis=-1)
    return np.any(no_worse & better, axis=0)


def merge_front(front: np.ndarray, new: np.ndarray) -> np.ndarray:
    """The non-dominated set of ``front ∪ new`` without repeated points, given such a ``front``.

    Costs ``O((len(front) + len(new)) · len(new))`` comparisons instead of the square of
    the union: the way a front grows batch by batch.
    """
    new = np.asarray(new, dtype=float).reshape(-1, front.shape[1])
    new = np.unique(new[nondominated_mask(new)], axis=0)
    repeated = np.any(np.all(front[:, None, :] == new[None, :, :], axis=-1), axis=0)
    new = new[~_dominated_by(front, new) & ~repeated]
    return np.concatenate([front[~_dominated_by(new, front)], new])


def _hypervolume_2d(points: np.ndarray, reference: np.ndarray) -> float:
    order = np.lexsort((points[:, 1], points[:, 0]))
    x, y = points[order, 0], points[order, 1]
    best_y = np.minimum.accumulate(y)
    previous = np.concatenate([[reference[1]], best_y[:-1]])
    return float(np.sum((reference[0] - x) * np.clip(previous - best_y, 0.0, None)))


def hypervolume(points: np.ndarray, reference) -> float:
    """Volume dominated by ``points`` and bounded by ``reference`` (all minimised).

    Exact. Two objectives: a sort-and-sweep, measured 3-6x faster than Optuna's for
    50-5000 points. Three or more: Optuna's WFG implementation
    (``optuna._hypervolume.compute_hypervolume``; While, Bradstreet & Barone, IEEE
    Trans. Evol. Comput. 16, 86, 2012), measured 2-3.5x faster than slicing along one
    objective (``benchmarks/bench_hypervolume.py``; both agree to 1e-16). Points not
    strictly better than the reference in every objective add nothing.

    Parameters
    ----------
    points : ndarray, shape (n, m)
    reference : array_like, shape (m,)
    """
    points = np.asarray(points, dtype=float)
    reference = np.broadcast_to(np.asarray(reference, dtype=float), points.shape[-1:])
    points = points[np.all(points < reference, axis=1)] if len(points) else points
    if len(points) == 0:
        return 0.0
    m = points.shape[1]
    if m == 1:
        return float(reference[0] - points[:, 0].min())
    if m == 2:
        return _hypervolume_2d(points, reference)  # the sweep ignores dominated points itself
    from optuna._hypervolume import compute_hypervolume

    return float(compute_hypervolume(points[nondominated_mask(points)], np.array(reference, dtype=float),
                                     assume_pareto=True))
