"""Figures of merit: definitions, what gets computed, and undefined cases.

The stacks are invented InGaAs/AlAs-like double barriers with plain-number parameters.
"""

import numpy as np
import pytest

import tunnelsmith.physics.metrics as metrics
from tunnelsmith.physics.current import current_density
from tunnelsmith.physics.device import Device
from tunnelsmith.physics.metrics import CATALOGUE, MetricRequest, evaluate, needs_iv
from tunnelsmith.physics.resonance import find_resonances
from tunnelsmith.physics.transfer import transmission

ENERGY = np.linspace(0.0, 1.0, 401)
BIAS = np.linspace(0.0, 1.0, 51)


def rtds(well_nm=(4.5,), barrier_nm=1.5, absorption_eV=None):
    """Batch of seven-layer double barriers differing in well width (invented examples)."""
    n = len(well_nm)
    edge = np.tile([0.0, 0.0, 1.2, 0.0, 1.2, 0.0, 0.0], (n, 1))
    mass = np.tile([0.041, 0.041, 0.15, 0.041, 0.15, 0.041, 0.041], (n, 1))
    thickness = np.tile([0.0, 2.0, barrier_nm, 0.0, barrier_nm, 2.0, 0.0], (n, 1))
    thickness[:, 3] = well_nm
    absorption = None
    if absorption_eV is not None:
        absorption = np.zeros_like(edge)
        absorption[:, 3] = absorption_eV
    return Device(edge, mass, thickness, np.full(n, 1e18), np.full(n, 1e18), 300.0, absorption_eV=absorption)


def test_catalogue_names_and_needs():
    assert set(CATALOGUE) == {
        "resonance_energy_eV",
        "resonance_width_eV",
        "transmission_contrast",
        "peak_current_A_cm2",
        "peak_voltage_V",
        "valley_current_A_cm2",
        "valley_voltage_V",
        "pvcr",
        "swing_product_W_cm2",
        "leakage_A_cm2",
        "total_thickness_nm",
    }
    assert all(info.needs in ("zero_bias", "iv") and info.name == name for name, info in CATALOGUE.items())
    assert [name for name, info in CATALOGUE.items() if info.takes_bias] == ["leakage_A_cm2"]
    assert CATALOGUE["resonance_energy_eV"].needs == "zero_bias" and CATALOGUE["pvcr"].needs == "iv"


def test_request_labels_and_needs_iv():
    assert MetricRequest("pvcr").label == "pvcr"
    assert MetricRequest("leakage_A_cm2", 0.05).label == "leakage_A_cm2@0.05V"
    assert not needs_iv([MetricRequest("resonance_energy_eV"), MetricRequest("total_thickness_nm")])
    assert needs_iv([MetricRequest("resonance_energy_eV"), MetricRequest("leakage_A_cm2", 0.1)])


def test_bad_requests_raise():
    with pytest.raises(ValueError, match="unknown metric"):
        evaluate(rtds(), [MetricRequest("peak_ratio")], energy_eV=ENERGY, bias_V=BIAS)
    with pytest.raises(ValueError, match="at_bias_V"):
        evaluate(rtds(), [MetricRequest("leakage_A_cm2")], energy_eV=ENERGY, bias_V=BIAS)


def test_zero_bias_metrics_never_compute_a_current(monkeypatch):
    def forbidden(*args, **kwargs):
        raise AssertionError("current computed for zero-bias metrics")

    monkeypatch.setattr(metrics, "current_density", forbidden)
    device = rtds((4.5, 3.0))
    requests = [MetricRequest(n) for n in ("resonance_energy_eV", "resonance_width_eV", "total_thickness_nm")]
    result = evaluate(device, requests, energy_eV=ENERGY, bias_V=BIAS)
    assert result.bias_V is None and result.current_density_A_cm2 is None
    assert result.transmission.shape == (2, ENERGY.size)
    expected = transmission(ENERGY, device.band_edge_eV, device.mass, device.thickness_nm)
    np.testing.assert_allclose(result.transmission, expected)
    levels = find_resonances(device.band_edge_eV, device.mass, device.thickness_nm, window_eV=(0.0, 1.0))
    np.testing.assert_allclose(result.values["resonance_energy_eV"], levels.energy_eV[:, 0], rtol=1e-9)
    np.testing.assert_allclose(result.values["resonance_width_eV"], levels.width_eV[:, 0], rtol=1e-6)
    np.testing.assert_allclose(result.values["total_thickness_nm"], [11.5, 10.0])
    assert result.resonance_energy_eV.shape == (2, 1, 4)
    assert all((r == "").all() for r in result.reasons.values())


def test_transmission_contrast_follows_its_definition():
    device = rtds((4.5,))
    result = evaluate(device, [MetricRequest("transmission_contrast")], energy_eV=ENERGY, bias_V=BIAS)
    first, second = result.resonance_energy_eV[0, 0, :2]
    peak = transmission(np.array([first]), device.band_edge_eV, device.mass, device.thickness_nm)[0, 0]
    between = (ENERGY > first) & (ENERGY < second)
    expected = peak / result.transmission[0, between].min()
    assert result.values["transmission_contrast"][0] == pytest.approx(expected, rel=1e-9)
    assert result.values["transmission_contrast"][0] > 100.0


