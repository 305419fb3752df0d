"""What every benchmark script shares: one thread per process and the machine record.

Import this module before numpy: :func:`single_thread` must set the thread-pool
variables before numpy loads its BLAS, or they have no effect.
"""

import os
import platform
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
RESULTS_DIR = ROOT / "benchmarks" / "results"
_THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS",
                     "VECLIB_MAXIMUM_THREADS")


def single_thread() -> None:
    """Keep BLAS and OpenMP pools to one thread: figures are per core."""
    for name in _THREAD_VARIABLES:
        os.environ[name] = "1"
    if str(ROOT) not in sys.path:
        sys.path.insert(0, str(ROOT))


def machine() -> dict:
    """The machine a figure was measured on (stored beside every result)."""
    import numpy as np

    cpu = "unknown"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    record = {
        "platform": platform.platform(),
        "python": platform.python_version(),
        "cpu": cpu,
        "logical_cpus": os.cpu_count(),
        "numpy": np.__version__,
        "threads_per_process": 1,
    }
    try:
        import optuna

        record["optuna"] = optuna.__version__
    except ImportError:
        pass
    return record
