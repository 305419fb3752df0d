"""The transmission kernel against references from outside the project.

References (each named again at its check):

- the closed-form transmission of a rectangular barrier, D. J. Griffiths, *Introduction
  to Quantum Mechanics* (2nd ed., Problem 2.33; problem number from memory), and its
  BenDaniel–Duke mass-ratio form derived in :func:`closed_form_barrier_amplitude`;
- the thin-film optics library ``tmm`` (S. J. Byrnes, arXiv:1603.02720): at normal
  incidence, s-polarised light obeys the equal-mass Schrödinger equation with
  ``k_j = n_j k_0``;
- direct integration of the BenDaniel–Duke equation (Phys. Rev. 152, 683, 1966) with
  ``scipy.integrate.solve_ivp``, with the exact linear potential under bias;
- the Airy-function solution of a uniform-field barrier, ``scipy.special.airy``.

Energies in eV, lengths in nm, masses in m0; layer axis last, emitter first.
"""

from __future__ import annotations

import threading
import warnings

import hypothesis
import numpy as np
import pytest
import tmm
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import special
from scipy.integrate import solve_ivp

from tunnelsmith.physics.constants import HBAR2_2M0_eV_nm2
from tunnelsmith.physics.transfer import (
    BAND_EDGE_NUDGE_eV,
    log10_transmission,
    scattering,
    transmission,
    wavevector_per_nm,
)

# Masses and band offsets of the example stacks are typical of GaAs/AlGaAs and
# InGaAs/AlAs (values of this kind: Vurgaftman et al., J. Appl. Phys. 89, 5815, 2001);
# the tests need plausible numbers, not exact ones.
GAAS_MASS, ALGAAS_MASS, ALGAAS_BARRIER_eV = 0.067, 0.092, 0.3
INGAAS_MASS, ALAS_MASS, ALAS_BARRIER_eV = 0.041, 0.075, 1.0


def stack(*layers, emitter=(0.0, GAAS_MASS), collector=None):
    """Layer arrays (band_edge_eV, mass, thickness_nm) of one stack.

    ``layers`` are (band_edge_eV, mass, thickness_nm) of the inner layers; the
    contacts are (band_edge_eV, mass), the collector defaulting to the emitter.
    """
    collector = emitter if collector is None else collector
    edge = [emitter[0], *(layer[0] for layer in layers), collector[0]]
    mass = [emitter[1], *(layer[1] for layer in layers), collector[1]]
    thickness = [0.0, *(layer[2] for layer in layers), 0.0]
    return np.array(edge), np.array(mass), np.array(thickness)


def double_barrier(kind: str):
    """Typical double barriers: AlAs/InGaAs-like 1.0 eV barriers 1.5 nm, well
    4.5 nm; GaAs/AlGaAs-like 0.3 eV barriers 5 nm, well 5 nm (inner layers, contacts)."""
    if kind == "AlAs/InGaAs":
        barrier, well = (ALAS_BARRIER_eV, ALAS_MASS, 1.5), (0.0, INGAAS_MASS, 4.5)
        contact = (0.0, INGAAS_MASS)
    else:
        barrier, well = (ALGAAS_BARRIER_eV, ALGAAS_MASS, 5.0), (0.0, GAAS_MASS, 5.0)
        contact = (0.0, GAAS_MASS)
    return [barrier, well, barrier], contact


# ---------------------------------------------------------------------------------------
# Reference solutions
# ---------------------------------------------------------------------------------------


def contact_flux_wavevector(energy_eV, band_edge_eV, mass, gap_eV=None):
    """``k/m`` of a contact, principal branch, with the (optional) non-parabolic mass."""
    kinetic = np.asarray(energy_eV) - band_edge_eV
    energy_mass = mass if gap_eV is None else mass * (1.0 + kinetic / gap_eV)
    return np.sqrt(kinetic * energy_mass / HBAR2_2M0_eV_nm2 + 0j) / energy_mass


def closed_form_barrier_amplitude(energy_eV, barrier_eV, well_mass, barrier_mass, width_nm):
    """Transmitted amplitude of one rectangular barrier between identical contacts.

    Derivation (BenDaniel–Duke boundary conditions): in a layer of wavevector ``k`` and
    mass ``m`` the pair ``(psi, psi'/m)``, continuous at every interface, is carried
    across a thickness ``a`` by ``M = [[cos ka, sin(ka)/q], [-q sin ka, cos ka]]`` with
    ``q = k/m``. Outside, ``psi = e^{ikz} + r e^{-ikz}`` left of the barrier and
    ``t e^{ik(z-a)}`` right of it, so ``(psi, psi'/m)`` is ``t (1, i q_w)`` at ``z = a``
    and ``(1 + r, i q_w (1 - r))`` at ``z = 0``. Applying ``M^-1`` and eliminating ``r``:

        1/t = cos(k_b a) - (i/2) (xi + 1/xi) sin(k_b a),   xi = q_b / q_w.

    Below the barrier ``k_b = i kappa`` gives ``1/T = 1 + (1/4)(eta + 1/eta)^2
    sinh^2(kappa a)`` with ``eta = (kappa/m_b)/(k/m_w)``; above it ``1/T = 1 + (1/4)
    (xi - 1/xi)^2 sin^2(k_b a)``. Equal masses give Griffiths' formulas. The expression
    is even in ``k_b`` and analytic in the energy, so it also holds for complex energies
    (contacts on the principal branch) and complex barrier heights ``U - iW``.
    """
    energy = np.asarray(energy_eV)
    q_well = contact_flux_wavevector(energy, 0.0, well_mass)
    k_barrier = np.sqrt((energy - barrier_eV) * barrier_mass / HBAR2_2M0_eV_nm2 + 0j)
    xi = (k_barrier / barrier_mass) / q_well
    phase = k_barrier * width_nm
    return 1.0 / (np.cos(phase) - 0.5j * (xi + 1.0 / xi) * np.sin(phase))


