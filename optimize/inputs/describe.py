"""The plain-text description of a spec that ``tunnelsmith check`` prints.
"""

from __future__ import annotations

from tunnelsmith.physics import materials as _materials
from tunnelsmith.optimize.inputs import limits
from tunnelsmith.optimize.inputs.dimensions import monolayer_span_nm, _count_designs, design_count, search_dimensions
from tunnelsmith.optimize.inputs.schema import Choices, ContactSpec, FloatRange, IntRange, LayerSpec, StackSpec
from tunnelsmith.optimize.inputs.tables import _fmt


def _range_text(value, unit: str = "", *, sizes: bool = True) -> str:
    """A fixed value or a range as written in the file, optionally with its size."""
    unit = f" {unit}" if unit else ""
    if isinstance(value, IntRange):
        return f"{value.min}–{value.max}{unit}" + (f" ({value.size} values)" if sizes else "")
    if isinstance(value, FloatRange):
        if value.size == 1:
            return f"{_fmt(value.min)}{unit}"
        text = f"{_fmt(value.min)}–{_fmt(value.max)}{unit}"
        if value.step is None:
            return text + " (continuous)" if sizes else text
        return text + (
            f" (step {_fmt(value.step)}, {value.size} values)" if sizes else f" step {_fmt(value.step)}"
        )
    return f"{_fmt(value)}{unit}"


def _span_text(lo: float, hi: float, digits: str = ".2f") -> str:
    lo_text, hi_text = f"{lo:{digits}}", f"{hi:{digits}}"
    return lo_text if lo_text == hi_text else f"{lo_text}–{hi_text}"


def _thickness_text(spec: StackSpec, layer: LayerSpec) -> str:
    ml_lo, ml_hi = monolayer_span_nm(spec, layer.material, layer.fraction)
    if layer.thickness_ml is not None:
        t = layer.thickness_ml
        n_lo, n_hi = (t.min, t.max) if isinstance(t, IntRange) else (t, t)
        return f"{_range_text(t, 'ml')} = {_span_text(n_lo * ml_lo, n_hi * ml_hi)} nm"
    t = layer.thickness_nm
    d_lo, d_hi = (t.min, t.max) if isinstance(t, FloatRange) else (t, t)
    return f"{_range_text(t, 'nm')} ≈ {_span_text(d_lo / ml_hi, d_hi / ml_lo, '.1f')} ml"


def _material_text(material: str | Choices, fraction) -> str:
    text = " | ".join(material.values) if isinstance(material, Choices) else material
    if isinstance(material, Choices):
        text = f"one of {text}"
    if fraction is not None:
        text += f", fraction {_range_text(fraction)}"
    return text


def _contact_text(contact: ContactSpec) -> str:
    fraction = f" (fraction {_fmt(contact.fraction)})" if contact.fraction is not None else ""
    return f"{contact.material}{fraction}, doping {contact.doping_cm3:.3g} cm^-3"


def _computation_text(spec: StackSpec) -> str:
    grid = spec.energy
    energy = f"zero-bias transmission ({grid.points} energies, {_fmt(grid.from_eV)} to {_fmt(grid.to_eV)} eV)"
    sweep = f"I–V sweep of {spec.bias.steps} biases ({_fmt(spec.bias.from_V)} to {_fmt(spec.bias.to_V)} V)"
    if not spec.is_campaign:
        return f"{energy} + {sweep} (a stack is solved in full)"
    if spec.needs_iv:
        return f"{energy} + {sweep}"
    return f"{energy} only"


