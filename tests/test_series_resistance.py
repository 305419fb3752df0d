"""Series resistance: V = V_int + J R_s, read as an upward sweep of the applied bias."""

from __future__ import annotations

import numpy as np
import pytest

from tunnelsmith.physics.metrics import MetricRequest, evaluate
from tunnelsmith.physics.series import applied_curve

from test_metrics import rtds


def test_no_resistance_leaves_the_curve_unchanged():
    v = np.linspace(0.0, 1.0, 21)
    j = np.vstack([np.sin(3 * v), v**2])
    mapped, bistable = applied_curve(v, j, 0.0, v)
    np.testing.assert_allclose(mapped, j, rtol=0, atol=1e-15)
    assert not bistable.any()


def test_an_ohmic_diode_in_series_is_two_resistors():
    # Two resistors in series: J = V / (R_d + R_s) (Ohm's and Kirchhoff's laws).
    r_diode, r_series = 2e-3, 3e-3  # Ohm cm^2
    v = np.linspace(-1.0, 1.0, 41)
    mapped, bistable = applied_curve(v, (v / r_diode)[None, :], r_series, v)
    np.testing.assert_allclose(mapped[0], v / (r_diode + r_series), rtol=1e-12)
    assert not bistable[0]


def test_a_steep_fall_folds_and_the_upward_sweep_jumps_over_it():
    v = np.linspace(0.0, 1.0, 401)
    peak = 1e5 / (1.0 + ((v - 0.4) / 0.03) ** 2)
    j = peak - peak[0] + 2e4 * v  # A/cm^2: a sharp NDR region, J(0) = 0
    r = 2e-6  # Ohm cm^2: J R reaches 0.2 V at the peak, steeper than the NDR can follow
    mapped, bistable = applied_curve(v, j[None, :], r, v)
    assert bistable[0]
    assert np.all(np.isfinite(mapped[0]))  # the applied grid lies inside the reach of the curve
    # The applied curve rises up to the fold, V_fold = V_int + J R at the intrinsic peak
    # region, and then drops at once: no point of the folded branch is reported.
    v_app = v + j * r
    fold = int(np.argmax(np.diff(v_app) < 0))
    jumps = np.diff(mapped[0])
    assert jumps.min() < -0.5 * (j[fold] - j.min())  # one large drop, the jump
    assert np.count_nonzero(jumps < -0.05 * j.max()) <= 2


def test_evaluate_shifts_the_peak_by_j_times_r():
    device = rtds()
    requests = [MetricRequest("peak_voltage_V"), MetricRequest("peak_current_A_cm2")]
    energy, bias = np.linspace(0.0, 1.0, 201), np.linspace(0.0, 1.0, 101)
    plain = evaluate(device, requests, energy_eV=energy, bias_V=bias)
    r = 0.05 / float(plain.values["peak_current_A_cm2"][0])  # J_peak R = 50 mV
    series = evaluate(device, requests, energy_eV=energy, bias_V=bias, series_resistance_ohm_cm2=r)
    shift = float(series.values["peak_voltage_V"][0] - plain.values["peak_voltage_V"][0])
    assert shift == pytest.approx(0.05, abs=0.01)  # within the 10 mV sweep step
    assert series.intrinsic_current_density_A_cm2 is not None
    np.testing.assert_allclose(series.intrinsic_current_density_A_cm2, plain.current_density_A_cm2, rtol=1e-12)


def test_a_leakage_current_is_taken_at_the_intrinsic_bias():
    device = rtds()
    request = [MetricRequest("leakage_A_cm2", 0.05)]
    energy = np.linspace(0.0, 1.0, 201)
    plain = evaluate(device, request, energy_eV=energy, bias_V=[0.0])
    leak = float(plain.values["leakage_A_cm2@0.05V"][0])
    r = 0.005 / leak  # J R = 5 mV at 50 mV
    series = evaluate(device, request, energy_eV=energy, bias_V=[0.0], series_resistance_ohm_cm2=r)
    # Reference: the intrinsic current at V_int solving V_int + J(V_int) R = 50 mV, by
    # bisection on the plain model (an independent route).
    from tunnelsmith.physics.current import current_density

    lo, hi = 0.0, 0.05
    for _ in range(30):
        mid = 0.5 * (lo + hi)
        j = float(current_density(device, [mid]).current_density_A_cm2[0, 0])
        lo, hi = (mid, hi) if mid + j * r < 0.05 else (lo, mid)
    reference = float(current_density(device, [0.5 * (lo + hi)]).current_density_A_cm2[0, 0])
    assert float(series.values["leakage_A_cm2@0.05V"][0]) == pytest.approx(reference, rel=0.01)
    assert float(series.values["leakage_A_cm2@0.05V"][0]) < leak


def test_the_stack_file_key_drives_the_solution(tmp_path):
    """[model] series_resistance_ohm_cm2 moves the stored curve and the metrics; the
    intrinsic curve is stored beside it."""
    from conftest import STACK, stack_file

    from tunnelsmith.optimize.inputs.reader import load
    from tunnelsmith.optimize.results.solution import solve_dataset

    iv = STACK + "\n[bias]\nfrom_V = 0.0\nto_V = 0.8\nsteps = 81\n"
    plain = solve_dataset(load(stack_file(tmp_path, iv, "plain.toml")))
    r = 0.03 / float(plain["peak_current_A_cm2"])  # J_peak R = 30 mV
    series = solve_dataset(load(stack_file(tmp_path, iv + f"\n[model]\nseries_resistance_ohm_cm2 = {r!r}\n",
                                           "series.toml")))
    shift = float(series["peak_voltage_V"] - plain["peak_voltage_V"])
    assert shift == pytest.approx(0.03, abs=0.01)
    np.testing.assert_allclose(series["intrinsic_current_density"], plain["current_density"], rtol=1e-12)
    assert "series resistance" in series["current_density"].attrs["long_name"]
