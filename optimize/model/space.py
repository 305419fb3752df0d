"""Search space of a campaign: Optuna distributions and trial parameters → designs.

Every independent searched value of a campaign (:func:`tunnelsmith.optimize.inputs.dimensions.search_dimensions`)
is one Optuna parameter named ``"<layer>.<parameter>"``:

=====================  ========================================================
``<layer>.thickness_ml``  :class:`~optuna.distributions.IntDistribution` (whole monolayers)
``<layer>.thickness_nm``  :class:`~optuna.distributions.FloatDistribution` (nm, with ``step``
                          when the range has one)
``<layer>.fraction``      :class:`~optuna.distributions.FloatDistribution` (alloy fraction of
                          the first-named cation, with ``step`` when given)
``<layer>.material``      :class:`~optuna.distributions.CategoricalDistribution` of names
=====================  ========================================================

A layer tied to another one with ``like`` adds no parameter: it reads the parameters of
the root layer of its tie (the spec stores the root's name in ``like``). A searched
``fraction`` applies only where the chosen material is an alloy key (``"AlGaAs"``);
a name with its composition written out (``"Al0.3Ga0.7As"``) keeps that composition.

A thickness in monolayers becomes nm through the monolayer of the material actually
chosen for that design (half its cubic lattice constant, growth on (001);
:func:`tunnelsmith.optimize.model.stack.thickness_from_monolayers`), so the same parameter value means a
slightly different thickness in InAs than in In0.53Ga0.47As.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from functools import lru_cache
from typing import Any

import numpy as np
from optuna.distributions import BaseDistribution, CategoricalDistribution, FloatDistribution, IntDistribution

from tunnelsmith.optimize.inputs.schema import Choices, FloatRange, IntRange
from tunnelsmith.optimize.inputs.dimensions import design_count, search_dimensions
from tunnelsmith.optimize.model.stack import DesignBatch, split_material, thickness_from_monolayers
from tunnelsmith.physics import materials

__all__ = ["parameter_name", "distributions", "suggest", "batch_from_params", "space_size"]


def parameter_name(layer: str, parameter: str) -> str:
    """Optuna parameter name of a layer value, e.g. ``"well.thickness_ml"``."""
    return f"{layer}.{parameter}"


def _distribution(domain) -> BaseDistribution:
    if isinstance(domain, IntRange):
        return IntDistribution(int(domain.min), int(domain.max))
    if isinstance(domain, FloatRange):
        return FloatDistribution(float(domain.min), float(domain.max), step=domain.step)
    if isinstance(domain, Choices):
        return CategoricalDistribution(tuple(domain.values))
    raise TypeError(f"not a search range: {domain!r}")


def distributions(spec) -> dict[str, BaseDistribution]:
    """Optuna distribution of every independent search dimension, in layer order."""
    return {parameter_name(d.layer, d.parameter): _distribution(d.domain) for d in search_dimensions(spec)}


def suggest(trial, spec, dists: Mapping[str, BaseDistribution] | None = None) -> dict[str, Any]:
    """Draw every search parameter of ``spec`` on an Optuna trial (``trial.suggest_*``).

    A trial created from an enqueued parameter set gets those values back. ``dists``:
    the result of :func:`distributions` when the caller keeps it.
    """
    params = {}
    for name, dist in (dists if dists is not None else distributions(spec)).items():
        if isinstance(dist, IntDistribution):
            params[name] = trial.suggest_int(name, dist.low, dist.high)
        elif isinstance(dist, FloatDistribution):
            params[name] = trial.suggest_float(name, dist.low, dist.high, step=dist.step)
        else:
            params[name] = trial.suggest_categorical(name, dist.choices)
    return params


def space_size(spec) -> int | float:
    """Number of distinct designs of the search space; ``math.inf`` if any range is continuous."""
    count = design_count(spec)
    return math.inf if count is None else count


@lru_cache(maxsize=256)
def _split(name: str) -> tuple[str, float]:
    return split_material(name)


def _column(layer, parameter: str, params: Sequence[Mapping[str, Any]]) -> np.ndarray | None:
    """Values of one layer setting over the batch (searched or fixed); None if unset."""
    value = getattr(layer, parameter)
    if value is None:
        return None
    if isinstance(value, (IntRange, FloatRange, Choices)):
        name = parameter_name(layer.like or layer.name, parameter)
        dtype = object if parameter == "material" else float
        return np.array([p[name] for p in params], dtype=dtype)
    return np.full(len(params), value, dtype=object if parameter == "material" else float)


def batch_from_params(spec, params: Sequence[Mapping[str, Any]]) -> DesignBatch:
    """Concrete designs of ``spec`` from ``B`` parameter dicts (one per trial).

    Parameters
    ----------
    spec : tunnelsmith.optimize.inputs.schema.StackSpec
    params : sequence of dict
        Parameter name → value, as ``trial.params``; every searched parameter present.

    Returns
    -------
    DesignBatch
        ``B`` designs; thicknesses in nm, fractions NaN for binaries and user materials.

    Raises
    ------
    KeyError
        When a parameter dict lacks a searched parameter.
    """
    n_designs = len(params)
    base = np.empty((n_designs, len(spec.layers)), dtype=object)
    fraction = np.full(base.shape, np.nan)
    thickness_nm = np.zeros(base.shape)
    for j, layer in enumerate(spec.layers):
        names = _column(layer, "material", params)
        split = [_split(str(name)) for name in names]
        base[:, j] = [b for b, _ in split]
        parsed = np.array([f for _, f in split], dtype=float)
        chosen = _column(layer, "fraction", params)
        is_alloy_key = np.array([str(name) in materials.ALLOYS for name in names], dtype=bool)
        fraction[:, j] = parsed if chosen is None else np.where(is_alloy_key, chosen, parsed)
        monolayers = _column(layer, "thickness_ml", params)
        if monolayers is not None:
            thickness_nm[:, j] = thickness_from_monolayers(
                base[:, j], fraction[:, j], monolayers, spec.temperature_K, spec.user_materials)
        else:
            thickness_nm[:, j] = _column(layer, "thickness_nm", params)
    return DesignBatch(tuple(layer.name for layer in spec.layers), base, fraction, thickness_nm)
