"""The Python interface for notebooks and scripts: the same operations as the commands.

Every function takes a spec (from :func:`load`) or the path of a stack or campaign file
and returns xarray objects with units in their attributes, the same content as the
netCDF files the command line writes. Results rank designs; they do not replace
measurement of grown wafers.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr

from tunnelsmith.optimize.inputs.reader import load
from tunnelsmith.optimize.inputs.schema import StackSpec


def _spec(spec_or_path) -> StackSpec:
    return spec_or_path if isinstance(spec_or_path, StackSpec) else load(spec_or_path)


def solve(spec_or_path) -> xr.Dataset:
    """Transmission, levels, band profile, I–V and metrics of one stack (``solution.nc``)."""
    from tunnelsmith.optimize.results.solution import solve_dataset

    return solve_dataset(_spec(spec_or_path))


def transmission(spec_or_path, energy_eV=None, bias_V=0.0) -> xr.DataArray:
    """Flux-normalised transmission T(V, E) of one stack.

    Parameters
    ----------
    spec_or_path : StackSpec or path-like
        A stack file (every value fixed).
    energy_eV : array_like, optional
        Energies above the emitter band edge (default: the file's ``[energy]`` grid).
    bias_V : float or array_like, default 0
        Applied biases (positive lowers the collector).

    Returns
    -------
    xarray.DataArray
        Dimensions ``(bias, energy)``; the ``[model] slice_nm`` of the file is used.
    """
    from tunnelsmith.optimize.model.evaluation import spec_profile
    from tunnelsmith.optimize.model.stack import nominal_batch, to_device
    from tunnelsmith.physics.transfer import scattering

    spec = _spec(spec_or_path)
    energy = np.asarray(spec.energy.values if energy_eV is None else energy_eV, dtype=float).ravel()
    bias = np.atleast_1d(np.asarray(bias_V, dtype=float)).ravel()
    device = to_device(spec, nominal_batch(spec))
    profile = spec_profile(spec, device, bias)
    values = scattering(energy, **profile.arrays).transmission[0]
    return xr.DataArray(values, dims=("bias", "energy"),
                        coords={"bias": ("bias", bias, {"units": "V"}), "energy": ("energy", energy, {"units": "eV"})},
                        name="transmission", attrs={"units": "1", "long_name": "flux-normalised transmission"})


def run_campaign(path, *, out_dir=None, trials: int | None = None, timeout_s: float | None = None,
                 workers: int = 1, storage: str | None = None, quiet: bool = True) -> xr.Dataset:
    """Start or resume the campaign of ``path`` and return its Pareto front (``front.nc``)."""
    from tunnelsmith.optimize.commands.campaign_run import run_campaign as run
    from tunnelsmith.optimize.search.layout import default_run_dir

    run(path, out_dir=out_dir, trials=trials, timeout_s=timeout_s, workers=workers, storage=storage, quiet=quiet)
    return open_front(out_dir if out_dir is not None else default_run_dir(load(path)))


def open_front(run_dir) -> xr.Dataset:
    """The Pareto front of a campaign run as a Dataset (read fully; the file is not held open)."""
    return xr.load_dataset(Path(run_dir) / "front.nc")


def tolerance(spec_or_path, *, samples: int | None = None) -> xr.Dataset:
    """Growth-error Monte Carlo of one stack: yields, spreads and sensitivities (``tolerance.nc``)."""
    from tunnelsmith.optimize.model.stack import nominal_batch
    from tunnelsmith.optimize.results.tolerance import run_study, tolerance_dataset

    spec = _spec(spec_or_path)
    return tolerance_dataset(run_study(spec, nominal_batch(spec), samples=samples, source=str(spec.path)))
