"""Band profile of a biased stack: flat bands plus a linear drop, sliced into steps.

Model
-----
The applied bias ``V`` drops linearly across all layers between the contacts; the
emitter stays at its zero-bias edge and the collector sits ``qV`` lower. This is the
usual first-order model of a tunneling structure: accumulation in the emitter and
depletion in the collector are not computed self-consistently, so the real drop across
the active layers is smaller than ``V`` and measured peak voltages come out higher.

A sloped layer is replaced by thin piecewise-constant slices whose potential is the
exact potential at the slice midpoint (Ando & Itoh, J. Appl. Phys. 61, 1497, 1987). The
midpoint rule makes the error second order in the slice thickness;
``tests/test_profile.py`` and ``tests/test_transfer.py`` show the transmission under
bias converging to a direct integration of the Schrödinger equation with the exact
linear potential, and :data:`DEFAULT_SLICE_nm` is chosen from that study.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tunnelsmith.physics.device import Device

#: Default slice thickness for sloped layers (nm); see the module docstring.
DEFAULT_SLICE_nm = 0.25


@dataclass(frozen=True)
class Profile:
    """Piecewise-constant profile of a batch of stacks at a set of biases.

    Attributes
    ----------
    band_edge_eV : ndarray, shape (B, nV, L')
        Band edge of each slice referred to the emitter's zero-bias edge; complex
        ``U - iW`` where the device carries an optical potential.
    mass, thickness_nm : ndarray, shape (B, nV, L')
    gap_eV : ndarray, shape (B, nV, L') or None
    layer_index : ndarray of int, shape (L',)
        The original layer each slice belongs to (0 = emitter, L-1 = collector).
    bias_V : ndarray, shape (nV,)
    """

    band_edge_eV: np.ndarray
    mass: np.ndarray
    thickness_nm: np.ndarray
    gap_eV: np.ndarray | None
    layer_index: np.ndarray
    bias_V: np.ndarray

    @property
    def arrays(self) -> dict[str, np.ndarray | None]:
        """Keyword arguments for :func:`physics.transfer.scattering`."""
        return dict(
            band_edge_eV=self.band_edge_eV,
            mass=self.mass,
            thickness_nm=self.thickness_nm,
            gap_eV=self.gap_eV,
        )


def interface_positions_nm(thickness_nm: np.ndarray) -> np.ndarray:
    """Positions of the interfaces, z = 0 at the emitter, shape (..., L-1)."""
    inner = np.asarray(thickness_nm, dtype=float)[..., 1:-1]
    zeros = np.zeros(inner.shape[:-1] + (1,))
    return np.concatenate([zeros, np.cumsum(inner, axis=-1)], axis=-1)


def slices_per_layer(thickness_nm: np.ndarray, bias_V: np.ndarray, slice_nm: float) -> np.ndarray:
    """Number of slices of each layer of each stack, shape (..., L).

    Contacts and unbiased stacks keep one slice per layer; every other layer gets just
    enough equal slices that none is thicker than ``slice_nm``. Each stack is sliced on
    its own, so its profile does not depend on the other stacks of a batch.
    """
    thickness = np.asarray(thickness_nm, dtype=float)
    count = np.ones(thickness.shape, dtype=int)
    if np.any(np.asarray(bias_V) != 0.0):
        count[..., 1:-1] = np.maximum(1, np.ceil(thickness[..., 1:-1] / slice_nm - 1e-9).astype(int))
    return count


def biased_profile(device: Device, bias_V, *, slice_nm: float = DEFAULT_SLICE_nm) -> Profile:
    """Slice a batch of stacks into a piecewise-constant profile at every bias.

    Parameters
    ----------
    device : Device
        ``B`` stacks of ``L`` layers.
    bias_V : array_like, shape (nV,)
        Applied biases; positive bias lowers the collector.
    slice_nm : float
        Largest slice thickness in a sloped layer.

    Returns
    -------
    Profile
        Arrays of shape ``(B, nV, L')``, ``L'`` the total of the per-layer slot counts
        (the most slices any stack of the batch needs in each layer).
    """
    bias = np.atleast_1d(np.asarray(bias_V, dtype=float))
    thickness = np.asarray(device.thickness_nm, dtype=float)
    edge = np.asarray(device.band_edge_eV, dtype=float)
    edge = edge - edge[:, :1]
    count = slices_per_layer(thickness, bias, slice_nm)  # (B, L)
    # The batch shares one slot count per layer; a stack that needs fewer slices fills
    # its spare slots with zero-thickness slices, which change nothing.
    slots = np.max(count, axis=0)
    layer_index = np.repeat(np.arange(device.n_layers), slots)
    slot_in_layer = np.arange(layer_index.size) - np.repeat(np.cumsum(slots) - slots, slots)
    used = slot_in_layer[None, :] < count[:, layer_index]

    # Slice thickness and midpoint position (z = 0 at the emitter interface).
    slice_thickness = np.where(used, thickness[:, layer_index] / count[:, layer_index], 0.0)
    slice_thickness[:, 0] = slice_thickness[:, -1] = 0.0
    start = np.concatenate([np.zeros((device.n_stacks, 1)), np.cumsum(slice_thickness, axis=-1)[:, :-1]], axis=-1)
    midpoint = start + 0.5 * slice_thickness
    total = device.total_thickness_nm[:, None]
    # Fraction of the drop reached at each slice midpoint: 0 in the emitter, 1 in the
    # collector; a stack with no inner thickness drops the whole bias at one interface.
    with np.errstate(divide="ignore", invalid="ignore"):
        drop_fraction = np.where(total > 0.0, midpoint / total, 0.0)
    drop_fraction[:, 0] = 0.0
    drop_fraction[:, -1] = 1.0

    band_edge = edge[:, None, layer_index] - bias[None, :, None] * drop_fraction[:, None, :]
    if device.absorption_eV is not None:
        band_edge = band_edge - 1j * np.asarray(device.absorption_eV, float)[:, None, layer_index]
    shape = band_edge.shape

    def spread(per_layer):
        return np.broadcast_to(np.asarray(per_layer, float)[:, None, layer_index], shape)

    return Profile(
        band_edge_eV=band_edge,
        mass=spread(device.mass),
        thickness_nm=np.broadcast_to(slice_thickness[:, None, :], shape),
        gap_eV=None if device.gap_eV is None else spread(device.gap_eV),
        layer_index=layer_index,
        bias_V=bias,
    )
