"""A design of a campaign run's front, for the commands that take ``RUN_DIR --design N``.

``solve``, ``tolerance`` and ``export`` accept a run directory with a trial number in
place of a stack file; they all go through :func:`load_front_design` (the campaign spec
and the design's layers) and :func:`design_stack_spec` (the design as a stack file).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.inputs import reader
from tunnelsmith.optimize.io import write_text
from tunnelsmith.optimize.model.stack import DesignBatch, split_material
from tunnelsmith.optimize.results.stack_file import stack_toml
from tunnelsmith.physics import materials

STACK_NAME = "stack.toml"


def load_front_design(run_dir: Path, design, storage, out_dir: Path):
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


def design_stack_spec(run_dir: Path, design, storage, out_dir: Path):
    """Write design ``design`` of ``run_dir`` as ``out_dir/stack.toml`` and load it.

    Returns
    -------
    (StackSpec, Path, StackSpec)
        The stack spec (every value fixed), the file written, and the campaign spec the
        design came from (its objectives and constraints).
    """
    out_dir = Path(out_dir)
    campaign, nominal = load_front_design(Path(run_dir), design, storage, out_dir)
    path = write_text(out_dir / STACK_NAME, stack_toml(campaign, nominal, source=f"design {design} of {run_dir}"))
    return reader.load(path), path, campaign
