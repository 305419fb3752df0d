"""Accuracy per cost and throughput of the physics core, on one core.

Measures
--------
1. Resonances: error of E_r and Gamma against fully converged poles, versus the
   transmission evaluations spent per level (capping the Newton iterations); and the
   continuation in bias (``track_resonances``) against the full search at every bias:
   levels found by one and not the other, and the cost of each.
2. Current: error of the Tsu–Esaki integral against brute-force dense grids, versus
   the energy nodes per bias (the default marked); and on invented random double and
   triple barriers against 1024 nodes.
3. Full design evaluations per second: a 7-layer InGaAs/AlAs-like double barrier
   (invented example) with every I–V metric over a 51-point bias sweep, and with the
   zero-bias metrics only; where the I–V time goes; and the memory of one I–V
   evaluation of a batch of 64 designs (tracemalloc peak of numpy's allocations, and the
   peak resident set of a fresh process).

Prints a table and writes ``benchmarks/results/physics.json``. Timings are CPU seconds
of this process, the best of several repetitions (the machine may be shared), numpy
forced to one thread.

Run: ``.venv/bin/python benchmarks/bench_physics.py`` (about three minutes).
"""

from harness import RESULTS_DIR, machine, single_thread

single_thread()  # before numpy is imported

import json  # noqa: E402
import os  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import tracemalloc  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

import tunnelsmith.physics.current as current_module  # noqa: E402
import tunnelsmith.physics.resonance as resonance_module  # noqa: E402
from tunnelsmith.physics.current import current_density  # noqa: E402
from tunnelsmith.physics.device import Device  # noqa: E402
from tunnelsmith.physics.metrics import CATALOGUE, MetricRequest, evaluate  # noqa: E402
from tunnelsmith.physics.profile import biased_profile  # noqa: E402

RESULTS = RESULTS_DIR / "physics.json"
NODE_COUNTS = (32, 48, 64, 80, 96, 128, 192, 256, 400)

# The brute-force reference of the tests (Tsu–Esaki integral from scipy.constants on
# dense uniform grids), so that test and benchmark measure against the same thing.
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from test_current import brute_force_current  # noqa: E402

EDGE = [0.0, 0.0, 1.2, 0.0, 1.2, 0.0, 0.0]
MASS = [0.041, 0.041, 0.15, 0.041, 0.15, 0.041, 0.041]
THICKNESS = [0.0, 2.0, 1.5, 4.5, 1.5, 2.0, 0.0]


def rtd_batch(n_stacks, seed=0, spread=True, barrier_nm=1.5, temperature_K=300.0):
    """The 7-layer example stack, with random well and barrier variations when ``spread``."""
    rng = np.random.default_rng(seed)
    edge, mass = np.tile(EDGE, (n_stacks, 1)), np.tile(MASS, (n_stacks, 1))
    thickness = np.tile(THICKNESS, (n_stacks, 1))
    thickness[:, [2, 4]] = barrier_nm
    if spread:
        thickness[:, 3] += rng.uniform(-0.5, 0.5, n_stacks)
        thickness[:, [2, 4]] += rng.uniform(-0.3, 0.3, (n_stacks, 2))
    doping = np.full(n_stacks, 1e18)
    return Device(edge, mass, thickness, doping, doping, temperature_K)


def random_stacks(n_stacks, seed=1):
    """Invented double and triple barriers with random offsets, masses and thicknesses."""
    rng = np.random.default_rng(seed)
    layers = 9
    edge, thickness = np.zeros((n_stacks, layers)), np.zeros((n_stacks, layers))
    mass = np.full((n_stacks, layers), 0.041)
    thickness[:, 1], thickness[:, -2] = rng.uniform(0, 4, n_stacks), rng.uniform(0, 4, n_stacks)
    for j in (2, 4, 6):
        edge[:, j] = rng.uniform(0.3, 1.2, n_stacks)
        mass[:, j] = 0.08 + 0.07 * rng.random(n_stacks)
        thickness[:, j] = rng.uniform(0.8, 3.0, n_stacks)
    thickness[:, 3], thickness[:, 5] = rng.uniform(2, 8, n_stacks), rng.uniform(2, 8, n_stacks)
    double = rng.random(n_stacks) < 0.5
    thickness[double, 5] = thickness[double, 6] = 0.0
    doping = np.full(n_stacks, 1e18)
    return Device(edge, mass, thickness, doping, doping, 300.0)


