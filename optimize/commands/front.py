"""``tunnelsmith front``: rebuild a run's front, trial table and plots from its storage,
and with ``--pick`` list the designs that pass an engineer's filters, ranked."""

from __future__ import annotations

from pathlib import Path

import xarray as xr

from tunnelsmith.optimize.commands.outputs import rebuild_outputs
from tunnelsmith.optimize.results.choice import apply_pick, parse_pick
from tunnelsmith.optimize.results.front import design_lines


def rebuild_front(run_dir, storage: str | None = None, quiet: bool = False, pick: str | None = None,
                  plots: bool = True) -> int:
    """Rebuild ``front.nc``, ``trials.nc`` and plots of ``run_dir``; returns exit status 0.

    Reads the storage only, so it is safe while workers are still adding trials. With
    ``pick`` (syntax in :mod:`tunnelsmith.optimize.results.choice`) the summary is the
    list of front designs that pass its filters, in its order.
    """
    chosen = parse_pick(pick) if pick is not None else None  # a bad expression fails before any work
    rebuild_outputs(run_dir, storage=storage, quiet=quiet or chosen is not None, plots=plots)
    if chosen is not None:
        front = xr.load_dataset(Path(run_dir) / "front.nc")
        order = apply_pick(front, chosen)
        twins = front["mirror_of"].values  # trial number of the twin, or -1
        print(f'{len(order)} of {front.sizes.get("design", 0)} front designs pass "{chosen.text}":')
        for d in order:
            note = f" (mirror image of trial {int(twins[d])})" if twins[d] >= 0 else ""
            print("\n".join(design_lines(front, int(d), note)))
    return 0
