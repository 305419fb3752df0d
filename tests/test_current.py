"""Contact Fermi levels and the Tsu–Esaki current against outside references.

Stacks are invented InGaAs/AlAs-like and GaAs/AlGaAs-like double barriers with plain
numbers for the material parameters.
"""

import numpy as np
import pytest
from scipy import constants as sc
from scipy.integrate import quad
from scipy.optimize import brentq

from tunnelsmith.physics.constants import KB_eV_K, NC_300K_cm3, RICHARDSON_A_cm2_K2
from tunnelsmith.physics.current import (
    _gauss_legendre_01,
    _NodeDensity,
    adaptive_nodes,
    current_density,
    effective_density_of_states_cm3,
    fermi_dirac_half,
    fermi_level_eV,
    supply_function_eV,
    transport_transmission,
    tsu_esaki_prefactor_A_cm2_eV,
)
from tunnelsmith.physics.device import Device
from tunnelsmith.physics.profile import biased_profile
from tunnelsmith.physics.transfer import transmission


def rtd(barrier_nm=1.5, well_nm=4.5, absorption_eV=None, emitter_doping=1e18, collector_doping=1e18):
    """Seven-layer InGaAs/AlAs-like double barrier (invented example)."""
    edge = np.array([[0.0, 0.0, 1.2, 0.0, 1.2, 0.0, 0.0]])
    mass = np.array([[0.041, 0.041, 0.15, 0.041, 0.15, 0.041, 0.041]])
    thickness = np.array([[0.0, 2.0, barrier_nm, well_nm, barrier_nm, 2.0, 0.0]])
    absorption = None
    if absorption_eV is not None:
        absorption = np.zeros_like(edge)
        absorption[0, 3] = absorption_eV
    return Device(edge, mass, thickness, [emitter_doping], [collector_doping], 300.0, absorption_eV=absorption)


def quad_fermi_half(eta, alpha=0.0):
    """(2/sqrt(pi)) Int sqrt(x(1+ax))(1+2ax)/(1+e^{x-eta}) dx by scipy.integrate.quad."""

    def integrand(x):
        return np.sqrt(x * (1 + alpha * x)) * (1 + 2 * alpha * x) / (1 + np.exp(min(x - eta, 700.0)))

    points = [eta] if eta > 0 else None
    value = quad(integrand, 0.0, max(eta, 0.0) + 80.0, points=points, epsabs=0.0, epsrel=1e-13, limit=500)[0]
    return 2.0 / np.sqrt(np.pi) * value


def test_richardson_constant_and_prefactor():
    # A* = 4 pi q m0 kB^2 / h^3 = 120.17 A cm^-2 K^-2 (textbook, e.g. Sze, Physics of
    # Semiconductor Devices), and the Tsu–Esaki prefactor q m kB T / (2 pi^2 hbar^3).
    assert RICHARDSON_A_cm2_K2 == pytest.approx(120.17, abs=0.01)
    mass, temperature = 0.041, 77.0
    direct = sc.e * mass * sc.m_e * sc.k * temperature / (2 * np.pi**2 * sc.hbar**3)  # A m^-2 J^-1
    direct_A_cm2_eV = direct * 1e-4 * sc.e
    assert tsu_esaki_prefactor_A_cm2_eV(mass, temperature) == pytest.approx(direct_A_cm2_eV, rel=1e-12)


def test_effective_density_of_states():
    # N_c = 2 (m kB T / 2 pi hbar^2)^{3/2} (any semiconductor text), from scipy.constants.
    mass, temperature = 0.067, 77.0
    direct = 2 * (mass * sc.m_e * sc.k * temperature / (2 * np.pi * sc.hbar**2)) ** 1.5 * 1e-6
    assert effective_density_of_states_cm3(mass, temperature) == pytest.approx(direct, rel=1e-12)
    assert effective_density_of_states_cm3(1.0, 300.0) == pytest.approx(NC_300K_cm3, rel=1e-14)


