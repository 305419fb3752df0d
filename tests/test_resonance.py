"""Quasi-bound levels against textbook results.

Material parameters are plain numbers (a GaAs/AlGaAs-like pair: well mass 0.067 m0,
barrier mass 0.092 m0, offset 0.3 eV; an InGaAs/AlAs-like pair: 0.041/0.15 m0, 1.2 eV),
not a material table.
"""

import numpy as np
import pytest
from scipy.optimize import brentq, minimize_scalar, newton

from tunnelsmith.physics.constants import HBAR2_2M0_eV_nm2, HBAR_eV_s
from tunnelsmith.physics.device import Device
from tunnelsmith.physics.profile import biased_profile
from tunnelsmith.physics.resonance import _Stacks, box_phase, closed_box_states, find_resonances, pole_rates, track_resonances
from tunnelsmith.physics.transfer import transmission

WELL_MASS, BARRIER_MASS, OFFSET_eV = 0.067, 0.092, 0.3


def double_barrier(barrier_nm, well_nm=6.0, spacer_nm=0.0):
    edge = np.array([0.0, 0.0, OFFSET_eV, 0.0, OFFSET_eV, 0.0, 0.0])
    mass = np.array([WELL_MASS, WELL_MASS, BARRIER_MASS, WELL_MASS, BARRIER_MASS, WELL_MASS, WELL_MASS])
    thickness = np.array([0.0, spacer_nm, barrier_nm, well_nm, barrier_nm, spacer_nm, 0.0])
    return edge, mass, thickness


def finite_well_levels(well_nm):
    """Bound levels of a finite well with the BenDaniel–Duke matching condition.

    Source: textbook finite square well with mass mismatch (e.g. Harrison, Quantum
    Wells, Wires and Dots, ch. 2; Bastard, Wave Mechanics Applied to Semiconductor
    Heterostructures, ch. 2): even states k tan(k a/2)/m_w = kappa/m_b, odd states
    -k cot(k a/2)/m_w = kappa/m_b, solved with scipy.optimize.brentq.
    """

    def k(E):
        return np.sqrt(E * WELL_MASS / HBAR2_2M0_eV_nm2)

    def kappa(E):
        return np.sqrt((OFFSET_eV - E) * BARRIER_MASS / HBAR2_2M0_eV_nm2)

    def even(E):
        return k(E) * np.tan(k(E) * well_nm / 2) / WELL_MASS - kappa(E) / BARRIER_MASS

    def odd(E):
        return -k(E) / np.tan(k(E) * well_nm / 2) / WELL_MASS - kappa(E) / BARRIER_MASS

    first_pole = HBAR2_2M0_eV_nm2 / WELL_MASS * (np.pi / well_nm) ** 2  # tan(ka/2) -> inf
    return brentq(even, 1e-9, first_pole - 1e-12, xtol=1e-15), brentq(
        odd, first_pole + 1e-12, OFFSET_eV - 1e-12, xtol=1e-15
    )


def test_thick_double_barrier_levels_equal_finite_well_bound_states():
    even, odd = finite_well_levels(6.0)
    levels = find_resonances(*double_barrier(16.0), window_eV=(0.0, 0.29), max_levels=3)
    assert abs(levels.energy_eV[0] - even) < 10e-6
    assert abs(levels.energy_eV[1] - odd) < 10e-6
    assert np.isnan(levels.energy_eV[2])
    assert not levels.above_barrier[:2].any()


def _transmission_fwhm(edge, mass, thickness, level_eV, width_eV):
    """Peak and full width at half maximum of T(E) by dense sampling and root finding."""

    def T(E):
        return transmission(np.array([E]), edge, mass, thickness)[0]

    peak = minimize_scalar(lambda E: -T(E), bracket=(level_eV - width_eV / 4, level_eV, level_eV + width_eV / 4),
                           tol=1e-14)
    top, at = -peak.fun, peak.x
    lo = brentq(lambda E: T(E) - top / 2, at - 5 * width_eV, at, xtol=1e-17)
    hi = brentq(lambda E: T(E) - top / 2, at, at + 5 * width_eV, xtol=1e-17)
    return top, at, hi - lo


