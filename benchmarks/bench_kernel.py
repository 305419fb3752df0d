"""Transmission-kernel throughput on one core, in layer·energy evaluations per second.

Workloads, each a batch of 64 stacks × 1000 energies × 12 layers (contacts included):

* ``mixed``: band edges drawn uniformly in 0–1 eV, energies 0–1.2 eV, so that most
  layers are propagating at some energies and evanescent at others (the target case:
  at least 1e7 layer·energy/s);
* ``rtd``: triple-barrier resonant-tunneling stacks (barriers 0.3–1.2 eV, wells at or
  below the emitter edge), energies 0–0.6 eV, the shape of a campaign's zero-bias scan;
* ``complex``: the ``mixed`` batch at complex energies E − 0.01i eV (pole search).

The reference is a straightforward per-energy 2×2-matrix loop (Python loops over
energies and layers, multiplying numpy 2×2 transfer matrices), timed on a subset and
scaled; it also checks that both give the same transmissions on that subset.

Prints a table and writes ``benchmarks/results/kernel.json``.
Usage: ``python benchmarks/bench_kernel.py [--quick]``.
"""

from harness import machine, single_thread

single_thread()  # before numpy is imported

import argparse  # noqa: E402
import json  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tunnelsmith.physics.constants import HBAR2_2M0_eV_nm2  # noqa: E402
from tunnelsmith.physics.transfer import transmission  # noqa: E402

RESULTS = ROOT / "benchmarks" / "results" / "kernel.json"
N_STACKS, N_ENERGIES, N_LAYERS = 64, 1000, 12
TARGET_PER_S = 1e7


def mixed_batch(rng) -> tuple:
    """Invented stacks: random edges 0–1 eV, masses 0.04–0.15 m0, layers 0.5–5 nm."""
    edge = rng.uniform(0.0, 1.0, (N_STACKS, N_LAYERS))
    edge[:, 0], edge[:, -1] = 0.0, -0.1
    mass = rng.uniform(0.04, 0.15, (N_STACKS, N_LAYERS))
    thickness = rng.uniform(0.5, 5.0, (N_STACKS, N_LAYERS))
    thickness[:, [0, -1]] = 0.0
    return np.linspace(0.001, 1.2, N_ENERGIES), edge, mass, thickness


def rtd_batch(rng) -> tuple:
    """Invented triple-barrier stacks: contact, spacer, (barrier, well) x 3, barrier,
    two spacers, contact; barriers 0.3–1.2 eV and 1–3 nm, wells -0.2–0 eV and 3–7 nm."""
    role = np.array(["c", "s", "b", "w", "b", "w", "b", "w", "b", "s", "s", "c"])
    edge = np.zeros((N_STACKS, N_LAYERS))
    thickness = np.zeros((N_STACKS, N_LAYERS))
    mass = np.full((N_STACKS, N_LAYERS), 0.041)
    barrier, well, spacer = role == "b", role == "w", role == "s"
    edge[:, barrier] = rng.uniform(0.3, 1.2, (N_STACKS, barrier.sum()))
    mass[:, barrier] = rng.uniform(0.07, 0.15, (N_STACKS, barrier.sum()))
    thickness[:, barrier] = rng.uniform(1.0, 3.0, (N_STACKS, barrier.sum()))
    edge[:, well] = rng.uniform(-0.2, 0.0, (N_STACKS, well.sum()))
    thickness[:, well] = rng.uniform(3.0, 7.0, (N_STACKS, well.sum()))
    thickness[:, spacer] = 2.0
    return np.linspace(0.0005, 0.6, N_ENERGIES), edge, mass, thickness


def time_kernel(energy, edge, mass, thickness, repeats: int) -> dict:
    transmission(energy, edge, mass, thickness)  # warm-up: work buffers, caches
    seconds = []
    for _ in range(repeats):
        start = time.perf_counter()
        transmission(energy, edge, mass, thickness)
        seconds.append(time.perf_counter() - start)
    evaluations = edge.shape[0] * np.size(energy) * edge.shape[-1]
    best = min(seconds)
    return {
        "seconds_min": round(best, 5),
        "seconds_median": round(float(np.median(seconds)), 5),
        "layer_energy_per_s": float(f"{evaluations / best:.4g}"),
        "layer_energy_per_s_median": float(f"{evaluations / np.median(seconds):.4g}"),
    }