class Counter:
    """Counts the energies passed to a wrapped function of a module."""

    def __init__(self, module, name):
        self.module, self.name, self.original = module, name, getattr(module, name)
        self.energies = 0

    def __enter__(self):
        def counted(*args, **kwargs):
            energy = args[1] if self.name == "box_phase" else args[0]
            self.energies += np.size(energy)
            return self.original(*args, **kwargs)

        setattr(self.module, self.name, counted)
        return self

    def __exit__(self, *exc):
        setattr(self.module, self.name, self.original)


def cpu_seconds(function, repeats=5):
    """Best CPU time of ``repeats`` calls (after one warm-up call)."""
    function()
    best = np.inf
    for _ in range(repeats):
        start = time.process_time()
        function()
        best = min(best, time.process_time() - start)
    return best


# --- 1. resonances ---------------------------------------------------------------------


def resonance_cases():
    cases = []
    example = rtd_batch(1, spread=False)
    thick = rtd_batch(1, spread=False, barrier_nm=5.0)
    for name, device, bias in (
        ("example stack, 0 and 0.2 V", example, [0.0, 0.2]),
        ("5 nm barriers (Gamma < 1 neV)", thick, [0.0, 0.1]),
        ("60 random double/triple barriers x 3 biases", random_stacks(60), [0.0, 0.2, 0.5]),
    ):
        profile = biased_profile(device, bias)
        cases.append((name, profile.arrays, (0.0, 0.9)))
    return cases


def bench_resonances():
    rows = []
    for name, arrays, window in resonance_cases():
        saved = (resonance_module._NEWTON_MAX_ITER, resonance_module._NEWTON_STOP_eV)
        try:
            resonance_module._NEWTON_MAX_ITER, resonance_module._NEWTON_STOP_eV = 60, 0.0
            reference = resonance_module.find_resonances(**arrays, window_eV=window)
        finally:
            resonance_module._NEWTON_MAX_ITER, resonance_module._NEWTON_STOP_eV = saved
        ref_energy, ref_width = reference.energy_eV, reference.width_eV
        n_levels = int(np.isfinite(ref_energy).sum())
        for iterations in (2, 3, 4, 5, 6, 8, resonance_module._NEWTON_MAX_ITER):
            saved = resonance_module._NEWTON_MAX_ITER
            try:
                resonance_module._NEWTON_MAX_ITER = iterations
                with Counter(resonance_module, "scattering") as kernel, Counter(resonance_module, "box_phase") as box:
                    found = resonance_module.find_resonances(**arrays, window_eV=window)
            finally:
                resonance_module._NEWTON_MAX_ITER = saved
            energy_error, width_error, missed = [], [], 0
            flat_ref = ref_energy.reshape(-1, ref_energy.shape[-1])
            flat_found = found.energy_eV.reshape(flat_ref.shape)
            flat_ref_width = ref_width.reshape(flat_ref.shape)
            flat_width = found.width_eV.reshape(flat_ref.shape)
            for row in range(flat_ref.shape[0]):
                for level, width in zip(flat_ref[row], flat_ref_width[row]):
                    if not np.isfinite(level):
                        continue
                    candidates = np.abs(flat_found[row] - level)
                    if not np.any(np.isfinite(candidates)) or np.nanmin(candidates) > 1e-4:
                        missed += 1
                        continue
                    k = np.nanargmin(candidates)
                    energy_error.append(candidates[k])
                    width_error.append(abs(flat_width[row, k] / width - 1.0))
            rows.append(
                dict(
                    case=name,
                    newton_iterations=iterations,
                    levels=n_levels,
                    kernel_evaluations_per_level=kernel.energies / n_levels,
                    box_phase_evaluations_per_level=box.energies / n_levels,
                    max_energy_error_eV=float(max(energy_error, default=np.nan)),
                    max_width_relative_error=float(max(width_error, default=np.nan)),
                    missed_levels=missed,
                )
            )
    return rows


