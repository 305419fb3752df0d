"""Peak and valley that cannot be fooled: sweep order, polarity, shoulders, ripples.

The rule under test (physics.metrics._peak_and_valley): each polarity is read from zero
bias outward; of all negative-differential-resistance regions the one with the largest
peak-to-valley ratio is reported; ripples below RIPPLE_FRACTION are ignored. The curves
are synthetic (sums of Lorentzian current peaks on a rising background), so every
expected number is known in closed form.
"""

from __future__ import annotations

import numpy as np
import pytest

from tunnelsmith.physics.metrics import RIPPLE_FRACTION, MetricRequest, _peak_and_valley, evaluate, ndr_regions

from test_metrics import rtds


def lorentz(v, centre, width, height):
    return height / (1.0 + ((v - centre) / width) ** 2)


def background(v):
    """A rising non-resonant current, so that every valley is followed by a rise."""
    return 0.1 * v + 0.5 * v**3


def two_resonances(v):
    """A weak first resonance (PVCR about 7) and a strong second one (about 13)."""
    v = np.abs(v)
    return lorentz(v, 0.3, 0.04, 2.0) + lorentz(v, 0.8, 0.03, 10.0) + background(v)


def metrics_of(v, j):
    result = _peak_and_valley(np.asarray(v, float), np.asarray(j, float)[None, :])
    return {name: float(value[0]) for name, (value, _) in result.items()}


BIAS = np.linspace(0.0, 1.6, 321)


def test_the_region_with_the_largest_ratio_wins_over_the_first_peak():
    found = metrics_of(BIAS, two_resonances(BIAS))
    assert found["peak_voltage_V"] == pytest.approx(0.8, abs=0.01)
    # The ratio of the second region (about 10.2 over its valley) beats the first's.
    regions, _ = ndr_regions(two_resonances(BIAS))
    ratios = [two_resonances(BIAS)[p] / two_resonances(BIAS)[q] for p, q in regions]
    assert len(regions) == 2 and found["pvcr"] == pytest.approx(max(ratios), rel=0.02)
    assert ratios[1] > ratios[0]


@pytest.mark.parametrize("order", ["descending", "shuffled"])
def test_the_order_of_the_sweep_does_not_matter(order):
    reference = metrics_of(BIAS, two_resonances(BIAS))
    index = np.arange(BIAS.size)[::-1] if order == "descending" else np.random.default_rng(1).permutation(BIAS.size)
    found = metrics_of(BIAS[index], two_resonances(BIAS[index]))
    for name, value in reference.items():
        assert found[name] == pytest.approx(value, rel=1e-12), name


def test_a_negative_sweep_mirrors_the_positive_one():
    positive = metrics_of(BIAS, two_resonances(BIAS))
    negative = metrics_of(-BIAS, -two_resonances(BIAS))  # J changes sign with the bias
    assert negative["peak_voltage_V"] == pytest.approx(-positive["peak_voltage_V"], rel=1e-12)
    assert negative["valley_voltage_V"] == pytest.approx(-positive["valley_voltage_V"], rel=1e-12)
    for name in ("pvcr", "peak_current_A_cm2", "valley_current_A_cm2", "swing_product_W_cm2"):
        assert negative[name] == pytest.approx(positive[name], rel=1e-12), name


def test_a_bipolar_sweep_reports_the_better_polarity():
    bias = np.linspace(-1.6, 1.6, 641)
    # Negative polarity: only the weak resonance (an asymmetric stack).
    current = np.where(bias >= 0, two_resonances(bias), -(lorentz(-bias, 0.3, 0.04, 2.0) + background(-bias)))
    found = metrics_of(bias, current)
    assert found["peak_voltage_V"] == pytest.approx(0.8, abs=0.01)
    only_negative = metrics_of(bias[bias <= 0], current[bias <= 0])
    assert only_negative["peak_voltage_V"] == pytest.approx(-0.3, abs=0.01)


def test_a_shoulder_below_the_ripple_size_is_not_a_peak():
    v = BIAS
    shoulder = lorentz(v, 0.8, 0.03, 10.0) + background(v)
    # A dip of 1.5 % right after 0.4 V: a local maximum there (the old first-local-maximum
    # rule took it, with a PVCR of 1.015), but below the ripple size.
    at = int(np.argmin(np.abs(v - 0.4)))
    shoulder[at + 1] = 0.985 * shoulder[at]
    assert shoulder[at + 1] < shoulder[at] and 0.015 < RIPPLE_FRACTION
    found = metrics_of(v, shoulder)
    assert found["peak_voltage_V"] == pytest.approx(0.8, abs=0.01)
    assert found["pvcr"] > 10.0


def test_no_valley_and_no_peak_are_reported_with_their_reasons():
    v = np.linspace(0.0, 1.0, 101)
    rising = _peak_and_valley(v, (0.5 * v)[None, :])
    assert np.isnan(rising["pvcr"][0][0]) and "no current peak" in rising["pvcr"][1][0]
    falling_to_the_end = _peak_and_valley(v, lorentz(v, 0.5, 0.05, 1.0)[None, :])
    assert np.isfinite(falling_to_the_end["peak_voltage_V"][0][0])
    assert "no valley" in falling_to_the_end["pvcr"][1][0]


def test_a_real_stack_gives_the_same_metrics_for_an_ascending_and_a_descending_sweep():
    device = rtds()
    requests = [MetricRequest(name) for name in ("pvcr", "peak_voltage_V", "valley_current_A_cm2")]
    energy = np.linspace(0.0, 1.0, 201)
    up = evaluate(device, requests, energy_eV=energy, bias_V=np.linspace(0.0, 1.0, 41))
    down = evaluate(device, requests, energy_eV=energy, bias_V=np.linspace(1.0, 0.0, 41))
    assert np.isfinite(up.values["pvcr"][0])
    for name in ("pvcr", "peak_voltage_V", "valley_current_A_cm2"):
        np.testing.assert_allclose(down.values[name], up.values[name], rtol=1e-9, err_msg=name)