def griffiths_barrier_transmission(energy_eV, barrier_eV, mass, width_nm):
    """Griffiths, Introduction to Quantum Mechanics (2nd ed.), Problem 2.33 (number from
    memory): 1/T = 1 + V0^2 sinh^2(kappa a) / (4E(V0-E)) below the barrier and
    1 + V0^2 sin^2(k a) / (4E(E-V0)) above it, for one mass everywhere."""
    energy = np.asarray(energy_eV, dtype=float)
    wave = np.sqrt(np.abs(energy - barrier_eV) * mass / HBAR2_2M0_eV_nm2) * width_nm
    below = energy < barrier_eV
    swing = np.where(below, np.sinh(wave) ** 2, np.sin(wave) ** 2)
    return 1.0 / (1.0 + barrier_eV**2 * swing / (4.0 * energy * np.abs(barrier_eV - energy)))


def integrate_schrodinger(energy_eV, layers, emitter, collector, *, bias_V=0.0, gaps=None):
    """Amplitudes (t, r, T) by direct integration of the BenDaniel–Duke equation.

    ``psi' = m phi`` and ``phi' = -(E - U(z)) psi / (hbar^2/2m0)`` with ``phi = psi'/m``
    (both continuous at interfaces) are integrated by ``scipy.integrate.solve_ivp``
    (DOP853, rtol 1e-11) from the collector, where the wave is purely outgoing
    ``(psi, phi) = (1, i q_c)``, back to the emitter, where it splits into incident and
    reflected waves. The bias drops linearly over the inner layers, exactly:
    ``U(z) = U_j - V z / L``; the collector edge is lowered by V. ``gaps`` (one per
    layer, contacts included, ``(emitter, *inner, collector)``) switch on the
    energy-dependent mass ``m (1 + (E - U)/E_g)`` (zero bias only).
    """
    energy = np.asarray(energy_eV, dtype=float)
    n = energy.size
    total_nm = sum(layer[2] for layer in layers)
    gap_e, *gap_inner, gap_c = gaps if gaps is not None else [None] * (len(layers) + 2)
    if gaps is not None and bias_V != 0.0:
        raise ValueError("the energy-dependent mass reference is for zero bias")
    q_collector = contact_flux_wavevector(energy, collector[0] - bias_V, collector[1], gap_c)
    state = np.concatenate([np.ones(n, dtype=complex), 1j * q_collector])
    z_right = total_nm
    for (edge, mass, thickness), gap in zip(reversed(layers), reversed(gap_inner)):
        energy_mass = mass if gap is None else mass * (1.0 + (energy - edge) / gap)

        def rhs(z, y, edge=edge, energy_mass=energy_mass):
            potential = edge - bias_V * z / total_nm
            psi, phi = y[:n], y[n:]
            return np.concatenate([energy_mass * phi, -(energy - potential) / HBAR2_2M0_eV_nm2 * psi])

        solution = solve_ivp(
            rhs, (z_right, z_right - thickness), state, method="DOP853", rtol=1e-11, atol=1e-13
        )
        assert solution.success
        state = solution.y[:, -1]
        z_right -= thickness
    q_emitter = contact_flux_wavevector(energy, emitter[0], emitter[1], gap_e)
    psi, phi = state[:n], state[n:]
    incident = (psi + phi / (1j * q_emitter)) / 2
    reflected = (psi - phi / (1j * q_emitter)) / 2
    t = 1.0 / incident
    return t, reflected / incident, np.abs(t) ** 2 * q_collector.real / q_emitter.real


def sliced_stack(layers, emitter, collector, bias_V, slice_nm):
    """Piecewise-constant version of a linearly biased stack, built here independently
    of physics.profile: every inner layer is cut into equal slices no thicker than
    ``slice_nm`` carrying the exact potential at their midpoints (Ando & Itoh, J. Appl.
    Phys. 61, 1497, 1987)."""
    total_nm = sum(layer[2] for layer in layers)
    edge, mass, thickness = [emitter[0]], [emitter[1]], [0.0]
    start = 0.0
    for layer_edge, layer_mass, layer_nm in layers:
        count = max(1, int(np.ceil(layer_nm / slice_nm - 1e-9)))
        width = layer_nm / count
        midpoints = start + (np.arange(count) + 0.5) * width
        edge.extend(layer_edge - bias_V * midpoints / total_nm)
        mass.extend([layer_mass] * count)
        thickness.extend([width] * count)
        start += layer_nm
    edge.append(collector[0] - bias_V)
    mass.append(collector[1])
    thickness.append(0.0)
    return np.array(edge), np.array(mass), np.array(thickness)


