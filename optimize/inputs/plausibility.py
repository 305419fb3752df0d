"""Legal but implausible values: warnings that name the key, the value and the usual range.

A value can be valid TOML and valid physics input and still almost certainly be a slip
(a doping of 1e24 cm^-3, a 500 V sweep). :func:`plausibility_warnings` lists every such
value of a spec with the range that is usual and where that range comes from; the
commands print them (exit status 0) and ``--strict`` turns them into errors.
"""

from __future__ import annotations

import numpy as np

from tunnelsmith.optimize.inputs.dimensions import design_count, thickness_span_nm
from tunnelsmith.optimize.inputs.schema import StackSpec

#: Net donor doping of III-V contact layers: below 1e14 cm^-3 is undoped background,
#: above 1e20 cm^-3 exceeds the solubility of the usual donors (common practice).
DOPING_RANGE_cm3 = (1e14, 1e20)
#: Resonant-tunnelling diodes peak below about 2 V; beyond +-5 V a stack of a few tens
#: of nm breaks down long before (common practice).
BIAS_LIMIT_V = 5.0
#: Cryostats reach 1 K; III-V growth and device parameters are tabulated up to about
#: 500 K (Vurgaftman, Meyer & Ram-Mohan, J. Appl. Phys. 89, 5815, 2001, sec. II).
TEMPERATURE_RANGE_K = (1.0, 500.0)
#: Layers of a tunnelling structure are a few nm; past 50 nm a layer is a bulk region
#: the coherent transfer-matrix model does not describe (common practice).
LAYER_LIMIT_nm = 50.0


def _fmt(value: float) -> str:
    return f"{value:g}"


def plausibility_warnings(spec: StackSpec) -> list[tuple[str, str]]:
    """``(key, message)`` for every implausible value of ``spec`` (empty when all are usual)."""
    found: list[tuple[str, str]] = []
    lo, hi = DOPING_RANGE_cm3
    for side in ("emitter", "collector"):
        doping = getattr(spec, side).doping_cm3
        if not lo <= doping <= hi:
            found.append((f"{side}.doping_cm3", f"doping_cm3 = {_fmt(doping)} is outside the usual {_fmt(lo)} to "
                          f"{_fmt(hi)} cm^-3 of doped III-V contacts (common practice)"))
    if spec.bias.steps > 1 and max(abs(spec.bias.from_V), abs(spec.bias.to_V)) > BIAS_LIMIT_V:
        found.append(("bias", f"the sweep from {_fmt(spec.bias.from_V)} to {_fmt(spec.bias.to_V)} V goes beyond "
                      f"+-{_fmt(BIAS_LIMIT_V)} V, past the breakdown of any tunnelling stack (common practice)"))
    t_lo, t_hi = TEMPERATURE_RANGE_K
    if not t_lo <= spec.temperature_K <= t_hi:
        found.append(("temperature_K", f"temperature_K = {_fmt(spec.temperature_K)} is outside {_fmt(t_lo)} to "
                      f"{_fmt(t_hi)} K, the range of the material parameters (Vurgaftman et al., J. Appl. Phys. "
                      "89, 5815, 2001)"))
    for layer in spec.layers:
        thickest = thickness_span_nm(spec, layer)[1]
        if thickest > LAYER_LIMIT_nm:
            found.append((f'layer "{layer.name}".thickness', f"the layer can be {thickest:.1f} nm thick, more than "
                          f"the {_fmt(LAYER_LIMIT_nm)} nm of a tunnelling layer; the coherent model does not "
                          "describe bulk regions (common practice)"))
    for index, objective in enumerate(spec.objectives, start=1):
        if objective.metric == "resonance_energy_eV" and objective.target is not None:
            if not spec.energy.from_eV <= objective.target <= spec.energy.to_eV:
                found.append((f"objective[{index}].target", f"the target {_fmt(objective.target)} eV lies outside "
                              f"the energy window {_fmt(spec.energy.from_eV)} to {_fmt(spec.energy.to_eV)} eV, "
                              "where no resonance is ever found"))
    if spec.model.nonparabolic:
        found += _band_alignment_warnings(spec)
    if spec.is_campaign:
        count = design_count(spec)
        if count is not None and spec.search.trials > count:
            found.append(("search.trials", f"trials = {spec.search.trials} is more than the {count} distinct designs "
                          "of the search space; the search repeats designs"))
    return found


def _candidates(spec, material, fraction) -> list[tuple[str, float | None]]:
    """Every (material, fraction) a layer or contact can take (range ends for fractions)."""
    from tunnelsmith.optimize.inputs.schema import Choices, FloatRange

    names = material.values if isinstance(material, Choices) else (material,)
    fractions = [fraction.min, fraction.max] if isinstance(fraction, FloatRange) else [fraction]
    return [(name, x) for name in names for x in fractions]


def _band_alignment_warnings(spec: StackSpec) -> list[tuple[str, str]]:
    """Neighbours whose gaps overlap in a staggered or broken-gap way, in non-parabolic mode.

    The two-band (Kane) non-parabolic mass of the model describes a conduction band above
    its own valence band; where the conduction band of one layer lies inside or below the
    valence band of its neighbour (broken gap, type III) or both band edges of one layer lie
    above those of the other (staggered, type II), interband tunnelling that the model
    leaves out decides the current (Vurgaftman, Meyer & Ram-Mohan, J. Appl. Phys. 89, 5815,
    2001, sec. IV, for the alignments).
    """
    import warnings

    from tunnelsmith.physics import materials

    sides = [("emitter", spec.emitter.material, spec.emitter.fraction)]
    sides += [(f'layer "{layer.name}"', layer.material, layer.fraction) for layer in spec.layers]
    sides.append(("collector", spec.collector.material, spec.collector.fraction))
    edges = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for key, material, fraction in sides:
            values = []
            for name, x in _candidates(spec, material, fraction):
                if name in spec.user_materials:
                    continue  # a user material's valence band is not known (its gap only sets the mass)
                try:
                    record = materials.material(name, spec.temperature_K, fraction=x, user=spec.user_materials)
                except (KeyError, ValueError):
                    continue
                if np.isfinite(record.gap_eV):
                    values.append((name if x is None else f"{name} (x = {x:g})", record.conduction_band_eV,
                                   record.conduction_band_eV - record.gap_eV))
            edges.append((key, values))
    found, seen = [], set()
    for (key_a, a_values), (key_b, b_values) in zip(edges, edges[1:]):
        for name_a, ec_a, ev_a in a_values:
            for name_b, ec_b, ev_b in b_values:
                if (name_a, name_b) in seen or name_a == name_b:
                    continue
                broken = ec_a < ev_b or ec_b < ev_a
                staggered = (ec_a - ec_b) * (ev_a - ev_b) > 0
                if broken or staggered:
                    seen.add((name_a, name_b))
                    kind = "a broken-gap (type III)" if broken else "a staggered (type II)"
                    found.append((f"{key_b}.material", f"{name_a} next to {name_b} is {kind} pair; with [model] "
                                  "nonparabolic = true the two-band mass assumes a conduction band above its own "
                                  "valence band, and interband tunnelling is not modelled (Vurgaftman et al., "
                                  "J. Appl. Phys. 89, 5815, 2001)"))
    return found
