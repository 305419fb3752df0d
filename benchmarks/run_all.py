"""Run every benchmark of the harness (``make bench``) one after the other.

Each benchmark is a script that prints a table and writes a JSON file under
``benchmarks/results/``; this runner calls them in fresh interpreters so that the
single-thread settings each one makes before importing numpy take effect.
"""

import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
SCRIPTS = ["bench_kernel.py", "bench_physics.py", "bench_tolerance.py", "bench_campaign.py", "bench_hypervolume.py", "bench_front.py"]


def main() -> int:
    failures = 0
    for name in SCRIPTS:
        script = HERE / name
        if not script.exists():
            print(f"(skipped {name}: not present)")
            continue
        print(f"\n=== {name} ===", flush=True)
        failures += subprocess.call([sys.executable, str(script)]) != 0
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
