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
starves it). ``F^{-1}`` is found in the variable ``s = sqrt(E - E_lo)``, in which ``F`` is
smooth also at the lower edge: ``F`` and ``dF/ds`` are tabulated at quantiles of every
part, the cubic Hermite interpolant of ``F`` is inverted in each cell, and two Newton
steps on ``F`` polish the result; each node is the last point where ``F`` was evaluated,
so its weight ``dE/du`` is exact for it. Every bias gets the same number of nodes, so a
whole bias sweep of a whole batch of stacks goes through the kernel in one call; at zero
bias the supply vanishes identically and the kernel is not called. Against brute-force
dense grids, :data:`DEFAULT_NODES` gives ~2e-6 relative error on an ordinary double
barrier (300 K and 77 K), ~1.5e-4 on a triple barrier and ~1e-4 on a level narrower than
1 neV; on invented random double and triple barriers the largest error against 1024
nodes is ~1e-3 (``benchmarks/bench_physics.py``).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
from scipy.special import expit, logit

from tunnelsmith.physics.constants import KB_eV_K, NC_300K_cm3, RICHARDSON_A_cm2_K2
from tunnelsmith.physics.device import Device
from tunnelsmith.physics.profile import DEFAULT_SLICE_nm, biased_profile
from tunnelsmith.physics.resonance import Resonances, track_resonances
from tunnelsmith.physics.transfer import scattering, transmission

#: Default number of energy nodes per bias (accuracy per node count in
#: benchmarks/bench_physics.py).
DEFAULT_NODES = 96

#: The integration window ends this many k_B T above the higher Fermi level.
SUPPLY_TAIL_kT = 40.0

#: Levels that place nodes (and are reported) are searched up to this many k_B T above
#: the higher Fermi level.
LEVEL_SEARCH_kT = 20.0

# Share of the nodes of each part of the node density (module docstring); the poles
# share POLES between them, at most POLE_MAX each, the rest goes to the uniform part.
# POLE_MAX and LINE_SHARE were tuned at 96 nodes (benchmarks/bench_physics.py): a larger
# share of the asinh density keeps f/rho smooth where a narrow line meets its tails.
_WEIGHT_EDGE = 0.1
_WEIGHT_FERMI = 0.05
_WEIGHT_POLES = 0.55
_WEIGHT_POLE_MAX = 0.35
# Part of a pole's share that goes to the Lorentzian (the rest to the asinh density).
_LINE_SHARE = 0.3

