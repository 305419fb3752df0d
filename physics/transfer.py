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
layer by ``exp(2 i k d)``, which never grows because at real energies every inner
layer takes the branch ``Im k >= 0`` (continued analytically for complex energies). The transmitted amplitude is the product of the interface factors
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

The recursion carries ``1 + rho`` and ``1 - rho`` rather than ``rho``: each is then a
product or quotient of well-conditioned factors, and neither is formed by cancellation
when ``rho`` approaches -1 or +1 (strong impedance mismatch, ``k`` near 0 close to a
band edge). Only ``k = 0`` exactly, an energy exactly on the band edge of an inner
layer, leaves the plane-wave basis degenerate; there the energy seen by that layer is
moved by :data:`BAND_EDGE_NUDGE_eV`, far below any physical scale and below the
rounding of ``E - U`` itself, which leaves the (analytic) amplitude unchanged. At a
contact band edge the flux-normalised transmission is exactly zero, which is returned.
Contact kinetic energies between 0 and ~1e-30 eV, where a contact's wavevector is
1e-15 of a neighbouring layer's, are beyond double precision (no device calculation
goes there).

Performance
-----------
The kernel is the hot path of every design evaluation; the loop over layers is written
for numpy throughput. Arrays of the batch shape are never allocated inside the loop:
they are work buffers reused through ``out=`` and kept, per thread, for the next call
with the same batch shape (the optimiser calls with one shape again and again, and
fresh large arrays cost page faults that, on virtual machines, can exceed the
arithmetic). For real energies and real band edges, which is every call
except pole searches and absorbing layers, each element of a layer is either purely
propagating (real ``k``) or purely evanescent (imaginary ``k``): ``|k|`` comes from a
real square root, and ``exp(2 i k d)`` from a real exponential on the evanescent
elements and a cosine and sine on the propagating ones only (``where=`` masks; on a
sorted energy grid each mask is one run per stack). The general complex path gives the
same values to rounding.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass

import numpy as np

from tunnelsmith.physics.constants import HBAR2_2M0_eV_nm2

#: Distance from an inner layer's band edge below which the energy is moved to the edge
#: plus this value, to avoid the k = 0 degeneracy of the plane-wave basis (eV).
BAND_EDGE_NUDGE_eV = 1e-20

# Interface factors are multiplied in blocks and only then taken to the logarithm:
# one complex log per block instead of per layer, with no risk of overflow because
# a single interface factor is bounded by the ratio of neighbouring k/m (within 1e+-15
# for any energy a device calculation uses).
_LOG_BLOCK_LAYERS = 16

