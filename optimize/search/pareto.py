"""Pareto dominance and hypervolume of minimised objective vectors.
"""

from __future__ import annotations

import numpy as np


def nondominated_mask(points: np.ndarray, *, chunk: int = 1024) -> np.ndarray:
    """Which points no other point dominates (all objectives minimised).

    ``a`` dominates ``b`` when ``a <= b`` in every objective and ``a < b`` in one.
    Equal points do not dominate each other: duplicates are all kept. Rows with a
    non-finite value are never on the front.

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
    candidates = points[keep]
    if len(candidates) < 2:
        return keep
    dominated = np.zeros(len(candidates), bool)
    for start in range(0, len(candidates), chunk):
        block = candidates[start:start + chunk]
        no_worse = np.all(candidates[:, None, :] <= block[None, :, :], axis=-1)
        better = np.any(candidates[:, None, :] < block[None, :, :], axis=-1)
        dominated[start:start + chunk] = np.any(no_worse & better, axis=0)
    keep[np.flatnonzero(keep)[dominated]] = False
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
