"""Campaign throughput: finished trials per second and the share spent in bookkeeping.

Measures, with the default sampler and storage (NSGA-II, journal file):

* a zero-bias campaign (``campaigns/demo.toml``: five layers, 801 energies) and a full
  I–V campaign (the same stack with a 21-point bias sweep and PVCR/peak-current
  objectives): finished trials per second over the whole loop, and the share of the
  loop's wall time spent outside the physics (sampler, storage, bookkeeping) — the
  physics being every call of :func:`tunnelsmith.optimize.model.objectives.metric_values`;
* the cost per trial of the samplers themselves after 2000 finished trials (NSGA-II and
  multi-objective TPE; in-memory storage, no physics), which decides the default sampler;
* finished trials per second with 1 and 2 local worker processes on the journal file
  (``tunnelsmith optimize --workers N``, from the trials' own time stamps), and on a
  throwaway PostgreSQL server when its binaries are installed (``tests/pg_cluster.py``).

Issue targets on a 2-core machine: >= 50 finished trials/s zero-bias, >= 5/s full I–V,
bookkeeping <= 30 % of the wall time.

Usage::

    python benchmarks/bench_campaign.py              # 10 000-trial zero-bias campaign
    python benchmarks/bench_campaign.py --trials 3000
    python benchmarks/bench_campaign.py --quick      # a short run of every measurement

Writes ``benchmarks/results/campaign.json`` and prints a table.
"""

from __future__ import annotations

import os

from harness import machine, single_thread

single_thread()  # one thread per process: the measurement is about this loop, and workers share cores

import argparse
import contextlib
import io
import json
import shutil
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402
import optuna  # noqa: E402

from tunnelsmith.optimize.commands import campaign_run as optimize

from tunnelsmith.optimize.search import loop

from tunnelsmith.optimize.search import records

from tunnelsmith.optimize.search import sampler as sampler_module

from tunnelsmith.optimize.search import storage as storage_module
from tunnelsmith.optimize.model import objectives
from tunnelsmith.optimize.model import space
from tunnelsmith.optimize.inputs.reader import load  # noqa: E402

RESULTS = ROOT / "benchmarks" / "results" / "campaign.json"
DEMO = ROOT / "campaigns" / "demo.toml"

IV_OBJECTIVES = """
[bias]
from_V = 0.0
to_V = 1.0
steps = 21

[[objective]]
metric = "resonance_energy_eV"
target = 0.15

[[objective]]
metric = "pvcr"
goal = "maximize"

[[constraint]]
metric = "peak_current_A_cm2"
min = 1e4
"""


def iv_campaign_text() -> str:
    """The demo stack with an I–V sweep and current objectives instead of zero-bias ones."""
    text = DEMO.read_text()
    head = text[: text.index("[[objective]]")].replace('name = "demo"', 'name = "demo_iv"')
    return head + IV_OBJECTIVES + "\n[search]\nsampler = \"nsga2\"\nbatch = 64\nseed = 1\n"


class PhysicsClock:
    """Wall time spent inside :func:`tunnelsmith.optimize.model.objectives.metric_values`."""

    def __init__(self) -> None:
        self.seconds = 0.0
        self.designs = 0
        self._original = objectives.metric_values

    def __enter__(self):
        def timed(spec, batch):
            start = time.perf_counter()
            try:
                return self._original(spec, batch)
            finally:
                self.seconds += time.perf_counter() - start
                self.designs += batch.n_designs

        objectives.metric_values = timed
        return self

    def __exit__(self, *exc) -> None:
        objectives.metric_values = self._original


class LoopClock:
    """Wall time of the worker loop alone (not start-up, not the output files)."""

    def __init__(self) -> None:
        self.seconds = 0.0
        self._original = loop._Worker.run

    def __enter__(self):
        clock = self
        original = self._original

        def run(worker):
            start = time.perf_counter()
            try:
                return original(worker)
            finally:
                clock.seconds += time.perf_counter() - start

        loop._Worker.run = run
        return self

    def __exit__(self, *exc) -> None:
        loop._Worker.run = self._original