# Work buffers kept between calls (see _Workspace): only for batches of at least
# _KEPT_MIN_ELEMENTS elements, at most _KEPT_SHAPES shapes, and older shapes are dropped
# once more than _KEPT_ELEMENTS batch elements are held.
_KEPT_MIN_ELEMENTS = 2**14
_KEPT_SHAPES = 3
_KEPT_ELEMENTS = 2**20


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
    emitter_propagating : ndarray of bool, optional
        Where the emitter carries an incident wave (``Re(k_e/m_e) > 0``), so that
        ``|r|^2`` is a reflection probability even when the collector is closed.
        ``None`` takes it as ``velocity_ratio > 0``.
    """

    log_t: np.ndarray
    r: np.ndarray
    velocity_ratio: np.ndarray
    emitter_propagating: np.ndarray | None = None

    @property
    def t(self) -> np.ndarray:
        """Complex transmitted amplitude (underflows to 0 below ~1e-308)."""
        with np.errstate(under="ignore"):
            return np.exp(self.log_t)

    @property
    def log10_transmission(self) -> np.ndarray:
        """log10 of the flux-normalised transmission; ``-inf`` where it is zero."""
        return _log10_transmission(self.log_t.real, self.velocity_ratio)

    @property
    def transmission(self) -> np.ndarray:
        """Flux-normalised transmission probability, in [0, 1] for lossless stacks."""
        return _transmission(self.log_t.real, self.velocity_ratio)

    @property
    def reflection(self) -> np.ndarray:
        """Reflection probability ``|r|^2``; 1 below a closed collector's band edge, zero
        where the emitter has no incident flux."""
        incident = self.emitter_propagating
        if incident is None:
            incident = self.velocity_ratio > 0.0
        with np.errstate(under="ignore"):
            return np.where(incident, np.abs(self.r) ** 2, 0.0)


def _transmission(log_abs_t: np.ndarray, velocity_ratio: np.ndarray) -> np.ndarray:
    """``|t|^2 v`` as ``exp(2 log|t|) v``, 0 where ``v = 0``, in one fresh array."""
    with np.errstate(under="ignore", invalid="ignore", over="ignore"):
        value = np.multiply(log_abs_t, 2.0)
        np.exp(value, out=value)  # underflows quietly to 0 below ~1e-308
        value *= velocity_ratio
    np.copyto(value, 0.0, where=velocity_ratio <= 0.0)
    return value


def _log10_transmission(log_abs_t: np.ndarray, velocity_ratio: np.ndarray) -> np.ndarray:
    """``log10(|t|^2 v)`` from ``log|t|``, finite far below 1e-308; ``-inf`` where ``v = 0``."""
    with np.errstate(divide="ignore", invalid="ignore"):
        value = np.log(velocity_ratio)
        value += 2.0 * log_abs_t
        value /= np.log(10.0)
    np.copyto(value, -np.inf, where=velocity_ratio <= 0.0)
    return value


def _is_real(*arrays: np.ndarray | None) -> bool:
    return not any(a is not None and np.iscomplexobj(a) for a in arrays)


def _energy_dependent_mass(
    kinetic_eV: np.ndarray,
    mass: np.ndarray,
    gap_eV: np.ndarray | None,
    out: np.ndarray | None = None,
) -> np.ndarray:
    """Non-parabolic mass ``m (1 + (E - U)/E_g)``; ``mass`` itself when ``gap_eV`` is None."""
    if gap_eV is None:
        return mass
    energy_mass = np.divide(kinetic_eV, gap_eV, out=out)
    energy_mass += 1.0
    energy_mass *= mass
    return energy_mass


def _wave_into(
    kinetic_eV: np.ndarray,
    mass: np.ndarray,
    gap_eV: np.ndarray | None,
    decaying: bool,
    k_out: np.ndarray,
    q_out: np.ndarray,
    mass_buffer: np.ndarray | None = None,
) -> None:
    """``k`` and ``k/m`` for the kinetic energy ``E - U`` (see :func:`wavevector_per_nm`).

    General complex arithmetic; ``k_out`` and ``q_out`` are complex arrays of the full
    shape, ``mass_buffer`` optional room for the energy-dependent mass.
    """
    energy_mass = _energy_dependent_mass(kinetic_eV, mass, gap_eV, out=mass_buffer)
    k = np.multiply(kinetic_eV, energy_mass, out=k_out)
    k /= HBAR2_2M0_eV_nm2
    # Adding +0 turns a -0 imaginary part into +0, so that sqrt(-x) = +i sqrt(x) for
    # real energies; the principal branch is then the outgoing wave of a contact.
    k += 0.0
    np.sqrt(k, out=k)
    if decaying:
        # Inner layers: keep Im k >= 0 on the real axis (k > 0 above the edge, i|k|
        # below) and continue analytically into the lower half plane of energy, with
        # the cut on the negative imaginary k^2 axis (principal k below the -45 degree
        # line is flipped). A plain "flip to Im k >= 0" would jump where a well's k^2
        # crosses the positive real axis, which the pole search does, and give a layer
        # equal to its neighbour -k: a vanishing interface denominator.
        np.negative(k, out=k, where=k.imag < -k.real)
    np.divide(k, energy_mass, out=q_out)


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
        ``True`` picks the inner-layer branch: ``Im k >= 0`` for real energies
        (evanescent waves decay to the right), continued analytically into the lower
        half plane of complex energy; ``False`` keeps numpy's principal branch (contacts:
        outgoing waves also for complex energies).

    Returns
    -------
    k_per_nm, k_over_m : ndarray of complex
    """
    kinetic_eV = np.asarray(energy_eV) - np.asarray(band_edge_eV)
    mass = np.asarray(mass, dtype=float)
    gap = None if gap_eV is None else np.asarray(gap_eV)
    shape = np.broadcast_shapes(kinetic_eV.shape, mass.shape, () if gap is None else gap.shape)
    k, k_over_m = np.empty(shape, dtype=complex), np.empty(shape, dtype=complex)
    _wave_into(kinetic_eV, mass, gap, decaying, k, k_over_m)
    return k, k_over_m


