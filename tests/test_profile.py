"""Biased profiles: the linear drop, the contacts, the slicing."""

import numpy as np
import pytest

from tunnelsmith.physics.device import Device
from tunnelsmith.physics.profile import DEFAULT_SLICE_nm, biased_profile, interface_positions_nm, slices_per_layer


def double_barrier(n_stacks=1, well_nm=4.5):
    edge = np.tile([0.1, 0.1, 1.2, 0.1, 1.2, 0.1, 0.1], (n_stacks, 1))
    mass = np.tile([0.041, 0.041, 0.15, 0.041, 0.15, 0.041, 0.041], (n_stacks, 1))
    thickness = np.tile([0.0, 2.0, 1.5, well_nm, 1.5, 2.0, 0.0], (n_stacks, 1))
    return Device(edge, mass, thickness, 2e18, 2e18, 300.0)


def test_energies_refer_to_the_emitter_and_collector_drops_by_bias():
    device = double_barrier()
    profile = biased_profile(device, [0.0, 0.4])
    edge = profile.band_edge_eV[0]
    assert edge[0, 0] == 0.0 and edge[1, 0] == 0.0
    assert edge[0, -1] == pytest.approx(0.0)
    assert edge[1, -1] == pytest.approx(-0.4)


def test_slice_midpoints_follow_the_exact_linear_potential():
    device = double_barrier()
    bias = 0.5
    profile = biased_profile(device, [bias], slice_nm=0.1)
    thickness = profile.thickness_nm[0, 0]
    start = np.concatenate([[0.0], np.cumsum(thickness)[:-1]])
    midpoint = start + thickness / 2
    total = device.total_thickness_nm[0]
    zero_bias = np.asarray(device.band_edge_eV)[0, profile.layer_index] - 0.1
    expected = zero_bias - bias * midpoint / total
    inner = slice(1, -1)
    np.testing.assert_allclose(profile.band_edge_eV[0, 0, inner], expected[inner], atol=1e-12)
    assert np.all(thickness[inner] <= 0.1 + 1e-12)
    np.testing.assert_allclose(thickness[inner].sum(), total)


def test_zero_bias_needs_no_slices():
    device = double_barrier()
    profile = biased_profile(device, [0.0])
    assert profile.band_edge_eV.shape == (1, 1, device.n_layers)
    np.testing.assert_array_equal(slices_per_layer(device.thickness_nm, [0.0], DEFAULT_SLICE_nm), 1)


def test_a_stack_is_sliced_the_same_whatever_its_batch_neighbours():
    """Each stack is sliced on its own: the transmission under bias of a stack alone
    equals its transmission inside a batch with a much thicker neighbour, to rounding."""
    from tunnelsmith.physics.transfer import transmission

    thin, thick = double_barrier(well_nm=3.0), double_barrier(well_nm=9.0)
    both = Device(*(np.concatenate([getattr(thin, f), getattr(thick, f)]) for f in
                    ("band_edge_eV", "mass", "thickness_nm", "emitter_doping_cm3", "collector_doping_cm3")), 300.0)
    energy = np.linspace(0.01, 0.8, 200)
    alone = biased_profile(thin, [0.4])
    batched = biased_profile(both, [0.4])
    t_alone = transmission(energy, alone.band_edge_eV, alone.mass, alone.thickness_nm)[0]
    t_batched = transmission(energy, batched.band_edge_eV, batched.mass, batched.thickness_nm)[0]
    np.testing.assert_allclose(t_batched, t_alone, rtol=1e-10)


def test_batch_shares_slice_count_and_keeps_each_stack_exact():
    thin, thick = double_barrier(well_nm=3.0), double_barrier(well_nm=6.0)
    both = Device(*(np.concatenate([getattr(thin, f), getattr(thick, f)]) for f in
                    ("band_edge_eV", "mass", "thickness_nm", "emitter_doping_cm3", "collector_doping_cm3")), 300.0)
    profile = biased_profile(both, [0.3])
    alone = biased_profile(thick, [0.3])
    assert profile.band_edge_eV.shape[-1] == alone.band_edge_eV.shape[-1]
    np.testing.assert_allclose(profile.thickness_nm[1], alone.thickness_nm[0])
    np.testing.assert_allclose(profile.band_edge_eV[1], alone.band_edge_eV[0])
    assert np.any(profile.thickness_nm[0, 0, 1:-1] == 0.0)  # the thin stack pads with empty slices
    np.testing.assert_allclose(profile.thickness_nm[0, 0].sum(), thin.total_thickness_nm[0])


def test_absorption_makes_the_edge_complex():
    device = double_barrier()
    absorbing = Device(device.band_edge_eV, device.mass, device.thickness_nm, 2e18, 2e18, 300.0,
                       absorption_eV=np.where(np.arange(7) == 3, 0.002, 0.0)[None, :])
    profile = biased_profile(absorbing, [0.0])
    np.testing.assert_allclose(profile.band_edge_eV[0, 0].imag, [0, 0, 0, -0.002, 0, 0, 0])


def test_interface_positions():
    np.testing.assert_allclose(interface_positions_nm(np.array([0, 1.0, 2.0, 0])), [0, 1, 3])


@pytest.mark.parametrize("kind", ["AlAs/InGaAs", "GaAs/AlGaAs"])
def test_default_slicing_is_converged_against_direct_integration(kind):
    """physics.profile at DEFAULT_SLICE_nm against scipy.integrate.solve_ivp with the
    exact linear potential (reference integrator in test_transfer.py): the transmission
    of a double barrier under 0.3 V agrees to 1e-3 relative at every energy."""
    from test_transfer import double_barrier as reference_stack, integrate_schrodinger

    layers, contact = reference_stack(kind)
    edge = np.array([[contact[0], *(l[0] for l in layers), contact[0]]])
    mass = np.array([[contact[1], *(l[1] for l in layers), contact[1]]])
    thickness = np.array([[0.0, *(l[2] for l in layers), 0.0]])
    device = Device(edge, mass, thickness, 1e18, 1e18, 300.0)
    energy = np.linspace(0.005, 0.6, 300)
    profile = biased_profile(device, [0.3])
    from tunnelsmith.physics.transfer import transmission

    sliced = transmission(energy, profile.band_edge_eV, profile.mass, profile.thickness_nm)[0, 0]
    _, _, reference = integrate_schrodinger(energy, layers, contact, contact, bias_V=0.3)
    assert np.max(np.abs(sliced / reference - 1)) < 1e-3