def sweep_windows(device, bias):
    """Level-search windows of :func:`physics.current.current_density`, shape (B, nV) each."""
    profile = biased_profile(device, bias)
    emitter, collector, source, _ = current_module.contact_levels(device, bias)
    lo, hi = current_module.integration_window_eV(
        bias[None, :], source, device.temperature_K, collector_edge_eV=np.real(profile.band_edge_eV[..., -1])
    )
    kT = current_module.KB_eV_K * device.temperature_K
    top = np.minimum(hi, np.maximum(emitter, collector) + current_module.LEVEL_SEARCH_kT * kT)
    return profile, lo, np.maximum(top, lo)


def bench_tracking():
    """Continuation in bias against the full search at every bias: same levels, cost."""
    rows = []
    for name, device, bias in (
        ("example batch of 32, 0-1 V in 51 steps", rtd_batch(32), np.linspace(0.0, 1.0, 51)),
        ("40 random double/triple barriers, -0.6-1 V in 41", random_stacks(40), np.linspace(-0.6, 1.0, 41)),
    ):
        profile, lo, hi = sweep_windows(device, bias)
        found = {}
        for method in ("find_resonances", "track_resonances"):
            function = getattr(resonance_module, method)
            extra = {"bias_V": bias} if method == "track_resonances" else {}

            def run(function=function, extra=extra):
                return function(**profile.arrays, window_eV=(lo, hi), **extra)

            with Counter(resonance_module, "scattering") as kernel, Counter(resonance_module, "box_phase") as box:
                found[method] = run()
            seconds = cpu_seconds(run, repeats=3)
            rows.append(
                dict(
                    case=name,
                    method=method,
                    ms_per_design=1e3 * seconds / device.n_stacks,
                    kernel_evaluations=kernel.energies,
                    box_phase_evaluations=box.energies,
                    levels=int(np.isfinite(found[method].energy_eV).sum()),
                )
            )
        searched, tracked = found["find_resonances"], found["track_resonances"]
        only = {}
        for label, mine, other in (("only_full_search", searched, tracked), ("only_tracking", tracked, searched)):
            distance = np.abs(mine.energy_eV[..., :, None] - other.energy_eV[..., None, :])
            matched = np.any(distance < 1e-9, axis=-1)
            only[label] = int((np.isfinite(mine.energy_eV) & ~matched).sum())
        both = np.isfinite(searched.energy_eV) & np.isfinite(tracked.energy_eV) & (
            np.abs(searched.energy_eV - tracked.energy_eV) < 1e-9
        )
        rows[-1].update(
            only,
            max_energy_difference_eV=float(np.max(np.abs(searched.energy_eV - tracked.energy_eV)[both], initial=0.0)),
        )
    return rows


# --- 2. current --------------------------------------------------------------------------