@pytest.mark.parametrize("barrier_nm", [3.0, 6.0])
def test_pole_width_is_the_fwhm_and_the_line_is_breit_wigner(barrier_nm):
    edge, mass, thickness = double_barrier(barrier_nm)
    levels = find_resonances(edge, mass, thickness, window_eV=(0.0, 0.29))
    level, width = levels.energy_eV[0], levels.width_eV[0]
    top, at, fwhm = _transmission_fwhm(edge, mass, thickness, level, width)
    assert fwhm == pytest.approx(width, rel=1e-3)
    assert at == pytest.approx(level, abs=0.02 * width)
    # Breit & Wigner, Phys. Rev. 49, 519 (1936): Lorentzian line of width Gamma at E_r,
    # closer the narrower the line is compared with the level spacing.
    energy = level + width * np.linspace(-3.0, 3.0, 25)
    lorentzian = top / (1.0 + (2.0 * (energy - level) / width) ** 2)
    deviation = np.max(np.abs(transmission(energy, edge, mass, thickness) - lorentzian)) / top
    assert deviation < (2e-2 if barrier_nm == 3.0 else 1e-3)
    assert levels.lifetime_s[0] == pytest.approx(HBAR_eV_s / width)


def test_resonance_narrower_than_any_scan_step_is_found():
    edge, mass, thickness = double_barrier(10.0)
    levels = find_resonances(edge, mass, thickness, window_eV=(0.0, 0.29))
    width = levels.width_eV[0]
    assert width < 1e-6  # below 1 micro-eV
    # A 0.1 meV grid (far finer than the default scan) does not see the line at all.
    grid = np.arange(0.0, 0.15, 1e-4)
    assert transmission(grid, edge, mass, thickness).max() < 1e-3
    top, _, fwhm = _transmission_fwhm(edge, mass, thickness, levels.energy_eV[0], width)
    assert top > 0.99  # symmetric stack: unit peak
    assert fwhm == pytest.approx(width, rel=1e-3)


def test_above_barrier_poles_zero_the_textbook_denominator():
    # Rectangular barrier, equal masses (Griffiths, Introduction to Quantum Mechanics,
    # sec. 2.6): t = exp(-ikL) / (cos qL - i (k^2 + q^2)/(2kq) sin qL), and T = 1 where
    # qL = n pi. Poles of t are zeros of the denominator.
    mass, length, height = 0.067, 10.0, 0.3
    edge, masses, thickness = np.array([0.0, height, 0.0]), np.full(3, mass), np.array([0.0, length, 0.0])
    levels = find_resonances(edge, masses, thickness, window_eV=(0.0, 1.0))

    def denominator(E):
        k = np.sqrt(E * mass / HBAR2_2M0_eV_nm2 + 0j)
        q = np.sqrt((E - height) * mass / HBAR2_2M0_eV_nm2 + 0j)
        return np.cos(q * length) - 1j * (k * k + q * q) / (2 * k * q) * np.sin(q * length)

    found = np.isfinite(levels.energy_eV)
    assert found.sum() == 3 and levels.above_barrier[found].all()
    unit_transmission = height + HBAR2_2M0_eV_nm2 / mass * (np.arange(1, 4) * np.pi / length) ** 2
    for energy, width, peak in zip(levels.energy_eV[found], levels.width_eV[found], unit_transmission):
        pole = energy - 0.5j * width
        assert abs(newton(denominator, pole, tol=1e-14) - pole) < 1e-9
        assert abs(energy - peak) < width / 2


def test_levels_under_bias_match_the_biased_transmission_line():
    edge, mass, thickness = double_barrier(5.0, spacer_nm=2.0)
    device = Device(edge[None], mass[None], thickness[None], [1e18], [1e18], 300.0)
    profile = biased_profile(device, [0.05, 0.1])
    levels = find_resonances(**profile.arrays, window_eV=(0.0, 0.3))
    assert levels.energy_eV.shape == (1, 2, 4)
    for v in range(2):
        arrays = [a[0, v] for a in (profile.band_edge_eV, profile.mass, profile.thickness_nm)]
        top, at, fwhm = _transmission_fwhm(*arrays, levels.energy_eV[0, v, 0], levels.width_eV[0, v, 0])
        assert fwhm == pytest.approx(levels.width_eV[0, v, 0], rel=1e-3)
        assert top < 1.0  # asymmetric under bias
    # The level follows the bias down (about half the drop sits in front of the well).
    assert levels.energy_eV[0, 1, 0] < levels.energy_eV[0, 0, 0]