class _BufferSet:
    """Named work arrays of one batch shape; contents are whatever the last user left."""

    def __init__(self, shape: tuple[int, ...]) -> None:
        self.shape = shape
        self._arrays: dict[tuple[str, np.dtype], np.ndarray] = {}

    def array(self, name: str, dtype: type = complex) -> np.ndarray:
        key = (name, np.dtype(dtype))
        if key not in self._arrays:
            self._arrays[key] = np.empty(self.shape, dtype=dtype)
        return self._arrays[key]


class _Workspace(threading.local):
    """Work buffers kept between calls on one thread, for the most recent batch shapes.

    A design campaign calls the kernel with a handful of large shapes (energy grid,
    bias sweep) again and again; small batches (pole search, whose shape changes every
    iteration) allocate cheaply and are not kept. At most ``_KEPT_SHAPES`` shapes are
    kept, and older ones are dropped as soon as more than ``_KEPT_ELEMENTS`` batch
    elements are held (about 200 bytes each), so the memory held is at most that of
    the last call or ~200 MB.
    """

    def __init__(self) -> None:
        self._sets: dict[tuple[int, ...], _BufferSet] = {}  # least recently used first

    def buffers(self, shape: tuple[int, ...]) -> _BufferSet:
        if np.prod(shape) < _KEPT_MIN_ELEMENTS:
            return _BufferSet(shape)  # cheap to allocate; keeping it would evict others
        buffer_set = self._sets.pop(shape, None) or _BufferSet(shape)
        self._sets[shape] = buffer_set
        while len(self._sets) > 1 and (
            len(self._sets) > _KEPT_SHAPES
            or sum(np.prod(kept) for kept in self._sets) > _KEPT_ELEMENTS
        ):
            del self._sets[next(iter(self._sets))]
        return buffer_set


_WORKSPACE = _Workspace()


