"""The search dimensions of a campaign spec and the size of its discrete design space.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from tunnelsmith.physics import materials as _materials
from tunnelsmith.optimize.inputs.schema import Choices, FloatRange, IntRange, StackSpec


@dataclass(frozen=True)
class Dimension:
    """One independent search dimension: a searched value of an untied layer.

    ``parameter`` is ``"material"``, ``"fraction"``, ``"thickness_ml"`` or
    ``"thickness_nm"``; ``tied`` lists the layers that copy this value.
    """

    layer: str
    parameter: str
    domain: IntRange | FloatRange | Choices
    tied: tuple[str, ...] = ()

    @property
    def size(self) -> int | None:
        """Number of distinct values, ``None`` for a continuous range."""
        return self.domain.size


def search_dimensions(spec: StackSpec) -> tuple[Dimension, ...]:
    """The independent search dimensions of a spec, in layer order (ties add none)."""
    dimensions = []
    for layer in spec.layers:
        if layer.like is not None:
            continue
        tied = tuple(other.name for other in spec.layers if other.like == layer.name)
        for parameter in ("material", "fraction", "thickness_ml", "thickness_nm"):
            value = getattr(layer, parameter)
            if isinstance(value, (IntRange, FloatRange, Choices)):
                dimensions.append(Dimension(layer.name, parameter, value, tied))
    return tuple(dimensions)


def design_count(spec: StackSpec) -> int | None:
    """Number of distinct designs of the search space, ``None`` if any range is continuous.

    The product over independent layers of (thickness values) x (material and fraction
    combinations); a searched fraction counts only for the alloy-key choices, which are
    the only ones it applies to. Tied layers add nothing.
    """
    return _count_designs(spec, continuous_as_one=False)


def _count_designs(spec: StackSpec, *, continuous_as_one: bool) -> int | None:
    def size(value) -> int | None:
        if isinstance(value, (IntRange, FloatRange)):
            n = value.size
            return 1 if n is None and continuous_as_one else n
        return 1

    total = 1
    for layer in spec.layers:
        if layer.like is not None:
            continue
        names = layer.material.values if isinstance(layer.material, Choices) else (layer.material,)
        alloys = sum(name in _materials.ALLOYS for name in names)
        fraction_size = size(layer.fraction) if alloys else 1
        thickness_size = size(layer.thickness_ml if layer.thickness_ml is not None else layer.thickness_nm)
        if thickness_size is None or fraction_size is None:
            return None
        total *= (len(names) - alloys + alloys * fraction_size) * thickness_size
    return total


def monolayer_span_nm(spec: StackSpec, material: str | Choices, fraction) -> tuple[float, float]:
    """Smallest and largest monolayer thickness (nm) over a layer's possible materials."""
    names = material.values if isinstance(material, Choices) else (material,)
    values = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for name in names:
            fractions = [None]
            if name in _materials.ALLOYS:
                fractions = [fraction.min, fraction.max] if isinstance(fraction, FloatRange) else [fraction]
            for x in fractions:
                values.append(
                    _materials.material(
                        name, spec.temperature_K, fraction=x, user=spec.user_materials
                    ).monolayer_nm
                )
    return min(values), max(values)


def thickness_span_nm(spec: StackSpec, layer) -> tuple[float, float]:
    """Thinnest and thickest a layer can be (nm) over its range and possible materials."""
    if layer.thickness_ml is not None:
        ml_lo, ml_hi = monolayer_span_nm(spec, layer.material, layer.fraction)
        t = layer.thickness_ml
        n_lo, n_hi = (t.min, t.max) if isinstance(t, IntRange) else (t, t)
        return n_lo * ml_lo, n_hi * ml_hi
    t = layer.thickness_nm
    return (t.min, t.max) if isinstance(t, FloatRange) else (t, t)