@pytest.mark.parametrize("alpha", [0.0, 0.05, 0.5])
def test_fermi_dirac_integral_against_adaptive_quadrature(alpha):
    eta = np.array([-50.0, -20.0, -5.0, -1.0, 0.0, 0.5, 1.0, 3.0, 10.0, 20.0, 35.0, 50.0, 100.0, 200.0])
    value, derivative = fermi_dirac_half(eta, alpha)
    reference = np.array([quad_fermi_half(e, alpha) for e in eta])
    np.testing.assert_allclose(value, reference, rtol=1e-12)
    step = 1e-5
    numeric = (fermi_dirac_half(eta + step, alpha)[0] - fermi_dirac_half(eta - step, alpha)[0]) / (2 * step)
    np.testing.assert_allclose(derivative, numeric, rtol=1e-7)


@pytest.mark.parametrize("doping", [1e15, 1e17, 1e18, 5e18, 5e19])
def test_fermi_level_inverts_the_quadrature(doping):
    mass, temperature = 0.041, 300.0
    ratio = doping / effective_density_of_states_cm3(mass, temperature)
    eta = brentq(lambda e: quad_fermi_half(e) - ratio, -40.0, 200.0, xtol=1e-14)
    kT = KB_eV_K * temperature
    assert fermi_level_eV(doping, mass, temperature) == pytest.approx(eta * kT, abs=1e-11)


def test_fermi_level_with_kane_density_of_states():
    mass, temperature, gap = 0.041, 300.0, 0.75
    kT = KB_eV_K * temperature
    alpha = kT / gap
    doping = np.array([1e17, 1e19])
    mu = fermi_level_eV(doping, mass, temperature, gap_eV=np.full(2, gap))
    ratio = doping / effective_density_of_states_cm3(mass, temperature)
    np.testing.assert_allclose([quad_fermi_half(m / kT, alpha) for m in mu], ratio, rtol=1e-10)
    # More states per energy: a lower Fermi level than the parabolic band's.
    assert np.all(mu < fermi_level_eV(doping, mass, temperature))


def test_non_degenerate_limit():
    # n << N_c: F_1/2(eta) -> exp(eta), so mu = kT ln(n / N_c) (Boltzmann statistics).
    mass, temperature, doping = 0.067, 300.0, 1e10
    kT = KB_eV_K * temperature
    expected = kT * np.log(doping / effective_density_of_states_cm3(mass, temperature))
    assert fermi_level_eV(doping, mass, temperature) == pytest.approx(expected, abs=1e-9)


def test_fermi_level_rejects_non_positive_doping():
    with pytest.raises(ValueError, match="doping"):
        fermi_level_eV(0.0, 0.067, 300.0)


def test_supply_function_low_temperature_limit():
    # kT ln(1 + e^{(mu - E)/kT}) -> (mu - E) theta(mu - E) as T -> 0 (Tsu & Esaki 1973).
    mu_e, mu_c = 0.08, -0.12
    energy = np.array([-0.2, -0.1, 0.0, 0.05, 0.075, 0.085, 0.2])
    cold = supply_function_eV(energy, mu_e, mu_c, 1.0)
    limit = np.maximum(mu_e - energy, 0.0) - np.maximum(mu_c - energy, 0.0)
    np.testing.assert_allclose(cold, limit, atol=1e-12)
    # At E = mu the emitter term is kT ln 2 exactly.
    assert supply_function_eV(mu_e, mu_e, -10.0, 4.2) == pytest.approx(KB_eV_K * 4.2 * np.log(2), rel=1e-12)


def test_zero_bias_gives_exactly_zero_current():
    curve = current_density(rtd(), [0.0, 0.1])
    assert curve.current_density_A_cm2[0, 0] == 0.0
    assert curve.current_density_A_cm2[0, 1] > 0.0


