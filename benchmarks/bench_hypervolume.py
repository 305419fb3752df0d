"""Our exact hypervolume against the one Optuna ships: speed and agreement.

The front file records the hypervolume of every campaign's front and its history. Optuna
carries an exact hypervolume (``optuna._hypervolume.compute_hypervolume``, the WFG
algorithm of While, Bradstreet & Barone, IEEE Trans. Evol. Comput. 16, 86, 2012). This
benchmark measures it against slicing along the last objective (the method the project
used before, kept here as :func:`sliced_hypervolume`) on non-dominated fronts of the
sizes campaigns produce, and checks that they agree. Outcome on the reference machine:
the project's 2-D sweep is 3-6x faster than Optuna's and stays; for three or more
objectives Optuna's is 2-3.5x faster and :func:`~tunnelsmith.optimize.search.pareto.hypervolume`
now calls it.
Writes ``benchmarks/results/hypervolume.json``.
"""

from harness import RESULTS_DIR, machine, single_thread

single_thread()  # before numpy is imported

import json  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402
from optuna._hypervolume import compute_hypervolume  # noqa: E402

from tunnelsmith.optimize.search.pareto import _hypervolume_2d, nondominated_mask  # noqa: E402

RESULTS = RESULTS_DIR / "hypervolume.json"


def front(n: int, m: int, seed: int) -> np.ndarray:
    """``n`` points on a concave front in [0, 1]^m (all non-dominated)."""
    rng = np.random.default_rng(seed)
    points = np.abs(rng.normal(size=(n, m)))
    points /= np.linalg.norm(points, axis=1, keepdims=True)
    return 1.0 - points[nondominated_mask(1.0 - points)]


def sliced_hypervolume(points: np.ndarray, reference: np.ndarray) -> float:
    """Exact hypervolume by slicing along the last objective down to the 2-D sweep."""
    points = points[np.all(points < reference, axis=1)]
    if len(points) == 0:
        return 0.0
    if points.shape[1] == 2:
        return _hypervolume_2d(points, reference)
    points = points[nondominated_mask(points)]
    points = points[np.argsort(points[:, -1], kind="stable")]
    levels = np.append(points[:, -1], reference[-1])
    return sum((levels[k + 1] - levels[k]) * sliced_hypervolume(points[: k + 1, :-1], reference[:-1])
               for k in range(len(points)) if levels[k + 1] > levels[k])


def best_time_s(function, repeats: int = 5) -> float:
    best = np.inf
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        best = min(best, time.perf_counter() - start)
    return best


def main() -> None:
    rows = []
    for m, sizes in ((2, (50, 500, 5000)), (3, (50, 200, 1000)), (4, (20, 50, 100))):
        for n in sizes:
            points = front(n, m, seed=n + m)
            reference = np.full(m, 1.1)
            ours, theirs = sliced_hypervolume(points, reference), compute_hypervolume(points, reference)
            row = {"objectives": m, "points": len(points), "sweep_or_slicing_s": best_time_s(lambda: sliced_hypervolume(points, reference)),
                   "optuna_s": best_time_s(lambda: compute_hypervolume(points, reference)),
                   "relative_difference": abs(ours - theirs) / theirs}
            rows.append(row)
            print(f"m={m} n={row['points']:5d}  sweep/slicing {row['sweep_or_slicing_s'] * 1e3:9.3f} ms  optuna {row['optuna_s'] * 1e3:9.3f} ms"
                  f"  |diff|/hv {row['relative_difference']:.1e}", flush=True)
    RESULTS.parent.mkdir(parents=True, exist_ok=True)
    RESULTS.write_text(json.dumps({"machine": machine(), "rows": rows}, indent=2) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
