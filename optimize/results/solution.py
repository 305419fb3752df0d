"""The full solution of one stack as an xarray Dataset (``solution.nc``).

Flow: stack spec → one design → Device → physics (biased profiles, transmission at
every bias, quasi-bound levels, I–V, figures of merit) → one Dataset.
"""

from __future__ import annotations

import numpy as np
import xarray as xr
from tunnelsmith.optimize.io import netcdf_name, provenance_attrs
from tunnelsmith.optimize.model.stack import nominal_batch, to_device
from tunnelsmith.physics import metrics as metrics_module
from tunnelsmith.physics.profile import interface_positions_nm
from tunnelsmith.physics.resonance import closed_box_states, find_resonances
from tunnelsmith.physics.transfer import scattering
from tunnelsmith.optimize.model.evaluation import evaluate_metrics, spec_profile


#: Emitter and collector are drawn this far beyond the layers in band diagrams (nm).
CONTACT_MARGIN_nm = 5.0


def solution_requests(spec) -> list:
    """Every catalogue metric the stack file can define, plus those it asks for."""
    requests = {r.label: r for r in spec.metric_requests}
    for name, info in metrics_module.CATALOGUE.items():
        if info.takes_bias:
            continue  # needs an at_bias_V, which only a spec window or objective gives
        if info.needs == "iv" and spec.bias.steps < 3:
            continue
        request = metrics_module.MetricRequest(name)
        requests.setdefault(request.label, request)
    return list(requests.values())


def solve_dataset(spec) -> xr.Dataset:
    """Compute the full solution of a stack file without ranges."""
    batch = nominal_batch(spec)
    device = to_device(spec, batch)
    energy_eV = spec.energy.values
    bias_V = spec.bias.values
    requests = solution_requests(spec)
    evaluation = evaluate_metrics(spec, device, requests)
    profile = spec_profile(spec, device, bias_V)
    transmission = scattering(energy_eV, **profile.arrays).transmission[0]  # (nV, nE)
    window = (float(energy_eV[0]), float(energy_eV[-1]))
    levels = find_resonances(**profile.arrays, window_eV=window, max_levels=spec.model.max_levels)

    coords = {
        "energy": ("energy", energy_eV, {"units": "eV", "long_name": "electron energy above the emitter band edge"}),
        "bias": ("bias", bias_V, {"units": "V", "long_name": "applied bias (collector lowered)"}),
        "level": ("level", np.arange(levels.energy_eV.shape[-1]), {"long_name": "quasi-bound level index"}),
        "layer": ("layer", list(batch.layer_names), {"long_name": "layer name"}),
    }
    data = {
        "transmission": (("bias", "energy"), transmission,
                         {"units": "1", "long_name": "flux-normalised transmission probability"}),
        "resonance_energy": (("bias", "level"), levels.energy_eV[0],
                             {"units": "eV", "long_name": "quasi-bound level energy E_r (pole real part)"}),
        "resonance_width": (("bias", "level"), levels.width_eV[0],
                            {"units": "eV", "long_name": "level width Gamma (FWHM, -2 x pole imaginary part)"}),
    }
    data.update(_profile_variables(profile, batch, device))
    if evaluation.current_density_A_cm2 is not None:
        data["current_density"] = (("bias",), _on_sweep(evaluation, bias_V),
                                   {"units": "A/cm2", "long_name": "Tsu-Esaki current density"})
    if evaluation.intrinsic_current_density_A_cm2 is not None:
        # With a series resistance `current_density` is what an upward sweep of the applied
        # bias records; the curve across the active region alone is kept beside it.
        resistance = spec.model.series_resistance_ohm_cm2
        data["current_density"][2].update(
            long_name=f"current density at the applied bias, series resistance {resistance:g} Ohm cm2 "
                      "(upward sweep)", bistable=int(bool(evaluation.bistable[0])))
        data["intrinsic_current_density"] = (("bias",), np.asarray(evaluation.intrinsic_current_density_A_cm2)[0],
                                             {"units": "A/cm2", "long_name": "Tsu-Esaki current density at the "
                                              "bias across the active region (no series resistance)"})
    for label, values in evaluation.values.items():
        info = metrics_module.CATALOGUE[label.split("@")[0]]
        reason = str(evaluation.reasons[label][0])
        attrs = {"units": info.units, "long_name": info.long_name}
        if reason:
            attrs["undefined_because"] = reason
        data[netcdf_name(label)] = ((), float(values[0]), attrs)
    data.update(_state_variables(spec, device, evaluation, bias_V))

    attrs = provenance_attrs(spec.text)
    attrs.update(title=f"tunnelsmith solution of {spec.path.name}", temperature_K=spec.temperature_K)
    return xr.Dataset({k: xr.Variable(*v) for k, v in data.items()},
                      coords={k: xr.Variable(*v) for k, v in coords.items()}, attrs=attrs)