def describe(spec: StackSpec) -> str:
    """Human-readable summary of a validated spec, as printed by ``tunnelsmith check``.

    Lists temperature, contacts, every layer (material or choices, fraction, thickness as
    a range in monolayers and in nm), the search space with the size of each dimension
    and the number of distinct designs, objectives, constraints, the computations they
    need and the memory of the largest one, search and tolerance settings, and warnings.
    """
    kind = "campaign" if spec.is_campaign else "stack"
    lines = [f'{kind} "{spec.name}" ({spec.path}, sha256 {spec.sha256[:12]})']
    if spec.description:
        lines.append(f"  {spec.description}")
    lines.append(f"temperature: {_fmt(spec.temperature_K)} K")
    lines.append(f"emitter:   {_contact_text(spec.emitter)}")
    lines.append(f"collector: {_contact_text(spec.collector)}")
    lines.append("layers (emitter → collector):")
    width = max(len(layer.name) for layer in spec.layers)
    for index, layer in enumerate(spec.layers, start=1):
        tie = f" [tied to {layer.like}]" if layer.like else ""
        absorption = f", absorption {_fmt(layer.absorption_eV)} eV" if layer.absorption_eV else ""
        lines.append(
            f"  {index:>2} {layer.name:<{width}}  {_material_text(layer.material, layer.fraction)}; "
            f"{_thickness_text(spec, layer)}{absorption}{tie}"
        )
    if spec.user_materials:
        lines.append(f"user materials: {', '.join(spec.user_materials)}")

    if spec.is_campaign:
        dimensions = search_dimensions(spec)
        lines.append(f"search space: {len(dimensions)} independent dimensions (tied layers add none)")
        for dim in dimensions:
            unit = {"thickness_ml": "ml", "thickness_nm": "nm"}.get(dim.parameter, "")
            domain = (
                " | ".join(dim.domain.values)
                if isinstance(dim.domain, Choices)
                else _range_text(dim.domain, unit, sizes=False)
            )
            size = "continuous" if dim.size is None else f"{dim.size} values"
            notes = f", shared with {', '.join(dim.tied)}" if dim.tied else ""
            if dim.parameter == "fraction":
                layer = next(layer for layer in spec.layers if layer.name == dim.layer)
                if isinstance(layer.material, Choices):
                    alloys = [n for n in layer.material.values if n in _materials.ALLOYS]
                    if len(alloys) < layer.material.size:
                        notes += f", applies to {' and '.join(alloys)} only"
            lines.append(f"  {dim.layer}.{dim.parameter}: {size} — {domain}{notes}")
        count = design_count(spec)
        if count is None:
            continuous = ", ".join(f"{d.layer}.{d.parameter}" for d in dimensions if d.size is None)
            discrete = _count_designs(spec, continuous_as_one=True)
            lines.append(
                f"  distinct designs: unlimited (continuous in {continuous}) × {discrete:,} "
                "discrete combinations"
            )
        else:
            lines.append(f"  distinct designs: {count:,}")
        lines.append("objectives:")
        lines.extend(f"  {objective.direction} {objective.label}" for objective in spec.objectives)
        if spec.constraints:
            lines.append("constraints:")
            lines.extend(f"  {constraint.label}" for constraint in spec.constraints)
        search = spec.search
        extras = "".join(
            [
                f", seed {search.seed}" if search.seed is not None else "",
                f", time limit {_fmt(search.timeout_h)} h" if search.timeout_h is not None else "",
            ]
        )
        lines.append(
            f"search: sampler {search.sampler}, {search.trials:,} trials in batches of {search.batch}{extras}"
        )
    lines.append(f"computation: {_computation_text(spec)}")
    largest = max(limits.run_steps(spec), key=lambda step: step.bytes)
    lines.append(f"memory: at most about {limits.bytes_text(largest.bytes)} per process (largest step: "
                 f"{largest.command}, {largest.what})")

    tolerance = spec.tolerance
    if tolerance is not None:
        lines.append(
            f"tolerance: {tolerance.samples} samples, thickness σ {_fmt(tolerance.thickness_sigma_ml)} ml, "
            f"growth rate σ {tolerance.growth_rate_sigma:.3g}, fraction σ "
            f"{_fmt(tolerance.fraction_sigma)}, seed {tolerance.seed}"
        )
        if tolerance.robust is not None:
            robust = tolerance.robust
            statistic = f"{_fmt(robust.quantile)} quantile" if robust.statistic == "quantile" else "mean"
            lines.append(f"  robust objectives: {statistic} over {robust.samples} grown variants per trial")
        lines.extend(f"  window {window.label}" for window in tolerance.windows)
    if spec.warnings:
        lines.append("warnings:")
        lines.extend(f"  {warning}" for warning in spec.warnings)
    return "\n".join(lines)