def test_batch_output_is_ascending_and_nan_padded():
    stacks = [double_barrier(b, well_nm=w) for b, w in ((4.0, 6.0), (4.0, 3.0), (3.0, 12.0))]
    edge, mass, thickness = (np.stack(a) for a in zip(*stacks))
    levels = find_resonances(edge, mass, thickness, window_eV=(0.0, 0.29), max_levels=5)
    assert levels.energy_eV.shape == (3, 5)
    counts = np.isfinite(levels.energy_eV).sum(axis=1)
    assert counts[1] == 1 and counts[2] >= 3
    for row, count in zip(levels.energy_eV, counts):
        assert np.all(np.diff(row[:count]) > 0) and np.all(np.isnan(row[count:]))
    single = find_resonances(*double_barrier(3.0, well_nm=12.0), window_eV=(0.0, 0.29), max_levels=5)
    np.testing.assert_allclose(levels.energy_eV[2], single.energy_eV, rtol=1e-10)


def test_window_bounds_may_differ_per_stack():
    stacks = [double_barrier(4.0), double_barrier(4.0)]
    edge, mass, thickness = (np.stack(a) for a in zip(*stacks))
    levels = find_resonances(edge, mass, thickness, window_eV=(np.array([0.0, 0.1]), 0.29), max_levels=2)
    assert np.isfinite(levels.energy_eV[0, 1])  # both levels in [0, 0.29]
    assert levels.energy_eV[1, 0] == pytest.approx(levels.energy_eV[0, 1])  # only the second


def test_optical_potential_adds_twice_its_strength_to_the_width():
    # First-order perturbation theory (common practice): -iW in the well shifts the
    # pole by -iW P_well, i.e. Gamma grows by 2 W P_well, with P_well close to 1 for a
    # well state behind thick barriers (some probability leaks into the barriers).
    edge, mass, thickness = double_barrier(8.0)
    absorption = 1e-4
    lossy = edge.astype(complex)
    lossy[3] -= 1j * absorption
    clean = find_resonances(edge, mass, thickness, window_eV=(0.0, 0.29))
    damped = find_resonances(lossy, mass, thickness, window_eV=(0.0, 0.29))
    extra = damped.width_eV[0] - clean.width_eV[0]
    assert 0.8 * 2 * absorption < extra < 2 * absorption
    assert damped.energy_eV[0] == pytest.approx(clean.energy_eV[0], abs=1e-6)


def test_finite_difference_box_converges_to_particle_in_a_box():
    # Flat stack between hard walls: E_n = hbar^2 (n pi / L)^2 / 2m (Griffiths, sec. 2.2).
    mass = 0.067
    edge, masses, thickness = np.zeros(3), np.full(3, mass), np.array([0.0, 6.0, 0.0])
    energy, position, probability = closed_box_states(edge, masses, thickness, window_eV=(0.0, 0.5), grid_nm=0.01)
    step = position[1] - position[0]
    length = position[-1] - position[0] + 2 * step  # wall to wall
    exact = HBAR2_2M0_eV_nm2 / mass * (np.arange(1, energy.size + 1) * np.pi / length) ** 2
    np.testing.assert_allclose(energy, exact, rtol=1e-4)
    np.testing.assert_allclose(probability.sum(axis=1) * step, 1.0, rtol=1e-12)


def test_finite_difference_box_agrees_with_the_prufer_levels(monkeypatch):
    # Internal consistency: the grid-free phase count and the BenDaniel–Duke matrix
    # describe the same closed box (walls as in closed_box_states).
    import tunnelsmith.physics.resonance as resonance

    edge, mass, thickness = double_barrier(2.0, well_nm=5.0, spacer_nm=1.0)
    energy, _, _ = closed_box_states(edge, mass, thickness, window_eV=(0.0, 0.6), grid_nm=0.005)
    assert energy.size >= 3 and np.min(np.diff(energy)) > 0.01
    monkeypatch.setattr(resonance, "START_WALL_nm", resonance.BOX_WALL_nm)
    stacks, _ = _Stacks.flatten(edge, mass, thickness, None)
    tolerance_eV = 1e-3
    below = np.floor(box_phase(stacks, energy[None, :] - tolerance_eV)[0] / np.pi)
    above = np.floor(box_phase(stacks, energy[None, :] + tolerance_eV)[0] / np.pi)
    # Each finite-difference level lies where the exact level count steps up by one.
    np.testing.assert_array_equal(below, np.arange(energy.size))
    np.testing.assert_array_equal(above, np.arange(1, energy.size + 1))


