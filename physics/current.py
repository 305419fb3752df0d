"""Contact Fermi levels and the Tsu–Esaki current density with adaptive energy nodes.

Model
-----
Current density (Tsu & Esaki, Appl. Phys. Lett. 22, 562, 1973), for electrons whose
in-plane motion is that of the injecting contact's parabolic band::

    J(V) = (q m k_B T / 2 pi^2 hbar^3) Int T(E, V) N(E, V) dE / k_B T
    N(E, V) = k_B T ln[(1 + exp((mu_e - E)/k_B T)) / (1 + exp((mu_c - E)/k_B T))]

with the prefactor ``A* (m/m0) T / k_B`` (Richardson constant
:data:`physics.constants.RICHARDSON_A_cm2_K2`), energies referred to the emitter's
zero-bias band edge, ``mu_e`` the emitter Fermi level and ``mu_c = mu_e - qV`` the
collector's (the Fermi levels line up at zero bias, so ``J(0) = 0`` exactly). The
contact that injects supplies the Fermi level and the mass: the emitter for ``V >= 0``,
the collector (its own doping and mass, Fermi levels ``mu_c + |V|`` and ``mu_c``) for
``V < 0``, so a mirror-symmetric stack gives ``J(-V) = -J(V)``. Only energies where
both contacts carry current count: ``E > max(0, -qV)``.

Fermi levels come from the doping through ``n = N_c F_1/2(eta)`` with the normalised
Fermi–Dirac integral of order one half and the effective density of states
``N_c = 2 (m k_B T / 2 pi hbar^2)^{3/2}`` (:data:`physics.constants.NC_300K_cm3`); the
donors are taken as fully ionised. With a gap given, the density of states is that of
the Kane dispersion ``E (1 + E/E_g) = hbar^2 k^2 / 2m``, consistent with the
non-parabolic mass of :mod:`physics.transfer`.

Phenomenological broadening
---------------------------
Where the device carries an optical potential ``W`` (``Device.absorption_eV``), the
layers absorb a fraction ``A = 1 - T - R`` of the incident flux. This stands for
incoherent (phase-breaking) scattering as a phenomenological extra width ``~2W`` of
the levels in those layers; it is not a scattering theory, and the optical potential
on its own is not current-conserving. The absorbed flux is handed back to the contacts
with Büttiker's voltage-probe partition (Büttiker, IBM J. Res. Dev. 32, 63, 1988):
``T_eff = T + A_e A_c / (A_e + A_c)``, with ``A_e`` and ``A_c`` the fractions absorbed
from emitter-side and collector-side injection. The incoherent part adds the broadened
Lorentzian tails of the levels to the current, which raises the valley current and
lowers the peak-to-valley ratio.

Integration nodes
-----------------
The energy integral runs over ``[max(0, collector edge), mu_top + SUPPLY_TAIL_kT k_B T]``.
Nodes are the Gauss–Legendre nodes in ``u`` of the substitution ``E = F^{-1}(u)``, with
``F`` the cumulative distribution of a node density ``rho(E)``, so that
``Int f dE = Int_0^1 f/rho du``; ``rho`` mixes (i) ``1/sqrt(E - E_lo)`` at the lower
edge, where ``T`` rises like ``sqrt(E - E_lo)``, (ii) a uniform part, (iii) logistic
bumps of width ``k_B T`` at both Fermi levels, where the supply bends, and (iv) for every
pole ``E_r - i Gamma/2`` a Lorentzian of width ``Gamma`` (``f/rho`` is then flat across
the line: the substitution ``E = E_r + (Gamma/2) tan(theta)``) plus a density
``1/sqrt((E - E_r)^2 + (Gamma/2)^2)``, logarithmic in the tails, which resolves the
crossover of the line into the background whatever ``Gamma`` (a Lorentzian alone
starves it). ``F^{-1}`` is found by a tabulate-and-polish inversion. Every bias gets the
same number of nodes, so a whole bias sweep of a whole batch of stacks goes through the
kernel in one call. Against brute-force dense grids, :data:`DEFAULT_NODES` gives ~1e-6
relative error on ordinary double and triple barriers and ~3e-4 on a level of width
below 1 neV (``benchmarks/bench_physics.py``).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
from scipy.special import expit, logit

from physics.constants import KB_eV_K, NC_300K_cm3, RICHARDSON_A_cm2_K2
from physics.device import Device
from physics.profile import DEFAULT_SLICE_nm, biased_profile
from physics.resonance import Resonances, find_resonances
from physics.transfer import scattering

#: Default number of energy nodes per bias (see benchmarks/bench_physics.py).
DEFAULT_NODES = 128

#: The integration window ends this many k_B T above the higher Fermi level.
SUPPLY_TAIL_kT = 40.0

#: Levels that place nodes (and are reported) are searched up to this many k_B T above
#: the higher Fermi level.
LEVEL_SEARCH_kT = 20.0

# Share of the nodes of each part of the node density (module docstring); the poles
# share POLES between them, at most POLE_MAX each, the rest goes to the uniform part.
_WEIGHT_EDGE = 0.1
_WEIGHT_UNIFORM = 0.25
_WEIGHT_FERMI = 0.05
_WEIGHT_POLES = 0.55
_WEIGHT_POLE_MAX = 0.25
# Part of a pole's share that goes to the Lorentzian (the rest to the asinh density).
_LINE_SHARE = 0.4

# Inversion of the node CDF: table quantiles per part, then Newton polishing steps.
_TABLE_PER_PART = 24
_NEWTON_POLISH_STEPS = 4

# Gauss–Legendre order of each of the three pieces of the Fermi–Dirac integral (in
# t = sqrt(x)), and their reach below and above the Fermi level in units of k_B T.
_FD_ORDER = 48
_FD_TAIL = 40.0


# --- Fermi–Dirac integral and contact Fermi levels -----------------------------------


@functools.lru_cache(maxsize=16)
def _gauss_legendre_01(order: int) -> tuple[np.ndarray, np.ndarray]:
    x, w = np.polynomial.legendre.leggauss(order)
    return 0.5 * (x + 1.0), 0.5 * w


def fermi_dirac_half(eta, nonparabolicity=0.0) -> tuple[np.ndarray, np.ndarray]:
    """Normalised Fermi–Dirac integral of order 1/2 and its derivative.

    ``F(eta) = (2/sqrt(pi)) Int_0^inf sqrt(x (1 + a x)) (1 + 2 a x) / (1 + exp(x - eta)) dx``
    with ``a`` the non-parabolicity ``k_B T / E_g`` (``a = 0``: the usual ``F_1/2``, so
    that ``n = N_c F_1/2(eta)`` and ``F_1/2 -> exp(eta)`` for ``eta -> -inf``).

    Method: with ``x = t^2`` the integrand is smooth in ``t``; Gauss–Legendre quadrature
    of order ``_FD_ORDER`` on three pieces split at ``x = eta - T``, ``x = eta`` and
    ending at ``x = eta + T`` (``T = _FD_TAIL``), so that the Fermi step sits at a
    junction, where the nodes cluster, and each piece is short on the scale of the
    step. Relative accuracy better than 1e-12 for -50 <= eta <= 200 and ``a <= 0.5``
    against adaptive quadrature (``tests/test_current.py``).

    Parameters
    ----------
    eta : array_like
        Reduced Fermi level ``(mu - E_c) / k_B T``.
    nonparabolicity : array_like
        ``k_B T / E_g`` (0 for a parabolic band).

    Returns
    -------
    value, derivative : ndarray
        ``F(eta)`` and ``dF/deta``.
    """
    eta = np.asarray(eta, float)[..., None]
    alpha = np.asarray(nonparabolicity, float)[..., None]
    # Breakpoints in t: deep inside the Fermi sea, the Fermi level, the end of the tail.
    fermi = np.maximum(eta, 0.0)
    deep = np.maximum(eta - _FD_TAIL, 0.0)
    breaks = [np.zeros_like(fermi), np.sqrt(deep), np.sqrt(fermi), np.sqrt(fermi + _FD_TAIL)]
    u, w = _gauss_legendre_01(_FD_ORDER)
    t = np.concatenate([a + (b - a) * u for a, b in zip(breaks[:-1], breaks[1:])], axis=-1)
    weight = np.concatenate([(b - a) * w for a, b in zip(breaks[:-1], breaks[1:])], axis=-1)
    x = t * t
    density = 2.0 * t * np.sqrt(x * (1.0 + alpha * x)) * (1.0 + 2.0 * alpha * x) * weight
    occupation = expit(eta - x)
    scale = 2.0 / np.sqrt(np.pi)
    value = scale * np.sum(density * occupation, axis=-1)
    derivative = scale * np.sum(density * occupation * (1.0 - occupation), axis=-1)
    return value, derivative


def effective_density_of_states_cm3(mass, temperature_K) -> np.ndarray:
    """``N_c = 2 (m k_B T / 2 pi hbar^2)^{3/2}`` in cm^-3 (mass in m0)."""
    return NC_300K_cm3 * (np.asarray(mass, float) * np.asarray(temperature_K, float) / 300.0) ** 1.5


def fermi_level_eV(doping_cm3, mass, temperature_K, *, gap_eV=None) -> np.ndarray:
    """Fermi level of a contact above its band edge, from its donor density.

    Solves ``n = N_c F(eta)`` (:func:`fermi_dirac_half`) by Newton's method on
    ``ln F(eta) - ln(n / N_c)``; ``ln F`` is increasing and concave, so the iteration
    converges monotonically once it is left of the root.

    Parameters
    ----------
    doping_cm3 : array_like
        Ionised donor density (cm^-3), > 0.
    mass : array_like
        Band-edge effective mass of the contact (m0).
    temperature_K : float or array_like
    gap_eV : array_like, optional
        Gap for the non-parabolic (Kane) density of states; ``None``: parabolic.

    Returns
    -------
    ndarray
        ``mu - E_c`` in eV (negative for a non-degenerate contact).
    """
    doping = np.asarray(doping_cm3, float)
    if np.any(~(doping > 0.0)):
        raise ValueError("contact doping must be positive (cm^-3)")
    kT = KB_eV_K * np.asarray(temperature_K, float)
    ratio = doping / effective_density_of_states_cm3(mass, temperature_K)
    alpha = 0.0 if gap_eV is None else kT / np.asarray(gap_eV, float)
    target = np.log(ratio)
    # Left of the root for the parabolic band; the degenerate limit for high densities.
    eta = np.where(ratio < 1.0, target, (0.75 * np.sqrt(np.pi) * ratio) ** (2.0 / 3.0) - 1.0)
    eta = eta - 1.0 if gap_eV is not None else eta
    for _ in range(60):
        value, derivative = fermi_dirac_half(eta, alpha)
        step = (target - np.log(value)) * value / derivative
        eta = eta + np.clip(step, -10.0, 10.0)
        if np.all(np.abs(step) < 1e-13 * np.maximum(1.0, np.abs(eta))):
            break
    return eta * kT


# --- supply function and prefactor ----------------------------------------------------


def supply_function_eV(energy_eV, emitter_fermi_eV, collector_fermi_eV, temperature_K) -> np.ndarray:
    """Tsu–Esaki supply ``k_B T ln[(1 + e^{(mu_e - E)/k_B T}) / (1 + e^{(mu_c - E)/k_B T})]``.

    Written as a difference of two ``logaddexp(0, .)`` (stable at any argument, exactly
    zero when ``mu_e = mu_c``). Tends to ``(mu_e - E) theta(mu_e - E) - (mu_c - E)
    theta(mu_c - E)`` as ``T -> 0``. All arguments broadcast; energies in eV.
    """
    kT = KB_eV_K * np.asarray(temperature_K, float)
    energy = np.asarray(energy_eV)
    emitter = np.logaddexp(0.0, (emitter_fermi_eV - energy) / kT)
    collector = np.logaddexp(0.0, (collector_fermi_eV - energy) / kT)
    return kT * (emitter - collector)


def tsu_esaki_prefactor_A_cm2_eV(mass, temperature_K) -> np.ndarray:
    """``q m k_B T / (2 pi^2 hbar^3) = A* (m/m0) T / k_B`` in A cm^-2 eV^-1.

    It multiplies ``Int T(E) ln[...] dE``, i.e. ``Int T(E) N(E) dE / k_B T`` with the
    supply :func:`supply_function_eV` ``N`` in eV.
    """
    return RICHARDSON_A_cm2_K2 * np.asarray(mass, float) * np.asarray(temperature_K, float) / KB_eV_K


def transport_transmission(energy_eV, band_edge_eV, mass, thickness_nm, *, gap_eV=None) -> np.ndarray:
    """Transmission that carries current, shape (..., nE).

    The coherent transmission of :func:`physics.transfer.scattering`; where the band
    edges are complex (optical potential), plus Büttiker's incoherent part
    ``A_e A_c / (A_e + A_c)`` (module docstring). The stack reversed gives the
    collector-side reflection; both orientations go through the kernel in one call.
    """
    edge = np.asarray(band_edge_eV)
    if not np.iscomplexobj(edge) or not np.any(edge.imag != 0.0):
        return scattering(energy_eV, edge.real, mass, thickness_nm, gap_eV=gap_eV).transmission
    layers = [edge, np.asarray(mass, float), np.asarray(thickness_nm, float)]
    if gap_eV is not None:
        layers.append(np.asarray(gap_eV, float))
    shape = np.broadcast_shapes(*(a.shape for a in layers))
    both = [np.stack([np.broadcast_to(a, shape), np.broadcast_to(a, shape)[..., ::-1]]) for a in layers]
    result = scattering(energy_eV, both[0], both[1], both[2], gap_eV=both[3] if gap_eV is not None else None)
    coherent = result.transmission[0]
    absorbed = np.clip(1.0 - coherent[None] - result.reflection, 0.0, None)
    total = absorbed[0] + absorbed[1]
    with np.errstate(invalid="ignore", divide="ignore"):
        # Only where both contacts carry propagating states can flux enter and leave.
        open_contacts = (total > 0.0) & (result.velocity_ratio[0] > 0.0)
        incoherent = np.where(open_contacts, absorbed[0] * absorbed[1] / total, 0.0)
    return coherent + incoherent


# --- adaptive nodes ---------------------------------------------------------------------


@dataclass(frozen=True)
class _NodeDensity:
    """Mixture node density on [lo, hi] (module docstring).

    Window arrays have shape S + (1,); the Fermi bumps S + (nb,) and the poles S + (K,).
    Each part is normalised to unit mass inside the window, then weighted.
    """

    lo: np.ndarray
    hi: np.ndarray
    w_edge: np.ndarray
    w_uniform: np.ndarray
    bump_center: np.ndarray
    bump_scale: np.ndarray
    bump_offset: np.ndarray
    bump_mass: np.ndarray
    w_bump: np.ndarray
    pole_center: np.ndarray
    pole_half_width: np.ndarray
    pole_offset: np.ndarray
    pole_mass: np.ndarray
    w_pole: np.ndarray
    line_offset: np.ndarray
    line_mass: np.ndarray
    w_line: np.ndarray

    @classmethod
    def build(cls, lo, hi, fermi_eV, kT, pole_eV, width_eV) -> _NodeDensity:
        lo, hi, kT = (np.asarray(a, float)[..., None] for a in (lo, hi, kT))
        span = hi - lo
        fermi = np.asarray(fermi_eV, float)
        bump_inside = (fermi >= lo) & (fermi <= hi)
        bump_center = np.where(bump_inside, fermi, lo)
        bump_offset = expit((lo - bump_center) / kT)
        bump_mass = expit((hi - bump_center) / kT) - bump_offset
        w_bump = np.where(bump_inside, _WEIGHT_FERMI, 0.0)

        pole_inside = np.isfinite(pole_eV) & np.isfinite(width_eV)
        center = np.where(pole_inside, pole_eV, lo)
        # A floor far below any physical width keeps asinh finite for Gamma = 0.
        half_width = np.where(pole_inside, np.maximum(0.5 * np.nan_to_num(width_eV), 1e-15), span)
        pole_offset = np.arcsinh((lo - center) / half_width)
        pole_mass = np.arcsinh((hi - center) / half_width) - pole_offset
        line_offset = np.arctan((lo - center) / half_width)
        line_mass = np.arctan((hi - center) / half_width) - line_offset
        count = np.sum(pole_inside, axis=-1, keepdims=True)
        share = np.where(pole_inside, np.minimum(_WEIGHT_POLES / np.maximum(count, 1), _WEIGHT_POLE_MAX), 0.0)
        w_line = _LINE_SHARE * share
        w_pole = share - w_line

        rest = 1.0 - _WEIGHT_EDGE - np.sum(w_bump, axis=-1, keepdims=True) - np.sum(share, axis=-1, keepdims=True)
        return cls(
            lo=lo,
            hi=hi,
            w_edge=np.full_like(lo, _WEIGHT_EDGE),
            w_uniform=rest,
            bump_center=bump_center,
            bump_scale=kT,
            bump_offset=bump_offset,
            bump_mass=bump_mass,
            w_bump=w_bump,
            pole_center=center,
            pole_half_width=half_width,
            pole_offset=pole_offset,
            pole_mass=pole_mass,
            w_pole=w_pole,
            line_offset=line_offset,
            line_mass=line_mass,
            w_line=w_line,
        )

    def cdf_and_density(self, energy: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``F(E)`` and ``rho(E)`` for energies of shape S + (N,)."""
        span = self.hi - self.lo
        above = np.clip(energy - self.lo, 0.0, span)
        cdf = self.w_edge * np.sqrt(above / span) + self.w_uniform * above / span
        with np.errstate(divide="ignore"):
            density = self.w_edge * 0.5 / np.sqrt(above * span) + self.w_uniform / span
        for k in range(self.bump_center.shape[-1]):
            logistic = expit((energy - self.bump_center[..., k, None]) / self.bump_scale)
            weight = self.w_bump[..., k, None] / self.bump_mass[..., k, None]
            cdf = cdf + weight * (logistic - self.bump_offset[..., k, None])
            density = density + weight * logistic * (1.0 - logistic) / self.bump_scale
        for k in range(self.pole_center.shape[-1]):
            offset = energy - self.pole_center[..., k, None]
            half_width = self.pole_half_width[..., k, None]
            weight = self.w_pole[..., k, None] / self.pole_mass[..., k, None]
            cdf = cdf + weight * (np.arcsinh(offset / half_width) - self.pole_offset[..., k, None])
            density = density + weight / np.hypot(offset, half_width)
            weight = self.w_line[..., k, None] / self.line_mass[..., k, None]
            cdf = cdf + weight * (np.arctan(offset / half_width) - self.line_offset[..., k, None])
            density = density + weight * half_width / (offset * offset + half_width * half_width)
        return cdf, density

    def quantile_table(self, per_part: int) -> np.ndarray:
        """Sorted energies of shape S + (T,): the window ends and ``per_part`` quantiles of
        every part, so every cell between neighbours holds at most 1/per_part of ``F``."""
        v = (np.arange(per_part) + 0.5) / per_part
        span = self.hi - self.lo
        parts = [self.lo, self.hi, self.lo + span * v * v, self.lo + span * v]
        for k in range(self.bump_center.shape[-1]):
            level = self.bump_offset[..., k, None] + v * self.bump_mass[..., k, None]
            parts.append(self.bump_center[..., k, None] + self.bump_scale * logit(level))
        for k in range(self.pole_center.shape[-1]):
            angle = self.pole_offset[..., k, None] + v * self.pole_mass[..., k, None]
            parts.append(self.pole_center[..., k, None] + self.pole_half_width[..., k, None] * np.sinh(angle))
            angle = self.line_offset[..., k, None] + v * self.line_mass[..., k, None]
            parts.append(self.pole_center[..., k, None] + self.pole_half_width[..., k, None] * np.tan(angle))
        table = np.concatenate([np.broadcast_to(p, self.lo.shape[:-1] + p.shape[-1:]) for p in parts], axis=-1)
        return np.sort(np.clip(table, self.lo, self.hi), axis=-1)

    def inverse(self, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``E = F^{-1}(u)`` and ``rho(E)`` for sorted ``u`` in (0, 1), shape S + (N,).

        ``F`` is tabulated on :meth:`quantile_table`; each ``u`` is bracketed in the
        table (one batched ``searchsorted``: rows are offset by 2 so that the flattened
        table stays sorted), interpolated linearly, and polished by Newton steps in
        ``sqrt(E - lo)`` kept inside the bracket (bisection where a step would leave it).
        """
        table = self.quantile_table(_TABLE_PER_PART)
        table_cdf = np.maximum.accumulate(self.cdf_and_density(table)[0], axis=-1)
        n_table = table.shape[-1]
        rows = table.reshape(-1, n_table)
        offset = 2.0 * np.arange(rows.shape[0])[:, None]
        target = np.broadcast_to(u, rows.shape[:1] + u.shape[-1:])
        cell = np.searchsorted((table_cdf.reshape(rows.shape) + offset).ravel(), (target + offset).ravel(), "right")
        cell = np.clip(cell.reshape(target.shape) - n_table * np.arange(rows.shape[0])[:, None], 1, n_table - 1)
        shape = table.shape[:-1] + u.shape[-1:]
        cell = cell.reshape(shape)
        lower, upper = np.take_along_axis(table, cell - 1, axis=-1), np.take_along_axis(table, cell, axis=-1)
        cdf_lower = np.take_along_axis(table_cdf, cell - 1, axis=-1)
        cdf_upper = np.take_along_axis(table_cdf, cell, axis=-1)
        target = target.reshape(shape)
        with np.errstate(divide="ignore", invalid="ignore"):
            fraction = np.clip((target - cdf_lower) / (cdf_upper - cdf_lower), 0.0, 1.0)
        energy = lower + np.nan_to_num(fraction) * (upper - lower)
        # Newton in s = sqrt(E - lo), in which F is smooth also at the lower edge, where
        # the edge part makes F grow like sqrt(E - lo).
        root, root_lower, root_upper = (np.sqrt(np.maximum(e - self.lo, 0.0)) for e in (energy, lower, upper))
        for _ in range(_NEWTON_POLISH_STEPS):
            cdf, density = self.cdf_and_density(self.lo + root * root)
            low = cdf < target
            root_lower = np.where(low, root, root_lower)
            root_upper = np.where(low, root_upper, root)
            with np.errstate(divide="ignore", invalid="ignore"):
                newton = root - (cdf - target) / (2.0 * root * density)
            inside = (newton >= root_lower) & (newton <= root_upper)
            root = np.where(inside, newton, 0.5 * (root_lower + root_upper))
        energy = self.lo + root * root
        return energy, self.cdf_and_density(energy)[1]


def adaptive_nodes(lo_eV, hi_eV, temperature_K, fermi_eV, pole_eV, width_eV, n_nodes: int):
    """Energy nodes and weights for ``Int_lo^hi f(E) dE ~ sum_i weight_i f(E_i)``.

    Parameters
    ----------
    lo_eV, hi_eV : ndarray, shape S
        Integration window.
    temperature_K : float
    fermi_eV : ndarray, shape S + (nb,)
        Fermi levels (logistic node bumps of width k_B T where inside the window).
    pole_eV, width_eV : ndarray, shape S + (K,)
        Poles ``E_r - i Gamma/2`` (NaN entries are ignored).
    n_nodes : int

    Returns
    -------
    energy_eV, weight_eV : ndarray, shape S + (n_nodes,)
    """
    kT = KB_eV_K * temperature_K * np.ones(np.shape(lo_eV))
    pole_eV, width_eV = np.asarray(pole_eV, float), np.asarray(width_eV, float)
    # Only as many pole parts as the busiest window needs (each costs a term per node).
    present = np.isfinite(pole_eV) & np.isfinite(width_eV)
    order = np.argsort(~present, axis=-1, kind="stable")
    count = int(present.sum(axis=-1).max(initial=0))
    pole_eV = np.take_along_axis(pole_eV, order, axis=-1)[..., :count]
    width_eV = np.take_along_axis(width_eV, order, axis=-1)[..., :count]
    density = _NodeDensity.build(lo_eV, hi_eV, fermi_eV, kT, pole_eV, width_eV)
    u, w = _gauss_legendre_01(n_nodes)
    energy, rho = density.inverse(u)
    with np.errstate(divide="ignore"):
        weight = np.where(np.isfinite(rho), w / rho, 0.0)
    return energy, weight


# --- current ----------------------------------------------------------------------------


@dataclass(frozen=True)
class IVCurve:
    """Current–voltage curves of a batch of stacks.

    Attributes
    ----------
    bias_V : ndarray, shape (nV,)
    current_density_A_cm2 : ndarray, shape (B, nV)
        Electron current density from emitter to collector (A/cm^2).
    resonances : Resonances
        Levels that carry current at each bias: from the lower end of the integration
        window to :data:`LEVEL_SEARCH_kT` k_B T above the higher Fermi level; arrays of
        shape (B, nV, levels).
    """

    bias_V: np.ndarray
    current_density_A_cm2: np.ndarray
    resonances: Resonances


def integration_window_eV(bias_V, source_fermi_eV, temperature_K, *, collector_edge_eV=None):
    """``(lo, hi)`` of the energy integral: both contacts propagate, supply not negligible.

    Parameters
    ----------
    bias_V, source_fermi_eV : array_like, broadcast together
        Bias and Fermi level of the injecting contact above its own band edge.
    temperature_K : float
    collector_edge_eV : array_like, optional
        Collector band edge at each bias on the emitter's zero-bias scale; ``-qV`` when
        omitted (contacts of one material).

    Returns
    -------
    lo, hi : ndarray
        ``lo = max(0, collector edge)``; ``hi`` is :data:`SUPPLY_TAIL_kT` k_B T above the
        higher of the two Fermi levels (``mu`` for ``V >= 0``, ``mu + |V|`` for ``V < 0``).
    """
    bias = np.asarray(bias_V, float)
    kT = KB_eV_K * temperature_K
    edge = -bias if collector_edge_eV is None else np.asarray(collector_edge_eV, float)
    lo = np.maximum(0.0, edge)
    hi = source_fermi_eV + np.maximum(0.0, -bias) + SUPPLY_TAIL_kT * kT
    lo, hi = np.broadcast_arrays(lo, np.maximum(hi, lo + 10.0 * kT))
    return lo, hi


def contact_levels(device: Device, bias_V):
    """Fermi levels and prefactor per stack and bias (see the module docstring).

    Returns
    -------
    emitter_fermi_eV, collector_fermi_eV : ndarray, shape (B, nV)
        Fermi levels of the two contacts on the emitter's zero-bias scale.
    source_fermi_eV : ndarray, shape (B, nV)
        Fermi level of the injecting contact above its own band edge.
    prefactor_A_cm2_eV : ndarray, shape (B, nV)
    """
    bias = np.atleast_1d(np.asarray(bias_V, float))[None, :]
    mass = np.asarray(device.mass, float)
    gap = None if device.gap_eV is None else np.asarray(device.gap_eV, float)
    levels = [
        fermi_level_eV(doping, mass[:, j], device.temperature_K, gap_eV=None if gap is None else gap[:, j])
        for j, doping in ((0, device.emitter_doping_cm3), (-1, device.collector_doping_cm3))
    ]
    forward = bias >= 0.0
    source = np.where(forward, levels[0][:, None], levels[1][:, None])
    source_mass = np.where(forward, mass[:, :1], mass[:, -1:])
    # The injecting contact's Fermi level sits at mu above the emitter edge for V >= 0,
    # and the emitter's Fermi level sits qV below the collector's (mu + |V|) for V < 0:
    # at mu on the common scale either way.
    return source, source - bias, source, tsu_esaki_prefactor_A_cm2_eV(source_mass, device.temperature_K)


def current_density(
    device: Device,
    bias_V,
    *,
    nodes: int = DEFAULT_NODES,
    slice_nm: float = DEFAULT_SLICE_nm,
    max_levels: int = 4,
) -> IVCurve:
    """Tsu–Esaki current density of every stack at every bias.

    Parameters
    ----------
    device : Device
        ``B`` stacks.
    bias_V : array_like, shape (nV,)
        Applied biases (V); positive bias lowers the collector.
    nodes : int
        Energy nodes per stack and bias (same for all, so the sweep is one kernel call).
    slice_nm : float
        Slice thickness of sloped layers (:func:`physics.profile.biased_profile`).
    max_levels : int
        Levels searched per bias to place nodes (and reported).

    Returns
    -------
    IVCurve
    """
    bias = np.atleast_1d(np.asarray(bias_V, float))
    profile = biased_profile(device, bias, slice_nm=slice_nm)
    emitter, collector, source, prefactor = contact_levels(device, bias)
    collector_edge = np.real(profile.band_edge_eV[..., -1])
    lo, hi = integration_window_eV(bias[None, :], source, device.temperature_K, collector_edge_eV=collector_edge)
    # Levels far above the Fermi levels carry no current (supply ~ exp(-20)); the uniform
    # nodes cover their tails, so the level search stops short of the integration window.
    level_top = np.minimum(hi, np.maximum(emitter, collector) + LEVEL_SEARCH_kT * KB_eV_K * device.temperature_K)
    levels = find_resonances(**profile.arrays, window_eV=(lo, np.maximum(level_top, lo)), max_levels=max_levels)
    energy, weight = adaptive_nodes(
        lo,
        hi,
        device.temperature_K,
        np.stack([emitter, collector], axis=-1),
        levels.energy_eV,
        levels.width_eV,
        nodes,
    )
    transmission = transport_transmission(energy, **profile.arrays)
    supply = supply_function_eV(energy, emitter[..., None], collector[..., None], device.temperature_K)
    kT = KB_eV_K * device.temperature_K
    current = prefactor * np.sum(weight * transmission * supply, axis=-1) / kT
    return IVCurve(bias_V=bias, current_density_A_cm2=current, resonances=levels)
