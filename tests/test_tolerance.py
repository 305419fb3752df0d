"""Growth-tolerance analysis: error model, Monte Carlo yield, sensitivities, robust values."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from conftest import tunnelsmith
from scipy.optimize import brentq
from scipy.stats import norm

from tunnelsmith.optimize.inputs import reader
from tunnelsmith.optimize.commands import tolerance as tolerance_commands
from tunnelsmith.optimize.model import growth
from tunnelsmith.optimize.model import robust
from tunnelsmith.optimize.results import tolerance as tolerance_results
from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.model.stack import DesignBatch, monolayer_nm, nominal_batch
from tunnelsmith.physics import materials
from tunnelsmith.physics.constants import HBAR2_2M0_eV_nm2

REPO = Path(__file__).resolve().parents[1]

# Invented test structures (not real wafers).
INP_DOUBLE_BARRIER = """
temperature_K = 300.0
[emitter]
material = "In0.53Ga0.47As"
doping_cm3 = 2e18
[collector]
material = "In0.53Ga0.47As"
doping_cm3 = 2e18
[[layer]]
name = "barrier_in"
material = "In0.52Al0.48As"
thickness_ml = 12
[[layer]]
name = "well"
material = "In0.53Ga0.47As"
thickness_ml = 16
[[layer]]
name = "barrier_out"
like = "barrier_in"
[bias]
steps = 1
[energy]
from_eV = 0.0
to_eV = 0.45
points = 301
"""

GAAS_THICK_BARRIERS = """
temperature_K = 300.0
[emitter]
material = "GaAs"
doping_cm3 = 1e18
[collector]
material = "GaAs"
doping_cm3 = 1e18
[[layer]]
name = "barrier_in"
material = "Al0.3Ga0.7As"
thickness_nm = 8.0
[[layer]]
name = "well"
material = "GaAs"
thickness_nm = 6.0
[[layer]]
name = "barrier_out"
material = "Al0.3Ga0.7As"
thickness_nm = 8.0
[bias]
steps = 1
[energy]
from_eV = 0.0
to_eV = 0.25
points = 301
"""

THREE_ALLOYS = """
temperature_K = 300.0
[emitter]
material = "In0.53Ga0.47As"
doping_cm3 = 2e18
[collector]
material = "GaAs"
doping_cm3 = 2e18
[[layer]]
name = "a"
material = "Al0.3Ga0.7As"
thickness_ml = 1
[[layer]]
name = "b"
material = "In0.53Ga0.47As"
thickness_nm = 3.0
[[layer]]
name = "c"
material = "Al0.4Ga0.6As"
thickness_ml = 2
[[layer]]
name = "d"
material = "GaAs"
thickness_ml = 3
[[layer]]
name = "e"
like = "c"
"""


def write(tmp_path: Path, text: str, name: str = "stack.toml", extra: str = "") -> Path:
    path = tmp_path / name
    path.write_text(text + extra, encoding="utf-8")
    return path


def load(tmp_path: Path, text: str, extra: str = "", name: str = "stack.toml"):
    return reader.load(write(tmp_path, text, name, extra))


def tolerance_table(thickness_sigma_ml=0.5, growth_rate_sigma=0.01, fraction_sigma=0.005, samples=500, seed=0):
    return (f"\n[tolerance]\nthickness_sigma_ml = {thickness_sigma_ml}\ngrowth_rate_sigma = {growth_rate_sigma}\n"
            f"fraction_sigma = {fraction_sigma}\nsamples = {samples}\nseed = {seed}\n")


def window(metric: str, lo: float, hi: float) -> str:
    return f'\n[[tolerance.spec]]\nmetric = "{metric}"\nmin = {float(lo)!r}\nmax = {float(hi)!r}\n'


# --------------------------------------------------------------------------------------
# Error model
# --------------------------------------------------------------------------------------


def test_same_seed_same_samples_and_different_seed_different(tmp_path):
    spec = load(tmp_path, THREE_ALLOYS, tolerance_table(thickness_sigma_ml=1.0))
    batch = nominal_batch(spec)
    first = growth.draw_growth_errors(batch, spec, 50, np.random.default_rng(7))
    again = growth.draw_growth_errors(batch, spec, 50, np.random.default_rng(7))
    other = growth.draw_growth_errors(batch, spec, 50, np.random.default_rng(8))
    np.testing.assert_array_equal(first.batch.thickness_nm, again.batch.thickness_nm)
    np.testing.assert_array_equal(first.batch.fraction, again.batch.fraction)
    np.testing.assert_array_equal(first.growth_rate_factor, again.growth_rate_factor)
    assert not np.array_equal(first.batch.thickness_nm, other.batch.thickness_nm)
    assert not np.array_equal(first.growth_rate_factor, other.growth_rate_factor)
    assert not np.allclose(first.batch.fraction[:, 0], other.batch.fraction[:, 0])


def test_study_uses_the_tolerance_seed(tmp_path, monkeypatch):
    # The [tolerance] seed alone fixes the samples of `tunnelsmith tolerance`.
    spec = load(tmp_path, THREE_ALLOYS, tolerance_table(seed=3))
    batch = nominal_batch(spec)
    drawn = []
    monkeypatch.setattr(tolerance_results, "monolayer_sensitivity", lambda *a: (np.zeros((0, 5)), {}))
    monkeypatch.setattr(tolerance_results, "evaluate_designs", lambda spec, b, requests, **k: drawn.append(b) or ({}, {}))
    tolerance_results.run_study(spec, batch, samples=20, requests=[])
    tolerance_results.run_study(spec, batch, samples=20, requests=[])
    np.testing.assert_array_equal(drawn[0].thickness_nm, drawn[1].thickness_nm)
    reseeded = load(tmp_path, THREE_ALLOYS, tolerance_table(seed=4), name="other.toml")
    tolerance_results.run_study(reseeded, batch, samples=20, requests=[])
    assert not np.array_equal(drawn[0].thickness_nm, drawn[2].thickness_nm)


def test_interface_steps_are_whole_monolayers_independent_per_layer(tmp_path):
    spec = load(tmp_path, THREE_ALLOYS, tolerance_table(growth_rate_sigma=0.0, fraction_sigma=0.0))
    batch = nominal_batch(spec)
    n = 20000
    grown = growth.perturb(batch, spec, n, np.random.default_rng(1))
    layer_ml = monolayer_nm(batch, spec.temperature_K)[0]
    steps = (grown.thickness_nm - batch.thickness_nm) / layer_ml
    # Layer "a" is one monolayer thick and gets clipped at zero; check the others.
    free = steps[:, 1:]
    np.testing.assert_allclose(free, np.rint(free), atol=1e-9)
    # Variance of a normal(0, 0.5) rounded to whole numbers: sum of m^2 P(round = m).
    m = np.arange(1, 6)
    p = norm.cdf((m + 0.5) / 0.5) - norm.cdf((m - 0.5) / 0.5)
    expected = 2.0 * np.sum(m**2 * p)
    standard_error = math.sqrt((2.0 * np.sum(m**4 * p) - expected**2) / n)  # of a sample variance
    variance = free.var(axis=0)
    assert np.all(np.abs(variance - expected) < 5 * standard_error), (variance, expected)
    # A layer tied with like= is its own growth step: its errors are not copies.
    c, e = steps[:, 2], steps[:, 4]
    assert np.mean(c != e) > 0.3
    assert abs(np.corrcoef(c, e)[0, 1]) < 0.05


def test_growth_rate_factor_scales_every_layer_of_a_sample(tmp_path):
    spec = load(tmp_path, THREE_ALLOYS, tolerance_table(thickness_sigma_ml=0.0, growth_rate_sigma=0.02,
                                                        fraction_sigma=0.0))
    batch = nominal_batch(spec)
    errors = growth.draw_growth_errors(batch, spec, 4000, np.random.default_rng(2))
    ratio = errors.batch.thickness_nm / batch.thickness_nm
    np.testing.assert_allclose(ratio, np.repeat(ratio[:, :1], 5, axis=1), rtol=1e-12)
    np.testing.assert_allclose(ratio[:, 0], errors.growth_rate_factor, rtol=1e-12)
    assert abs(np.std(errors.growth_rate_factor) / 0.02 - 1.0) < 0.05


def test_thicknesses_never_negative(tmp_path):
    spec = load(tmp_path, THREE_ALLOYS, tolerance_table(thickness_sigma_ml=3.0, growth_rate_sigma=0.3))
    batch = nominal_batch(spec)
    grown = growth.perturb(batch, spec, 5000, np.random.default_rng(3))
    assert np.all(grown.thickness_nm >= 0.0)
    assert np.any(grown.thickness_nm[:, 0] == 0.0)  # the clip was needed, not vacuous


def test_alloy_shift_is_shared_by_layers_and_contacts_of_one_alloy(tmp_path):
    spec = load(tmp_path, THREE_ALLOYS, tolerance_table(fraction_sigma=0.01))
    batch = nominal_batch(spec)
    errors = growth.draw_growth_errors(batch, spec, 3000, np.random.default_rng(4))
    shift = errors.batch.fraction - batch.fraction
    # Layers a, c, e are AlGaAs (x = 0.3, 0.4, 0.4): one shift per sample.
    np.testing.assert_allclose(shift[:, 0], shift[:, 2], atol=1e-12)
    np.testing.assert_allclose(shift[:, 0], shift[:, 4], atol=1e-12)
    # Layer b and the emitter are InGaAs: their own shared shift, unrelated to AlGaAs.
    emitter, collector = errors.contact_fraction
    np.testing.assert_allclose(emitter - 0.53, shift[:, 1], atol=1e-12)
    assert abs(np.corrcoef(shift[:, 0], shift[:, 1])[0, 1]) < 0.08
    assert abs(np.std(shift[:, 0]) / 0.01 - 1.0) < 0.06
    # Binaries do not shift.
    assert np.all(np.isnan(errors.batch.fraction[:, 3]))
    assert np.all(np.isnan(collector))


def test_fraction_is_clipped_to_unit_interval(tmp_path):
    text = THREE_ALLOYS.replace("Al0.3Ga0.7As", "GaAs").replace('material = "Al0.4Ga0.6As"',
                                                                 'material = "AlGaAs"\nfraction = 0.99')
    spec = load(tmp_path, text, tolerance_table(fraction_sigma=0.05))
    grown = growth.perturb(nominal_batch(spec), spec, 2000, np.random.default_rng(5))
    column = grown.fraction[:, 2]
    assert column.max() == 1.0 and column.min() >= 0.0


def test_batches_are_design_major(tmp_path):
    spec = load(tmp_path, THREE_ALLOYS, tolerance_table(thickness_sigma_ml=0.0, growth_rate_sigma=0.0,
                                                        fraction_sigma=0.0))
    one = nominal_batch(spec)
    two = DesignBatch(one.layer_names, np.repeat(one.base, 2, axis=0), np.repeat(one.fraction, 2, axis=0),
                      one.thickness_nm * np.array([[1.0], [2.0]]))
    grown = growth.perturb(two, spec, 3, np.random.default_rng(0))
    np.testing.assert_allclose(grown.thickness_nm, np.repeat(two.thickness_nm, 3, axis=0))


def test_wilson_interval_matches_published_examples():
    # Newcombe, Stat. Med. 17, 857 (1998), Table I, Wilson score intervals (from memory):
    # 81/263 -> 0.2553-0.3662, 15/148 -> 0.0624-0.1605, 0/20 -> 0-0.1611, 1/29 -> 0.0061-0.1718.
    for (k, n), expected in {(81, 263): (0.2553, 0.3662), (15, 148): (0.0624, 0.1605),
                             (0, 20): (0.0, 0.1611), (1, 29): (0.0061, 0.1718)}.items():
        np.testing.assert_allclose(growth.wilson_interval(k, n), expected, atol=6e-5)


# --------------------------------------------------------------------------------------
# Monte Carlo against a direct sampling written here from the physics API
# --------------------------------------------------------------------------------------


def direct_sampling(n_samples: int, seed: int, fraction_sigma: float):
    """Grow and evaluate the InP double barrier without tunnelsmith.optimize.model.stack or optimize.tolerance."""
    from tunnelsmith.physics.device import Device
    from tunnelsmith.physics.metrics import MetricRequest, evaluate

    rng = np.random.default_rng(seed)
    temperature = 300.0
    nominal_x = {"InGaAs": 0.53, "InAlAs": 0.52}
    layers = [("InGaAs", None), ("InAlAs", 12), ("InGaAs", 16), ("InAlAs", 12), ("InGaAs", None)]
    shift = {alloy: rng.normal(0.0, fraction_sigma, n_samples) for alloy in ("InAlAs", "InGaAs")}
    rate = 1.0 + rng.normal(0.0, 0.01, n_samples)
    columns = {key: [] for key in ("band_edge_eV", "mass", "thickness_nm")}
    for alloy, monolayers in layers:
        nominal = materials.material(alloy, temperature, fraction=nominal_x[alloy])
        grown = materials.alloy_arrays(alloy, np.clip(nominal_x[alloy] + shift[alloy], 0, 1), temperature)
        columns["band_edge_eV"].append(grown["conduction_band_eV"])
        columns["mass"].append(grown["mass"])
        if monolayers is None:
            columns["thickness_nm"].append(np.zeros(n_samples))
        else:
            steps = np.rint(rng.normal(0.0, 0.5, n_samples))
            thickness = rate * monolayers * nominal.monolayer_nm + steps * nominal.monolayer_nm
            columns["thickness_nm"].append(np.maximum(thickness, 0.0))
    arrays = {key: np.stack(value, axis=1) for key, value in columns.items()}
    device = Device(**arrays, emitter_doping_cm3=2e18, collector_doping_cm3=2e18, temperature_K=temperature)
    result = evaluate(device, [MetricRequest("resonance_energy_eV")], energy_eV=np.linspace(0.0, 0.45, 301),
                      bias_V=np.array([0.0]))
    return result.values["resonance_energy_eV"]


def test_monte_carlo_agrees_with_direct_sampling(tmp_path):
    n = 400
    sigma_x = 0.01  # larger than the default so that the shared composition shift matters
    spec = load(tmp_path, INP_DOUBLE_BARRIER, tolerance_table(fraction_sigma=sigma_x, seed=11))
    batch = nominal_batch(spec)
    nominal = growth.monolayer_sensitivity(spec, batch, growth.metric_requests(spec))[1]
    centre = nominal["resonance_energy_eV"]
    lo, hi = centre - 0.004, centre + 0.006
    spec = load(tmp_path, INP_DOUBLE_BARRIER,
                tolerance_table(fraction_sigma=sigma_x, seed=11) + window("resonance_energy_eV", lo, hi))
    study = tolerance_results.run_study(spec, batch, samples=n)
    tool = study.values["resonance_energy_eV"]
    direct = direct_sampling(n, seed=12, fraction_sigma=sigma_x)
    assert np.all(np.isfinite(tool)) and np.all(np.isfinite(direct))

    s_tool, s_direct = tool.std(ddof=1), direct.std(ddof=1)
    assert s_tool > 0.002  # the spread is real, not a degenerate zero
    assert abs(tool.mean() - direct.mean()) < 4.0 * math.sqrt((s_tool**2 + s_direct**2) / n)
    # Standard error of a standard deviation: s * sqrt((kurtosis - 1) / (4 n)).
    def std_error(x):
        z = (x - x.mean()) / x.std()
        return x.std() * math.sqrt((np.mean(z**4) - 1.0) / (4.0 * n))
    assert abs(s_tool - s_direct) < 4.0 * math.hypot(std_error(tool), std_error(direct)), (s_tool, s_direct)

    yield_tool = tolerance_results.window_yields(study)["all"][0] / n
    yield_direct = np.mean((direct >= lo) & (direct <= hi))
    pooled = 0.5 * (yield_tool + yield_direct)
    assert 0.1 < pooled < 0.9
    assert abs(yield_tool - yield_direct) < 4.0 * math.sqrt(pooled * (1 - pooled) * 2.0 / n)


def test_zero_sigmas_give_the_nominal_pass_or_fail(tmp_path):
    spec = load(tmp_path, INP_DOUBLE_BARRIER)
    batch = nominal_batch(spec)
    centre = growth.monolayer_sensitivity(spec, batch, growth.metric_requests(spec))[1]["resonance_energy_eV"]
    for lo, hi, expected in ((centre - 0.01, centre + 0.01, 1.0), (centre + 0.001, centre + 0.01, 0.0)):
        spec = load(tmp_path, INP_DOUBLE_BARRIER, tolerance_table(0.0, 0.0, 0.0) + window("resonance_energy_eV", lo, hi))
        study = tolerance_results.run_study(spec, batch, samples=8)
        inside, total = tolerance_results.window_yields(study)["all"]
        assert inside / total == expected
        np.testing.assert_allclose(study.values["resonance_energy_eV"], centre, rtol=1e-12)


# --------------------------------------------------------------------------------------
# Sensitivity against the finite-well bound state
# --------------------------------------------------------------------------------------


def finite_well_ground_state_eV(width_nm: float, depth_eV: float, mass_well: float, mass_barrier: float) -> float:
    """Ground state of a finite square well with BenDaniel-Duke matching.

    Even state: (k / m_w) tan(k L / 2) = kappa / m_b, with k = sqrt(m_w E / c) and
    kappa = sqrt(m_b (V0 - E) / c), c = hbar^2 / 2 m0. P. Harrison, Quantum Wells, Wires
    and Dots (Wiley), chapter 2, the finite well with unequal well and barrier masses.
    """
    def mismatch(energy):
        k = math.sqrt(mass_well * energy / HBAR2_2M0_eV_nm2)
        kappa = math.sqrt(mass_barrier * (depth_eV - energy) / HBAR2_2M0_eV_nm2)
        return k / mass_well * math.tan(0.5 * k * width_nm) - kappa / mass_barrier

    # The ground state lies below k L / 2 = pi / 2 and below the barrier top.
    top = min(depth_eV, HBAR2_2M0_eV_nm2 * (math.pi / width_nm) ** 2 / mass_well)
    return brentq(mismatch, 1e-9 * top, top * (1 - 1e-12), xtol=1e-15)


def test_well_sensitivity_matches_the_finite_well_equation(tmp_path):
    spec = load(tmp_path, GAAS_THICK_BARRIERS)
    batch = nominal_batch(spec)
    requests = growth.metric_requests(spec)
    sensitivity, nominal = growth.monolayer_sensitivity(spec, batch, requests)
    row = sensitivity[[r.label for r in requests].index("resonance_energy_eV")]
    well = materials.material("GaAs")
    barrier = materials.material("Al0.3Ga0.7As")
    depth = barrier.conduction_band_eV - well.conduction_band_eV
    a = well.monolayer_nm

    def level(width_nm):
        return finite_well_ground_state_eV(width_nm, depth, well.mass, barrier.mass)

    expected = (level(6.0 + a) - level(6.0 - a)) / 2.0
    assert expected < 0  # a wider well lowers the level
    # 8 nm barriers leak so little that the level and its shift are the bound state's.
    assert abs(nominal["resonance_energy_eV"] / level(6.0) - 1.0) < 1e-3
    assert abs(row[1] / expected - 1.0) < 1e-3, (row[1], expected)
    # Thick barriers: adding a monolayer to a barrier hardly moves the level.
    assert abs(row[0]) < 0.02 * abs(row[1]) and abs(row[2]) < 0.02 * abs(row[1])


# --------------------------------------------------------------------------------------
# Robust values (campaign hook)
# --------------------------------------------------------------------------------------


def test_pessimistic_order_statistics():
    samples = np.array([[5.0, 1.0, 3.0, 2.0, 4.0, 6.0, 7.0, 8.0, 9.0, 10.0]])
    assert robust._order_statistic(samples, 0.1, low=True)[0] == 1.0
    assert robust._order_statistic(samples, 0.2, low=True)[0] == 2.0
    assert robust._order_statistic(samples, 0.2, low=False)[0] == 9.0
    # An undefined sample ranks worst: tolerated up to a share q, then the value is undefined.
    one_bad = np.where(samples == 5.0, np.nan, samples)
    assert robust._order_statistic(one_bad, 0.2, low=True)[0] == 1.0
    assert robust._order_statistic(one_bad, 0.2, low=False)[0] == 10.0
    two_bad = np.where(samples <= 2.0, np.nan, samples)
    assert np.isnan(robust._order_statistic(two_bad, 0.1, low=True)[0])


ROBUST_CAMPAIGN = """
temperature_K = 300.0
[campaign]
name = "robust-test"
[emitter]
material = "GaAs"
doping_cm3 = 1e18
[collector]
material = "GaAs"
doping_cm3 = 1e18
[[layer]]
name = "barrier_in"
material = "Al0.3Ga0.7As"
thickness_ml = 14
[[layer]]
name = "well"
material = "GaAs"
thickness_ml = { min = 10, max = 30 }
[[layer]]
name = "barrier_out"
like = "barrier_in"
[bias]
steps = 1
[energy]
to_eV = 0.3
points = 301
[[objective]]
metric = "resonance_energy_eV"
target = TARGET
[tolerance]
robust = { samples = 24, quantile = 0.1 }
[[tolerance.spec]]
metric = "resonance_energy_eV"
min = LOW
max = HIGH
"""


def test_robust_values_prefer_the_design_with_the_smaller_spread(tmp_path):
    # Two wells whose levels sit symmetrically about the target: equal nominal error.
    # The narrow well's level moves more per monolayer, so its pessimistic error is larger.
    probe = load(tmp_path, ROBUST_CAMPAIGN.replace("TARGET", "0.1").replace("LOW", "0.0").replace("HIGH", "1.0"))
    template = nominal_batch(load(tmp_path, GAAS_THICK_BARRIERS, name="template.toml"))
    layer_ml = monolayer_nm(template, 300.0)[0]
    thickness = np.array([[14, 16, 14], [14, 26, 14]]) * layer_ml
    batch = DesignBatch(template.layer_names, np.repeat(template.base, 2, axis=0), np.repeat(template.fraction, 2, axis=0), thickness)
    values, _ = robust.robust_metric_values(probe, batch, np.random.default_rng(0))
    narrow, wide = (float(v) for v in values["nominal_resonance_energy_eV"])
    assert narrow > wide  # the narrow well's level lies higher
    target = 0.5 * (narrow + wide)
    half = 0.5 * (narrow - wide)
    text = (ROBUST_CAMPAIGN.replace("TARGET", repr(target))
            .replace("LOW", repr(wide - 0.1 * half)).replace("HIGH", repr(wide + 0.1 * half)))
    spec = load(tmp_path, text, name="campaign.toml")
    values, reasons = robust.robust_metric_values(spec, batch, np.random.default_rng(0))

    nominal_error = np.abs(values["nominal_resonance_energy_eV"] - target)
    np.testing.assert_allclose(nominal_error[0], nominal_error[1], rtol=1e-9)
    robust_error = np.abs(values["resonance_energy_eV"] - target)
    assert np.all(robust_error > nominal_error)  # growth errors only make things worse
    assert robust_error[0] > robust_error[1], robust_error  # the wide well wins
    # The margin comes from the spread: about twice as large for the narrow well.
    excess = robust_error - nominal_error
    assert excess[0] > 1.5 * excess[1], excess
    # Yield of the window around the wide well's level: the wide well passes more often.
    assert values["yield"][1] > values["yield"][0]
    assert values["nominal_yield"].tolist() == [0.0, 1.0]
    assert all(r == "" for r in reasons["resonance_energy_eV"])


# --------------------------------------------------------------------------------------
# Command line
# --------------------------------------------------------------------------------------


def run_cli(*args, cwd=REPO):
    return tunnelsmith("tolerance", *args, cwd=cwd)


def test_command_line_writes_tolerance_file(tmp_path):
    import xarray as xr

    stack = write(tmp_path, INP_DOUBLE_BARRIER, extra=tolerance_table() + window("resonance_energy_eV", 0.05, 0.4))
    out = tmp_path / "out"
    result = run_cli(stack, "--samples", 200, "--out", out, "--quiet")
    assert result.returncode == 0, result.stderr
    assert "yield" in result.stdout and "resonance_energy_eV" in result.stdout
    ds = xr.load_dataset(out / "tolerance.nc")
    assert ds.sizes["sample"] == 200 and ds.sizes["layer"] == 3
    assert ds["thickness_nm"].dims == ("sample", "layer")
    assert ds["sensitivity"].dims == ("metric", "layer")
    assert 0.0 <= ds.attrs["yield_ci_low_all"] <= ds.attrs["yield_all"] <= ds.attrs["yield_ci_high_all"] <= 1.0
    assert ds.attrs["campaign_toml"] == stack.read_text()


def fake_front(run_dir: Path, campaign_text: str, trials=(3, 17)) -> None:
    """A front.nc as the campaign engine writes it (design section 4), for two trials."""
    import xarray as xr

    run_dir.mkdir(parents=True, exist_ok=True)
    layers = ["barrier_in", "well", "barrier_out"]
    ml = materials.material("In0.53Ga0.47As").monolayer_nm
    barrier_ml = materials.material("In0.52Al0.48As").monolayer_nm
    thickness = np.array([[12 * barrier_ml, w * ml, 12 * barrier_ml] for w in (14, 18)])
    front = xr.Dataset(
        {"thickness_nm": (("design", "layer"), thickness),
         "material": (("design", "layer"), np.array([["In0.52Al0.48As", "In0.53Ga0.47As", "In0.52Al0.48As"]] * 2)),
         "fraction": (("design", "layer"), np.array([[0.52, 0.53, 0.52]] * 2))},
        coords={"design": list(trials), "layer": layers}, attrs={"campaign_toml": campaign_text})
    front.to_netcdf(run_dir / "front.nc")


FRONT_CAMPAIGN = INP_DOUBLE_BARRIER.replace("thickness_ml = 16", "thickness_ml = { min = 12, max = 20 }") + """
[campaign]
name = "front-test"
[[objective]]
metric = "resonance_energy_eV"
target = 0.2
"""


def test_command_line_design_of_a_front(tmp_path):
    import xarray as xr

    run_dir = tmp_path / "run"
    fake_front(run_dir, FRONT_CAMPAIGN)
    result = run_cli(run_dir, "--design", 17, "--samples", 64, "--quiet")
    assert result.returncode == 0, result.stderr
    ds = xr.load_dataset(run_dir / "tolerance_design_17" / "tolerance.nc")
    ml = materials.material("In0.53Ga0.47As").monolayer_nm
    np.testing.assert_allclose(ds["nominal_thickness_nm"].values[1], 18 * ml)


BAD_INPUTS = [
    (["{missing}"], "no such file"),
    (["{run}"], "--design"),
    (["{run}", "--design", "5"], "not on the front"),
    (["{stack}", "--design", "3"], "--design"),
    (["{empty}", "--design", "3"], "front.nc"),
    (["{stack}", "--storage", "sqlite:///x.db"], "--storage"),
    (["{missing}", "--design", "3"], "no such run directory"),
]


def bad_input_places(tmp_path: Path) -> dict:
    run_dir = tmp_path / "run"
    fake_front(run_dir, FRONT_CAMPAIGN)
    (tmp_path / "empty").mkdir()
    return {"missing": tmp_path / "nothing.toml", "run": run_dir, "stack": write(tmp_path, INP_DOUBLE_BARRIER),
            "empty": tmp_path / "empty"}


@pytest.mark.parametrize("arguments, words", BAD_INPUTS)
def test_bad_input_exits_2_with_a_message(tmp_path, capsys, arguments, words):
    from tunnelsmith.optimize.cli import main

    places = bad_input_places(tmp_path)
    assert main(["tolerance", *[a.format(**places) for a in arguments]]) == 2
    message = capsys.readouterr().err
    assert words in message and "Fix:" in message


def test_bad_input_from_the_shell_has_no_traceback(tmp_path):
    places = bad_input_places(tmp_path)
    result = run_cli(places["run"], "--design", 5)
    assert result.returncode == 2
    assert "Traceback" not in result.stderr and "not on the front" in result.stderr


def test_bad_sample_count_is_an_input_error(tmp_path):
    with pytest.raises(InputError):
        tolerance_commands.run_tolerance(write(tmp_path, INP_DOUBLE_BARRIER), samples=0, out_dir=tmp_path, quiet=True)
