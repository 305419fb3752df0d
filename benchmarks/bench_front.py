"""Outputs at overnight scale: front, trial table and hypervolume history of 10^4-10^6 trials.

Synthetic runs: the trials of a real 64-trial run of ``campaigns/demo.toml`` are repeated
with their objective values drawn at random (three objectives, as in the demo), so the
front has the size and shape of a real one while the history grows to any length.
Measures :func:`~tunnelsmith.optimize.results.front.build_datasets` (everything
``tunnelsmith front`` computes before writing) with the exemplar curves off, the
non-dominated mask alone, and the peak memory (tracemalloc). The growth with the number of
trials must be linear or n log n. Writes ``benchmarks/results/front.json``.
"""

from harness import RESULTS_DIR, machine, single_thread

single_thread()  # before numpy is imported

import copy  # noqa: E402
import json  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
import tracemalloc  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
import optuna  # noqa: E402

from tunnelsmith.optimize.inputs.reader import load  # noqa: E402
from tunnelsmith.optimize.results.front import build_datasets  # noqa: E402
from tunnelsmith.optimize.search.pareto import nondominated_mask  # noqa: E402
from tunnelsmith.optimize.search.storage import open_storage  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
RESULTS = RESULTS_DIR / "front.json"
SIZES = (10_000, 100_000, 1_000_000) if "--full" in sys.argv else (10_000, 30_000, 100_000)


class SyntheticStudy:
    """What build_datasets reads of a study: its name and its trials."""

    def __init__(self, name, trials):
        self.study_name, self._trials = name, trials

    def get_trials(self, deepcopy=False):
        return self._trials


def exemplar_trials(directory: Path):
    run = directory / "run"
    subprocess.run([sys.executable, "-m", "tunnelsmith", "optimize", str(ROOT / "campaigns" / "demo.toml"),
                    "--out", str(run), "--trials", "64", "--quiet"], check=True, capture_output=True)
    storage = open_storage(run, writer=False)
    (name,) = optuna.study.get_all_study_names(storage)
    trials = optuna.load_study(study_name=name, storage=storage).get_trials(deepcopy=True)
    return load(run / "campaign.toml"), name, [t for t in trials if t.state == optuna.trial.TrialState.COMPLETE]


def synthetic(trials, n: int, seed: int):
    rng = np.random.default_rng(seed)
    values = np.array([t.values for t in trials], dtype=float)
    low, high = values.min(axis=0), values.max(axis=0)
    out = []
    for number in range(n):
        trial = copy.copy(trials[number % len(trials)])
        trial.number = number
        trial._trial_id = number
        trial.values = list(low + (high - low) * rng.random(len(low)))
        out.append(trial)
    return out


def main() -> None:
    rows = []
    with tempfile.TemporaryDirectory() as directory:
        spec, name, trials = exemplar_trials(Path(directory))
        for n in SIZES:
            study = SyntheticStudy(name, synthetic(trials, n, seed=n))
            points = np.array([t.values for t in study.get_trials()], dtype=float)
            start = time.perf_counter()
            on_front = nondominated_mask(points)
            mask_s = time.perf_counter() - start
            tracemalloc.start()
            start = time.perf_counter()
            front_ds, trials_ds = build_datasets(study, spec, curves=False)
            build_s = time.perf_counter() - start
            peak_MiB = tracemalloc.get_traced_memory()[1] / 2**20
            tracemalloc.stop()
            row = {"trials": n, "front_designs": int(on_front.sum()), "mask_s": mask_s, "build_s": build_s,
                   "peak_MiB": peak_MiB, "history_points": int(front_ds.sizes.get("history", 0))}
            rows.append(row)
            print(f"{n:8d} trials  front {row['front_designs']:5d}  mask {mask_s:7.3f} s  build_datasets "
                  f"{build_s:7.2f} s  peak {peak_MiB:7.1f} MiB", flush=True)
    RESULTS.parent.mkdir(parents=True, exist_ok=True)
    RESULTS.write_text(json.dumps({"machine": machine(), "rows": rows}, indent=2) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