def test_no_level_in_the_window_gives_nan_with_a_reason():
    # A 1 nm well puts its only level above 0.5 eV.
    result = evaluate(
        rtds((1.0,)), [MetricRequest("resonance_energy_eV"), MetricRequest("transmission_contrast")],
        energy_eV=np.linspace(0.0, 0.5, 101), bias_V=BIAS,
    )
    assert np.isnan(result.values["resonance_energy_eV"][0])
    assert result.reasons["resonance_energy_eV"][0] == "no resonance in the energy window"
    assert np.isnan(result.values["transmission_contrast"][0]) and result.reasons["transmission_contrast"][0]


def test_parabola_refines_a_sampled_quadratic_exactly():
    bias = np.array([0.0, 0.1, 0.25, 0.3, 0.45])
    vertex_x, vertex_y = metrics._parabola_vertex(bias[None, 1:4], (5.0 - 40.0 * (bias[1:4] - 0.2) ** 2)[None])
    assert vertex_x[0] == pytest.approx(0.2, abs=1e-12) and vertex_y[0] == pytest.approx(5.0, abs=1e-12)


def test_peak_and_valley_of_a_synthetic_curve():
    # Invented N-shaped curve: a quadratic peak of 10 at 0.3 V, a quadratic valley of 1
    # at 0.6 V, sampled on a 0.05 V grid.
    bias = np.linspace(0.0, 1.0, 21)
    curve = np.where(bias < 0.45, 10.0 - 50.0 * (bias - 0.3) ** 2, 1.0 + 30.0 * (bias - 0.6) ** 2)
    falling = 10.0 * np.exp(-30.0 * (bias - 0.3) ** 2)  # the peak, then down to the end
    found = metrics._peak_and_valley(bias, np.stack([curve, np.linspace(0.0, 5.0, 21), falling]))
    value = {name: v for name, (v, _) in found.items()}
    reason = {name: r for name, (_, r) in found.items()}
    assert value["peak_voltage_V"][0] == pytest.approx(0.3) and value["peak_current_A_cm2"][0] == pytest.approx(10.0)
    assert value["valley_voltage_V"][0] == pytest.approx(0.6) and value["valley_current_A_cm2"][0] == pytest.approx(1.0)
    assert value["pvcr"][0] == pytest.approx(10.0)
    assert value["swing_product_W_cm2"][0] == pytest.approx(9.0 * 0.3)
    # Monotonic curve: no peak; a curve still falling at the end of the sweep: no valley.
    assert np.isnan(value["pvcr"][1]) and reason["pvcr"][1] == "no current peak inside the bias sweep"
    assert value["peak_voltage_V"][2] == pytest.approx(0.3, abs=0.005) and np.isnan(value["valley_voltage_V"][2])
    assert reason["valley_voltage_V"][2] == "no valley after the current peak inside the bias sweep"
    assert reason["peak_voltage_V"][2] == ""


def test_iv_metrics_of_a_double_barrier():
    device = rtds((4.5, 1.0))
    requests = [MetricRequest(n) for n in ("peak_current_A_cm2", "peak_voltage_V", "valley_current_A_cm2", "pvcr")]
    requests.append(MetricRequest("leakage_A_cm2", 0.05))
    result = evaluate(device, requests, energy_eV=ENERGY, bias_V=BIAS)
    assert result.current_density_A_cm2.shape == (2, BIAS.size)
    np.testing.assert_array_equal(result.bias_V, BIAS)
    assert result.resonance_energy_eV.shape == (2, BIAS.size, 4)
    current = result.current_density_A_cm2[0]
    discrete = np.argmax(current[:30])
    assert abs(result.values["peak_voltage_V"][0] - BIAS[discrete]) <= BIAS[1] - BIAS[0]
    assert result.values["peak_current_A_cm2"][0] >= current[discrete] * 0.999
    assert result.values["pvcr"][0] > 10.0
    # The leakage request is computed at its own bias, not read off the sweep.
    alone = current_density(device.take([0]), [0.05]).current_density_A_cm2[0, 0]
    assert result.values["leakage_A_cm2@0.05V"][0] == pytest.approx(alone, rel=1e-4)
    # The 1 nm well's level sits above the supply window throughout: no peak, a reason.
    assert np.isnan(result.values["pvcr"][1]) and result.reasons["pvcr"][1]
    assert np.isfinite(result.values["leakage_A_cm2@0.05V"][1])


def test_leakage_alone_computes_only_its_bias(monkeypatch):
    seen = []
    original = metrics.current_density

    def spy(device, bias_V, **kwargs):
        seen.append(np.asarray(bias_V))
        return original(device, bias_V, **kwargs)

    monkeypatch.setattr(metrics, "current_density", spy)
    result = evaluate(rtds(), [MetricRequest("leakage_A_cm2", 0.1)], energy_eV=ENERGY, bias_V=BIAS)
    assert len(seen) == 1 and seen[0].tolist() == [0.1]
    assert result.current_density_A_cm2 is None and result.values["leakage_A_cm2@0.1V"][0] > 0.0


def test_optical_potential_raises_the_valley_and_lowers_the_pvcr():
    requests = [MetricRequest(n) for n in ("peak_current_A_cm2", "valley_current_A_cm2", "pvcr")]
    clean = evaluate(rtds(), requests, energy_eV=ENERGY, bias_V=BIAS).values
    lossy = evaluate(rtds(absorption_eV=0.01), requests, energy_eV=ENERGY, bias_V=BIAS).values
    assert lossy["valley_current_A_cm2"][0] > 1.5 * clean["valley_current_A_cm2"][0]
    assert lossy["pvcr"][0] < 0.7 * clean["pvcr"][0]