def airy_trapezoid_transmission(energy_eV, barrier_eV, contact_mass, barrier_mass, width_nm, bias_V):
    """Exact transmission of a uniform-field barrier between flat contacts.

    Emitter ``U = 0`` (z < 0); barrier ``U_b - V z/a`` (0 < z < a); collector ``U = -V``.
    Inside the barrier ``psi'' = (m_b F / (hbar^2/2m0)) (z_t - z) psi`` with ``F = V/a``
    and turning point ``z_t = (U_b - E)/F``; with ``alpha = (m_b F/(hbar^2/2m0))^(1/3)``
    and ``zeta = alpha (z_t - z)`` this is Airy's equation, ``psi = a Ai(zeta) + b
    Bi(zeta)``, ``psi'/m_b = -(alpha/m_b)(a Ai'(zeta) + b Bi'(zeta))``, evaluated with
    ``scipy.special.airy``; the Wronskian ``Ai Bi' - Ai' Bi = 1/pi`` solves the matching.
    """
    energy = np.asarray(energy_eV, dtype=float)
    field = bias_V / width_nm
    alpha = (barrier_mass * field / HBAR2_2M0_eV_nm2) ** (1.0 / 3.0)
    turning_nm = (barrier_eV - energy) / field
    q_emitter = contact_flux_wavevector(energy, 0.0, contact_mass)
    q_collector = contact_flux_wavevector(energy, -bias_V, contact_mass)

    def airy_at(z_nm):
        return special.airy(alpha * (turning_nm - z_nm))

    # Outgoing wave (1, i q_c) at z = a: a Ai + b Bi = 1, a Ai' + b Bi' = -i q_c m_b / alpha.
    ai, ai_prime, bi, bi_prime = airy_at(width_nm)
    slope = -1j * q_collector * barrier_mass / alpha
    wronskian = ai * bi_prime - ai_prime * bi
    a = (bi_prime - bi * slope) / wronskian
    b = (ai * slope - ai_prime) / wronskian
    ai, ai_prime, bi, bi_prime = airy_at(0.0)
    psi = a * ai + b * bi
    phi = -(alpha / barrier_mass) * (a * ai_prime + b * bi_prime)
    incident = (psi + phi / (1j * q_emitter)) / 2
    return np.abs(1.0 / incident) ** 2 * q_collector.real / q_emitter.real


def relative_error(value, reference):
    return np.max(np.abs(np.asarray(value) / np.asarray(reference) - 1.0))


# ---------------------------------------------------------------------------------------
# Closed forms
# ---------------------------------------------------------------------------------------


def griffiths_error() -> float:
    """Largest relative error against Griffiths' barrier formula, below and above V0."""
    energy = np.concatenate([np.linspace(0.002, 0.298, 150), np.linspace(0.302, 1.5, 150)])
    worst = 0.0
    for width_nm in (1.0, 5.0, 12.0):
        arrays = stack((ALGAAS_BARRIER_eV, GAAS_MASS, width_nm))
        kernel = transmission(energy, *arrays)
        reference = griffiths_barrier_transmission(energy, ALGAAS_BARRIER_eV, GAAS_MASS, width_nm)
        worst = max(worst, relative_error(kernel, reference))
    return worst


def test_rectangular_barrier_matches_griffiths_closed_form():
    """Griffiths, Introduction to Quantum Mechanics, Problem 2.33 (number from memory)."""
    assert griffiths_error() < 1e-13


def mass_ratio_error() -> float:
    """Largest relative error against the BenDaniel–Duke barrier formula (mass ratio)."""
    energy = np.concatenate([np.linspace(0.002, 0.99, 200), np.linspace(1.01, 2.5, 200)])
    worst = 0.0
    for barrier_mass, width_nm in ((ALAS_MASS, 1.5), (0.15, 3.0), (0.02, 6.0)):
        arrays = stack((ALAS_BARRIER_eV, barrier_mass, width_nm), emitter=(0.0, INGAAS_MASS))
        amplitude = closed_form_barrier_amplitude(
            energy, ALAS_BARRIER_eV, INGAAS_MASS, barrier_mass, width_nm
        )
        worst = max(worst, relative_error(transmission(energy, *arrays), np.abs(amplitude) ** 2))
    return worst


def test_rectangular_barrier_with_mass_ratio_matches_bendaniel_duke_closed_form():
    """Closed form derived in closed_form_barrier_amplitude (BenDaniel & Duke 1966)."""
    assert mass_ratio_error() < 1e-13
    # The mass ratio matters: the equal-mass formula is far off for the same barrier.
    energy = np.linspace(0.05, 0.9, 20)
    arrays = stack((ALAS_BARRIER_eV, 0.15, 3.0), emitter=(0.0, INGAAS_MASS))
    equal = griffiths_barrier_transmission(energy, ALAS_BARRIER_eV, INGAAS_MASS, 3.0)
    assert relative_error(transmission(energy, *arrays), equal) > 0.1


def test_complex_amplitude_continues_analytically_to_complex_energies_and_edges():
    """The closed form of closed_form_barrier_amplitude is analytic in E and U: the
    kernel's amplitude t (not only |t|^2) must follow it into the lower half plane
    (pole search) and for an absorbing barrier U - iW."""
    energy = np.linspace(0.05, 1.6, 40)
    for complex_energy, barrier in (
        (energy - 0.02j, ALAS_BARRIER_eV),
        (energy - 0.3j, ALAS_BARRIER_eV),
        (energy + 0.0j, ALAS_BARRIER_eV - 0.01j),
    ):
        arrays = stack((barrier, ALAS_MASS, 2.0), emitter=(0.0, INGAAS_MASS))
        kernel = np.exp(scattering(complex_energy, *arrays).log_t)
        reference = closed_form_barrier_amplitude(
            complex_energy, barrier, INGAAS_MASS, ALAS_MASS, 2.0
        )
        np.testing.assert_allclose(kernel, reference, rtol=1e-11)


def test_barrier_is_transparent_where_k_times_width_is_n_pi():
    """Above a barrier T = 1 exactly where k_b a = n pi (Griffiths, Problem 2.33; the
    mass ratio does not matter since sin(k_b a) = 0)."""
    width_nm = 4.0
    for barrier_mass in (GAAS_MASS, ALGAAS_MASS):
        n = np.arange(1, 6)
        energy = ALGAAS_BARRIER_eV + HBAR2_2M0_eV_nm2 * (n * np.pi / width_nm) ** 2 / barrier_mass
        arrays = stack((ALGAAS_BARRIER_eV, barrier_mass, width_nm))
        np.testing.assert_allclose(transmission(energy, *arrays), 1.0, atol=1e-12)
        # and only there: halfway between two such energies T < 1
        halfway = ALGAAS_BARRIER_eV + HBAR2_2M0_eV_nm2 * (
            (n + 0.5) * np.pi / width_nm
        ) ** 2 / barrier_mass
        assert np.all(transmission(halfway, *arrays) < 1.0 - 1e-4)