# Inversion of the node CDF: table quantiles per part (more for the asinh parts, which
# span many decades of E - E_r), Newton steps on each cell's cubic, Newton steps on F.
# With fewer table points or steps the nodes' residual in u reaches 1e-8..1e-5, which
# shows in the current at 1e-7..1e-4 and spoils the exact integral of a Lorentzian.
_TABLE_PER_PART = 16
_ASINH_PER_PART = 48
_CELL_NEWTON_STEPS = 2
_NEWTON_POLISH_STEPS = 2

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
        return transmission(energy_eV, edge.real, mass, thickness_nm, gap_eV=gap_eV)
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
    """Mixture node density on [lo, hi] (module docstring), in the variable ``s = sqrt(E - lo)``.

    ``F`` is smooth in ``s`` also at the lower edge, where the edge part makes it grow
    like ``sqrt(E - lo)``; there ``dF/ds`` is finite and positive. Window arrays have
    shape S + (1,); the Fermi bumps S + (nb,) and the poles S + (K,). Each part is
    normalised to unit mass inside the window and weighted; ``*_coefficient`` is weight
    over mass, and ``constant`` collects the parts' values at ``lo`` so that ``F(lo) = 0``.
    """

    lo: np.ndarray
    hi: np.ndarray
    edge_slope: np.ndarray
    uniform_rate: np.ndarray
    constant: np.ndarray
    kT: np.ndarray
    bump_center: np.ndarray
    bump_coefficient: np.ndarray
    bump_offset: np.ndarray
    bump_mass: np.ndarray
    pole_center: np.ndarray
    pole_half_width: np.ndarray
    asinh_coefficient: np.ndarray
    asinh_offset: np.ndarray
    asinh_mass: np.ndarray
    line_coefficient: np.ndarray
    line_offset: np.ndarray
    line_mass: np.ndarray

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
        asinh_offset = np.arcsinh((lo - center) / half_width)
        asinh_mass = np.arcsinh((hi - center) / half_width) - asinh_offset
        line_offset = np.arctan((lo - center) / half_width)
        line_mass = np.arctan((hi - center) / half_width) - line_offset
        count = np.sum(pole_inside, axis=-1, keepdims=True)
        share = np.where(pole_inside, np.minimum(_WEIGHT_POLES / np.maximum(count, 1), _WEIGHT_POLE_MAX), 0.0)
        w_line = _LINE_SHARE * share
        w_pole = share - w_line

        bump_coefficient = w_bump / bump_mass
        asinh_coefficient = w_pole / asinh_mass
        line_coefficient = w_line / line_mass
        rest = 1.0 - _WEIGHT_EDGE - np.sum(w_bump, axis=-1, keepdims=True) - np.sum(share, axis=-1, keepdims=True)
        constant = -(
            np.sum(bump_coefficient * bump_offset, axis=-1, keepdims=True)
            + np.sum(asinh_coefficient * asinh_offset + line_coefficient * line_offset, axis=-1, keepdims=True)
        )
        return cls(
            lo=lo,
            hi=hi,
            edge_slope=_WEIGHT_EDGE / np.sqrt(span),
            uniform_rate=rest / span,
            constant=constant,
            kT=kT,
            bump_center=bump_center,
            bump_coefficient=bump_coefficient,
            bump_offset=bump_offset,
            bump_mass=bump_mass,
            pole_center=center,
            pole_half_width=half_width,
            asinh_coefficient=asinh_coefficient,
            asinh_offset=asinh_offset,
            asinh_mass=asinh_mass,
            line_coefficient=line_coefficient,
            line_offset=line_offset,
            line_mass=line_mass,
        )

    def cdf_and_slope(self, root: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``F`` and ``dF/ds`` at ``s = root`` (shape S + (N,)), i.e. at ``E = lo + s^2``.

        ``dF/ds = 2 s rho(E)``, with the edge part's ``2 s rho`` the constant
        ``edge_slope``. The pole parts share one square root: with
        ``r = (E - E_r)/(Gamma/2)``, ``asinh r = sign(r) ln(|r| + sqrt(1 + r^2))``.
        """
        # In-place arithmetic on a few buffers: the arrays are large, and each fresh
        # temporary costs a pass over memory (and page faults).
        energy = np.multiply(root, root)
        cdf = np.multiply(energy, self.uniform_rate)
        energy += self.lo
        work = np.multiply(root, self.edge_slope)
        cdf += work
        cdf += self.constant
        rest = np.empty_like(cdf)  # 2 s rho without the edge part, divided by 2 s
        rest[...] = self.uniform_rate
        extra = np.empty_like(cdf)
        for k in range(self.bump_center.shape[-1]):
            logistic = np.subtract(energy, self.bump_center[..., k, None], out=work)
            logistic /= self.kT
            expit(logistic, out=logistic)
            cdf += np.multiply(logistic, self.bump_coefficient[..., k, None], out=extra)
            np.subtract(1.0, logistic, out=extra)
            extra *= logistic
            extra *= self.bump_coefficient[..., k, None] / self.kT
            rest += extra
        if self.pole_center.shape[-1]:
            root_q, asinh = np.empty_like(cdf), np.empty_like(cdf)
        for k in range(self.pole_center.shape[-1]):
            half_width = self.pole_half_width[..., k, None]
            r = np.subtract(energy, self.pole_center[..., k, None], out=work)
            r /= half_width
            q = np.multiply(r, r, out=extra)
            q += 1.0
            np.sqrt(q, out=root_q)
            np.abs(r, out=asinh)
            asinh += root_q
            np.log(asinh, out=asinh)
            np.copysign(asinh, r, out=asinh)
            asinh *= self.asinh_coefficient[..., k, None]
            cdf += asinh
            line = np.arctan(r, out=r)
            line *= self.line_coefficient[..., k, None]
            cdf += line
            rest += np.divide(self.asinh_coefficient[..., k, None] / half_width, root_q, out=root_q)
            rest += np.divide(self.line_coefficient[..., k, None] / half_width, q, out=q)
        rest *= root
        rest *= 2.0
        rest += self.edge_slope
        return cdf, rest

    def quantile_table(self, per_part: int) -> np.ndarray:
        """Sorted energies of shape S + (T,): the window ends and ``per_part`` quantiles of
        every part, so every cell between neighbours holds at most 1/per_part of ``F``."""
        v = (np.arange(per_part) + 0.5) / per_part
        v_asinh = (np.arange(_ASINH_PER_PART) + 0.5) / _ASINH_PER_PART
        span = self.hi - self.lo
        parts = [self.lo, self.hi, self.lo + span * v * v, self.lo + span * v]
        for k in range(self.bump_center.shape[-1]):
            level = self.bump_offset[..., k, None] + v * self.bump_mass[..., k, None]
            parts.append(self.bump_center[..., k, None] + self.kT * logit(level))
        for k in range(self.pole_center.shape[-1]):
            center, half_width = self.pole_center[..., k, None], self.pole_half_width[..., k, None]
            angle = self.asinh_offset[..., k, None] + v_asinh * self.asinh_mass[..., k, None]
            parts.append(center + half_width * np.sinh(angle))
            angle = self.line_offset[..., k, None] + v * self.line_mass[..., k, None]
            parts.append(center + half_width * np.tan(angle))
        table = np.concatenate([np.broadcast_to(p, self.lo.shape[:-1] + p.shape[-1:]) for p in parts], axis=-1)
        return np.sort(np.clip(table, self.lo, self.hi), axis=-1)

    def inverse(self, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``E = F^{-1}(u)`` and ``dE/du`` for sorted ``u`` in (0, 1), shape S + (N,).

        ``F`` and ``dF/ds`` are tabulated on :meth:`quantile_table`; each ``u`` is
        bracketed in the table, the cubic Hermite interpolant of ``F`` through the
        cell's ends and slopes (textbook piecewise-cubic interpolation, e.g. de Boor, A
        Practical Guide to Splines, ch. IV) is inverted, and Newton steps on ``F`` kept
        inside the cell polish the result. The node is the last point where ``F`` was
        evaluated, so its ``dE/du = 2 s / (dF/ds)`` is exact for it.
        """
        table = np.sqrt(self.quantile_table(_TABLE_PER_PART) - self.lo)
        table_cdf, table_slope = self.cdf_and_slope(table)
        table_cdf = np.maximum.accumulate(table_cdf, axis=-1)
        # Bracket each u in its table row with one searchsorted over the flattened table:
        # rows are offset by 2 (F is in [0, 1]), so the flattened table stays sorted.
        n_table = table.shape[-1]
        n_rows = table_cdf.size // n_table
        row_offset = 2.0 * np.arange(n_rows)[:, None]
        target = np.broadcast_to(u, table.shape[:-1] + u.shape[-1:])
        flat_target = (target.reshape(n_rows, -1) + row_offset).ravel()
        upper_index = np.searchsorted((table_cdf.reshape(n_rows, -1) + row_offset).ravel(), flat_target, "right")
        first = n_table * np.arange(n_rows)[:, None]
        upper_index = np.clip(upper_index.reshape(n_rows, -1) - first, 1, n_table - 1) + first
        upper_index = upper_index.reshape(target.shape)
        lower_index = upper_index - 1
        lower, upper = table.take(lower_index), table.take(upper_index)
        root = _invert_hermite_cell(
            target,
            lower,
            upper,
            table_cdf.take(lower_index),
            table_cdf.take(upper_index),
            table_slope.take(lower_index),
            table_slope.take(upper_index),
        )
        for step in range(_NEWTON_POLISH_STEPS + 1):
            cdf, slope = self.cdf_and_slope(root)
            if step == _NEWTON_POLISH_STEPS:
                break
            root, lower, upper = _bracketed_newton(root, cdf - target, slope, lower, upper)
        return self.lo + root * root, 2.0 * root / slope



def _invert_hermite_cell(target, lower, upper, cdf_lower, cdf_upper, slope_lower, slope_upper):
    """``s`` in ``[lower, upper]`` where the cubic Hermite interpolant of ``F(s)`` equals ``target``.

    The interpolant through the cell's ends and slopes (exact for cubic ``F``, error
    O(h^4) for smooth ``F``) is inverted by Newton steps on the polynomial, kept inside
    the cell by bisection; polynomial steps cost a few multiplications, far less than an
    evaluation of ``F``.
    """
    width = upper - lower
    rise = cdf_upper - cdf_lower
    # F - target = c0 + m0 t + c2 t^2 + c3 t^3 for t in [0, 1]: the Hermite form of the
    # cubic with values and slopes (per unit t) at both ends, expanded in powers of t.
    m0, m1 = slope_lower * width, slope_upper * width
    c0 = cdf_lower - target
    c2 = 3.0 * rise - 2.0 * m0 - m1
    c3 = m0 + m1 - 2.0 * rise
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.clip(np.nan_to_num(-c0 / rise), 0.0, 1.0)
    left, right = np.zeros_like(t), np.ones_like(t)
    for _ in range(_CELL_NEWTON_STEPS):
        value = ((c3 * t + c2) * t + m0) * t + c0
        derivative = (3.0 * c3 * t + 2.0 * c2) * t + m0
        t, left, right = _bracketed_newton(t, value, derivative, left, right)
    return lower + t * width


def _bracketed_newton(x, residual, slope, left, right):
    """One Newton step towards the root of an increasing function, given its residual
    and slope at ``x``: the bracket [left, right] shrinks to the root's side of ``x``,
    and a step that would leave it is replaced by bisection."""
    below = residual < 0.0
    left = np.where(below, x, left)
    right = np.where(below, right, x)
    with np.errstate(divide="ignore", invalid="ignore"):
        newton = x - residual / slope
    return np.where((newton >= left) & (newton <= right), newton, 0.5 * (left + right)), left, right


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
    energy, jacobian = density.inverse(u)
    return energy, w * jacobian


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
    levels = track_resonances(
        **profile.arrays, bias_V=bias, window_eV=(lo, np.maximum(level_top, lo)), max_levels=max_levels
    )
    # At zero bias the supply vanishes identically (J = 0 exactly): no nodes there.
    current = np.zeros(emitter.shape)
    if np.all(bias == 0.0):
        return IVCurve(bias_V=bias, current_density_A_cm2=current, resonances=levels)
    biased = np.flatnonzero(bias != 0.0) if np.any(bias == 0.0) else slice(None)
    energy, weight = adaptive_nodes(
        lo[:, biased],
        hi[:, biased],
        device.temperature_K,
        np.stack([emitter, collector], axis=-1)[:, biased],
        levels.energy_eV[:, biased],
        levels.width_eV[:, biased],
        nodes,
    )
    arrays = {key: None if value is None else value[:, biased] for key, value in profile.arrays.items()}
    transmitted = transport_transmission(energy, **arrays)
    supply = supply_function_eV(energy, emitter[:, biased, None], collector[:, biased, None], device.temperature_K)
    kT = KB_eV_K * device.temperature_K
    current[:, biased] = prefactor[:, biased] * np.sum(weight * transmitted * supply, axis=-1) / kT
    return IVCurve(bias_V=bias, current_density_A_cm2=current, resonances=levels)