def _on_sweep(evaluation, bias_V) -> np.ndarray:
    """Current density on the spec's sweep (evaluation may carry extra biases)."""
    sweep = np.asarray(evaluation.bias_V)
    index = [int(np.argmin(np.abs(sweep - v))) for v in bias_V]
    return np.asarray(evaluation.current_density_A_cm2)[0, index]


def _profile_variables(profile, batch, device) -> dict:
    """Band edge as a step function of position, and the layer extents."""
    thickness = np.asarray(profile.thickness_nm)[0, 0]  # (L',)
    edges = np.concatenate([[0.0], np.cumsum(thickness[1:-1])])
    start = np.concatenate([[-CONTACT_MARGIN_nm], edges])
    end = np.concatenate([edges, [edges[-1] + CONTACT_MARGIN_nm]])
    position = np.stack([start, end], axis=-1).ravel()  # two samples per slice → steps
    band = np.repeat(np.real(profile.band_edge_eV[0]), 2, axis=-1)  # (nV, 2 L')
    interfaces = interface_positions_nm(np.asarray(device.thickness_nm)[0])
    return {
        "band_edge": (("bias", "position"), band,
                      {"units": "eV", "long_name": "conduction-band edge (piecewise constant, sliced)"}),
        "position_nm": (("position",), position, {"units": "nm", "long_name": "position from the emitter interface"}),
        "layer_start": (("layer",), interfaces[:-1], {"units": "nm", "long_name": "layer start position"}),
        "layer_end": (("layer",), interfaces[1:], {"units": "nm", "long_name": "layer end position"}),
        "layer_material": (("layer",), np.array(batch.material_names()[0], dtype=str),
                           {"long_name": "layer material"}),
        "layer_thickness_nm": (("layer",), batch.thickness_nm[0], {"units": "nm", "long_name": "layer thickness"}),
    }


def _state_variables(spec, device, evaluation, bias_V) -> dict:
    """|psi|^2 of the closed-box states at zero bias and at the current peak."""
    biases = [0.0]
    peak = evaluation.values.get("peak_voltage_V")
    if peak is not None and np.isfinite(peak[0]):
        biases.append(float(bias_V[int(np.argmin(np.abs(bias_V - peak[0])))]))
    window = (float(spec.energy.values[0]), float(spec.energy.values[-1]))
    profile = spec_profile(spec, device, biases)
    energies, densities, grid = [], [], None
    for index in range(len(biases)):
        energy, position, probability = closed_box_states(
            np.real(profile.band_edge_eV[0, index]), profile.mass[0, index], profile.thickness_nm[0, index],
            window_eV=window,
        )
        grid = position if grid is None else grid
        energies.append(energy)
        densities.append(np.array([np.interp(grid, position, p) for p in probability]).reshape(len(energy), grid.size))
    n_states = max((len(e) for e in energies), default=0)
    state_energy = np.full((len(biases), n_states), np.nan)
    state_probability = np.full((len(biases), n_states, grid.size), np.nan)
    for index, (energy, density) in enumerate(zip(energies, densities)):
        state_energy[index, : len(energy)] = energy
        state_probability[index, : len(energy)] = density
    return {
        "state_bias": (("state_bias",), np.array(biases), {"units": "V", "long_name": "bias of the drawn states"}),
        "state_position": (("state_position",), grid, {"units": "nm", "long_name": "position of |psi|^2 samples"}),
        "state_energy": (("state_bias", "state"), state_energy,
                         {"units": "eV", "long_name": "closed-box state energy"}),
        "state_probability": (("state_bias", "state", "state_position"), state_probability,
                              {"units": "1/nm", "long_name": "closed-box |psi|^2, normalised"}),
    }


def metrics_table(dataset: xr.Dataset) -> str:
    """A short terminal table of the scalar figures of merit."""
    rows = []
    for name, variable in dataset.data_vars.items():
        if variable.ndim == 0:
            value = float(variable.values)
            text = f"{value:.4g}" if np.isfinite(value) else f"undefined ({variable.attrs.get('undefined_because', '')})"
            rows.append(f"  {name:<26} {text:>14}  {variable.attrs.get('units', '')}")
    return "\n".join(rows)
