"""Stable, vectorised transmission through a one-dimensional layer stack.

Model
-----
Effective-mass envelope functions, one valley. In layer ``j`` the envelope is a sum of
a right- and a left-going wave with wavevector
``k_j = sqrt(2 m_j (E - U_j)) / hbar``. Across every interface the envelope and
``(1/m) dpsi/dz`` are continuous (BenDaniel & Duke, Phys. Rev. 152, 683, 1966).

Numerics
--------
Raw 2x2 transfer matrices overflow across thick or high barriers. This kernel instead
runs the *reflection-coefficient recursion* from the collector towards the emitter
(the scattering form of the transfer-matrix method; see Ko & Inkson, Phys. Rev. B 38,
9945, 1988): the ratio ``rho`` of left- to right-going amplitude is carried across each
layer by ``exp(2 i k d)``, which never grows because the branch ``Im k >= 0`` is used in
every inner layer. The transmitted amplitude is the product of the interface factors
``tau_j`` and the layer phases ``exp(i k_j d_j)``; it is accumulated as a complex
logarithm, so transmissions far below the smallest double (1e-308) stay meaningful
through :attr:`Scattering.log10_transmission`.

Conventions
-----------
Energies in eV, thicknesses in nm, masses in units of the free-electron mass m0.
The last axis of ``band_edge_eV``, ``mass`` and ``thickness_nm`` runs over layers from
the emitter contact (index 0) to the collector contact (index L-1); the contacts'
thicknesses are ignored. Energies may be complex (the pole search of
:mod:`physics.resonance` continues the amplitude into the lower half plane; the
contacts then take the principal branch, i.e. outgoing waves). A complex band edge
``U - iW`` (``W > 0``) is an absorbing optical potential.

Energies that sit exactly on the band edge of an inner layer make the plane-wave basis
degenerate (``k = 0``); there the energy seen by that layer is moved by
:data:`BAND_EDGE_NUDGE_eV`, far below any physical scale, which leaves the (analytic)
amplitude unchanged to ~1e-10 relative. At a contact band edge the flux-normalised
transmission is exactly zero, which is returned.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from physics.constants import HBAR2_2M0_eV_nm2

#: Distance from an inner layer's band edge below which the energy is moved to the edge
#: plus this value, to avoid the k = 0 degeneracy of the plane-wave basis (eV).
BAND_EDGE_NUDGE_eV = 1e-10

# Interface factors are multiplied in blocks and only then taken to the logarithm:
# one complex log per block instead of per layer, with no risk of overflow because
# a single interface factor is bounded by a few orders of magnitude.
_LOG_BLOCK_LAYERS = 16


@dataclass(frozen=True)
class Scattering:
    """Scattering amplitudes of a batch of stacks at a set of energies.

    Attributes
    ----------
    log_t : ndarray of complex
        Natural logarithm of the transmitted amplitude ``t`` (emitter to collector),
        shape ``(..., nE)``; the wave is referred to the collector's left edge and the
        incident wave to the emitter's right edge.
    r : ndarray of complex
        Reflected amplitude at the emitter's right edge, shape ``(..., nE)``.
    velocity_ratio : ndarray of float
        ``Re(k_c/m_c) / Re(k_e/m_e)``, the ratio of group velocities that turns
        ``|t|^2`` into a probability-current ratio; zero where either contact has no
        propagating state.
    """

    log_t: np.ndarray
    r: np.ndarray
    velocity_ratio: np.ndarray

    @property
    def t(self) -> np.ndarray:
        """Complex transmitted amplitude (underflows to 0 below ~1e-308)."""
        return np.exp(self.log_t)

    @property
    def log10_transmission(self) -> np.ndarray:
        """log10 of the flux-normalised transmission; ``-inf`` where it is zero."""
        with np.errstate(divide="ignore", invalid="ignore"):
            value = (2.0 * self.log_t.real + np.log(self.velocity_ratio)) / np.log(10.0)
        return np.where(self.velocity_ratio > 0.0, value, -np.inf)

    @property
    def transmission(self) -> np.ndarray:
        """Flux-normalised transmission probability, in [0, 1] for lossless stacks."""
        return np.where(self.velocity_ratio > 0.0, 10.0 ** self.log10_transmission, 0.0)

    @property
    def reflection(self) -> np.ndarray:
        """Reflection probability ``|r|^2`` (zero where the emitter has no flux)."""
        return np.where(self.velocity_ratio > 0.0, np.abs(self.r) ** 2, 0.0)


def wavevector_per_nm(
    energy_eV: np.ndarray,
    band_edge_eV: np.ndarray,
    mass: np.ndarray,
    gap_eV: np.ndarray | None = None,
    *,
    decaying: bool = True,
) -> tuple[np.ndarray, np.ndarray]:
    """Wavevector ``k`` (1/nm) and reduced wavevector ``k/m`` of one layer.

    Parameters
    ----------
    energy_eV : array_like
        Energies, broadcastable against the other arguments.
    band_edge_eV, mass : array_like
        Band edge (eV) and band-edge effective mass (m0) of the layer.
    gap_eV : array_like, optional
        Gap for the non-parabolic mass ``m(E) = m (1 + (E - U)/E_g)``; ``None`` or
        ``inf`` for a parabolic band.
    decaying : bool
        ``True`` picks the branch with ``Im k >= 0`` (inner layers: evanescent waves
        decay to the right); ``False`` keeps numpy's principal branch (contacts:
        outgoing waves also for complex energies).

    Returns
    -------
    k_per_nm, k_over_m : ndarray of complex
    """
    kinetic_eV = np.asarray(energy_eV) - np.asarray(band_edge_eV)
    m = np.asarray(mass, dtype=float)
    if gap_eV is not None:
        m = m * (1.0 + kinetic_eV / np.asarray(gap_eV))
    # "+ 0j" gives a +0 imaginary part for real input, so sqrt(-x) = +i sqrt(x).
    k = np.sqrt(kinetic_eV * m / HBAR2_2M0_eV_nm2 + 0j)
    if decaying:
        k = np.where(k.imag < 0.0, -k, k)
    return k, k / m


def scattering(
    energy_eV: np.ndarray,
    band_edge_eV: np.ndarray,
    mass: np.ndarray,
    thickness_nm: np.ndarray,
    *,
    gap_eV: np.ndarray | None = None,
) -> Scattering:
    """Transmitted and reflected amplitudes of a batch of stacks.

    Parameters
    ----------
    energy_eV : array_like, shape (nE,) or broadcastable to (..., nE)
        Energies (real, or complex for pole searches).
    band_edge_eV : array_like, shape (..., L)
        Conduction-band edge of each layer, emitter first, collector last.
    mass : array_like, shape (..., L)
        Band-edge effective mass of each layer in m0.
    thickness_nm : array_like, shape (..., L)
        Layer thicknesses; entries 0 and L-1 (the contacts) are ignored. Zero-thickness
        layers change nothing, so stacks of different length batch by padding.
    gap_eV : array_like, shape (..., L), optional
        Gap of each layer for the non-parabolic mass (``inf`` = parabolic).

    Returns
    -------
    Scattering
        Amplitudes of shape ``(..., nE)``.
    """
    energy = np.asarray(energy_eV)
    band_edge = np.asarray(band_edge_eV)
    mass = np.asarray(mass, dtype=float)
    thickness = np.asarray(thickness_nm, dtype=float)
    n_layers = band_edge.shape[-1]
    if n_layers < 2:
        raise ValueError("a stack needs at least the two contacts (L >= 2)")

    def layer(j: int, inner: bool):
        edge = band_edge[..., j, None]
        if inner:
            # Keep clear of k = 0 where the plane-wave basis degenerates (module doc).
            offset = energy - edge
            edge = np.where(np.abs(offset) < BAND_EDGE_NUDGE_eV, energy - BAND_EDGE_NUDGE_eV, edge)
        gap = None if gap_eV is None else np.asarray(gap_eV)[..., j, None]
        return wavevector_per_nm(energy, edge, mass[..., j, None], gap, decaying=inner)

    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        k_next, q_next = layer(n_layers - 1, inner=False)
        q_collector = q_next
        rho = np.zeros(np.broadcast_shapes(k_next.shape, energy.shape), dtype=complex)
        tau_block = np.ones_like(rho)
        log_t = np.zeros_like(rho)
        for j in range(n_layers - 2, -1, -1):
            inner = j > 0
            k_j, q_j = layer(j, inner)
            plus = q_j * (1.0 + rho)
            minus = q_next * (1.0 - rho)
            denominator = plus + minus
            r_j = (plus - minus) / denominator
            tau_block = tau_block * (2.0 * q_j / denominator)
            if inner:
                phase = k_j * thickness[..., j, None]
                log_t = log_t + 1j * phase
                rho = r_j * np.exp(2j * phase)
            if (n_layers - 2 - j) % _LOG_BLOCK_LAYERS == _LOG_BLOCK_LAYERS - 1 or j == 0:
                log_t = log_t + np.log(tau_block)
                tau_block = np.ones_like(rho)
            k_next, q_next = k_j, q_j
        q_emitter = q_next
        velocity_ratio = np.where(
            (q_emitter.real > 0.0) & (q_collector.real > 0.0) & np.isfinite(log_t.real),
            q_collector.real / q_emitter.real,
            0.0,
        )
    return Scattering(log_t=log_t, r=r_j, velocity_ratio=velocity_ratio)


def transmission(
    energy_eV: np.ndarray,
    band_edge_eV: np.ndarray,
    mass: np.ndarray,
    thickness_nm: np.ndarray,
    *,
    gap_eV: np.ndarray | None = None,
) -> np.ndarray:
    """Flux-normalised transmission probability of a batch of stacks.

    ``physics.transmission(energy_eV, band_edge_eV, mass, thickness_nm)`` with
    ``energy_eV`` of shape (nE,) and the layer arrays of shape (..., L) returns an
    array of shape (..., nE). See :func:`scattering` for conventions and the method;
    values below ~1e-308 underflow here, use :func:`log10_transmission` for those.
    """
    return scattering(energy_eV, band_edge_eV, mass, thickness_nm, gap_eV=gap_eV).transmission


def log10_transmission(
    energy_eV: np.ndarray,
    band_edge_eV: np.ndarray,
    mass: np.ndarray,
    thickness_nm: np.ndarray,
    *,
    gap_eV: np.ndarray | None = None,
) -> np.ndarray:
    """log10 of the transmission, finite far below 1e-308 (``-inf`` where T = 0)."""
    return scattering(
        energy_eV, band_edge_eV, mass, thickness_nm, gap_eV=gap_eV
    ).log10_transmission
