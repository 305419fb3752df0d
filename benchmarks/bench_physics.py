"""Accuracy per cost and throughput of the physics core, on one core.

Measures
--------
1. Resonances: error of E_r and Gamma against fully converged poles, versus the
   transmission evaluations spent per level (capping the Newton iterations).
2. Current: error of the Tsu–Esaki integral against brute-force dense grids, versus
   the energy nodes per bias.
3. Full design evaluations per second: a 7-layer InGaAs/AlAs-like double barrier
   (invented example) with every I–V metric over a 51-point bias sweep, and with the
   zero-bias metrics only.

Prints a table and writes ``benchmarks/results/physics.json``. Timings are CPU seconds
of this process (the machine may be shared), numpy forced to one thread.

Run: ``.venv/bin/python benchmarks/bench_physics.py`` (about two minutes).
"""

import os

for _variable in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[_variable] = "1"

import json  # noqa: E402
import platform  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
import scipy  # noqa: E402

import physics.current as current_module  # noqa: E402
import physics.resonance as resonance_module  # noqa: E402
from physics.current import current_density  # noqa: E402
from physics.device import Device  # noqa: E402
from physics.metrics import CATALOGUE, MetricRequest, evaluate  # noqa: E402
from physics.profile import biased_profile  # noqa: E402

RESULTS = Path(__file__).resolve().parent / "results" / "physics.json"

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


def cpu_seconds(function, repeats=3):
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
        for nodes in (32, 48, 64, 96, 128, 192, 256, 400):
            value = current_density(device, bias, nodes=nodes).current_density_A_cm2[0]
            error = np.abs(value / reference - 1.0)
            rows.append(
                dict(
                    case=name,
                    nodes=nodes,
                    max_relative_error=float(error.max()),
                    median_relative_error=float(np.median(error)),
                )
            )
    return rows


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
    seconds = cpu_seconds(lambda: evaluate(device, iv_requests, energy_eV=grid, bias_V=bias), repeats=2)
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
    # Where the I-V time goes (one instrumented call).
    parts = {}
    targets = [
        (resonance_module, "closed_box_levels"),
        (resonance_module, "_scan_peaks"),
        (resonance_module, "refine_poles"),
        (current_module, "adaptive_nodes"),
        (current_module, "transport_transmission"),
    ]
    originals = {name: getattr(module, name) for module, name in targets}
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
    parts = {name: seconds / iv_stacks for name, seconds in parts.items()}

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


def machine():
    model = platform.processor()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    return dict(
        cpu=model,
        logical_cpus=os.cpu_count(),
        python=platform.python_version(),
        numpy=np.__version__,
        scipy=scipy.__version__,
        platform=platform.platform(),
        threads="1 (OMP/OPENBLAS/MKL_NUM_THREADS=1)",
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
    current_rows = bench_current()
    print("\nCurrent: relative error against brute-force dense grids vs. nodes per bias")
    print(f"{'case':40s} {'nodes':>5s} {'max err':>10s} {'median err':>10s}")
    for r in current_rows:
        print(f"{r['case']:40s} {r['nodes']:5d} {r['max_relative_error']:10.2e} {r['median_relative_error']:10.2e}")
    throughput_rows, parts = bench_throughput()
    print("\nThroughput (CPU time, one thread)")
    for r in throughput_rows:
        print(
            f"{r['what']:55s} batch {r['stacks']:4d}  energy grid {r['energy_points']:5d}  "
            f"{r['designs_per_second']:9.1f} designs/s"
        )
    print("I-V time per design (s): " + ", ".join(f"{k} {v:.4f}" for k, v in parts.items()))
    result = dict(
        date=time.strftime("%Y-%m-%d %H:%M:%S %Z"),
        machine=machine(),
        resonances=resonance_rows,
        current=current_rows,
        throughput=throughput_rows,
        iv_time_per_design_s=parts,
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
