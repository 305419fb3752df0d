"""``tunnelsmith tolerance``: a growth-error study of a stack file or of a front design.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path
import numpy as np
from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.model.stack import DesignBatch, nominal_batch, split_material
from tunnelsmith.physics import materials
from tunnelsmith.optimize.results.tolerance import run_study, tolerance_dataset
from tunnelsmith.optimize.results.tolerance import summary_table
from tunnelsmith.optimize.inputs import reader


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


def _load_front_design(run_dir: Path, design, storage, out_dir: Path):
    """Spec and nominal design of trial ``design`` on the front of a campaign run."""
    import xarray as xr
    from tunnelsmith.optimize.io import atomic_path

    if design is None:
        raise InputError("command line", "--design", f"{run_dir} is a directory (a campaign run), which holds "
                         "many designs", f"pick one with --design N (a trial number on the front, see {run_dir}/front.nc), "
                         "or give a stack file")
    if storage is not None:
        from tunnelsmith.optimize.commands.outputs import rebuild_outputs

        rebuild_outputs(run_dir, storage=storage, quiet=True)
    front_path = run_dir / "front.nc"
    if not front_path.exists():
        raise InputError(run_dir, None, "the directory has no front.nc (not a campaign run, or its front was "
                         "never written)", f"run `tunnelsmith front {run_dir}` first, or give the run directory "
                         "of a campaign")
    try:
        front = xr.load_dataset(front_path)
    except (OSError, ValueError) as error:
        raise InputError(front_path, None, f"cannot read the file ({error})",
                         f"rebuild it with `tunnelsmith front {run_dir}`") from None
    missing = [v for v in ("thickness_nm", "material", "fraction") if v not in front.variables]
    if "design" not in front.coords or missing or "campaign_toml" not in front.attrs:
        raise InputError(front_path, None, "not a front file of this program (no design coordinate, layer "
                         "variables or campaign_toml attribute)", f"rebuild it with `tunnelsmith front {run_dir}`")
    designs = [int(d) for d in front["design"].values]
    if design not in designs:
        shown = ", ".join(map(str, designs[:20])) + (", ..." if len(designs) > 20 else "")
        raise InputError(front_path, "--design", f"trial {design} is not on the front "
                         f"(trials on the front: {shown or 'none'})",
                         f"choose one of the trial numbers on the front, e.g. --design {designs[0]}" if designs
                         else "let the campaign finish some trials first")
    # The campaign text as the run saw it, stored beside the results (load needs a file).
    campaign_path = out_dir / "campaign.toml"
    with atomic_path(campaign_path) as temporary:
        temporary.write_text(str(front.attrs["campaign_toml"]), encoding="utf-8")
    spec = reader.load(campaign_path)
    row = front.sel(design=design)
    layer_names = tuple(str(name) for name in front["layer"].values)
    if layer_names != tuple(layer.name for layer in spec.layers):
        raise InputError(front_path, "layer", "the front's layers do not match the campaign text it stores",
                         f"rebuild the front with `tunnelsmith front {run_dir}`")
    base, fraction = [], []
    for name, stored in zip(row["material"].values, row["fraction"].values):
        b, f = split_material(str(name))
        if b in materials.ALLOYS and np.isfinite(stored):
            f = float(stored)  # the stored fraction is exact; the display name is rounded
        base.append(b)
        fraction.append(f)
    nominal = DesignBatch(layer_names, np.array([base], dtype=object), np.array([fraction], dtype=float),
                          np.array([row["thickness_nm"].values], dtype=float))
    return spec, nominal


def run_tolerance(target, *, design: int | None = None, samples: int | None = None, out_dir=None,
                  storage: str | None = None, quiet: bool = False) -> int:
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
        spec, nominal = _load_front_design(target, design, storage, out)
        source = f"design {design} of {target}"
    else:
        spec, nominal = _load_stack(target, design, storage)
        out = Path(out_dir) if out_dir is not None else Path("runs") / target.stem
        source = str(target)
    for warning in getattr(spec, "located_warnings", ()):
        print(f"warning: {warning}", file=sys.stderr)

    progress = _ProgressBar("growth samples", quiet)
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
    if plot_tolerance is not None:
        figures = plot_tolerance(dataset, out)

    print(f"tunnelsmith tolerance: {source}")
    print(summary_table(study))
    print(f"\ntolerance: {path}")
    for figure in figures:
        print(f"plot:      {figure}")
    print(f"\nnote: {MODEL_CAUTION}")
    return 0
