"""Growth-tolerance Monte Carlo throughput: samples per second on one core.

Two cases; each times the Monte Carlo itself (error draws, devices, physics in
chunks) and, apart, the fixed cost of the per-monolayer sensitivities (2 n + 1 designs):

* zero-bias metrics (resonance energy and width, transmission contrast) of the example
  stack ``campaigns/filter_tolerance.toml``; target: 10 000 samples in under 10 s;
* full I–V metrics (resonance, peak, valley, peak-to-valley ratio) of
  ``campaigns/rtd_ingaas_alas.toml`` with its 49-point bias sweep.

Prints a table and writes ``benchmarks/results/tolerance.json``.
Usage: ``python benchmarks/bench_tolerance.py [--quick]``.
"""

from harness import machine, single_thread

single_thread()  # before numpy is imported

import argparse  # noqa: E402
import json  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tunnelsmith.optimize.inputs import reader
from tunnelsmith.optimize.model import growth
from tunnelsmith.optimize.model.stack import nominal_batch  # noqa: E402

RESULTS = ROOT / "benchmarks" / "results" / "tolerance.json"
TARGET_SAMPLES, TARGET_SECONDS = 10_000, 10.0


def time_case(path: Path, samples: int, requests=None) -> dict:
    """Time the Monte Carlo (draws, devices, physics in chunks) and, apart, the sensitivities."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        spec = reader.load(path)
        nominal = nominal_batch(spec)
        requests = list(requests) if requests is not None else growth.metric_requests(spec)
        settings = growth.tolerance_settings(spec)
        start = time.perf_counter()
        errors = growth.draw_growth_errors(nominal, spec, samples, np.random.default_rng(settings.seed))
        values, _ = growth.evaluate_designs(spec, errors.batch, requests, contact_fraction=errors.contact_fraction)
        seconds = time.perf_counter() - start
        start = time.perf_counter()
        growth.monolayer_sensitivity(spec, nominal, requests)
        sensitivity_s = time.perf_counter() - start
    labels = [r.label for r in requests]
    return {
        "stack": str(path.relative_to(ROOT)),
        "samples": samples,
        "layers": len(nominal.layer_names),
        "metrics": labels,
        "energy_points": spec.energy.points,
        "bias_points": spec.bias.steps,
        "designs_per_call": growth.designs_per_call(spec, requests),
        "seconds": round(seconds, 3),
        "samples_per_s": round(samples / seconds, 1),
        "sensitivity_designs": 1 + 2 * len(nominal.layer_names),
        "sensitivity_s": round(sensitivity_s, 3),
        "undefined_samples": {label: int(np.sum(~np.isfinite(values[label]))) for label in labels},
    }


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer samples (a smoke run, not a measurement)")
    args = parser.parse_args()
    from tunnelsmith.physics.metrics import MetricRequest

    zero_bias_samples = 1_000 if args.quick else TARGET_SAMPLES
    iv_samples = 8 if args.quick else 64
    zero_bias = time_case(ROOT / "campaigns" / "filter_tolerance.toml", zero_bias_samples)
    iv_requests = [MetricRequest(name) for name in ("resonance_energy_eV", "resonance_width_eV",
                                                    "peak_current_A_cm2", "peak_voltage_V",
                                                    "valley_current_A_cm2", "pvcr")]
    iv = time_case(ROOT / "campaigns" / "rtd_ingaas_alas.toml", iv_samples, iv_requests)
    projected_s = TARGET_SAMPLES / zero_bias["samples_per_s"]
    target_met = projected_s < TARGET_SECONDS

    header = (f"{'case':<12}{'stack':<36}{'samples':>9}{'E pts':>7}{'V pts':>7}{'time (s)':>10}{'samples/s':>11}"
              f"{'sensitivities (s)':>19}")
    print(header)
    print("-" * len(header))
    for name, case in (("zero-bias", zero_bias), ("full I-V", iv)):
        print(f"{name:<12}{case['stack']:<36}{case['samples']:>9}{case['energy_points']:>7}"
              f"{case['bias_points']:>7}{case['seconds']:>10.2f}{case['samples_per_s']:>11.1f}"
              f"{case['sensitivity_s']:>19.2f}")
    print(f"\ntarget: {TARGET_SAMPLES} zero-bias samples in under {TARGET_SECONDS:g} s on one core -> "
          f"{projected_s:.1f} s projected: {'met' if target_met else 'NOT met'}")

    RESULTS.parent.mkdir(parents=True, exist_ok=True)
    RESULTS.write_text(json.dumps({
        "benchmark": "tolerance",
        "quick": args.quick,
        "machine": machine(),
        "zero_bias": zero_bias,
        "full_iv": iv,
        "target": {"samples": TARGET_SAMPLES, "seconds": TARGET_SECONDS, "projected_s": round(projected_s, 2),
                   "met": bool(target_met)},
    }, indent=2) + "\n", encoding="utf-8")
    print(f"wrote {RESULTS.relative_to(ROOT)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