# ---------------------------------------------------------------------------------------
# Thin-film optics: tmm
# ---------------------------------------------------------------------------------------


def tmm_error(n_stacks=12, n_energies=40, seed=7) -> tuple[float, float]:
    """Largest errors of T (relative) and of the complex amplitude t (absolute) against
    ``tmm.coh_tmm`` for random equal-mass stacks.

    Mapping: k_0 = 1/nm, so the vacuum wavelength is 2 pi nm and the index of layer j
    is n_j = k_j / k_0 (principal square root: imaginary, i.e. lossy in tmm's
    convention, where a layer is evanescent). tmm's T carries the same flux factor
    Re(n_out)/Re(n_in) as ours, and its t is referred to the same planes.
    """
    rng = np.random.default_rng(seed)
    worst_t, worst_amplitude = 0.0, 0.0
    for _ in range(n_stacks):
        n_inner = rng.integers(1, 7)
        edge = np.concatenate([[0.0], rng.uniform(-0.1, 0.8, n_inner), [rng.uniform(-0.2, 0.1)]])
        thickness = np.concatenate([[0.0], rng.uniform(0.5, 6.0, n_inner), [0.0]])
        mass = np.full(edge.size, GAAS_MASS)
        energy = np.sort(rng.uniform(max(edge[0], edge[-1]) + 0.005, 1.2, n_energies))
        result = scattering(energy, edge, mass, thickness)
        kernel_t = np.exp(result.log_t)
        for i, e in enumerate(energy):
            index = np.sqrt((e - edge) * mass / HBAR2_2M0_eV_nm2 + 0j)  # k_j / (1/nm)
            d_list = np.concatenate([[np.inf], thickness[1:-1], [np.inf]])
            optics = tmm.coh_tmm("s", index, d_list, 0.0, 2.0 * np.pi)
            worst_t = max(worst_t, abs(result.transmission[i] / optics["T"] - 1.0))
            worst_amplitude = max(worst_amplitude, abs(kernel_t[i] - optics["t"]))
    return worst_t, worst_amplitude


def test_equal_mass_stacks_match_tmm_thin_film_optics():
    """tmm (Byrnes, arXiv:1603.02720): s-polarised light at normal incidence."""
    worst_t, worst_amplitude = tmm_error()
    assert worst_t < 1e-12
    assert worst_amplitude < 1e-12


# ---------------------------------------------------------------------------------------
# Direct integration of the Schrödinger equation
# ---------------------------------------------------------------------------------------


def zero_bias_ode_error() -> float:
    """Largest relative error of T against solve_ivp for mixed-mass stacks, zero bias,
    including a dense grid through the first resonance of each double barrier."""
    worst = 0.0
    for kind, resonance_window in (("AlAs/InGaAs", (0.15, 0.22)), ("GaAs/AlGaAs", (0.05, 0.12))):
        layers, contact = double_barrier(kind)
        energy = np.concatenate([np.linspace(0.003, 1.3, 80), np.linspace(*resonance_window, 120)])
        _, _, reference = integrate_schrodinger(energy, layers, contact, contact)
        kernel = transmission(energy, *stack(*layers, emitter=contact))
        worst = max(worst, relative_error(kernel, reference))
    # an asymmetric stack with different contacts (flux factor q_c/q_e)
    layers = [(0.4, 0.09, 2.0), (-0.05, 0.05, 3.0), (0.8, 0.12, 1.0), (0.1, 0.07, 2.5)]
    emitter, collector = (0.0, 0.067), (-0.15, 0.041)
    energy = np.linspace(0.003, 1.3, 120)
    _, _, reference = integrate_schrodinger(energy, layers, emitter, collector)
    arrays = stack(*layers, emitter=emitter, collector=collector)
    return max(worst, relative_error(transmission(energy, *arrays), reference))


def test_mixed_mass_stacks_at_zero_bias_match_direct_integration():
    """scipy.integrate.solve_ivp on the BenDaniel–Duke equation."""
    assert zero_bias_ode_error() < 1e-9  # solve_ivp runs at rtol 1e-11


def test_direct_integration_reference_agrees_with_airy_solution():
    """The two references of the biased checks agree with each other (scipy.special.airy
    against solve_ivp with the exact linear potential), so either can judge the kernel."""
    energy = np.linspace(0.01, 0.8, 40)
    for barrier_eV, contact_mass, barrier_mass, width_nm, bias_V in (
        (ALGAAS_BARRIER_eV, GAAS_MASS, ALGAAS_MASS, 5.0, 0.2),
        (ALAS_BARRIER_eV, INGAAS_MASS, ALAS_MASS, 3.0, 0.5),
    ):
        airy = airy_trapezoid_transmission(
            energy, barrier_eV, contact_mass, barrier_mass, width_nm, bias_V
        )
        _, _, ode = integrate_schrodinger(
            energy, [(barrier_eV, barrier_mass, width_nm)], (0.0, contact_mass), (0.0, contact_mass),
            bias_V=bias_V,
        )
        assert relative_error(airy, ode) < 1e-9


SLICES_nm = (0.5, 0.25, 0.1, 0.05)


