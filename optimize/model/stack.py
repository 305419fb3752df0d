"""Concrete designs: from layer values (material, fraction, thickness) to physics arrays.

A :class:`DesignBatch` holds ``B`` concrete designs of one spec's layer template as
plain arrays. It is what the search space produces from trials, what the tolerance
study perturbs, and what :func:`to_device` turns into a :class:`physics.device.Device`.
Alloys are looked up vectorised over their fraction, so a batch of thousands of
slightly different compositions costs one call per layer.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from tunnelsmith.physics import materials
from tunnelsmith.physics.device import Device


@dataclass(frozen=True)
class DesignBatch:
    """``B`` concrete designs of ``n`` layers between the contacts.

    Attributes
    ----------
    layer_names : tuple of str, length n
    base : ndarray of object, shape (B, n)
        Binary name (``"GaAs"``), alloy key (``"AlGaAs"``) or user-material name.
    fraction : ndarray of float, shape (B, n)
        Alloy fraction of the first-named cation; NaN for binaries and user materials.
    thickness_nm : ndarray of float, shape (B, n)
    """

    layer_names: tuple[str, ...]
    base: np.ndarray
    fraction: np.ndarray
    thickness_nm: np.ndarray

    @property
    def n_designs(self) -> int:
        return self.thickness_nm.shape[0]

    def material_names(self) -> np.ndarray:
        """Display names such as ``"Al0.3Ga0.7As"``, shape (B, n)."""
        names = np.empty(self.base.shape, dtype=object)
        for index, base in np.ndenumerate(self.base):
            fraction = self.fraction[index]
            names[index] = base if np.isnan(fraction) else materials.canonical_name(base, float(fraction))
        return names

    def take(self, indices) -> DesignBatch:
        return DesignBatch(self.layer_names, self.base[indices], self.fraction[indices], self.thickness_nm[indices])


def split_material(name: str, fraction: float | None = None) -> tuple[str, float]:
    """``("Al0.3Ga0.7As", None)`` or ``("AlGaAs", 0.3)`` → ``("AlGaAs", 0.3)``; NaN for non-alloys."""
    if fraction is not None:
        return name, float(fraction)
    try:
        base, parsed = materials.parse_name(name)
    except (ValueError, KeyError):
        return name, float("nan")  # user-defined names do not parse; they are looked up as they are
    return base, float("nan") if parsed is None else float(parsed)


def material_arrays(base: np.ndarray, fraction: np.ndarray, temperature_K: float, user=None) -> dict[str, np.ndarray]:
    """Band edge, mass, gap and lattice constant for arrays of (base, fraction).

    Each distinct alloy is evaluated once, vectorised over all its fractions; binaries
    and user materials once per name.
    """
    base = np.asarray(base, dtype=object)
    fraction = np.asarray(fraction, dtype=float)
    keys = ("conduction_band_eV", "mass", "gap_eV", "lattice_nm")
    out = {key: np.full(base.shape, np.nan) for key in keys}
    for name in set(base.ravel().tolist()):
        where = base == name
        if name in materials.ALLOYS:
            values = materials.alloy_arrays(name, fraction[where], temperature_K)
        else:
            with warnings.catch_warnings():
                # The spec already reported indirect-valley materials once, when it was loaded.
                warnings.simplefilter("ignore", materials.IndirectValleyWarning)
                record = materials.material(name, temperature_K, user=user)
            values = {key: getattr(record, key) for key in keys}
        for key in keys:
            out[key][where] = values[key]
    return out


def thickness_from_monolayers(base, fraction, thickness_ml, temperature_K: float, user=None) -> np.ndarray:
    """Thickness in nm of ``thickness_ml`` monolayers (half the cubic lattice constant, (001) growth)."""
    lattice_nm = material_arrays(base, fraction, temperature_K, user)["lattice_nm"]
    return np.asarray(thickness_ml, dtype=float) * lattice_nm / 2.0


def monolayer_nm(batch: DesignBatch, temperature_K: float, user=None) -> np.ndarray:
    """Monolayer thickness of every layer of a batch, shape (B, n)."""
    return material_arrays(batch.base, batch.fraction, temperature_K, user)["lattice_nm"] / 2.0


def to_device(spec, batch: DesignBatch) -> Device:
    """Physics arrays of a batch of designs of ``spec`` (contacts added at both ends).

    Parameters
    ----------
    spec : tunnelsmith.optimize.inputs.schema.StackSpec
        Supplies the contacts, temperature, model options, user materials and
        per-layer optical potentials.
    batch : DesignBatch
    """
    n_designs = batch.n_designs
    temperature_K = spec.temperature_K
    user = spec.user_materials
    contacts = [split_material(c.material, c.fraction) for c in (spec.emitter, spec.collector)]
    base = np.concatenate(
        [np.full((n_designs, 1), contacts[0][0], dtype=object), batch.base,
         np.full((n_designs, 1), contacts[1][0], dtype=object)], axis=1)
    fraction = np.concatenate(
        [np.full((n_designs, 1), contacts[0][1]), batch.fraction, np.full((n_designs, 1), contacts[1][1])], axis=1)
    props = material_arrays(base, fraction, temperature_K, user)
    zeros = np.zeros((n_designs, 1))
    thickness = np.concatenate([zeros, batch.thickness_nm, zeros], axis=1)
    absorption = np.array([0.0] + [layer.absorption_eV for layer in spec.layers] + [0.0])
    return Device(
        band_edge_eV=props["conduction_band_eV"],
        mass=props["mass"],
        thickness_nm=thickness,
        emitter_doping_cm3=np.full(n_designs, spec.emitter.doping_cm3),
        collector_doping_cm3=np.full(n_designs, spec.collector.doping_cm3),
        temperature_K=temperature_K,
        gap_eV=props["gap_eV"] if spec.model.nonparabolic else None,
        absorption_eV=np.broadcast_to(absorption, thickness.shape).copy() if np.any(absorption > 0) else None,
    )


def nominal_batch(spec) -> DesignBatch:
    """The single design of a stack file whose values are all fixed.

    Ties are already resolved by :func:`tunnelsmith.optimize.inputs.reader.load` (a tied layer carries
    copies of the values of the layer it names).
    """
    from tunnelsmith.optimize.errors import InputError

    base, fraction, thickness_nm = [], [], []
    for layer in spec.layers:
        if layer.searched:
            raise InputError(spec.path, f'layer "{layer.name}"', "this layer has a search range",
                             "give fixed values to solve one stack, or run the file with `tunnelsmith optimize`")
        b, f = split_material(layer.material, layer.fraction)
        base.append(b)
        fraction.append(f)
        if layer.thickness_nm is not None:
            thickness_nm.append(float(layer.thickness_nm))
        else:
            thickness_nm.append(float(thickness_from_monolayers(
                np.array([b], object), np.array([f]), [layer.thickness_ml], spec.temperature_K, spec.user_materials)[0]))
    names = tuple(layer.name for layer in spec.layers)
    return DesignBatch(names, np.array([base], dtype=object), np.array([fraction]), np.array([thickness_nm]))
