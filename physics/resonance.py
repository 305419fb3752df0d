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
   Inner layers identical to their contact (spacers) are folded into the contact first
   (:meth:`_Stacks.absorb_contact_runs`): the walls then sit at the first layer that
   differs, and the search runs on fewer layers.
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

Along a bias sweep (:func:`track_resonances`) the full search runs at a few biases
only; the others start Newton's method from the poles of their searched neighbours,
carried across in bias by their rates ``dE_p/dV`` (:func:`pole_rates`): a natural-
parameter continuation (Allgower & Georg, Introduction to Numerical Continuation
Methods, SIAM 2003, ch. 2) whose predictions are accurate enough for two Newton steps,
where a box level needs five or more. The converged poles are the same poles: only the
start points differ (``tests/test_resonance.py``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import eigh_tridiagonal

from tunnelsmith.physics.constants import HBAR2_2M0_eV_nm2, HBAR_eV_s
from tunnelsmith.physics.transfer import scattering

#: Distance of the hard walls from the contact interfaces in :func:`closed_box_states`
#: (nm), so that band diagrams show a stretch of each contact.
BOX_WALL_nm = 2.0

#: Distance of the hard walls from the contact interfaces for the start points (nm).
#: Walls right at the contacts keep the spurious levels of the pockets between a wall
#: and a barrier as high as possible; a level behind a barrier moves by about its width,
#: well inside the basin of the Newton iteration. Spacers identical to a contact count
#: as contact here (:meth:`_Stacks.absorb_contact_runs`), so they form no pockets.
START_WALL_nm = 0.0

#: Points of the coarse transmission scan that adds start points for broad resonances.
SCAN_POINTS = 16

#: Continuation in bias (:func:`track_resonances`): the full search runs at every
#: TRACK_STRIDE-th bias of the sorted sweep, and at least every TRACK_MAX_STEP_V volts.
#: Chosen in ``benchmarks/bench_physics.py``: a shorter stride costs more full searches
#: and finds no more levels.
TRACK_STRIDE = 8
TRACK_MAX_STEP_V = 0.2
# Extra levels the searched biases keep in their widened windows.
_TRACK_EXTRA_LEVELS = 2
# Rate dE/dV of a pole whose own rate is not finite: mid-way in [-1, 0] eV/V.
_DEFAULT_LEVEL_RATE_eV_V = -0.5
# Bias step (V) and energy probe (eV) of pole_rates: a pole moves by <~1e-6 eV, so the
# Newton step's own error (~shift^2 / 10 meV) stays below 1e-4 of the shift.
_RATE_STEP_V = 1e-6
_RATE_PROBE_eV = 1e-6
# A level predicted this far outside the window gets no start point there (eV).
_OUTSIDE_eV = 2e-3

# Phase scan of the closed box: grid points and refinement steps per level.
_BOX_GRID = 16
_BOX_REFINE_STEPS = 8
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
# After _SETTLE_ITER iterations, an iterate more than _BELOW_EDGE_eV below the higher
# contact band edge is dropped (it wanders: no pole of interest lies there).
_SETTLE_ITER = 3
_BELOW_EDGE_eV = 5e-3
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

        Contacts take the principal branch of ``k`` and inner layers the branch
        continued from ``Im k >= 0`` on the real axis; the two differ in sign where
        ``Re E`` lies below the band edge, which Newton iterates towards a level close to
        the contact band edge cross. An inner layer identical to its contact then makes
        their interface singular (0/0 in the recursion) and the iterate is lost (on 400
        invented GaAs/AlGaAs-like double barriers with 5-40 nm wells and spacers, 6 of
        2144 levels were missed without this step, 1 with it). An inner layer identical
        to its contact, with nothing but such layers and zero-thickness layers between it
        and the contact, is part of the contact: here it gets zero thickness and the
        parameters of the nearest layer that has a thickness and differs from the
        contact. This multiplies ``t`` by a nonvanishing phase factor (the contact's
        reference plane moves) and leaves the poles where they are. Layers without
        thickness in every stack are then dropped (they cost kernel time and change
        nothing).
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
        return _Stacks(replaced[0], replaced[1], thickness, gap).drop_empty_layers()

    def drop_empty_layers(self) -> _Stacks:
        """The stacks without the inner layers that have zero thickness in every stack."""
        keep = np.any(self.thickness_nm != 0.0, axis=0)
        keep[0] = keep[-1] = True
        if keep.all():
            return self
        return _Stacks(**{name: None if a is None else a[:, keep] for name, a in self.arrays.items()})

    @property
    def threshold_eV(self) -> np.ndarray:
        """Higher of the two contacts' real band edges, shape (P,): below it ``t`` has no
        propagating channel and its continuation has a branch point."""
        return np.max(np.real(self.band_edge_eV[:, [0, -1]]), axis=-1)

    @property
    def barrier_top_eV(self) -> np.ndarray:
        """Highest real band edge of the inner layers that have a thickness, shape (P,)."""
        inner = np.real(self.band_edge_eV[:, 1:-1])
        present = self.thickness_nm[:, 1:-1] > 0.0
        return np.max(np.where(present, inner, -np.inf), axis=-1, initial=-np.inf)


def fold_contact_spacers(band_edge_eV, mass, thickness_nm, *, gap_eV=None) -> dict:
    """Kernel arguments of an equivalent stack without the spacers identical to a contact.

    Inner layers identical to their contact (with only such layers between them and the
    contact) are moved into the contact, and layers left without thickness in every
    stack are dropped (:meth:`_Stacks.absorb_contact_runs`). The transmitted amplitude
    only gains a phase factor (the contact's reference plane moves): transmission,
    reflection probability and the poles are those of the original stack, for fewer
    layers in the kernel.

    Parameters
    ----------
    band_edge_eV, mass, thickness_nm, gap_eV
        Layer arrays of shape (..., L), as for :func:`physics.transfer.scattering`.

    Returns
    -------
    dict
        ``band_edge_eV``, ``mass``, ``thickness_nm``, ``gap_eV`` of shape (..., L'),
        ``L' <= L``.
    """
    stacks, lead = _Stacks.flatten(band_edge_eV, mass, thickness_nm, gap_eV)
    folded = stacks.absorb_contact_runs()
    return {key: None if a is None else a.reshape(lead + a.shape[-1:]) for key, a in folded.arrays.items()}


def _flat_window(window_eV, lead: tuple[int, ...]) -> tuple[np.ndarray, np.ndarray]:
    """The window bounds broadcast to the leading shape and flattened, shape (P,) each."""
    lo = np.broadcast_to(np.asarray(window_eV[0], float), lead).reshape(-1)
    hi = np.broadcast_to(np.asarray(window_eV[1], float), lead).reshape(-1)
    return lo, hi


def _search(stacks: _Stacks, lo, hi, max_levels: int, start_eV=None, scan_points: int = SCAN_POINTS):
    """Start points (box levels, scan peaks, the caller's) and their Newton iterations.

    Returns the ``(pole_eV, converged)`` arrays of :func:`refine_poles`, shape (P, K).
    """
    # Spacers identical to a contact belong to it: the box walls then sit at the first
    # layer that differs, and no spurious levels of the pockets between a wall and a
    # barrier are searched (absorb_contact_runs).
    stacks = stacks.absorb_contact_runs()
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
        starts.append(apart_from_box(start_eV, _START_MERGE_eV))
    return refine_poles(stacks, np.concatenate(starts, axis=-1), lo_eV=lo, hi_eV=hi)


def _report(stacks: _Stacks, pole, converged, lo, hi, max_levels: int, lead: tuple[int, ...]) -> Resonances:
    """The lowest ``max_levels`` distinct converged poles inside [lo, hi], as Resonances."""
    energy, fwhm = _select_levels(pole, converged, lo, hi, max_levels)
    above = energy > stacks.barrier_top_eV[:, None]
    shape = lead + (max_levels,)
    return Resonances(energy.reshape(shape), fwhm.reshape(shape), above.reshape(shape))


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
    lo, hi = _flat_window(window_eV, lead)
    extra = None
    if start_eV is not None:
        extra = np.asarray(start_eV, float)
        extra = np.broadcast_to(extra, lead + extra.shape[-1:]).reshape(-1, extra.shape[-1])
    pole, converged = _search(stacks, lo, hi, max_levels, extra, scan_points)
    return _report(stacks, pole, converged, lo, hi, max_levels, lead)


def track_resonances(
    band_edge_eV,
    mass,
    thickness_nm,
    *,
    bias_V,
    gap_eV=None,
    window_eV=(0.0, 1.0),
    max_levels: int = 4,
    scan_points: int = SCAN_POINTS,
) -> Resonances:
    """Quasi-bound levels along a bias sweep, by continuation in bias.

    The levels of :func:`find_resonances` at every bias, for a fraction of the cost.
    The full search (box levels, scan, Newton) runs at every :data:`TRACK_STRIDE`-th
    bias of the sorted sweep, never more than :data:`TRACK_MAX_STEP_V` apart, in the
    window widened by the bias step to either side. Each pole found there gets its
    rate ``dE_p/dV`` (:func:`pole_rates`). At the biases in between, Newton's method
    starts from the cubic Hermite interpolation in bias of a level's pole and rate at
    the two searched neighbours, or from one neighbour's tangent where the level
    entered or left the window on the way (natural-parameter continuation with a
    tangent predictor; Allgower & Georg, Introduction to Numerical Continuation
    Methods, SIAM 2003, ch. 2). Where a start point is lost on the way (two levels
    anticrossing between searched biases send both predictions to one pole), that bias
    gets the full search too.

    No level is missed for want of a start point: in the linear-drop profile every
    band edge moves by ``-f V`` with ``0 <= f <= 1``, so a level moves by at most
    ``|dV|`` eV (Hellmann–Feynman: ``dE/dV = -<f>``), and every level inside a bias's
    window lies inside the widened windows of both searched neighbours.

    Parameters
    ----------
    band_edge_eV, mass, thickness_nm, gap_eV
        As for :func:`find_resonances`, with the bias axis second to last: shape
        (..., nV, L).
    bias_V : array_like, shape (nV,)
        Bias of each profile along that axis (V), in any order.
    window_eV : (lo, hi)
        Energy window, scalars or arrays broadcastable to (..., nV).
    max_levels, scan_points
        As for :func:`find_resonances`.

    Returns
    -------
    Resonances
        Arrays of shape ``(..., nV, max_levels)``.
    """
    stacks, lead = _Stacks.flatten(band_edge_eV, mass, thickness_nm, gap_eV)
    bias = np.asarray(bias_V, float).reshape(-1)
    if not lead or lead[-1] != bias.size:
        raise ValueError(f"the layer arrays' bias axis (second to last) has {lead[-1:]} entries, bias_V {bias.size}")
    lo, hi = _flat_window(window_eV, lead)
    n_bias = bias.size
    order = np.argsort(bias, kind="stable")
    searched = _searched_positions(bias[order])
    if searched.size == n_bias:
        pole, converged = _search(stacks, lo, hi, max_levels, scan_points=scan_points)
        return _report(stacks, pole, converged, lo, hi, max_levels, lead)

    # Rows of the flattened (..., nV) leading shape: row = run * nV + bias index.
    runs = lo.size // n_bias
    sorted_bias = bias[order]

    def rows_at(positions):
        return (n_bias * np.arange(runs)[:, None] + order[positions]).ravel()

    # The full search at the searched biases, in windows widened by the bias step to
    # each neighbour, down to the contacts' band edge at most (no level lies below).
    step = np.diff(sorted_bias[searched])
    reach = np.tile(np.maximum(np.append(step, 0.0), np.insert(step, 0, 0.0)), runs)
    rows = rows_at(searched)
    searched_stacks = stacks.subset(rows)
    wide_lo = np.maximum(lo[rows] - reach, np.minimum(searched_stacks.threshold_eV, lo[rows]))
    wide_hi = hi[rows] + reach
    n_wide = max_levels + _TRACK_EXTRA_LEVELS
    pole_s, converged_s = _search(searched_stacks, wide_lo, wide_hi, n_wide, scan_points=scan_points)
    energy_s, width_s = _select_levels(pole_s, converged_s, wide_lo, wide_hi, n_wide)
    known = energy_s - 0.5j * width_s
    # dU/dV of the profile from the nearest bias of another value (exact for the
    # linear drop of physics.profile).
    values, value_index = np.unique(sorted_bias, return_inverse=True)
    other = value_index[searched] + 1
    other = np.where(other < values.size, other, value_index[searched] - 1).clip(0)
    dV = np.tile(values[other] - sorted_bias[searched], runs)
    other_rows = rows_at(np.searchsorted(sorted_bias, values[other]))
    with np.errstate(divide="ignore", invalid="ignore"):
        edge_rate = (stacks.band_edge_eV[other_rows] - searched_stacks.band_edge_eV) / dV[:, None]
    rate = pole_rates(searched_stacks, np.where(np.isfinite(edge_rate), edge_rate, 0.0), known)

    # Every other bias starts from its neighbours' poles.
    between = np.setdiff1d(np.arange(n_bias), searched)
    rows_b = rows_at(between)
    start = _continuation_starts(
        known.reshape(runs, searched.size, -1),
        rate.reshape(runs, searched.size, -1),
        sorted_bias[searched],
        np.searchsorted(searched, between) - 1,
        sorted_bias[between],
    ).reshape(rows_b.size, -1)
    pole_b, converged_b = _refine_between(stacks.subset(rows_b), start, lo[rows_b], hi[rows_b], max_levels, scan_points)

    energy = np.full((lo.size, max_levels), np.nan)
    width = np.full((lo.size, max_levels), np.nan)
    energy[rows], width[rows] = _select_levels(pole_s, converged_s, lo[rows], hi[rows], max_levels)
    energy[rows_b], width[rows_b] = _select_levels(pole_b, converged_b, lo[rows_b], hi[rows_b], max_levels)
    above = energy > stacks.barrier_top_eV[:, None]
    shape = lead + (max_levels,)
    return Resonances(energy.reshape(shape), width.reshape(shape), above.reshape(shape))


def _refine_between(stacks: _Stacks, start, lo, hi, max_levels: int, scan_points: int):
    """Newton's method from the continuation's start points (P, K); the full search too
    where a start point is lost. Returns ``(pole_eV, converged)`` like refine_poles."""
    # A level predicted well outside the window gets no start point: above it, it is
    # not reported; below it, it may have left through the contact band edge (no pole
    # on this sheet any more) or the prediction may be poor (levels that anticross on
    # the way bend away from their tangents), which only the full search tells.
    below = start.real < lo[:, None] - _OUTSIDE_eV
    start = np.where(below | (start.real > hi[:, None] + _OUTSIDE_eV), np.nan, start)
    pole, converged = refine_poles(stacks.absorb_contact_runs(), start, lo_eV=lo, hi_eV=hi)
    # A start point lost on the way ran into another one's pole, as both do when two
    # levels anticross between the searched biases, or did not converge: the
    # continuation is not to be trusted there either, and the full search runs too.
    again = np.flatnonzero(np.any(below | (np.isfinite(start) & ~converged), axis=-1))
    if again.size == 0:
        return pole, converged
    pole_again, converged_again = _search(stacks.subset(again), lo[again], hi[again], max_levels, scan_points=scan_points)
    # Both sets of poles go to the selection, which merges the ones found twice.
    extra = pole_again.shape[-1]
    pole = np.concatenate([pole, np.full((pole.shape[0], extra), np.nan + 0j)], axis=-1)
    converged = np.concatenate([converged, np.zeros((pole.shape[0], extra), bool)], axis=-1)
    pole[again, -extra:] = pole_again
    converged[again, -extra:] = converged_again
    return pole, converged


def _searched_positions(sorted_bias: np.ndarray) -> np.ndarray:
    """Positions in the sorted sweep where the full search runs (both ends included):
    greedily as far apart as TRACK_STRIDE positions and TRACK_MAX_STEP_V volts allow."""
    n = sorted_bias.size
    positions = [0]
    for k in range(1, n):  # scheduling only: a few scalar comparisons per bias
        last = positions[-1]
        if k == n - 1 or k + 1 - last > TRACK_STRIDE or sorted_bias[k + 1] - sorted_bias[last] > TRACK_MAX_STEP_V:
            positions.append(k)
    return np.asarray(positions)


def pole_rates(stacks: _Stacks, edge_rate_eV_V: np.ndarray, pole_eV: np.ndarray) -> np.ndarray:
    """Rate of change ``dE_p/dV`` of converged poles with bias, shape (P, K), complex.

    One Newton step (the difference form of :func:`refine_poles`) from each pole on the
    profile moved by :data:`_RATE_STEP_V` along ``edge_rate_eV_V`` (``dU/dV`` of each
    layer, shape (P, L)): the step is the pole's shift to first order, the tangent
    (Euler) predictor of continuation methods. NaN where the step is not finite.
    """
    rows, column = np.nonzero(np.isfinite(pole_eV))
    rate = np.full(pole_eV.shape, np.nan, dtype=complex)
    if rows.size == 0:
        return rate
    moved = _Stacks(
        stacks.band_edge_eV + _RATE_STEP_V * edge_rate_eV_V, stacks.mass, stacks.thickness_nm, stacks.gap_eV
    ).absorb_contact_runs()
    h = _RATE_PROBE_eV
    probe = pole_eV[rows, column][:, None] + np.array([-h, h])
    log_t = scattering(probe, **moved.rows(rows)).log_t
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        shift = h / np.tanh(0.5 * (log_t[:, 1] - log_t[:, 0]))
    rate[rows, column] = np.where(np.isfinite(shift), shift / _RATE_STEP_V, np.nan)
    return rate


def _mutual_nearest(distance: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Pairs (i, j) that are each other's nearest in ``distance`` (..., K, K), ``inf`` =
    never; the partner's index, or -1, for either side."""
    to_right, to_left = np.argmin(distance, axis=-1), np.argmin(distance, axis=-2)
    index = np.arange(distance.shape[-1])
    left_paired = np.isfinite(np.min(distance, axis=-1)) & (np.take_along_axis(to_left, to_right, axis=-1) == index)
    right_paired = np.isfinite(np.min(distance, axis=-2)) & (np.take_along_axis(to_right, to_left, axis=-1) == index)
    return np.where(left_paired, to_right, -1), np.where(right_paired, to_left, -1)


def _continuation_starts(known, rate, searched_bias, interval, bias) -> np.ndarray:
    """Start points at the biases between searched ones, shape (R, nB, 2K).

    Parameters
    ----------
    known, rate : ndarray of complex, shape (R, nS, K)
        Poles at the searched biases (NaN-padded) and their ``dE_p/dV``.
    searched_bias : ndarray, shape (nS,)
        The searched biases, ascending.
    interval : ndarray of int, shape (nB,)
        For each bias in between, the searched bias below it.
    bias : ndarray, shape (nB,)

    A level is a pole followed from one searched bias to the next: a pole below and a
    pole above whose tangent predictions (:func:`pole_rates`) each land nearest the
    other (mutually), no farther than the bias step times 1 eV/V (a level moves by at
    most ``|dV|`` eV). Between them its start point is the cubic Hermite interpolation
    in bias of the pole and its rate at both ends; a pole without a partner (a level
    that entered or left the window on the way) starts from its own tangent.
    """
    step = np.diff(searched_bias)[None, :, None, None]
    rate = np.where(np.isfinite(rate), rate, _DEFAULT_LEVEL_RATE_eV_V)
    left, right = known[:, :-1, :, None], known[:, 1:, None, :]
    left_rate, right_rate = rate[:, :-1, :, None], rate[:, 1:, None, :]
    mismatch = np.abs(left + left_rate * step - right) + np.abs(right - right_rate * step - left)
    mismatch = np.where(mismatch <= 2.0 * step, mismatch, np.inf)  # NaN poles fail too
    to_right, to_left = _mutual_nearest(mismatch)

    below, above = known[:, interval], known[:, interval + 1]
    below_rate, above_rate = rate[:, interval], rate[:, interval + 1]
    width = np.diff(searched_bias)[interval][None, :, None]
    offset = (bias - searched_bias[interval])[None, :, None]
    # Partner of each pole below, with its rate (NaN where unpaired).
    partner_index = to_right[:, interval]
    paired = partner_index >= 0
    partner = np.where(paired, np.take_along_axis(above, partner_index.clip(0), axis=-1), np.nan)
    partner_rate = np.take_along_axis(above_rate, partner_index.clip(0), axis=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(width > 0.0, offset / width, 0.0)
    hermite = (
        (1.0 + 2.0 * t) * (1.0 - t) ** 2 * below
        + t * (1.0 - t) ** 2 * width * below_rate
        + t * t * (3.0 - 2.0 * t) * partner
        - t * t * (1.0 - t) * width * partner_rate
    )
    from_below = np.where(paired, hermite, below + below_rate * offset)
    entered = to_left[:, interval] < 0
    from_above = np.where(entered, above + above_rate * (offset - width), np.nan)
    return np.concatenate([from_below, from_above], axis=-1)


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
    threshold = np.repeat(stacks.threshold_eV, n_starts)
    z = np.where(z.real < threshold + _START_ABOVE_EDGE_eV, threshold + _START_ABOVE_EDGE_eV + 1j * z.imag, z)
    z = np.where(z.imag == 0.0, z - 1j * _START_BELOW_AXIS_eV, z)
    span = np.maximum(hi_eV - lo_eV, 1e-6)
    max_step = 0.25 * span
    last_step = np.full(z.shape, np.inf)
    diff_step = np.full(z.shape, _DIFF_STEP_MAX_eV)
    active = np.flatnonzero(np.isfinite(z))
    settled = np.zeros(z.shape, dtype=bool)
    column = np.arange(n_starts)
    for iteration in range(_NEWTON_MAX_ITER):
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
            # Still below the contact band edge after the first steps: no pole of this
            # sheet lies there (a Siegert pole has Re E below the edge only when it is
            # broader than its height above it), the iterate is lost.
            | ((iteration >= _SETTLE_ITER) & (updated.real < threshold[active] - _BELOW_EDGE_eV))
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