def campaign_throughput(path: Path, trials: int, label: str) -> dict:
    """Run a campaign in this process; finished trials/s and the bookkeeping share."""
    run_dir = Path(tempfile.mkdtemp(prefix="bench-campaign-"))
    try:
        with PhysicsClock() as physics, LoopClock() as loop, contextlib.redirect_stderr(io.StringIO()):
            start = time.perf_counter()
            code = optimize.run_campaign(path, out_dir=run_dir, trials=trials, quiet=True)
            total = time.perf_counter() - start
        assert code == 0
        finished = len([t for t in optuna.load_study(study_name=load(path).name,
                                                       storage=storage_module.open_storage(run_dir, writer=False)).trials
                        if records.counts_toward_budget(t)])
    finally:
        shutil.rmtree(run_dir, ignore_errors=True)
    return {
        "campaign": label,
        "finished_trials": finished,
        "loop_s": round(loop.seconds, 3),
        "physics_s": round(physics.seconds, 3),
        "total_with_startup_and_outputs_s": round(total, 3),
        "trials_per_s": round(finished / loop.seconds, 2),
        "physics_designs_per_s": round(physics.designs / max(physics.seconds, 1e-9), 1),
        "bookkeeping_share": round(1.0 - physics.seconds / loop.seconds, 3),
    }


def sampler_cost(sampler_name: str, history: int = 2000, probe: int = 64) -> dict:
    """Seconds per trial (ask + tell) of a sampler once ``history`` trials are finished."""
    spec = load(DEMO)
    dists = space.distributions(spec)
    rng = np.random.default_rng(0)

    n_objectives = len(objectives.directions(spec))

    def values(params) -> list[float]:
        # A cheap stand-in with as many objectives as the demo (no physics here): a level
        # error, a thickness, and conflicting barrier terms with some noise.
        well = params["well.thickness_ml"] * (1.0 if params["well.material"] == "InAs" else 0.95)
        barriers = sum(v for k, v in params.items() if k.startswith("barrier") and k.endswith("thickness_ml"))
        stand_in = [abs(1.0 / well - 0.07) + 0.01 * rng.random()]
        stand_in += [(-1) ** k * barriers * 0.3 + 0.1 * rng.random() for k in range(n_objectives - 1)]
        return stand_in

    sampler = sampler_module.make_sampler(sampler_name, seed=0, search_space=dists, batch=64)
    study = optuna.create_study(directions=objectives.directions(spec), sampler=sampler)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if sampler_name == "nsga2":
            # NSGA-II keeps generations: build its history through its own loop (cheap).
            while len(study.trials) < history:
                sampler.start_batch()
                batch = [study.ask(dists) for _ in range(64)]
                for trial in batch:
                    study.tell(trial, values(trial.params))
        else:
            # TPE needs no bookkeeping of its own: a random history of the same size.
            random = optuna.samplers.RandomSampler(seed=1)
            for _ in range(history):
                params = {name: random.sample_independent(study, None, name, d) for name, d in dists.items()}
                study.add_trial(optuna.trial.create_trial(params=params, distributions=dists, values=values(params)))
        start = time.perf_counter()
        if hasattr(sampler, "start_batch"):
            sampler.start_batch()
        batch = [study.ask(dists) for _ in range(probe)]
        for trial in batch:
            study.tell(trial, values(trial.params))
        per_trial = (time.perf_counter() - start) / probe
    return {"sampler": sampler_name, "history_trials": history, "seconds_per_trial": round(per_trial, 5)}


def workers_throughput(path: Path, trials: int, workers: int, storage: str | None = None) -> dict:
    """Finished trials/s of ``tunnelsmith optimize --workers N`` from the trials' time stamps."""
    run_dir = Path(tempfile.mkdtemp(prefix="bench-workers-"))
    extra = ["--storage", storage] if storage else []
    try:
        subprocess.run([sys.executable, "-m", "tunnelsmith", "optimize", str(path), "--out", str(run_dir),
                        "--trials", str(trials), "--workers", str(workers), "--quiet", *extra],
                       check=True, cwd=ROOT, capture_output=True)
        study = optuna.load_study(study_name=load(path).name,
                                  storage=storage or storage_module.open_storage(run_dir, writer=False))
        done = [t for t in study.trials if records.counts_toward_budget(t)]
        first = min(t.datetime_start for t in study.trials)
        last = max(t.datetime_complete for t in done)
        span = (last - first).total_seconds()
    finally:
        shutil.rmtree(run_dir, ignore_errors=True)
    return {"workers": workers, "storage": "postgresql" if storage else "journal file",
            "finished_trials": len(done), "seconds": round(span, 3), "trials_per_s": round(len(done) / span, 2)}