def matrix_loop_transmission(energy, edge, mass, thickness) -> np.ndarray:
    """The straightforward method: per energy, multiply 2×2 transfer matrices of
    (psi, psi'/m) layer by layer, then read t off the product (BenDaniel–Duke
    conditions; contacts are plane waves). T = |t|^2 Re q_c / Re q_e."""
    values = np.empty((edge.shape[0], len(energy)))
    for b in range(edge.shape[0]):
        for i, e in enumerate(energy):
            q = []
            total = np.eye(2, dtype=complex)
            for j in range(edge.shape[1]):
                k = np.sqrt(complex((e - edge[b, j]) * mass[b, j] / HBAR2_2M0_eV_nm2))
                q.append(k / mass[b, j])
                if 0 < j < edge.shape[1] - 1:
                    phase = k * thickness[b, j]
                    layer = np.array([[np.cos(phase), np.sin(phase) / q[j]],
                                      [-q[j] * np.sin(phase), np.cos(phase)]])
                    total = layer @ total
            (a, bb), (c, d) = total
            q_e, q_c = q[0], q[-1]
            t = 2j * q_e / (1j * q_c * a + q_c * q_e * bb - c + 1j * q_e * d)
            values[b, i] = abs(t) ** 2 * q_c.real / q_e.real if q_e.real > 0 and q_c.real > 0 else 0.0
    return values


def time_matrix_loop(energy, edge, mass, thickness, n_stacks: int, n_energies: int) -> dict:
    """Time the loop on a subset and scale to the full batch (it is linear in both)."""
    stride = max(1, len(energy) // n_energies)
    subset_energy = energy[::stride][:n_energies]
    arrays = [a[:n_stacks] for a in (edge, mass, thickness)]
    start = time.perf_counter()
    loop = matrix_loop_transmission(subset_energy, *arrays)
    seconds = time.perf_counter() - start
    kernel = transmission(subset_energy, *arrays)
    scale = (edge.shape[0] * len(energy)) / (n_stacks * len(subset_energy))
    significant = kernel > 1e-6  # the raw matrix product loses digits in thick barriers
    return {
        "subset": f"{n_stacks} stacks x {len(subset_energy)} energies",
        "seconds_subset": round(seconds, 4),
        "seconds_full_batch_scaled": round(seconds * scale, 2),
        "max_relative_difference_to_kernel": float(
            f"{np.max(np.abs(loop[significant] / kernel[significant] - 1.0)):.2e}"
        ),
    }


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats (a smoke run)")
    args = parser.parse_args()
    repeats = 3 if args.quick else 15
    rng = np.random.default_rng(20240601)
    mixed, rtd = mixed_batch(rng), rtd_batch(rng)
    energy, edge, mass, thickness = mixed
    workloads = {
        "mixed": time_kernel(*mixed, repeats),
        "rtd": time_kernel(*rtd, repeats),
        "complex": time_kernel(energy - 0.01j, edge, mass, thickness, max(3, repeats // 3)),
    }
    loop = time_matrix_loop(*mixed, n_stacks=2, n_energies=20 if args.quick else 100)
    kernel_seconds = workloads["mixed"]["seconds_min"]
    loop["speedup_of_kernel"] = round(loop["seconds_full_batch_scaled"] / kernel_seconds, 1)
    result = {
        "machine": machine(),
        "batch": {"stacks": N_STACKS, "energies": N_ENERGIES, "layers": N_LAYERS},
        "target_layer_energy_per_s": TARGET_PER_S,
        "meets_target": workloads["mixed"]["layer_energy_per_s"] >= TARGET_PER_S,
        "kernel": workloads,
        "matrix_loop": loop,
        "repeats": repeats,
    }
    RESULTS.parent.mkdir(parents=True, exist_ok=True)
    RESULTS.write_text(json.dumps(result, indent=2) + "\n")

    info = result["machine"]
    print(f"machine: {info['cpu']} | {info['platform']} | numpy {info['numpy']} | 1 thread")
    print(f"batch: {N_STACKS} stacks x {N_ENERGIES} energies x {N_LAYERS} layers")
    print(f"{'workload':<10} {'best ms':>9} {'median ms':>10} {'layer*E/s (best)':>18} {'(median)':>10}")
    for name, w in workloads.items():
        print(f"{name:<10} {w['seconds_min'] * 1e3:9.1f} {w['seconds_median'] * 1e3:10.1f} "
              f"{w['layer_energy_per_s']:18.3g} {w['layer_energy_per_s_median']:10.3g}")
    print(f"2x2-matrix loop: {loop['seconds_full_batch_scaled']:.1f} s for the batch "
          f"(scaled from {loop['subset']}), kernel {loop['speedup_of_kernel']:.0f}x faster; "
          f"max relative difference {loop['max_relative_difference_to_kernel']:.1e}")
    print(f"target {TARGET_PER_S:.0e} layer*E/s: {'met' if result['meets_target'] else 'NOT met'}")
    print(f"written {RESULTS.relative_to(ROOT)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