def test_sub_nano_eV_level_matches_the_sampled_line():
    # InGaAs/AlAs-like stack with 5 nm barriers: Gamma ~ 6e-10 eV, so the Newton
    # iteration has to resolve the pole to well below 1e-10 eV.
    edge = np.array([0.0, 0.0, 1.2, 0.0, 1.2, 0.0, 0.0])
    mass = np.array([0.041, 0.041, 0.15, 0.041, 0.15, 0.041, 0.041])
    thickness = np.array([0.0, 2.0, 5.0, 4.5, 5.0, 2.0, 0.0])
    levels = find_resonances(edge, mass, thickness, window_eV=(0.0, 1.0))
    level, width = levels.energy_eV[0], levels.width_eV[0]
    assert width < 1e-9
    top, at, fwhm = _transmission_fwhm(edge, mass, thickness, level, width)
    assert fwhm == pytest.approx(width, rel=1e-3)
    assert abs(at - level) < 0.01 * width


def test_ground_level_of_a_wide_well_next_to_the_band_edge_is_found():
    # A 40 nm well between thick barriers, with and without spacers: its ground level
    # lies 3 meV above the contact band edge, where Newton iterates cross below the edge.
    # Thick barriers make it the bound state of the finite well (textbook even-state
    # condition, as in finite_well_levels), solved here with scipy.optimize.brentq.
    well_nm = 40.0

    def even(E):
        k = np.sqrt(E * WELL_MASS / HBAR2_2M0_eV_nm2)
        kappa = np.sqrt((OFFSET_eV - E) * BARRIER_MASS / HBAR2_2M0_eV_nm2)
        return k * np.tan(k * well_nm / 2) / WELL_MASS - kappa / BARRIER_MASS

    first_pole = HBAR2_2M0_eV_nm2 / WELL_MASS * (np.pi / well_nm) ** 2
    ground = brentq(even, 1e-9, first_pole - 1e-12, xtol=1e-15)
    assert ground < 4e-3
    stacks = [double_barrier(barrier, well_nm=well_nm, spacer_nm=spacer) for barrier in (8.0, 16.0) for spacer in (0.0, 2.0, 10.0)]
    edge, mass, thickness = (np.stack(a) for a in zip(*stacks))
    levels = find_resonances(edge, mass, thickness, window_eV=(0.0, 0.29), max_levels=3)
    np.testing.assert_allclose(levels.energy_eV[:, 0], ground, atol=10e-6)
    assert np.all(np.diff(levels.energy_eV, axis=-1) > 5e-3)  # the next two levels, none twice


def _sweep_levels(device, bias_V, window_eV=(0.0, 0.6)):
    profile = biased_profile(device, bias_V)
    lo = np.maximum(0.0, -np.asarray(bias_V))
    window = (lo, lo + (window_eV[1] - window_eV[0]))
    tracked = track_resonances(**profile.arrays, bias_V=bias_V, window_eV=window)
    searched = find_resonances(**profile.arrays, window_eV=window)
    return tracked, searched


def _assert_finds_every_level_of(tracked, searched):
    """Every level of ``searched`` is in ``tracked`` at the same bias, to rounding."""
    for index in zip(*np.nonzero(np.isfinite(searched.energy_eV))):
        distance = np.abs(tracked.energy_eV[index[:-1]] - searched.energy_eV[index])
        match = np.nanargmin(np.where(np.isnan(distance), np.inf, distance))
        assert distance[match] < 1e-12, f"level {searched.energy_eV[index]} eV at {index} not tracked"
        assert tracked.width_eV[index[:-1]][match] == pytest.approx(searched.width_eV[index], rel=1e-8)