def test_symmetric_stack_gives_antisymmetric_current():
    bias = np.array([0.05, 0.2, 0.3, 0.6])
    curve = current_density(rtd(), np.concatenate([bias, -bias]))
    forward, reverse = np.split(curve.current_density_A_cm2[0], 2)
    np.testing.assert_allclose(reverse, -forward, rtol=1e-8)


def test_reverse_bias_uses_the_collector_contact():
    # Collector doping sets the supply under reverse bias, emitter doping under forward.
    low, high = rtd(collector_doping=1e17), rtd(collector_doping=1e18)
    j_low = current_density(low, [-0.1, 0.1]).current_density_A_cm2[0]
    j_high = current_density(high, [-0.1, 0.1]).current_density_A_cm2[0]
    assert j_low[1] == pytest.approx(j_high[1], rel=1e-9)
    assert abs(j_low[0]) < abs(j_high[0])


def brute_force_current(device, bias_V, points=200_000, around_eV=None, half_span_eV=None):
    """Tsu–Esaki integral by the trapezoid rule on uniform grids, from scipy.constants.

    J = q m kB T / (2 pi^2 hbar^3) Int T ln[(1 + e^{(mu - E)/kT}) / (1 + e^{(mu - qV - E)/kT})] dE
    (Tsu & Esaki, Appl. Phys. Lett. 22, 562, 1973), with the emitter's mass and Fermi level,
    over the integration window plus 0.3 eV. With ``around_eV`` (one energy per bias) the
    window is cut into three pieces, the middle one of half-width ``half_span_eV`` around
    that energy, each with ``points`` points, so that a line far narrower than the window
    is sampled densely.
    """
    profile = biased_profile(device, bias_V)
    mu = fermi_level_eV(device.emitter_doping_cm3[0], device.mass[0, 0], device.temperature_K)
    kT = sc.k * device.temperature_K / sc.e
    prefactor_si = sc.e * device.mass[0, 0] * sc.m_e * sc.k * device.temperature_K / (2 * np.pi**2 * sc.hbar**3)
    prefactor = prefactor_si * sc.e * 1e-4  # A m^-2 J^-1 -> A cm^-2 eV^-1
    result = []
    for v, bias in enumerate(bias_V):
        edges = [max(0.0, -bias), mu + 40 * kT + 0.3]
        if around_eV is not None:
            edges = [edges[0], around_eV[v] - half_span_eV, around_eV[v] + half_span_eV, edges[1]]
        arrays = [a[0, v] for a in (profile.band_edge_eV, profile.mass, profile.thickness_nm)]
        total = 0.0
        for start, stop in zip(edges[:-1], edges[1:]):
            energy = np.linspace(start, stop, points)
            supply = np.log1p(np.exp((mu - energy) / kT)) - np.log1p(np.exp((mu - bias - energy) / kT))
            total += np.trapezoid(transport_transmission(energy, *arrays) * supply, energy)
        result.append(prefactor * total)
    return np.array(result)


def test_adaptive_nodes_agree_with_a_dense_grid():
    # Bias points below the peak, at the peak, in the valley, and beyond (forward bias:
    # the reference takes the emitter's Fermi level and mass).
    bias = np.array([0.06, 0.26, 0.5, 0.9])
    adaptive = current_density(rtd(), bias).current_density_A_cm2[0]
    np.testing.assert_allclose(adaptive, brute_force_current(rtd(), bias), rtol=1e-5)


def test_narrow_resonance_current_against_a_dense_grid_around_the_level():
    # Thick barriers: Gamma ~ 1e-8 eV, far below any affordable uniform step over the
    # whole window; the reference adds a 200 000-point grid over +-1e4 Gamma.
    device = rtd(barrier_nm=5.0)
    bias = np.array([0.1])
    curve = current_density(device, bias)
    level, width = curve.resonances.energy_eV[0, 0, 0], curve.resonances.width_eV[0, 0, 0]
    assert width < 1e-6
    reference = brute_force_current(device, bias, around_eV=[level], half_span_eV=1e4 * width)
    assert curve.current_density_A_cm2[0, 0] == pytest.approx(reference[0], rel=2e-4)