def bench_current():
    triple = Device(
        np.array([[0, 0, 1.2, 0, 1.2, 0, 1.2, 0, 0.0]]),
        np.array([[0.041, 0.041, 0.15, 0.041, 0.15, 0.041, 0.15, 0.041, 0.041]]),
        np.array([[0, 2, 1.5, 5, 1.5, 6, 1.5, 2, 0.0]]),
        [1e18],
        [1e18],
        300.0,
    )
    cases = [
        ("example stack, 15 biases 0.02-1 V", rtd_batch(1, spread=False), np.linspace(0.02, 1.0, 15), False),
        ("example stack at 77 K", rtd_batch(1, spread=False, temperature_K=77.0), np.array([0.05, 0.2, 0.3, 0.6]), False),
        ("triple barrier", triple, np.array([0.05, 0.15, 0.3, 0.5]), False),
        ("5 nm barriers (Gamma < 1 neV)", rtd_batch(1, spread=False, barrier_nm=5.0), np.array([0.05, 0.1, 0.2]), True),
    ]
    rows = []
    for name, device, bias, narrow in cases:
        if narrow:
            levels = current_density(device, bias, nodes=512).resonances
            reference = np.array(
                [
                    brute_force_current(device, bias[[v]], around_eV=[level], half_span_eV=1e4 * width)[0]
                    for v, (level, width) in enumerate(zip(levels.energy_eV[0, :, 0], levels.width_eV[0, :, 0]))
                ]
            )
        else:
            reference = brute_force_current(device, bias)
        for nodes in NODE_COUNTS:
            value = current_density(device, bias, nodes=nodes).current_density_A_cm2[0]
            error = np.abs(value / reference - 1.0)
            rows.append(
                dict(
                    case=name,
                    reference="brute-force dense grid",
                    nodes=nodes,
                    max_relative_error=float(error.max()),
                    median_relative_error=float(np.median(error)),
                )
            )
    # Invented random stacks over a whole sweep, against 1024 nodes (the brute-force
    # grids above are too slow for hundreds of biases).
    bias = np.linspace(0.02, 1.0, 25)
    warm, cold = random_stacks(30, seed=11), random_stacks(30, seed=12)
    cold = Device(cold.band_edge_eV, cold.mass, cold.thickness_nm, cold.emitter_doping_cm3, cold.collector_doping_cm3, 77.0)
    for name, device in (("30 random stacks x 25 biases, 300 K", warm), ("30 random stacks x 25 biases, 77 K", cold)):
        reference = current_density(device, bias, nodes=1024).current_density_A_cm2
        for nodes in (64, 80, current_module.DEFAULT_NODES, 128):
            error = np.abs(current_density(device, bias, nodes=nodes).current_density_A_cm2 / reference - 1.0)
            rows.append(
                dict(
                    case=name,
                    reference="1024 nodes",
                    nodes=nodes,
                    max_relative_error=float(error.max()),
                    median_relative_error=float(np.median(error)),
                )
            )
    return rows


def default_node_errors(rows):
    """Largest error of each case at the default node count."""
    return {r["case"]: r["max_relative_error"] for r in rows if r["nodes"] == current_module.DEFAULT_NODES}


# --- 3. throughput -----------------------------------------------------------------------


def bench_throughput():
    bias = np.linspace(0.0, 1.0, 51)
    iv_requests = [MetricRequest(name) for name, info in CATALOGUE.items() if not info.takes_bias]
    iv_requests.append(MetricRequest("leakage_A_cm2", 0.05))
    zero_requests = [
        MetricRequest(name)
        for name in ("resonance_energy_eV", "resonance_width_eV", "transmission_contrast", "total_thickness_nm")
    ]
    rows = []
    iv_stacks = 32
    device = rtd_batch(iv_stacks)
    grid = np.linspace(0.0, 1.0, 201)
    seconds = cpu_seconds(lambda: evaluate(device, iv_requests, energy_eV=grid, bias_V=bias))
    slices = biased_profile(device, bias).band_edge_eV.shape[-1]
    rows.append(
        dict(
            what="all metrics, 51-point I-V sweep",
            stacks=iv_stacks,
            energy_points=grid.size,
            nodes_per_bias=current_module.DEFAULT_NODES,
            slices=slices,
            designs_per_second=iv_stacks / seconds,
        )
    )
    parts = iv_time_parts(device, bias)

    zero_stacks = 300
    device = rtd_batch(zero_stacks)
    for points in (201, 2001):
        grid = np.linspace(0.0, 1.0, points)
        seconds = cpu_seconds(lambda: evaluate(device, zero_requests, energy_eV=grid, bias_V=bias))
        rows.append(
            dict(
                what="zero-bias metrics (level, width, contrast, thickness)",
                stacks=zero_stacks,
                energy_points=points,
                nodes_per_bias=None,
                slices=7,
                designs_per_second=zero_stacks / seconds,
            )
        )
    return rows, parts


