"""Quasi-bound states of a layer stack: the poles of the transmitted amplitude.

Model
-----
A quasi-bound (resonant) state is a pole ``E_p = E_r - i Gamma/2`` of the transmitted
amplitude ``t(E)`` continued into the lower half of the complex energy plane, with
outgoing waves in both contacts (Siegert, Phys. Rev. 56, 750, 1939); the kernel
:func:`physics.transfer.scattering` provides that continuation (principal square-root
branch in the contacts). Near an isolated pole the transmission follows the
Breit–Wigner line ``T(E) ~ T_peak (Gamma/2)^2 / ((E - E_r)^2 + (Gamma/2)^2)``
(Breit & Wigner, Phys. Rev. 49, 519, 1936), so ``Gamma`` is the full width at half
maximum and the state decays with lifetime ``hbar / Gamma``.

Numerics
--------
1. *Start points.* (a) The levels of the stack closed by hard walls
   :data:`START_WALL_nm` inside the contacts. For the piecewise-constant profile they
   are found exactly, without a spatial grid, from the Prüfer phase of the solution
   that vanishes at the left wall (Prüfer, Math. Ann. 95, 499, 1926): by the
   oscillation theorem of Sturm–Liouville theory the number of levels below ``E``
   equals the number of zeros of that solution, i.e. ``floor(theta(E)/pi)`` of the
   phase at the right wall. This is the grid-free limit of the BenDaniel–Duke
   finite-difference box Hamiltonian used by :func:`closed_box_states` (the tests check
   that the two agree). A well that holds a resonance holds a box level next to it
   however narrow the resonance is, so no resonance is lost between the points of a
   scan.
   (b) Local maxima of a coarse transmission scan, which sit close to broad
   (above-barrier) resonances whose box levels may be far from the pole.
   (c) Optional start points from the caller (e.g. peaks of a transmission already
   computed on a fine grid).
2. *Root finder.* Newton's method on ``f(E) = 1/t(E)``, which is analytic and close to
   linear near a pole, with the derivative from the central difference at ``E +- h``.
   Normalising ``f(E +- h)`` by ``exp((log t(E+h) + log t(E-h))/2)`` turns the Newton
   step into ``delta = h coth((log t(E+h) - log t(E-h)) / 2)``, which never forms
   ``t`` (no overflow for thick barriers), is blind to the ``2 pi i`` ambiguity of the
   logarithm, and is exact for linear ``f`` whatever ``h``; ``h`` shrinks with the step,
   so convergence is quadratic. Start points are moved above both contact band edges
   (branch points of ``t``) and just below the real axis. All start points of all
   stacks go through the kernel in one call per iteration; iterates that meet, or
   leave the window, are dropped on the way.
3. Poles reached from several start points are merged; poles inside the energy window
   are reported in ascending order of ``E_r``, NaN-padded to ``max_levels``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import eigh_tridiagonal

from physics.constants import HBAR2_2M0_eV_nm2, HBAR_eV_s
from physics.transfer import scattering

#: Distance of the hard walls from the contact interfaces in :func:`closed_box_states`
#: (nm), so that band diagrams show a stretch of each contact.
BOX_WALL_nm = 2.0

#: Distance of the hard walls from the contact interfaces for the start points (nm).
#: Walls right at the contacts keep the spurious levels of the pockets between a wall
#: and a barrier as high as possible; a level behind a barrier moves by about its width,
#: well inside the basin of the Newton iteration.
START_WALL_nm = 0.0

#: Points of the coarse transmission scan that adds start points for broad resonances.
SCAN_POINTS = 16

# Phase scan of the closed box: grid points and refinement steps per level.
_BOX_GRID = 16
_BOX_REFINE_STEPS = 4
# Extra box levels above max_levels, because pockets next to the walls add spurious ones.
_BOX_EXTRA_LEVELS = 2
# Start points are moved this far above the higher contact band edge and below the real
# axis (eV); a caller's start point this close to a box level is left out.
_START_ABOVE_EDGE_eV = 1e-4
_START_BELOW_AXIS_eV = 1e-5
_START_MERGE_eV = 2e-3
# Newton iteration: most iterations, step below which a point stops, and step below which
# a pole counts as converged (both relative to 1 + |E|). Convergence is quadratic, with
# f = 1/t curved on the scale of the level spacing (>~ 10 meV, not Gamma): the error
# left after a last step delta is about delta^2 / 10 meV, ~1e-16 eV after 1e-9 eV.
_NEWTON_MAX_ITER = 14
_NEWTON_STOP_eV = 1e-9
_NEWTON_ACCEPT_eV = 1e-6
# Bounds of the difference step h (eV): h follows the last step, and its upper bound
# keeps the curvature error of the difference (~h^2 / 10 meV) below 1e-14 eV also on
# the first steps, when a line narrower than 1e-9 eV may lie between E - h and E + h.
_DIFF_STEP_MAX_eV = 1e-8
_DIFF_STEP_MIN_eV = 1e-12
# Iterates from two start points closer than this follow the same path to one pole.
_MEET_eV = 1e-6
# Poles closer than this (absolute eV plus a fraction of the width) are one pole.
_MERGE_eV = 1e-7
_MERGE_REL_WIDTH = 1e-4


@dataclass(frozen=True)
class Resonances:
    """Quasi-bound levels of a batch of stacks.

    Attributes
    ----------
    energy_eV : ndarray, shape (..., n_levels)
        Resonance energies ``E_r`` in ascending order, NaN-padded.
    width_eV : ndarray, shape (..., n_levels)
        Full width at half maximum ``Gamma = -2 Im E_p``; NaN where there is no level.
    above_barrier : ndarray of bool, shape (..., n_levels)
        ``True`` where ``E_r`` lies above the highest inner layer of the stack.
    """

    energy_eV: np.ndarray
    width_eV: np.ndarray
    above_barrier: np.ndarray

    @property
    def lifetime_s(self) -> np.ndarray:
        """Lifetime ``hbar / Gamma`` in seconds (NaN where there is no level)."""
        with np.errstate(divide="ignore"):
            return HBAR_eV_s / self.width_eV


@dataclass(frozen=True)
class _Stacks:
    """Layer arrays of P stacks flattened to shape (P, L)."""

    band_edge_eV: np.ndarray
    mass: np.ndarray
    thickness_nm: np.ndarray
    gap_eV: np.ndarray | None

    @classmethod
    def flatten(cls, band_edge_eV, mass, thickness_nm, gap_eV) -> tuple[_Stacks, tuple[int, ...]]:
        arrays = [np.asarray(band_edge_eV), np.asarray(mass, float), np.asarray(thickness_nm, float)]
        if gap_eV is not None:
            arrays.append(np.asarray(gap_eV, float))
        shape = np.broadcast_shapes(*(a.shape for a in arrays))
        flat = [np.broadcast_to(a, shape).reshape(-1, shape[-1]) for a in arrays]
        return cls(*flat[:3], flat[3] if gap_eV is not None else None), shape[:-1]

    def subset(self, index: np.ndarray) -> _Stacks:
        """The stacks at ``index`` (rows may repeat)."""
        return _Stacks(**self.rows(index))

    def rows(self, index: np.ndarray) -> dict:
        """Keyword arguments of :func:`scattering` for the stacks at ``index``."""
        return dict(
            band_edge_eV=self.band_edge_eV[index],
            mass=self.mass[index],
            thickness_nm=self.thickness_nm[index],
            gap_eV=None if self.gap_eV is None else self.gap_eV[index],
        )

    @property
    def arrays(self) -> dict:
        return dict(
            band_edge_eV=self.band_edge_eV, mass=self.mass, thickness_nm=self.thickness_nm, gap_eV=self.gap_eV
        )

    def absorb_contact_runs(self) -> _Stacks:
        """Equivalent stacks for the pole search, with contact-like edge layers removed.

        For complex energies the kernel takes ``Im k >= 0`` in inner layers, which for a
        propagating inner layer identical to the adjacent contact makes their interface
        singular. An inner layer identical to its contact, with nothing but such layers
        and zero-thickness layers between it and the contact, is part of the contact:
        here it gets zero thickness and the parameters of the nearest layer that has a
        thickness and differs from the contact. This multiplies ``t`` by a
        nonvanishing phase factor (the contact's reference plane moves) and leaves the
        poles where they are.
        """
        arrays = [self.band_edge_eV, self.mass] + ([] if self.gap_eV is None else [self.gap_eV])
        n_layers = self.band_edge_eV.shape[-1]
        thickness = self.thickness_nm.copy()
        replaced = [a.copy() for a in arrays]
        for contact, inner in ((0, range(1, n_layers - 1)), (n_layers - 1, range(n_layers - 2, 0, -1))):
            inner = list(inner)
            if not inner:
                continue
            run = np.ones(self.band_edge_eV.shape[0], dtype=bool)
            runs = []
            for j in inner:
                # A zero-thickness layer is transparent: it neither ends nor breaks a run.
                same = np.all([a[:, j] == a[:, contact] for a in arrays], axis=0)
                run = run & (same | (self.thickness_nm[:, j] == 0.0))
                runs.append(run)
            runs = np.stack(runs, axis=-1)
            # The nearest inner layer that differs from the contact.
            source = np.asarray(inner)[np.argmin(runs, axis=-1)]
            rows = np.arange(runs.shape[0])
            for column, j in enumerate(inner):
                hit = runs[:, column]
                thickness[hit, j] = 0.0
                for target, a in zip(replaced, arrays):
                    target[hit, j] = a[rows[hit], source[hit]]
        gap = replaced[2] if self.gap_eV is not None else None
        return _Stacks(replaced[0], replaced[1], thickness, gap)

    @property
    def barrier_top_eV(self) -> np.ndarray:
        """Highest real band edge of the inner layers that have a thickness, shape (P,)."""
        inner = np.real(self.band_edge_eV[:, 1:-1])
        present = self.thickness_nm[:, 1:-1] > 0.0
        return np.max(np.where(present, inner, -np.inf), axis=-1, initial=-np.inf)


def find_resonances(
    band_edge_eV,
    mass,
    thickness_nm,
    *,
    gap_eV=None,
    window_eV=(0.0, 1.0),
    max_levels: int = 4,
    start_eV=None,
    scan_points: int = SCAN_POINTS,
) -> Resonances:
    """Quasi-bound levels (poles of the transmitted amplitude) inside an energy window.

    Parameters
    ----------
    band_edge_eV : array_like, shape (..., L)
        Band edge of each layer (eV), emitter contact first; may be complex ``U - iW``
        (optical potential). Any leading shape, e.g. the ``(B, nV, L')`` arrays of a
        :class:`physics.profile.Profile`.
    mass, thickness_nm : array_like, broadcastable to (..., L)
        Band-edge masses (m0) and thicknesses (nm; contact entries ignored).
    gap_eV : array_like, optional
        Gaps for the non-parabolic mass (see :mod:`physics.transfer`).
    window_eV : (lo, hi)
        Energy window on the scale of ``band_edge_eV``; ``lo`` and ``hi`` may be arrays
        broadcastable to the leading shape (one window per stack and bias).
    max_levels : int
        Number of levels reported (the lowest ones in the window).
    start_eV : array_like, shape (..., nS), optional
        Extra start points for the root finder (NaN entries are ignored).
    scan_points : int
        Points of the coarse transmission scan that adds start points for broad
        resonances (0 switches the scan off).

    Returns
    -------
    Resonances
        Arrays of shape ``(..., max_levels)``.
    """
    stacks, lead = _Stacks.flatten(band_edge_eV, mass, thickness_nm, gap_eV)
    lo = np.broadcast_to(np.asarray(window_eV[0], float), lead).reshape(-1)
    hi = np.broadcast_to(np.asarray(window_eV[1], float), lead).reshape(-1)
    width = np.maximum(hi - lo, 1e-6)

    margin = 0.05 * width
    box = closed_box_levels(stacks, lo - margin, hi + margin, max_levels + _BOX_EXTRA_LEVELS)

    def apart_from_box(points, distance_eV):
        # A start point this close to a box level only repeats its Newton iteration.
        known = np.isfinite(box[:, None, :])
        gap = np.min(np.abs(points[..., None] - box[:, None, :]), axis=-1, initial=np.inf, where=known)
        return np.where(gap < distance_eV, np.nan, points)

    starts = [box]
    if scan_points > 0:
        peaks = _scan_peaks(stacks, lo, hi, scan_points, max_levels)
        starts.append(apart_from_box(peaks, width[:, None] / scan_points))
    if start_eV is not None:
        extra = np.asarray(start_eV, float)
        extra = np.broadcast_to(extra, lead + extra.shape[-1:]).reshape(-1, extra.shape[-1])
        starts.append(apart_from_box(extra, _START_MERGE_eV))
    start = np.concatenate(starts, axis=-1)

    pole, converged = refine_poles(stacks.absorb_contact_runs(), start, lo_eV=lo, hi_eV=hi)
    energy, fwhm = _select_levels(pole, converged, lo, hi, max_levels)
    above = energy > stacks.barrier_top_eV[:, None]
    shape = lead + (max_levels,)
    return Resonances(energy.reshape(shape), fwhm.reshape(shape), above.reshape(shape))


# --- closed box -------------------------------------------------------------------


def _wrap(angle: np.ndarray) -> np.ndarray:
    """Angle folded into [-pi, pi)."""
    return (angle + np.pi) % (2.0 * np.pi) - np.pi


def _box_thickness(stacks: _Stacks) -> np.ndarray:
    thickness = stacks.thickness_nm.copy()
    thickness[:, 0] = thickness[:, -1] = START_WALL_nm
    return thickness


def box_phase(stacks: _Stacks, energy_eV: np.ndarray) -> np.ndarray:
    """Prüfer phase at the right wall of the closed box, shape (P, M).

    The solution starts with ``psi = 0`` at the left wall; in every layer the phase is
    the angle of ``(psi, (1/m) psi' / s)`` with the layer's scale ``s = |k|/m``. It keeps
    its quadrant at an interface (``psi`` and ``psi'/m`` are continuous, BenDaniel &
    Duke), grows by ``k d`` across an oscillating layer, and moves by less than
    ``pi/2`` across an evanescent one, where ``(psi, psi'/kappa)`` turns by a
    hyperbolic rotation (the flow ``theta' = kappa cos 2 theta`` cannot cross its fixed
    points). ``floor(theta/pi)`` counts the zeros, i.e. the box levels below
    ``energy_eV`` (real, shape (P, M)).
    """
    edge = np.real(stacks.band_edge_eV)
    thickness = _box_thickness(stacks)
    theta = np.zeros(np.shape(energy_eV))
    scale_prev = None
    for j in range(edge.shape[-1]):
        kinetic = energy_eV - edge[:, j, None]
        mass = stacks.mass[:, j, None]
        if stacks.gap_eV is not None:
            mass = mass * np.maximum(1.0 + kinetic / stacks.gap_eV[:, j, None], 1e-3)
        k_squared = kinetic * mass / HBAR2_2M0_eV_nm2
        k_abs = np.maximum(np.sqrt(np.abs(k_squared)), 1e-12)
        scale = k_abs / mass
        oscillating = k_squared > 0.0
        length = k_abs * thickness[:, j, None]
        # Interface rescaling and the hyperbolic rotation of an evanescent layer in one
        # angle: each moves theta by less than pi/2, so the wrap below is unambiguous.
        tanh = np.where(oscillating, 0.0, np.tanh(length))
        psi = np.sin(theta)
        flux = np.cos(theta) if scale_prev is None else np.cos(theta) * (scale_prev / scale)
        turned = np.arctan2(psi + tanh * flux, tanh * psi + flux)
        theta = theta + _wrap(turned - theta) + np.where(oscillating, length, 0.0)
        scale_prev = scale
    return theta


def closed_box_levels(stacks: _Stacks, lo_eV: np.ndarray, hi_eV: np.ndarray, count: int) -> np.ndarray:
    """The lowest ``count`` closed-box levels in [lo, hi] of each stack, NaN-padded (P, count).

    Levels are bracketed on a coarse phase scan by the level count ``floor(theta/pi)``
    and refined by bisection alternating with the Illinois variant of regula falsi on
    ``theta(E) - n pi`` (Dowell & Jarratt, BIT 11, 168, 1971). Their precision only
    has to place the Newton iteration of :func:`refine_poles` in the basin of the pole.
    """
    grid = lo_eV[:, None] + (hi_eV - lo_eV)[:, None] * np.linspace(0.0, 1.0, _BOX_GRID)
    theta = box_phase(stacks, grid)
    below = np.floor(theta / np.pi)
    target = below[:, :1] + 1.0 + np.arange(count)
    valid = target <= below[:, -1:]
    cell = np.clip(np.argmax(below[:, None, :] >= target[..., None], axis=-1), 1, _BOX_GRID - 1)
    # Refine only the levels that exist, each against its own stack.
    pair = np.flatnonzero(valid)
    rows, column = np.divmod(pair, count)
    cell, target = cell[rows, column], target[rows, column]
    a, b = grid[rows, cell - 1], grid[rows, cell]
    fa, fb = theta[rows, cell - 1] - np.pi * target, theta[rows, cell] - np.pi * target
    own = stacks.subset(rows)
    side = np.zeros(a.shape, dtype=int)
    x = 0.5 * (a + b)
    for step in range(_BOX_REFINE_STEPS):
        # Bisection on every other step keeps the bracket shrinking where theta jumps
        # by pi over a tiny range (a narrow level), which stalls regula falsi.
        with np.errstate(invalid="ignore", divide="ignore"):
            x = np.where((fb != fa) & (step % 2 == 1), (a * fb - b * fa) / (fb - fa), 0.5 * (a + b))
        x = np.clip(x, np.minimum(a, b), np.maximum(a, b))
        fx = box_phase(own, x[:, None])[:, 0] - np.pi * target
        left = fx < 0.0
        # Illinois: halve the stale end's value when the same end is kept twice.
        fb = np.where(left & (side == -1), 0.5 * fb, fb)
        fa = np.where(~left & (side == 1), 0.5 * fa, fa)
        a, fa = np.where(left, x, a), np.where(left, fx, fa)
        b, fb = np.where(left, b, x), np.where(left, fb, fx)
        side = np.where(left, -1, 1)
    levels = np.full(valid.shape, np.nan)
    levels[rows, column] = x
    return levels


def closed_box_states(band_edge_eV, mass, thickness_nm, *, window_eV, grid_nm: float = 0.05):
    """Levels and probability densities of one stack closed by hard walls.

    The stack is closed by hard walls :data:`BOX_WALL_nm` inside each contact and
    discretised on a uniform grid with the BenDaniel–Duke operator
    ``-d/dz (hbar^2 / 2m) d/dz + U`` (masses at the half-grid points, which keeps the
    matrix symmetric and ``psi'/m`` continuous); the eigenpairs in the window come from
    :func:`scipy.linalg.eigh_tridiagonal`. Non-parabolicity is ignored here (band-edge
    masses); the states are meant for band diagrams.

    Parameters
    ----------
    band_edge_eV, mass, thickness_nm : array_like, shape (L,)
        One stack (a complex band edge contributes its real part).
    window_eV : (lo, hi)
        Energy window of the levels returned, on the scale of ``band_edge_eV``.
    grid_nm : float
        Grid step.

    Returns
    -------
    energy_eV : ndarray, shape (n,)
    position_nm : ndarray, shape (nz,)
        Grid points, z = 0 at the emitter interface.
    probability : ndarray, shape (n, nz)
        ``|psi|^2`` in 1/nm, normalised so that it integrates to 1 over the box.
    """
    edge = np.real(np.asarray(band_edge_eV))
    mass = np.asarray(mass, float)
    thickness = np.asarray(thickness_nm, float)
    if edge.ndim != 1 or mass.shape != edge.shape or thickness.shape != edge.shape or edge.size < 2:
        raise ValueError("closed_box_states takes one stack: band_edge_eV, mass, thickness_nm of shape (L,)")
    interfaces = np.concatenate([[0.0], np.cumsum(thickness[1:-1])])
    length = interfaces[-1] + 2.0 * BOX_WALL_nm
    n_points = max(int(np.ceil(length / grid_nm)) - 1, 2)
    step = length / (n_points + 1)
    position = -BOX_WALL_nm + step * np.arange(1, n_points + 1)

    def layer_of(z):
        return np.searchsorted(interfaces, z, side="right")

    half = -BOX_WALL_nm + step * (np.arange(n_points + 1) + 0.5)
    inverse_mass = 1.0 / mass[layer_of(half)]
    coefficient = HBAR2_2M0_eV_nm2 / step**2
    diagonal = coefficient * (inverse_mass[:-1] + inverse_mass[1:]) + edge[layer_of(position)]
    off_diagonal = -coefficient * inverse_mass[1:-1]
    lo, hi = (float(v) for v in window_eV)
    energy, vectors = eigh_tridiagonal(diagonal, off_diagonal, select="v", select_range=(lo, hi))
    probability = (vectors**2).T / step
    return energy, position, probability


# --- start points from a coarse transmission scan ---------------------------------


def _first_true(mask: np.ndarray, values: np.ndarray, count: int) -> np.ndarray:
    """The first ``count`` entries of ``values`` where ``mask`` holds, NaN-padded."""
    n = mask.shape[-1]
    key = np.where(mask, np.arange(n), n)
    order = np.sort(key, axis=-1)[..., :count]
    padded = np.concatenate([values, np.full(values.shape[:-1] + (1,), np.nan)], axis=-1)
    return np.take_along_axis(padded, order, axis=-1)


def transmission_peaks(energy_eV: np.ndarray, log10_transmission: np.ndarray, count: int) -> np.ndarray:
    """Energies of the first ``count`` interior local maxima of a scan, NaN-padded.

    ``energy_eV`` broadcastable to ``log10_transmission`` (..., M); returns (..., count).
    """
    value = np.asarray(log10_transmission)
    energy = np.broadcast_to(energy_eV, value.shape)
    peak = (value[..., 1:-1] > value[..., :-2]) & (value[..., 1:-1] >= value[..., 2:])
    return _first_true(peak, energy[..., 1:-1], count)


def _scan_peaks(stacks: _Stacks, lo: np.ndarray, hi: np.ndarray, points: int, count: int) -> np.ndarray:
    fraction = (np.arange(points) + 0.5) / points
    energy = lo[:, None] + (hi - lo)[:, None] * fraction
    log10_t = scattering(energy, **stacks.arrays).log10_transmission
    return transmission_peaks(energy, log10_t, count)


# --- Newton iteration on 1/t --------------------------------------------------------


def refine_poles(
    stacks: _Stacks, start_eV: np.ndarray, *, lo_eV: np.ndarray, hi_eV: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Newton iteration from every start point to a pole of ``t`` (module docstring).

    Parameters
    ----------
    stacks : _Stacks
        P stacks.
    start_eV : ndarray, shape (P, K)
        Start points (real or complex; NaN = none).
    lo_eV, hi_eV : ndarray, shape (P,)
        Energy window of each stack. A step is at most a quarter of the window, and an
        iterate that leaves the window by more than that, or sinks deeper than the
        window is wide, is abandoned: it is heading for a pole nobody asked for.

    Returns
    -------
    pole_eV : ndarray of complex, shape (P, K)
        NaN where abandoned, or where the start point duplicated another one.
    converged : ndarray of bool, shape (P, K)
    """
    n_starts = start_eV.shape[-1]
    z = np.asarray(start_eV, dtype=complex).ravel().copy()
    # Start above both contact band edges (the branch points of t; below them the real
    # axis is a branch cut, and Newton steps across a branch point go astray) and just
    # below the real axis, the side from which the poles are reached.
    threshold = np.repeat(np.max(np.real(stacks.band_edge_eV[:, [0, -1]]), axis=-1), n_starts)
    z = np.where(z.real < threshold + _START_ABOVE_EDGE_eV, threshold + _START_ABOVE_EDGE_eV + 1j * z.imag, z)
    z = np.where(z.imag == 0.0, z - 1j * _START_BELOW_AXIS_eV, z)
    span = np.maximum(hi_eV - lo_eV, 1e-6)
    max_step = 0.25 * span
    last_step = np.full(z.shape, np.inf)
    diff_step = np.full(z.shape, _DIFF_STEP_MAX_eV)
    active = np.flatnonzero(np.isfinite(z))
    settled = np.zeros(z.shape, dtype=bool)
    column = np.arange(n_starts)
    for _ in range(_NEWTON_MAX_ITER):
        if active.size == 0:
            break
        rows = active // n_starts
        energy = z[active]
        h = diff_step[active]
        probe = energy[:, None] + np.stack([-h, h], axis=-1)
        log_t = scattering(probe, **stacks.rows(rows)).log_t
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            delta = h / np.tanh(0.5 * (log_t[:, 1] - log_t[:, 0]))
        finite = np.isfinite(delta)
        delta = np.where(finite, delta, 0.0)
        size = np.abs(delta)
        limit = max_step[rows]
        delta = np.where(size > limit, delta * (limit / np.maximum(size, 1e-300)), delta)
        updated = energy + delta
        # Poles of t lie in the lower half plane; reflect a step that leaves it.
        updated = np.where(updated.imag > 0.0, np.conj(updated), updated)
        z[active] = updated
        size = np.abs(delta)
        # A non-finite step means E +- h sits on the pole within rounding.
        last_step[active] = np.where(finite, size, np.where(last_step[active] < _NEWTON_ACCEPT_eV, 0.0, np.inf))
        scale = 1.0 + np.abs(energy)
        diff_step[active] = np.clip(size, _DIFF_STEP_MIN_eV * scale, _DIFF_STEP_MAX_eV)

        escaped = (
            (updated.real < lo_eV[rows] - limit)
            | (updated.real > hi_eV[rows] + limit)
            | (-updated.imag > span[rows])
        )
        # Two start points that have met follow the same path: keep the first. A point
        # within half a width of a pole already settled is bound for that pole too.
        others = z.reshape(-1, n_starts)[rows]
        distance = np.abs(others - updated[:, None])
        met = (distance <= _MEET_eV) & (column[None, :] < (active % n_starts)[:, None])
        near_settled = settled.reshape(-1, n_starts)[rows] & (distance <= -others.imag)
        duplicate = np.any(met | near_settled, axis=-1)
        dropped = escaped | duplicate
        z[active[dropped]] = np.nan
        last_step[active[dropped]] = np.inf
        done = dropped | ~finite | (size <= _NEWTON_STOP_eV * scale)
        settled[active[done & ~dropped]] = True
        active = active[~done]
    converged = last_step <= _NEWTON_ACCEPT_eV * (1.0 + np.abs(z))
    return z.reshape(start_eV.shape), converged.reshape(start_eV.shape)


def _select_levels(pole, converged, lo, hi, max_levels):
    """Merge duplicate poles and keep the lowest ``max_levels`` inside [lo, hi]."""
    energy = pole.real
    width = np.maximum(-2.0 * pole.imag, 0.0)
    keep = converged & (energy >= lo[:, None]) & (energy <= hi[:, None])

    def ordered(keep):
        order = np.argsort(np.where(keep, energy, np.inf), axis=-1, kind="stable")
        return order, np.take_along_axis(keep, order, axis=-1)

    order, kept = ordered(keep)
    z = np.take_along_axis(pole, order, axis=-1)
    g = np.take_along_axis(width, order, axis=-1)
    same = np.abs(z[:, 1:] - z[:, :-1]) <= _MERGE_eV + _MERGE_REL_WIDTH * g[:, 1:]
    duplicate = np.zeros_like(kept)
    duplicate[:, 1:] = same & kept[:, :-1] & kept[:, 1:]
    keep = np.zeros_like(keep)
    np.put_along_axis(keep, order, kept & ~duplicate, axis=-1)

    order, kept = ordered(keep)
    order, kept = order[:, :max_levels], kept[:, :max_levels]
    out_energy = np.where(kept, np.take_along_axis(energy, order, axis=-1), np.nan)
    out_width = np.where(kept, np.take_along_axis(width, order, axis=-1), np.nan)
    if out_energy.shape[-1] < max_levels:
        pad = np.full((out_energy.shape[0], max_levels - out_energy.shape[-1]), np.nan)
        out_energy = np.concatenate([out_energy, pad], axis=-1)
        out_width = np.concatenate([out_width, pad], axis=-1)
    return out_energy, out_width