def test_current_converges_with_the_number_of_nodes():
    bias = np.array([0.1, 0.27, 0.45])
    default = current_density(rtd(), bias).current_density_A_cm2
    fine = current_density(rtd(), bias, nodes=1024).current_density_A_cm2
    np.testing.assert_allclose(default, fine, rtol=1e-6)


def test_adaptive_nodes_integrate_a_lorentzian_exactly():
    # Int Lorentzian over the window = (arctan terms), closed form.
    lo, hi = np.array([0.0]), np.array([1.0])
    center, width = 0.3, 1e-7
    fermi = np.array([[0.1, -0.2]])
    energy, weight = adaptive_nodes(lo, hi, 300.0, fermi, np.array([[center]]), np.array([[width]]), 400)
    half = width / 2
    values = half / np.pi / ((energy - center) ** 2 + half**2)
    exact = (np.arctan((hi - center) / half) - np.arctan((lo - center) / half)) / np.pi
    assert np.sum(weight * values) == pytest.approx(exact[0], rel=1e-9)
    assert np.sum(weight) == pytest.approx(1.0, rel=1e-12)  # the window's length
    assert np.all(np.diff(energy) > 0) and energy.min() > 0.0 and energy.max() < 1.0


def test_broadening_transmission_is_bounded_and_exceeds_the_coherent_one():
    lossy = rtd(absorption_eV=0.005)
    profile = biased_profile(lossy, [0.0])
    energy = np.linspace(0.01, 0.6, 300)
    arrays = dict(
        band_edge_eV=profile.band_edge_eV[0, 0], mass=profile.mass[0, 0], thickness_nm=profile.thickness_nm[0, 0]
    )
    coherent = transmission(energy, **arrays)
    total = transport_transmission(energy, **arrays)
    assert np.all(total >= coherent) and np.all(total <= 1.0 + 1e-12)
    assert np.max(total - coherent) > 0.01
    clean = biased_profile(rtd(), [0.0])
    np.testing.assert_array_equal(
        transport_transmission(energy, clean.band_edge_eV[0, 0], clean.mass[0, 0], clean.thickness_nm[0, 0]),
        transmission(energy, clean.band_edge_eV[0, 0], clean.mass[0, 0], clean.thickness_nm[0, 0]),
    )


def test_nodes_are_the_quantiles_of_the_node_density():
    # Internal consistency of the node map: each node is F^{-1} of its Gauss–Legendre
    # point, also for a line narrower than the rounding of E near 1 eV, a line at the
    # lower edge of the window, and Fermi steps a few meV wide at 4.2 K (invented
    # windows; kT from physics.constants).
    lo, hi = np.array([0.0, 0.0, 0.2]), np.array([1.1, 0.6, 0.45])
    kT = KB_eV_K * np.array([300.0, 300.0, 4.2])
    fermi = np.array([[0.08, -0.3], [0.06, 0.02], [0.25, 0.26]])
    poles = np.array([[7e-4, 0.5], [0.3, np.nan], [0.2001, 0.26]])
    widths = np.array([[1.6e-3, 1e-3], [1e-10, np.nan], [1e-9, 2e-5]])
    density = _NodeDensity.build(lo, hi, fermi, kT, poles, widths)
    for n_nodes in (32, 96, 400):
        u, _ = _gauss_legendre_01(n_nodes)
        energy, _ = density.inverse(u)
        cdf, _ = density.cdf_and_slope(np.sqrt(energy - lo[:, None]))
        np.testing.assert_allclose(cdf, np.broadcast_to(u, cdf.shape), rtol=0, atol=1e-7)
        assert np.all(np.diff(energy, axis=-1) > 0) and np.all(energy > lo[:, None]) and np.all(energy < hi[:, None])