def iv_time_parts(device, bias, repeats=3):
    """Where the I-V time goes: CPU seconds per design of the main steps, best of
    ``repeats`` instrumented calls of current_density."""
    targets = [
        (resonance_module, "closed_box_levels"),
        (resonance_module, "_scan_peaks"),
        (resonance_module, "refine_poles"),
        (resonance_module, "pole_rates"),
        (current_module, "adaptive_nodes"),
        (current_module, "transport_transmission"),
    ]
    originals = {name: getattr(module, name) for module, name in targets}
    best = {}
    for _ in range(repeats):
        parts = {}
        for module, name in targets:

            def timed(*args, _original=originals[name], _name=name, **kwargs):
                start = time.process_time()
                try:
                    return _original(*args, **kwargs)
                finally:
                    parts[_name] = parts.get(_name, 0.0) + time.process_time() - start

            setattr(module, name, timed)
        try:
            start = time.process_time()
            current_density(device, bias)
            parts["current_density (total)"] = time.process_time() - start
        finally:
            for module, name in targets:
                setattr(module, name, originals[name])
        for name, seconds in parts.items():
            best[name] = min(best.get(name, np.inf), seconds / device.n_stacks)
    return best


# A fresh interpreter measures one full I-V evaluation of a batch: tracemalloc's peak
# (numpy reports its buffers to it) and the peak resident set against the one before.
_MEMORY_PROBE = """
import os, sys, tracemalloc
sys.path.insert(0, {benchmarks!r})
import numpy as np
from bench_physics import rtd_batch
from tunnelsmith.physics.metrics import CATALOGUE, MetricRequest, evaluate

def status(key):
    for line in open("/proc/self/status"):
        if line.startswith(key):
            return int(line.split()[1]) / 1024.0
requests = [MetricRequest(n) for n, i in CATALOGUE.items() if not i.takes_bias]
requests.append(MetricRequest("leakage_A_cm2", 0.05))
device = rtd_batch({stacks})
before = status("VmRSS:")
tracemalloc.start()
evaluate(device, requests, energy_eV=np.linspace(0.0, 1.0, 201), bias_V=np.linspace(0.0, 1.0, 51))
peak = tracemalloc.get_traced_memory()[1] / 2**20
tracemalloc.stop()
print(peak, before, status("VmHWM:"))
"""


def iv_memory(stacks=64):
    """Memory of one I-V evaluation (all metrics, 51 biases) of ``stacks`` designs, MiB."""
    code = _MEMORY_PROBE.format(benchmarks=str(Path(__file__).resolve().parent), stacks=stacks)
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[1]))
    output = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, env=env, check=True, cwd=env["PYTHONPATH"]
    )
    peak, before, high_water = (float(v) for v in output.stdout.split())
    return dict(
        stacks=stacks,
        tracemalloc_peak_MiB=peak,
        rss_before_MiB=before,
        peak_rss_MiB=high_water,
        peak_rss_increase_MiB=high_water - before,
    )