def biased_slicing_errors(kind: str, bias_V: float = 0.3) -> dict[float, float]:
    """Largest relative error of T, sliced kernel against solve_ivp with the exact
    linear potential, per slice thickness; energies span 0-0.6 eV with a dense patch
    through the first resonance under bias."""
    layers, contact = double_barrier(kind)
    coarse = np.linspace(0.005, 0.6, 150)
    fine_arrays = sliced_stack(layers, contact, contact, bias_V, 0.01)
    first_peak = coarse[np.argmax(transmission(coarse, *fine_arrays) * (coarse < 0.3))]
    energy = np.concatenate([coarse, np.linspace(first_peak - 0.01, first_peak + 0.01, 81)])
    _, _, reference = integrate_schrodinger(energy, layers, contact, contact, bias_V=bias_V)
    errors = {}
    for h in SLICES_nm:
        sliced = transmission(energy, *sliced_stack(layers, contact, contact, bias_V, h))
        errors[h] = relative_error(sliced, reference)
    return errors


@pytest.mark.parametrize("kind", ["AlAs/InGaAs", "GaAs/AlGaAs"])
def test_sliced_linear_potential_converges_to_direct_integration(kind):
    """solve_ivp with the exact linear drop (0.3 V) judges the midpoint slicing (Ando &
    Itoh 1987): the error falls as h^2 and 0.25 nm slices stay below 1e-3."""
    errors = biased_slicing_errors(kind)
    assert errors[0.25] < 1e-3
    assert errors[0.05] < 5e-5
    for coarse, fine in zip(SLICES_nm, SLICES_nm[1:]):
        order = np.log(errors[coarse] / errors[fine]) / np.log(coarse / fine)
        assert 1.8 < order < 2.2


def airy_errors() -> dict[float, float]:
    """Largest relative error of the sliced kernel against the Airy solution of
    trapezoidal barriers, per slice thickness."""
    energy = np.linspace(0.01, 0.8, 60)
    worst = {h: 0.0 for h in SLICES_nm + (0.01,)}
    for barrier_eV, contact_mass, barrier_mass, width_nm, bias_V in (
        (ALGAAS_BARRIER_eV, GAAS_MASS, ALGAAS_MASS, 5.0, 0.2),
        (ALAS_BARRIER_eV, INGAAS_MASS, ALAS_MASS, 3.0, 0.5),
        (0.5, GAAS_MASS, GAAS_MASS, 10.0, 0.8),
    ):
        airy = airy_trapezoid_transmission(
            energy, barrier_eV, contact_mass, barrier_mass, width_nm, bias_V
        )
        contact = (0.0, contact_mass)
        for h in worst:
            arrays = sliced_stack([(barrier_eV, barrier_mass, width_nm)], contact, contact, bias_V, h)
            worst[h] = max(worst[h], relative_error(transmission(energy, *arrays), airy))
    return worst


def test_sliced_trapezoidal_barrier_converges_to_airy_solution():
    """scipy.special.airy: exact solution of a uniform-field barrier."""
    errors = airy_errors()
    assert errors[0.01] < 1e-5
    assert errors[0.1] < 5e-4
    assert errors[0.5] / errors[0.05] > 80.0  # second order: (0.5/0.05)^2 = 100


def nonparabolic_ode_error() -> float:
    """Largest relative error against solve_ivp with the energy-dependent mass
    m (1 + (E - U)/E_g) in every layer, contacts included."""
    barrier = (ALAS_BARRIER_eV, ALAS_MASS, 1.5)
    layers = [barrier, (0.0, INGAAS_MASS, 4.5), barrier]
    gaps = [0.75, 3.0, 0.75, 3.0, 0.75]  # InGaAs-like contacts and well, AlAs-like barriers
    contact = (0.0, INGAAS_MASS)
    energy = np.linspace(0.003, 1.3, 150)
    edge, mass, thickness = stack(*layers, emitter=contact)
    kernel = transmission(energy, edge, mass, thickness, gap_eV=np.array(gaps))
    _, _, reference = integrate_schrodinger(energy, layers, contact, contact, gaps=gaps)
    parabolic = transmission(energy, edge, mass, thickness)
    assert relative_error(parabolic, reference) > 0.1  # the check can tell the models apart
    return relative_error(kernel, reference)


def test_nonparabolic_mass_matches_direct_integration():
    """solve_ivp with the energy-dependent mass of each layer (BenDaniel–Duke form)."""
    assert nonparabolic_ode_error() < 1e-9


# ---------------------------------------------------------------------------------------
# Flux conservation and absorption
# ---------------------------------------------------------------------------------------


def random_stacks(rng, n_stacks, n_layers):
    edge = rng.uniform(-0.3, 1.2, (n_stacks, n_layers))
    mass = rng.uniform(0.02, 0.2, (n_stacks, n_layers))
    thickness = rng.uniform(0.0, 8.0, (n_stacks, n_layers))
    thickness[:, [0, -1]] = 0.0
    return edge, mass, thickness


def flux_conservation_error(seed=3) -> float:
    """Largest |T + R - 1| over random lossless stacks, at energies on every band edge,
    1e-9 eV either side of it, and on a grid (below and above every edge)."""
    rng = np.random.default_rng(seed)
    worst = 0.0
    for n_layers in (3, 5, 9, 14):
        edge, mass, thickness = random_stacks(rng, 40, n_layers)
        energy_grid = np.linspace(-0.35, 1.6, 200)
        result = scattering(energy_grid, edge, mass, thickness)
        open_emitter = energy_grid > edge[:, :1]
        balance = result.transmission + result.reflection
        worst = max(worst, np.max(np.abs(balance - 1.0), where=open_emitter, initial=0.0))
        for b in range(edge.shape[0]):
            edges = np.unique(edge[b])
            energy = np.concatenate([edges, edges - 1e-9, edges + 1e-9])
            single = scattering(energy, edge[b], mass[b], thickness[b])
            open_emitter = energy > edge[b, 0]
            balance = single.transmission + single.reflection
            worst = max(worst, np.max(np.abs(balance - 1.0), where=open_emitter, initial=0.0))
    return worst


