"""``tunnelsmith tolerance``: a growth-error study of a stack file or of a front design.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path
from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.model.stack import nominal_batch
from tunnelsmith.optimize.results.tolerance import run_study, tolerance_dataset
from tunnelsmith.optimize.results.tolerance import summary_table
from tunnelsmith.optimize.inputs import limits, reader
from tunnelsmith.optimize.commands.front_design import load_front_design


class _ProgressBar:
    """Progress of the growth samples: a :mod:`tqdm` bar on a terminal, one line otherwise."""

    def __init__(self, label: str, quiet: bool):
        self.label, self.quiet = label, quiet
        self.bar = None
        self.start = time.perf_counter()

    def __call__(self, done: int, total: int) -> None:
        if self.quiet:
            return
        if sys.stderr.isatty():
            if self.bar is None:
                from tqdm import tqdm

                self.bar = tqdm(total=total, desc=self.label, unit="sample", file=sys.stderr)
            self.bar.update(done - self.bar.n)
            if done >= total:
                self.bar.close()
        elif done >= total:
            elapsed = time.perf_counter() - self.start
            rate = done / elapsed if elapsed > 0 else 0.0
            print(f"{self.label}: {done}/{total} in {elapsed:.1f} s ({rate:.0f}/s)", file=sys.stderr, flush=True)


def _load_stack(path: Path, design, storage):

    if design is not None and not path.exists():
        raise InputError(path, None, "no such run directory",
                         "give the directory `tunnelsmith optimize` wrote (default runs/<campaign name>/)")
    if design is not None:
        raise InputError("command line", "--design", f"--design picks a design of a campaign run, but {path} is a file",
                         f"give the run directory instead (tunnelsmith tolerance RUN_DIR --design {design}), "
                         "or drop --design to study the stack file")
    if storage is not None:
        raise InputError("command line", "--storage", "--storage belongs to a campaign run directory",
                         "drop --storage when studying a stack file")
    spec = reader.load(path)
    try:
        return spec, nominal_batch(spec)
    except InputError as error:
        raise InputError(error.file, error.key, f"{error.problem}; a tolerance study needs one concrete design",
                         "give every layer fixed values, or run the campaign and study a design of its front: "
                         "tunnelsmith tolerance RUN_DIR --design N") from None


def run_tolerance(target, *, design: int | None = None, samples: int | None = None, out_dir=None,
                  storage: str | None = None, quiet: bool = False, plots: bool = True) -> int:
    """Entry point of ``tunnelsmith tolerance``; returns the exit status.

    Parameters
    ----------
    target : path
        A stack file (its ``[tolerance]`` settings and ``[[tolerance.spec]]`` windows are
        used; defaults without them), or a campaign run directory together with
        ``design``.
    design : int, optional
        Trial number of a design on the run's front (``RUN_DIR/front.nc``).
    samples : int, optional
        Growth samples (overrides ``[tolerance] samples``).
    out_dir : path, optional
        Default ``runs/<stack stem>/`` or ``RUN_DIR/tolerance_design_<N>/``.
    storage : str, optional
        Optuna storage URL of the run: the front is rebuilt from it first.
    quiet : bool
        No progress bar.
    """
    from tunnelsmith.optimize.io import MODEL_CAUTION, write_netcdf

    target = Path(target)
    if samples is not None and int(samples) < 1:
        raise InputError("command line", "--samples", f"{samples} samples cannot give a yield",
                         "give at least one sample, e.g. --samples 500")
    if target.is_dir():
        out = Path(out_dir) if out_dir is not None else target / f"tolerance_design_{design}"
        spec, nominal = load_front_design(target, design, storage, out)
        source = f"design {design} of {target}"
    else:
        spec, nominal = _load_stack(target, design, storage)
        out = Path(out_dir) if out_dir is not None else Path("runs") / target.stem
        source = str(target)
    for warning in getattr(spec, "located_warnings", ()):
        print(f"warning: {warning}", file=sys.stderr)

    progress = _ProgressBar("growth samples", quiet)
    if samples is not None:
        # --samples overrides the file's [tolerance] samples: the same bounds apply to it.
        if samples > limits.MAX_TOLERANCE_SAMPLES:
            raise InputError("command line", "--samples", f"{samples} growth samples are more than the "
                             f"{limits.MAX_TOLERANCE_SAMPLES} a yield can use ({limits.SAMPLES_REASON})",
                             f"give at most --samples {limits.MAX_TOLERANCE_SAMPLES}")
        limits.check_memory(spec, samples=samples)
    study = run_study(spec, nominal, samples=samples, progress=progress, source=source)
    dataset = tolerance_dataset(study)
    if design is not None:
        dataset.attrs["design"] = int(design)
    path = write_netcdf(dataset, out / "tolerance.nc")
    figures = []
    try:
        from tunnelsmith.optimize.plots import plot_tolerance
    except ImportError:
        plot_tolerance = None
    if plot_tolerance is not None and plots:
        figures = plot_tolerance(dataset, out)

    print(f"tunnelsmith tolerance: {source}")
    print(summary_table(study))
    print(f"\ntolerance: {path}")
    for figure in figures:
        print(f"plot:      {figure}")
    print(f"\nnote: {MODEL_CAUTION}")
    return 0