def _run_recursion(
    energy_eV: np.ndarray,
    band_edge_eV: np.ndarray,
    mass: np.ndarray,
    thickness_nm: np.ndarray,
    gap_eV: np.ndarray | None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The reflection-coefficient recursion (module doc).

    Returns ``(log_t, r, velocity_ratio, emitter_propagating)`` as work buffers of the
    calling thread: valid until the next call, so the public functions copy what they
    hand out.
    """
    energy = np.asarray(energy_eV)
    band_edge = np.asarray(band_edge_eV)
    mass = np.asarray(mass, dtype=float)
    thickness = np.asarray(thickness_nm, dtype=float)
    gap = None if gap_eV is None else np.asarray(gap_eV)
    n_layers = band_edge.shape[-1]
    if n_layers < 2:
        raise ValueError("a stack needs at least the two contacts (L >= 2)")
    layer_arrays = [a for a in (band_edge, mass, thickness, gap) if a is not None]
    shape = np.broadcast_shapes(energy.shape, *(a.shape[:-1] + (1,) for a in layer_arrays))
    work = _WORKSPACE.buffers(shape)
    layers = (_RealLayers if _is_real(energy, band_edge, gap) else _ComplexLayers)(
        energy, band_edge, mass, gap, work
    )
    log_t, tau_block = work.array("log_t"), work.array("tau_block")
    # (1 + rho, 1 - rho) at the left edge of layer j+1, and the same pair being built
    # for layer j: the roles swap every layer.
    plus, minus = work.array("plus_a"), work.array("minus_a")
    new_plus, new_minus = work.array("plus_b"), work.array("minus_b")
    two_over_den, tau = work.array("two_over_den"), work.array("tau")
    q_j, q_next = work.array("q_a"), work.array("q_b")
    scratch = work.array("scratch", float)
    velocity_ratio = work.array("velocity_ratio", float)
    emitter_propagating = work.array("emitter_propagating", bool)

    # The contacts' band-edge k = 0 produces log(0) = -inf and 0/0 on purpose (zero
    # transmission, flagged through velocity_ratio); thick barriers underflow exp(2ikd).
    with np.errstate(all="ignore"):
        layers.wave(n_layers - 1, q_next, inner=False)
        np.copyto(velocity_ratio, q_next.real)  # collector's k/m, divided below
        plus.fill(1.0)  # rho = 0: nothing comes back from the collector
        minus.fill(1.0)
        log_t.fill(0.0)
        tau_block.fill(1.0)
        for j in range(n_layers - 2, -1, -1):
            inner = j > 0
            layers.wave(j, q_j, inner)
            # Matching psi and psi'/m at the interface j|j+1 gives the right-going
            # amplitude at the right edge of layer j as A_{j+1} den / (2 q_j), with
            # den = q_j (1 + rho) + q_{j+1} (1 - rho); the reflection ratio there is
            # r_j = (q_j (1 + rho) - q_{j+1} (1 - rho)) / den, so
            #   tau_j = 2 q_j / den,  1 + r_j = 2 q_j (1 + rho) / den,
            #   1 - r_j = 2 q_{j+1} (1 - rho) / den,
            # all products and quotients: 1 + r and 1 - r keep their relative accuracy
            # when r is close to -1 or +1 (strong mismatch, k near 0 next to a band
            # edge), where forming 1 + r from r would cancel.
            from_left = np.multiply(q_j, plus, out=new_plus)
            from_right = np.multiply(q_next, minus, out=new_minus)
            np.add(from_left, from_right, out=two_over_den)
            np.divide(2.0, two_over_den, out=two_over_den)
            tau_block *= np.multiply(q_j, two_over_den, out=tau)
            one_plus_r = np.multiply(from_left, two_over_den, out=new_plus)
            one_minus_r = np.multiply(from_right, two_over_den, out=new_minus)
            if inner:
                # Across the layer rho = r_j e with e = exp(2 i k d):
                #   1 + rho = (1 - e) + (1 + r_j) e,  1 - rho = (1 - e) + (1 - r_j) e,
                # with 1 - e computed without cancellation.
                round_trip, one_minus_round_trip = layers.cross(
                    thickness[..., j, None], log_t, two_over_den, tau, scratch
                )
                one_plus_r *= round_trip
                one_plus_r += one_minus_round_trip
                one_minus_r *= round_trip
                one_minus_r += one_minus_round_trip
                plus, new_plus = new_plus, plus
                minus, new_minus = new_minus, minus
            if (n_layers - 2 - j) % _LOG_BLOCK_LAYERS == _LOG_BLOCK_LAYERS - 1 or j == 0:
                # log z = log|z| + i arg z from real functions, several times faster
                # than numpy's complex log.
                log_t.real += np.log(np.abs(tau_block, out=scratch), out=scratch)
                log_t.imag += np.arctan2(tau_block.imag, tau_block.real, out=scratch)
                tau_block.fill(1.0)
            q_next, q_j = q_j, q_next
        # r at the emitter from (1 + r) and (1 - r): exact to the absolute rounding.
        reflected = np.subtract(one_plus_r, one_minus_r, out=one_plus_r)
        reflected *= 0.5
        q_emitter_real = q_next.real
        np.greater(q_emitter_real, 0.0, out=emitter_propagating)
        flux = emitter_propagating & (velocity_ratio > 0.0) & np.isfinite(log_t.real)
        np.divide(velocity_ratio, q_emitter_real, out=velocity_ratio, where=flux)
        np.copyto(velocity_ratio, 0.0, where=~flux)
    return log_t, reflected, velocity_ratio, emitter_propagating


def _nudge_off_band_edge(kinetic_eV: np.ndarray, scratch: np.ndarray, mask: np.ndarray) -> None:
    """Move kinetic energies within BAND_EDGE_NUDGE_eV of zero to +BAND_EDGE_NUDGE_eV."""
    np.less(np.abs(kinetic_eV, out=scratch), BAND_EDGE_NUDGE_eV, out=mask)
    if mask.any():  # rare; skips the masked copy otherwise
        np.copyto(kinetic_eV, BAND_EDGE_NUDGE_eV, where=mask)


class _ComplexLayers:
    """Per-layer waves for complex energies or band edges (pole search, absorption).

    ``wave(j, q_out, inner)`` writes ``k_j/m_j`` into ``q_out`` and keeps ``k_j``;
    ``cross(thickness, log_t, round_trip, one_minus_round_trip, scratch)`` then adds
    ``i k_j d_j`` to ``log_t`` and writes ``exp(2 i k_j d_j)`` and ``1 - exp(2 i k_j d_j)``
    into the two complex buffers, which it returns.
    """

    def __init__(self, energy, band_edge, mass, gap, work: _BufferSet):
        self._energy, self._band_edge, self._mass, self._gap = energy, band_edge, mass, gap
        self._k = work.array("k")
        self._kinetic = work.array("kinetic")
        self._energy_mass = None if gap is None else work.array("energy_mass")
        self._scratch = work.array("scratch", float)
        self._mask = work.array("mask", bool)

    def wave(self, j: int, q_out: np.ndarray, inner: bool) -> None:
        kinetic = np.subtract(self._energy, self._band_edge[..., j, None], out=self._kinetic)
        if inner:
            _nudge_off_band_edge(kinetic, self._scratch, self._mask)
        gap = None if self._gap is None else self._gap[..., j, None]
        mass = self._mass[..., j, None]
        _wave_into(kinetic, mass, gap, inner, self._k, q_out, self._energy_mass)

    def cross(self, thickness_nm, log_t, round_trip, one_minus_round_trip, scratch):
        k_times_d = np.multiply(self._k, thickness_nm, out=self._k)
        log_t.real -= k_times_d.imag  # log t gains i k d
        log_t.imag += k_times_d.real
        exponent = np.multiply(k_times_d, 2j, out=k_times_d)
        np.exp(exponent, out=round_trip)
        # 1 - exp(2ikd) by subtraction, and as -expm1(2ikd) where k d is small and the
        # subtraction would cancel (k near 0 is where 1 - exp(2ikd) must stay accurate).
        np.subtract(1.0, round_trip, out=one_minus_round_trip)
        small = np.less(np.abs(exponent, out=scratch), 1.0, out=self._mask)
        np.expm1(exponent, out=one_minus_round_trip, where=small)
        np.negative(one_minus_round_trip, out=one_minus_round_trip, where=small)
        return round_trip, one_minus_round_trip


class _RealLayers:
    """Per-layer waves for real energies and band edges (same interface as _ComplexLayers).

    Each element is either propagating (``k`` real, ``k^2 > 0``) or evanescent (``k``
    on the positive imaginary axis: the principal branch for the contacts and the
    decaying branch for inner layers coincide). Only ``|k|`` and the mask are kept.
    """

    def __init__(self, energy, band_edge, mass, gap, work: _BufferSet):
        self._energy, self._band_edge, self._mass, self._gap = energy, band_edge, mass, gap
        self._abs_k = work.array("abs_k", float)
        self._energy_mass = None if gap is None else work.array("energy_mass", float)
        self._propagating = work.array("propagating", bool)
        self._evanescent = work.array("evanescent", bool)
        self._thin = work.array("thin", bool)

    def wave(self, j: int, q_out: np.ndarray, inner: bool) -> None:
        kinetic = np.subtract(self._energy, self._band_edge[..., j, None], out=self._abs_k)
        if inner:
            _nudge_off_band_edge(kinetic, q_out.real, self._propagating)
        gap = None if self._gap is None else self._gap[..., j, None]
        energy_mass = _energy_dependent_mass(
            kinetic, self._mass[..., j, None], gap, out=self._energy_mass
        )
        k_squared = np.multiply(kinetic, energy_mass, out=kinetic)
        k_squared /= HBAR2_2M0_eV_nm2
        np.greater(k_squared, 0.0, out=self._propagating)
        np.logical_not(self._propagating, out=self._evanescent)
        abs_k = np.sqrt(np.abs(k_squared, out=k_squared), out=k_squared)
        q_out.fill(0.0)
        np.divide(abs_k, energy_mass, out=q_out.real, where=self._propagating)
        np.divide(abs_k, energy_mass, out=q_out.imag, where=self._evanescent)

    def cross(self, thickness_nm, log_t, round_trip, one_minus_round_trip, scratch):
        propagating, evanescent = self._propagating, self._evanescent
        abs_k_d = np.multiply(self._abs_k, thickness_nm, out=self._abs_k)
        # log t gains i k d: -|k| d on evanescent elements, i |k| d on propagating ones.
        np.subtract(log_t.real, abs_k_d, out=log_t.real, where=evanescent)
        np.add(log_t.imag, abs_k_d, out=log_t.imag, where=propagating)
        # Each transcendental function runs only on the elements that need it.
        # Evanescent: exp(2ikd) = exp(-2|k|d), and 1 - exp(2ikd) by subtraction except
        # where that would cancel (exp > 1/2), where it is -expm1(-2|k|d).
        exponent = np.multiply(abs_k_d, -2.0, out=scratch, where=evanescent)
        np.exp(exponent, out=round_trip.real, where=evanescent)
        np.subtract(1.0, round_trip.real, out=one_minus_round_trip.real, where=evanescent)
        thin = np.greater(round_trip.real, 0.5, out=self._thin, where=evanescent)
        thin &= evanescent
        np.expm1(exponent, out=one_minus_round_trip.real, where=thin)
        np.negative(one_minus_round_trip.real, out=one_minus_round_trip.real, where=thin)
        np.copyto(round_trip.imag, 0.0, where=evanescent)
        np.copyto(one_minus_round_trip.imag, 0.0, where=evanescent)
        # Propagating, from s = sin kd and c = cos kd: exp(2ikd) = 1 - 2 s^2 + 2i s c and
        # 1 - exp(2ikd) = 2 s^2 - 2i s c, free of cancellation for small k d.
        sine = np.sin(abs_k_d, out=scratch, where=propagating)
        cosine = np.cos(abs_k_d, out=abs_k_d, where=propagating)
        np.multiply(sine, cosine, out=round_trip.imag, where=propagating)
        np.multiply(round_trip.imag, 2.0, out=round_trip.imag, where=propagating)
        np.negative(round_trip.imag, out=one_minus_round_trip.imag, where=propagating)
        twice_sine_squared = one_minus_round_trip.real
        np.multiply(sine, sine, out=twice_sine_squared, where=propagating)
        np.multiply(twice_sine_squared, 2.0, out=twice_sine_squared, where=propagating)
        np.subtract(1.0, twice_sine_squared, out=round_trip.real, where=propagating)
        return round_trip, one_minus_round_trip


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
        Conduction-band edge of each layer, emitter first, collector last; complex
        ``U - iW`` for an absorbing layer.
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
        Amplitudes of shape ``(..., nE)``, the broadcast of ``energy_eV`` with the
        leading axes of the layer arrays.
    """
    arrays = _run_recursion(energy_eV, band_edge_eV, mass, thickness_nm, gap_eV)
    return Scattering(*(array.copy() for array in arrays))


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
    Equal to ``scattering(...).transmission``, without copying the amplitudes out.
    """
    log_t, _, velocity_ratio, _ = _run_recursion(
        energy_eV, band_edge_eV, mass, thickness_nm, gap_eV
    )
    return _transmission(log_t.real, velocity_ratio)


def log10_transmission(
    energy_eV: np.ndarray,
    band_edge_eV: np.ndarray,
    mass: np.ndarray,
    thickness_nm: np.ndarray,
    *,
    gap_eV: np.ndarray | None = None,
) -> np.ndarray:
    """log10 of the transmission, finite far below 1e-308 (``-inf`` where T = 0).

    Equal to ``scattering(...).log10_transmission``.
    """
    log_t, _, velocity_ratio, _ = _run_recursion(
        energy_eV, band_edge_eV, mass, thickness_nm, gap_eV
    )
    return _log10_transmission(log_t.real, velocity_ratio)