def test_lossless_stacks_conserve_flux():
    """T + R = 1 for real band edges (current conservation; common practice)."""
    assert flux_conservation_error() < 1e-12


def test_closed_collector_reflects_everything():
    """Between the emitter edge and a higher collector edge: T = 0 and R = 1."""
    edge, mass, thickness = stack((0.5, 0.09, 3.0), emitter=(0.0, GAAS_MASS), collector=(0.2, GAAS_MASS))
    energy = np.linspace(0.01, 0.19, 10)
    result = scattering(energy, edge, mass, thickness)
    np.testing.assert_array_equal(result.transmission, 0.0)
    np.testing.assert_allclose(result.reflection, 1.0, atol=1e-12)


def test_absorbing_layers_lose_flux_and_lossless_limit_conserves_it():
    """With an optical potential U - iW (W > 0) the stack absorbs: T + R < 1; the loss
    is first order in W as W -> 0 and zero at W = 0 (common practice)."""
    rng = np.random.default_rng(11)
    edge, mass, thickness = random_stacks(rng, 30, 7)
    thickness[:, 1:-1] += 0.5  # every inner layer has room to absorb
    energy = np.linspace(0.0, 1.5, 120)
    incident = energy > edge[:, :1]
    loss = {}
    for width in (1e-2, 1e-4, 1e-6, 1e-8, 0.0):
        absorbing = edge.astype(complex)
        absorbing[:, 1:-1] -= 1j * width
        result = scattering(energy, absorbing, mass, thickness)
        assert np.all(result.transmission <= 1.0 - result.reflection + 1e-12)
        loss[width] = (1.0 - result.transmission - result.reflection)[incident]
    for width in (1e-2, 1e-4, 1e-6, 1e-8):
        assert np.all(loss[width] > 0.0)
    # Far below every resonance width the loss is linear in W.
    np.testing.assert_allclose(loss[1e-6] / loss[1e-8], 100.0, rtol=1e-2)
    assert np.max(np.abs(loss[0.0])) < 1e-12


# ---------------------------------------------------------------------------------------
# Thick barriers and log transmission
# ---------------------------------------------------------------------------------------


def thick_barrier_log10_reference(energy_eV, barrier_eV, well_mass, barrier_mass, width_nm):
    """log10 T of one thick barrier from the closed form (closed_form_barrier_amplitude)
    in log space: for kappa a >> 1, sinh^2 = e^{2 kappa a}/4 (1 - e^{-2 kappa a})^2, so
    log T = log(16 / (eta + 1/eta)^2) - 2 kappa a up to e^{-2 kappa a} (Griffiths'
    formula with the BenDaniel–Duke factor eta = (kappa/m_b)/(k/m_w))."""
    k = np.sqrt(energy_eV * well_mass / HBAR2_2M0_eV_nm2)
    kappa = np.sqrt((barrier_eV - energy_eV) * barrier_mass / HBAR2_2M0_eV_nm2)
    eta = (kappa / barrier_mass) / (k / well_mass)
    return (np.log(16.0 / (eta + 1.0 / eta) ** 2) - 2.0 * kappa * width_nm) / np.log(10.0)


def thick_barrier_errors():
    """(log10 T of a 100 nm, 1 eV barrier at 0.1 eV, worst |log10 T - reference| over
    widths up to 2000 nm and two mass ratios)."""
    energy = np.array([0.05, 0.1, 0.3, 0.6])
    worst = 0.0
    for barrier_mass in (GAAS_MASS, ALGAAS_MASS):
        for width_nm in (100.0, 300.0, 2000.0):
            arrays = stack((1.0, barrier_mass, width_nm))
            kernel = log10_transmission(energy, *arrays)
            reference = thick_barrier_log10_reference(energy, 1.0, GAAS_MASS, barrier_mass, width_nm)
            worst = max(worst, np.max(np.abs(kernel - reference) / np.abs(reference)))
    example = log10_transmission(np.array([0.1]), *stack((1.0, GAAS_MASS, 100.0)))[0]
    return example, worst