def test_tracking_along_the_sweep_finds_the_levels_of_the_full_search():
    # Internal consistency: continuation in bias only changes the Newton start points,
    # so it must converge to the same poles as the full search at every bias. Invented
    # InGaAs/AlAs-like double barriers of different wells, a sweep in shuffled order
    # through reverse and forward bias (levels leave the window through the contact band
    # edge on the way).
    rng = np.random.default_rng(3)
    n = 6
    edge = np.tile([0.0, 0.0, 1.2, 0.0, 1.2, 0.0, 0.0], (n, 1))
    mass = np.tile([0.041, 0.041, 0.15, 0.041, 0.15, 0.041, 0.041], (n, 1))
    thickness = np.tile([0.0, 2.0, 1.5, 4.5, 1.5, 2.0, 0.0], (n, 1))
    thickness[:, 3] = rng.uniform(3.0, 9.0, n)
    device = Device(edge, mass, thickness, np.full(n, 1e18), np.full(n, 1e18), 300.0)
    bias = rng.permutation(np.linspace(-0.5, 1.0, 61))
    tracked, searched = _sweep_levels(device, bias)
    assert tracked.energy_eV.shape == (n, bias.size, 4)
    assert np.isfinite(searched.energy_eV).sum() > 300
    _assert_finds_every_level_of(tracked, searched)
    np.testing.assert_array_equal(np.isnan(tracked.energy_eV), np.isnan(searched.energy_eV))
    np.testing.assert_array_equal(tracked.above_barrier, searched.above_barrier)


def test_tracking_falls_back_to_the_full_search_where_levels_anticross():
    # Internal consistency on two invented triple barriers at 77 K whose wells' levels
    # anticross under bias: between two searched biases both continuation start points
    # run into one pole, and the full search has to take over there (without it, the
    # level at 0.224 V, 1 meV above the band edge, is lost).
    edge = np.array([[0.0, 0.0, 0.718, 0.0, 0.558, 0.0, 0.591, 0.0, 0.0], [0.0, 0.0, 0.322, 0.0, 0.802, 0.0, 0.312, 0.0, 0.0]])
    mass = np.array(
        [[0.041, 0.041, 0.095, 0.041, 0.114, 0.041, 0.146, 0.041, 0.041],
         [0.041, 0.041, 0.135, 0.041, 0.137, 0.041, 0.081, 0.041, 0.041]]
    )
    thickness = np.array([[0.0, 3.9, 1.45, 5.82, 2.73, 3.29, 2.02, 1.37, 0.0], [0.0, 1.87, 1.63, 5.79, 2.17, 4.8, 1.5, 2.26, 0.0]])
    device = Device(edge, mass, thickness, [1e18] * 2, [1e18] * 2, 77.0)
    bias = np.linspace(0.02, 1.0, 25)
    tracked, searched = _sweep_levels(device, bias, window_eV=(0.0, 0.22))
    _assert_finds_every_level_of(tracked, searched)
    at = np.argmin(np.abs(bias - 0.224))
    assert 0.0 < tracked.energy_eV[0, at, 0] < 2e-3


def test_pole_rate_is_the_slope_of_the_level_with_bias():
    # dE_p/dV from one perturbed Newton step against central differences of converged
    # poles; Hellmann–Feynman (textbook perturbation theory): a level in the linear drop
    # moves down at a rate between 0 and 1 eV/V, about 1/2 for a symmetric stack.
    edge, mass, thickness = double_barrier(5.0, spacer_nm=2.0)
    device = Device(edge[None], mass[None], thickness[None], [1e18], [1e18], 300.0)
    step_V = 1e-4
    bias = np.array([0.1 - step_V, 0.1, 0.1 + step_V])
    profile = biased_profile(device, bias)
    levels = find_resonances(**profile.arrays, window_eV=(0.0, 0.29), max_levels=1)
    pole = levels.energy_eV[0, :, 0] - 0.5j * levels.width_eV[0, :, 0]
    stacks, _ = _Stacks.flatten(**{k: v[0, 1:2] for k, v in profile.arrays.items() if v is not None}, gap_eV=None)
    edge_rate = (profile.band_edge_eV[0, 2] - profile.band_edge_eV[0, 0]) / (2 * step_V)
    rate = pole_rates(stacks, edge_rate[None], pole[1:2, None])[0, 0]
    difference = (pole[2] - pole[0]) / (2 * step_V)
    assert rate.real == pytest.approx(difference.real, rel=1e-4)
    assert abs(rate.imag - difference.imag) < 1e-4 * abs(difference)
    assert -1.0 < rate.real < 0.0 and rate.real == pytest.approx(-0.5, abs=0.1)
