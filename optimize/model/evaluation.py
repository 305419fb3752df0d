"""The physics of a spec's designs, under the model settings the file states.

One place turns a spec's ``[energy]``, ``[bias]`` and ``[model]`` settings into the
arguments of :func:`tunnelsmith.physics.metrics.evaluate` and of the biased profile, so
that a setting such as ``slice_nm`` drives every quantity it names — the stored
transmission, the current and every metric — wherever designs are evaluated (campaign
objectives, tolerance samples, solution and front files).
"""

from __future__ import annotations

from tunnelsmith.physics.metrics import Evaluation, evaluate
from tunnelsmith.physics.profile import DEFAULT_SLICE_nm, Profile, biased_profile


def slice_thickness_nm(spec) -> float:
    """The slice thickness of sloped layers: ``[model] slice_nm``, else the physics default."""
    return DEFAULT_SLICE_nm if spec.model.slice_nm is None else float(spec.model.slice_nm)


def evaluate_metrics(spec, device, requests) -> Evaluation:
    """:func:`~tunnelsmith.physics.metrics.evaluate` of ``device`` with every setting of ``spec``."""
    return evaluate(device, list(requests), energy_eV=spec.energy.values, bias_V=spec.bias.values,
                    max_levels=spec.model.max_levels, slice_nm=slice_thickness_nm(spec),
                    series_resistance_ohm_cm2=spec.model.series_resistance_ohm_cm2)


def spec_profile(spec, device, bias_V) -> Profile:
    """The sliced band profile of ``device`` at ``bias_V`` with the spec's slice thickness."""
    return biased_profile(device, bias_V, slice_nm=slice_thickness_nm(spec))