def test_thick_barrier_log_transmission_matches_closed_form_far_below_double_range():
    """Griffiths' barrier formula in log space (thick_barrier_log10_reference): 100 nm of
    1 eV barrier (mass 0.067) at 0.1 eV is log10 T = -109.11; 300 and 2000 nm go below
    1e-308."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        example, worst = thick_barrier_errors()
        assert example == pytest.approx(-109.11, abs=0.01)
        assert worst < 1e-12
        deep = stack((1.0, GAAS_MASS, 2000.0))
        log10_t = log10_transmission(np.array([0.1]), *deep)[0]
        assert -2200 < log10_t < -2100 and np.isfinite(log10_t)
        # transmission() underflows quietly to zero there; log10 and the Scattering
        # object agree
        assert transmission(np.array([0.1]), *deep)[0] == 0.0
        assert scattering(np.array([0.1]), *deep).log10_transmission[0] == log10_t


# ---------------------------------------------------------------------------------------
# Band edges
# ---------------------------------------------------------------------------------------


def inner_band_edge_error() -> float:
    """Largest relative difference between T exactly on an inner band edge and the
    limit from neighbouring energies (mean of E +- 1e-7 eV, second-order accurate)."""
    worst = 0.0
    layers, contact = double_barrier("AlAs/InGaAs")
    cases = [
        stack(*layers, emitter=contact),  # barrier edges at 1.0 eV
        stack((0.3, 0.09, 4.0), (0.12, 0.067, 5.0), (0.3, 0.09, 4.0)),  # above-barrier well edge
        stack((0.5, 0.09, 3.0), (0.5, 0.15, 0.0), (0.05, 0.07, 20.0)),  # zero-thickness layer
    ]
    for edge, mass, thickness in cases:
        for on_edge in np.setdiff1d(edge[1:-1], edge[[0, -1]]):  # contact edges: next test
            exact = transmission(np.array([on_edge]), edge, mass, thickness)[0]
            delta = 1e-7
            beside = np.array([on_edge - delta, on_edge + delta])
            neighbours = transmission(beside, edge, mass, thickness)
            assert np.isfinite(exact) and exact > 0.0
            worst = max(worst, abs(exact / neighbours.mean() - 1.0))
    return worst


def test_energy_on_inner_band_edge_is_finite_and_continuous():
    """k = 0 in an inner layer: finite value equal to the limit, no floating-point
    warning (the plane-wave basis degenerates there; BAND_EDGE_NUDGE_eV)."""
    assert BAND_EDGE_NUDGE_eV <= 1e-9
    with warnings.catch_warnings(), np.errstate(all="raise"):
        warnings.simplefilter("error")
        assert inner_band_edge_error() < 1e-6


def test_energy_on_contact_band_edge_gives_zero_transmission():
    """At the emitter or collector edge the contact carries no current: T = 0 exactly
    (and R = 0 at the emitter edge, where nothing is incident)."""
    barrier = (0.5, 0.09, 3.0)
    edge, mass, thickness = stack(barrier, emitter=(0.0, GAAS_MASS), collector=(-0.1, GAAS_MASS))
    with warnings.catch_warnings(), np.errstate(all="raise"):
        warnings.simplefilter("error")
        result = scattering(np.array([0.0, -0.1]), edge, mass, thickness)
        assert result.transmission.tolist() == [0.0, 0.0]
        assert result.log10_transmission.tolist() == [-np.inf, -np.inf]
        assert result.reflection[0] == 0.0
        # Mirror: the collector edge above the emitter edge.
        flipped = stack(barrier, emitter=(-0.1, GAAS_MASS), collector=(0.0, GAAS_MASS))
        assert transmission(np.array([0.0]), *flipped)[0] == 0.0
        assert transmission(np.array([1e-6]), *flipped)[0] > 0.0


# ---------------------------------------------------------------------------------------
# Batching, padding, broadcasting
# ---------------------------------------------------------------------------------------


def test_zero_thickness_layers_change_nothing():
    """A layer of zero thickness is no layer, whatever its edge and mass (common
    practice: stacks of different length batch by padding)."""
    rng = np.random.default_rng(5)
    edge, mass, thickness = random_stacks(rng, 20, 6)
    energy = np.linspace(-0.2, 1.5, 300)
    plain = scattering(energy, edge, mass, thickness)
    for position in (1, 3, 5):
        padding_edge, padding_mass = rng.uniform(-0.5, 2.0, 20), rng.uniform(0.02, 0.5, 20)
        result = scattering(
            energy,
            np.insert(edge, position, padding_edge, axis=-1),
            np.insert(mass, position, padding_mass, axis=-1),
            np.insert(thickness, position, 0.0, axis=-1),
        )
        np.testing.assert_allclose(result.transmission, plain.transmission, rtol=1e-12, atol=1e-300)
        np.testing.assert_allclose(np.exp(result.log_t), np.exp(plain.log_t), rtol=1e-11, atol=1e-300)


def test_batched_and_one_by_one_calls_agree():
    rng = np.random.default_rng(6)
    edge, mass, thickness = random_stacks(rng, 16, 8)
    gap = rng.uniform(0.5, 3.0, edge.shape)
    energy = np.linspace(-0.1, 1.4, 257)
    for kwargs in ({}, {"gap_eV": gap}):
        batched = transmission(energy, edge, mass, thickness, **kwargs)
        for b in range(edge.shape[0]):
            row = (edge[b], mass[b], thickness[b])
            row_kwargs = {key: value[b] for key, value in kwargs.items()}
            single = transmission(energy, *row, **row_kwargs)
            np.testing.assert_allclose(batched[b], single, rtol=1e-12, atol=1e-300)
            by_energy = [transmission(energy[i : i + 1], *row, **row_kwargs)[0] for i in range(0, 257, 32)]
            np.testing.assert_allclose(by_energy, single[::32], rtol=1e-12, atol=1e-300)


def test_leading_axes_broadcast():
    """Layer arrays of shape (..., L) and energies (nE,) or (..., nE) broadcast."""
    rng = np.random.default_rng(8)
    edge, mass, thickness = random_stacks(rng, 6, 5)
    edge, mass = edge.reshape(2, 3, 5), mass.reshape(2, 3, 5)
    shared_thickness = thickness[0]  # one thickness row for every stack
    energy = np.linspace(0.01, 1.2, 50)
    result = transmission(energy, edge, mass, shared_thickness)
    assert result.shape == (2, 3, 50)
    per_row_energy = energy + np.array([0.0, 0.05])[:, None, None]  # (2, 1, nE)
    shifted = transmission(per_row_energy, edge, mass, shared_thickness)
    assert shifted.shape == (2, 3, 50)
    for i in range(2):
        for j in range(3):
            alone = transmission(energy, edge[i, j], mass[i, j], shared_thickness)
            np.testing.assert_allclose(result[i, j], alone, rtol=1e-12)
            alone = transmission(per_row_energy[i, 0], edge[i, j], mass[i, j], shared_thickness)
            np.testing.assert_allclose(shifted[i, j], alone, rtol=1e-12)
    scatter = scattering(energy, edge, mass, shared_thickness)
    assert scatter.log_t.shape == scatter.r.shape == scatter.velocity_ratio.shape == (2, 3, 50)


def test_results_are_independent_of_later_calls_and_other_threads():
    """Work buffers are reused between calls (per thread): results handed out must
    never change afterwards, and concurrent threads must not mix."""
    rng = np.random.default_rng(9)
    edge, mass, thickness = random_stacks(rng, 8, 6)
    energy = np.linspace(0.0, 1.2, 400)
    first = scattering(energy, edge, mass, thickness)
    kept = first.transmission.copy(), first.log_t.copy()
    t_first = transmission(energy, edge, mass, thickness)
    scattering(energy, edge + 0.1, mass, thickness)  # same shape, different stack
    transmission(energy, edge + 0.2, mass, thickness)
    np.testing.assert_array_equal(first.transmission, kept[0])
    np.testing.assert_array_equal(first.log_t, kept[1])
    np.testing.assert_array_equal(t_first, kept[0])

    expected = [transmission(energy, edge + shift, mass, thickness) for shift in (0.0, 0.3)]
    results = [None, None]

    def work(slot):
        for _ in range(20):
            value = transmission(energy, edge + 0.3 * slot, mass, thickness)
            if not np.array_equal(value, expected[slot]):
                results[slot] = value
                return
        results[slot] = "ok"

    threads = [threading.Thread(target=work, args=(slot,)) for slot in (0, 1)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert results == ["ok", "ok"]


def test_wavevector_branches():
    """Inner layers: Im k >= 0 on the real axis (decaying), continued analytically
    into the lower half plane (no jump where a well's k^2 crosses the positive real
    axis); contacts: numpy's principal branch, which for energies below the real axis
    gives the outgoing wave (Re k > 0)."""
    energy = np.array([0.3 - 0.05j, -0.2 - 0.05j, 0.3 + 0.0j, -0.2 + 0.0j])
    k_inner, q_inner = wavevector_per_nm(energy, 0.0, GAAS_MASS)
    k_contact, _ = wavevector_per_nm(energy, 0.0, GAAS_MASS, decaying=False)
    assert np.all(k_inner[1:].imag >= 0.0)  # barrier below the axis, and the real axis
    assert k_inner[0].real > 0.0  # well below the axis: continuous from k > 0
    above, below = wavevector_per_nm(np.array([0.3 + 1e-9j, 0.3 - 1e-9j]), 0.0, GAAS_MASS)[0]
    assert abs(above - below) < 1e-6 * abs(above)
    np.testing.assert_allclose(k_contact, np.sqrt(energy * GAAS_MASS / HBAR2_2M0_eV_nm2))
    assert k_contact[0].real > 0.0 and k_contact[0].imag < 0.0
    np.testing.assert_allclose(k_inner**2, energy * GAAS_MASS / HBAR2_2M0_eV_nm2, rtol=1e-14)
    np.testing.assert_allclose(q_inner, k_inner / GAAS_MASS, rtol=1e-15)
    k_nonparabolic, _ = wavevector_per_nm(0.3, 0.1, GAAS_MASS, 1.5)
    expected = 0.2 * GAAS_MASS * (1 + 0.2 / 1.5) / HBAR2_2M0_eV_nm2  # m(E) = m (1 + (E-U)/E_g)
    np.testing.assert_allclose(k_nonparabolic**2, expected, rtol=1e-14)


# ---------------------------------------------------------------------------------------
# Property-based checks
# ---------------------------------------------------------------------------------------


@st.composite
def lossless_stacks(draw):
    n_layers = draw(st.integers(2, 9))
    def floats(lo, hi):
        return st.floats(lo, hi, allow_nan=False, allow_infinity=False, allow_subnormal=False)

    edge = np.array(draw(st.lists(floats(-0.5, 2.0), min_size=n_layers, max_size=n_layers)))
    mass = np.array(draw(st.lists(floats(0.01, 1.0), min_size=n_layers, max_size=n_layers)))
    thickness = np.array(draw(st.lists(floats(0.0, 30.0), min_size=n_layers, max_size=n_layers)))
    energy = np.array(draw(st.lists(floats(-0.6, 3.0), min_size=1, max_size=30)))
    # energies exactly on band edges are part of the domain
    energy = np.concatenate([energy, edge[: draw(st.integers(0, n_layers))]])
    # Not so: contact kinetic energies below 1e-30 eV (other than 0), where a contact
    # wavevector is 1e-15 of a layer's and the amplitude ratios exceed double precision.
    # No device calculation comes near; kinetic energies of 1e-67 eV do fail.
    for contact_edge in edge[[0, -1]]:
        kinetic = np.abs(energy - contact_edge)
        hypothesis.assume(np.all((kinetic == 0.0) | (kinetic > 1e-30)))
    return energy, edge, mass, thickness


@settings(max_examples=150, deadline=None)
@given(lossless_stacks())
def test_random_stacks_give_probabilities_that_conserve_flux(case):
    """0 <= T <= 1, no NaN, T + R = 1 wherever the emitter carries an incident wave."""
    energy, edge, mass, thickness = case
    result = scattering(energy, edge, mass, thickness)
    t, r = result.transmission, result.reflection
    assert not np.any(np.isnan(t)) and not np.any(np.isnan(r))
    assert np.all((t >= 0.0) & (t <= 1.0 + 1e-12))
    assert not np.any(np.isnan(result.log10_transmission))
    incident = energy > edge[0]
    np.testing.assert_allclose((t + r)[incident], 1.0, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(t[energy <= edge[0]], 0.0)