def postgres_workers(scratch: Path, trials: int) -> list[dict]:
    """1 and 2 workers on a throwaway PostgreSQL server, when its binaries are installed."""
    sys.path.insert(0, str(ROOT / "tests"))
    try:
        from pg_cluster import Cluster, server_bindir
    except ImportError:
        return []
    if server_bindir() is None:
        print("(PostgreSQL server binaries not found: no database measurement)")
        return []
    cluster = Cluster()
    rows = []
    try:
        for n in (1, 2):
            # A campaign name per run: each run is its own study in the database.
            path = scratch / f"demo_pg{n}.toml"
            path.write_text(DEMO.read_text().replace('name = "demo"', f'name = "demo_pg{n}"'))
            rows.append(dict(workers_throughput(path, trials, n, storage=cluster.url), campaign="zero-bias"))
    finally:
        cluster.stop()
    return rows


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trials", type=int, default=10_000, help="zero-bias campaign budget")
    parser.add_argument("--quick", action="store_true", help="short runs of every measurement")
    parser.add_argument("--skip-sampler-cost", action="store_true")
    parser.add_argument("--skip-postgres", action="store_true", help="no throwaway PostgreSQL measurement")
    args = parser.parse_args(argv)
    zero_trials = 1500 if args.quick else args.trials
    iv_trials = 128 if args.quick else max(256, zero_trials // 20)
    worker_trials = 1000 if args.quick else max(2000, zero_trials // 4)
    optuna.logging.set_verbosity(optuna.logging.WARNING)

    with tempfile.TemporaryDirectory() as scratch:
        iv_path = Path(scratch) / "demo_iv.toml"
        iv_path.write_text(iv_campaign_text())
        rows = [campaign_throughput(DEMO, zero_trials, "zero-bias (demo.toml)"),
                campaign_throughput(iv_path, iv_trials, "full I-V (demo stack, 21 biases)")]
        samplers = [] if args.skip_sampler_cost else [sampler_cost("nsga2"), sampler_cost("tpe")]
        workers = [dict(workers_throughput(DEMO, worker_trials, n), campaign="zero-bias") for n in (1, 2)]
        workers += [dict(workers_throughput(iv_path, iv_trials, n), campaign="full I-V") for n in (1, 2)]
        workers += [] if args.skip_postgres else postgres_workers(Path(scratch), 192 if args.quick else 640)

    print(f"\ncampaign throughput ({machine()['logical_cpus']} cores, Optuna {optuna.__version__}, NSGA-II, journal file)")
    print(f"{'campaign':<36}{'trials':>8}{'trials/s':>10}{'physics designs/s':>19}{'bookkeeping':>13}")
    for row in rows:
        print(f"{row['campaign']:<36}{row['finished_trials']:>8}{row['trials_per_s']:>10.1f}"
              f"{row['physics_designs_per_s']:>19.1f}{100 * row['bookkeeping_share']:>12.1f}%")
    if samplers:
        print("\nsampler cost per trial after 2000 finished trials (no physics, in memory)")
        for row in samplers:
            print(f"  {row['sampler']:<8}{1e3 * row['seconds_per_trial']:>10.2f} ms")
    print("\nlocal worker processes sharing one storage")
    for row in workers:
        print(f"  {row['campaign']:<10} {row['storage']:<13} {row['workers']} worker(s): {row['trials_per_s']:7.1f} "
              f"finished trials/s ({row['finished_trials']} trials in {row['seconds']:.1f} s)")

    RESULTS.parent.mkdir(parents=True, exist_ok=True)
    RESULTS.write_text(json.dumps({"machine": machine(), "quick": args.quick, "campaigns": rows,
                                   "sampler_cost": samplers, "workers": workers}, indent=2) + "\n")
    print(f"\nwritten {RESULTS.relative_to(ROOT)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
