"""The batch-of-stacks data model shared by every physics routine."""

from __future__ import annotations

from dataclasses import dataclass, fields, replace

import numpy as np


@dataclass(frozen=True)
class Device:
    """A batch of ``B`` layer stacks between an emitter and a collector contact.

    Every per-layer array has shape ``(B, L)``; index 0 is the emitter contact and
    index ``L - 1`` the collector contact (their thicknesses are ignored). Stacks with
    fewer layers are padded with zero-thickness layers, which change nothing.

    Attributes
    ----------
    band_edge_eV : ndarray, shape (B, L)
        Gamma-valley conduction-band edge of each layer at zero bias. Any common
        absolute scale will do: physics routines refer energies to the emitter edge.
    mass : ndarray, shape (B, L)
        Band-edge effective mass in units of m0.
    thickness_nm : ndarray, shape (B, L)
        Layer thickness in nm.
    emitter_doping_cm3, collector_doping_cm3 : ndarray, shape (B,)
        Donor density of the contacts in cm^-3 (sets their Fermi levels).
    temperature_K : float
        Lattice and carrier temperature.
    gap_eV : ndarray, shape (B, L), optional
        Gamma gap for the non-parabolic mass ``m(E) = m (1 + (E - U)/E_g)``; ``None``
        switches non-parabolicity off.
    absorption_eV : ndarray, shape (B, L), optional
        Optical potential ``W >= 0``: the layer edge becomes ``U - iW``. A
        phenomenological broadening, off (``None``) by default.
    """

    band_edge_eV: np.ndarray
    mass: np.ndarray
    thickness_nm: np.ndarray
    emitter_doping_cm3: np.ndarray
    collector_doping_cm3: np.ndarray
    temperature_K: float
    gap_eV: np.ndarray | None = None
    absorption_eV: np.ndarray | None = None

    def __post_init__(self) -> None:
        shape = np.shape(self.band_edge_eV)
        if len(shape) != 2 or shape[1] < 2:
            raise ValueError(f"band_edge_eV must have shape (B, L >= 2), got {shape}")
        for name in ("mass", "thickness_nm", "gap_eV", "absorption_eV"):
            value = getattr(self, name)
            if value is not None and np.shape(value) != shape:
                raise ValueError(f"{name} has shape {np.shape(value)}, expected {shape}")
        for name in ("emitter_doping_cm3", "collector_doping_cm3"):
            object.__setattr__(self, name, np.broadcast_to(np.asarray(getattr(self, name), float), shape[:1]))
        if not self.temperature_K > 0:
            raise ValueError("temperature_K must be positive")

    @property
    def n_stacks(self) -> int:
        return int(np.shape(self.band_edge_eV)[0])

    @property
    def n_layers(self) -> int:
        return int(np.shape(self.band_edge_eV)[1])

    @property
    def total_thickness_nm(self) -> np.ndarray:
        """Sum of the layers between the contacts, shape (B,)."""
        return np.sum(np.asarray(self.thickness_nm)[:, 1:-1], axis=-1)

    def take(self, indices) -> Device:
        """The sub-batch of the stacks at ``indices`` (any numpy index along B)."""
        changes = {}
        for field in fields(self):
            value = getattr(self, field.name)
            if isinstance(value, np.ndarray):
                changes[field.name] = value[indices]
        return replace(self, **changes)