def main():
    started = time.time()
    resonance_rows = bench_resonances()
    print("Resonances: error against fully converged poles vs. cost per level")
    print(
        f"{'case':46s} {'iter':>4s} {'kernel/lvl':>10s} {'box/lvl':>8s} {'max dE_r eV':>12s} "
        f"{'max dG/G':>10s} {'missed':>6s}"
    )
    for r in resonance_rows:
        print(
            f"{r['case']:46s} {r['newton_iterations']:4d} {r['kernel_evaluations_per_level']:10.1f} "
            f"{r['box_phase_evaluations_per_level']:8.1f} {r['max_energy_error_eV']:12.2e} "
            f"{r['max_width_relative_error']:10.2e} {r['missed_levels']:6d}"
        )
    tracking_rows = bench_tracking()
    print("\nContinuation in bias against the full search at every bias (CPU ms per design, best of 3)")
    print(f"{'case':50s} {'method':16s} {'ms/design':>9s} {'kernel E':>9s} {'box E':>8s} {'levels':>6s}")
    for r in tracking_rows:
        print(
            f"{r['case']:50s} {r['method']:16s} {r['ms_per_design']:9.2f} {r['kernel_evaluations']:9d} "
            f"{r['box_phase_evaluations']:8d} {r['levels']:6d}"
        )
        if "only_full_search" in r:
            print(
                f"{'':50s} levels only in the full search {r['only_full_search']}, only in the tracking "
                f"{r['only_tracking']}; common ones agree to {r['max_energy_difference_eV']:.1e} eV"
            )
    current_rows = bench_current()
    print("\nCurrent: relative error against brute-force dense grids (or 1024 nodes) vs. nodes per bias")
    print(f"{'case':40s} {'nodes':>5s} {'max err':>10s} {'median err':>10s}")
    for r in current_rows:
        mark = "  <- default" if r["nodes"] == current_module.DEFAULT_NODES else ""
        print(
            f"{r['case']:40s} {r['nodes']:5d} {r['max_relative_error']:10.2e} {r['median_relative_error']:10.2e}{mark}"
        )
    default_errors = default_node_errors(current_rows)
    print(
        f"Error at the default {current_module.DEFAULT_NODES} nodes: "
        + ", ".join(f"{case} {error:.1e}" for case, error in default_errors.items())
    )
    throughput_rows, parts = bench_throughput()
    print("\nThroughput (CPU time, one thread, best of 5 repetitions)")
    for r in throughput_rows:
        print(
            f"{r['what']:55s} batch {r['stacks']:4d}  energy grid {r['energy_points']:5d}  "
            f"{r['designs_per_second']:9.1f} designs/s"
        )
    print("I-V time per design (ms, best of 3): " + ", ".join(f"{k} {1e3 * v:.2f}" for k, v in parts.items()))
    memory = iv_memory()
    print(
        f"Memory of one I-V evaluation of {memory['stacks']} designs: tracemalloc peak "
        f"{memory['tracemalloc_peak_MiB']:.0f} MiB, peak RSS {memory['peak_rss_MiB']:.0f} MiB "
        f"(+{memory['peak_rss_increase_MiB']:.0f} MiB over the {memory['rss_before_MiB']:.0f} MiB before)"
    )
    result = dict(
        date=time.strftime("%Y-%m-%d %H:%M:%S %Z"),
        machine=machine(),
        resonances=resonance_rows,
        current=current_rows,
        tracking=tracking_rows,
        default_nodes=current_module.DEFAULT_NODES,
        default_node_max_errors=default_errors,
        throughput=throughput_rows,
        iv_time_per_design_s=parts,
        iv_memory=memory,
        targets=dict(
            resonance="E_r within 1e-6 eV and Gamma within 1e-3 relative with <= 100 evaluations per level",
            current="1e-3 relative with <= 400 nodes per bias",
            iv_designs_per_second=20,
            zero_bias_designs_per_second=5000,
        ),
        wall_seconds=time.time() - started,
    )
    RESULTS.parent.mkdir(parents=True, exist_ok=True)
    RESULTS.write_text(json.dumps(result, indent=2) + "\n")
    print(f"\nwritten {RESULTS} ({time.time() - started:.0f} s)")


if __name__ == "__main__":
    main()
