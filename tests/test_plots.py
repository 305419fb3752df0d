"""Figures from result Datasets: files appear atomically, are real PNGs, and missing
optional data never stops a figure.

The Datasets are built here with the layouts of solution.nc, front.nc/trials.nc and
tolerance.nc (DESIGN.md §4). Their numbers are an invented double-barrier scenario,
shaped to look like a device but computed by no physics.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from matplotlib import image as mpimg

from tunnelsmith.optimize import plots

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
LAYERS = ("spacer", "barrier_in", "well", "barrier_out", "cladding")


# ----------------------------------------------------------------------------- builders


def _lorentzian(energy_eV, centre_eV, width_eV):
    return (0.5 * width_eV) ** 2 / ((energy_eV - centre_eV) ** 2 + (0.5 * width_eV) ** 2)


def make_solution(*, with_states=True, with_current=True, with_band=True, position_coord=False) -> xr.Dataset:
    """solution.nc look-alike. The band edge is stored as tunnelsmith.optimize.commands.solve writes it: two
    samples per slice on a ``position`` dimension whose values sit in ``position_nm``;
    ``position_coord=True`` stores one sample per slice boundary on a coordinate instead."""
    energy_eV = np.linspace(0.0, 0.8, 801)
    bias_V = np.linspace(0.0, 0.6, 31)
    level = np.arange(2)
    shift = 0.5 * bias_V[:, None]  # levels follow the well's potential, about half the drop
    resonance_energy = np.array([0.12, 0.46])[None, :] - shift
    resonance_width = np.tile([1.5e-3, 2.5e-2], (bias_V.size, 1))
    transmission = 1e-6 * np.exp(-2.0 * (0.8 - energy_eV))[None, :] + sum(
        0.9 * _lorentzian(energy_eV[None, :], resonance_energy[:, [k]], resonance_width[:, [k]]) for k in level
    )
    starts = np.array([-10.0, 0.0, 3.0, 5.0, 9.5, 11.5, 14.5])
    ends = np.array([0.0, 3.0, 5.0, 9.5, 11.5, 14.5, 24.5])
    names = ("emitter", *LAYERS, "collector")
    materials = ("In0.53Ga0.47As", "In0.53Ga0.47As", "AlAs", "In0.53Ga0.47As", "AlAs", "In0.52Al0.48As",
                 "In0.53Ga0.47As")
    offsets = np.array([0.0, 0.0, 1.2, 0.0, 1.2, 0.5, 0.0])
    # slices of 0.5 nm, each at the potential of its midpoint (linear drop over 0..14.5 nm)
    slice_start = np.arange(-10.0, 24.5, 0.5)
    layer_of = np.clip(np.searchsorted(ends, slice_start, side="right"), 0, len(names) - 1)
    drop = np.clip((slice_start + 0.25) / 14.5, 0.0, 1.0)
    band_edge = offsets[layer_of][None, :] - bias_V[:, None] * drop[None, :]
    if position_coord:
        position_nm = slice_start
    else:
        position_nm = np.stack([slice_start, slice_start + 0.5], axis=-1).ravel()
        band_edge = np.repeat(band_edge, 2, axis=-1)
    data_vars = {
        "transmission": (("bias", "energy"), transmission, {"units": "1"}),
        "resonance_energy": (("bias", "level"), resonance_energy, {"units": "eV"}),
        "resonance_width": (("bias", "level"), resonance_width, {"units": "eV"}),
        "resonance_energy_eV": ((), 0.12),
    }
    coords = {"energy": energy_eV, "bias": bias_V, "level": level}
    if with_band:
        data_vars.update({
            "band_edge": (("bias", "position"), band_edge, {"units": "eV"}),
            "layer_start": (("layer",), starts, {"units": "nm"}),
            "layer_end": (("layer",), ends, {"units": "nm"}),
            "layer_material": (("layer",), np.array(materials, dtype=object)),
        })
        coords["layer"] = list(names)
        if position_coord:
            coords["position"] = position_nm
        else:
            data_vars["position_nm"] = (("position",), position_nm, {"units": "nm"})
    if with_current:
        current = 2.0e5 * np.exp(-(((bias_V - 0.24) / 0.09) ** 2)) + 4.0e4 * bias_V ** 2 + 3e2 * bias_V
        peak = int(np.argmax(current[:20]))
        valley = peak + int(np.argmin(current[peak:]))
        data_vars.update({
            "current_density": (("bias",), current, {"units": "A cm-2"}),
            "peak_voltage_V": ((), bias_V[peak]), "peak_current_A_cm2": ((), current[peak]),
            "valley_voltage_V": ((), bias_V[valley]), "valley_current_A_cm2": ((), current[valley]),
            "pvcr": ((), current[peak] / current[valley]),
        })
    if with_states:
        position2 = np.linspace(-2.0, 16.5, 200)
        inside = (position2 > 5.0) & (position2 < 9.5)
        probability = np.stack([
            np.where(inside, np.sin(n * np.pi * (position2 - 5.0) / 4.5) ** 2, 0.0) for n in (1, 2)
        ])
        data_vars.update({
            "state_energy": (("state_bias", "state"), np.array([[0.12, 0.46], [0.0, 0.34]])),
            "state_probability": (("state_bias", "state", "state_position"), np.stack([probability] * 2)),
        })
        coords.update({"state_bias": [0.0, 0.24], "state_position": position2})
    return xr.Dataset(data_vars, coords=coords, attrs={
        "campaign_toml": 'name = "invented double barrier"\ntemperature_K = 300.0\n',
        "software_version": "test",
    })


CAMPAIGN_TOML = """[campaign]
name = "invented rtd search"

[[objective]]
metric = "pvcr"
goal = "maximize"

[[objective]]
metric = "resonance_energy_eV"
target = 0.15

[[objective]]
metric = "leakage_A_cm2"
at_bias_V = 0.05
goal = "minimize"
log = true
"""
LABELS = ["pvcr", "resonance_energy_eV", "leakage_A_cm2@0.05V"]


def make_front_and_trials(*, n_objectives=3, with_extras=True, seed=3) -> tuple[xr.Dataset, xr.Dataset]:
    """front.nc/trials.nc look-alikes; ``objective_value`` follows the campaign's convention
    (raw value for a goal, |v - target| for a target, log10 v for log = true)."""
    rng = np.random.default_rng(seed)
    labels = LABELS[:n_objectives]
    n_trials = 120
    metric = np.column_stack([
        rng.uniform(1.0, 8.0, n_trials), rng.uniform(0.05, 0.3, n_trials), 10 ** rng.uniform(-2, 3, n_trials),
    ])
    states = np.array(["COMPLETE"] * n_trials, dtype=object)
    states[::17] = "FAIL"
    metric[::17] = np.nan
    states[-1] = "RUNNING"
    metric[-1] = np.nan
    objective = np.column_stack([metric[:, 0], np.abs(metric[:, 1] - 0.15), np.log10(metric[:, 2])])
    objective = objective[:, :n_objectives]
    front_rows = np.array([3, 9, 20, 41, 55, 77])
    thickness = np.column_stack([
        np.full(6, 3.0), rng.uniform(1.2, 2.5, 6), rng.uniform(3.0, 6.0, 6), rng.uniform(1.2, 2.5, 6),
        np.full(6, 3.0),
    ])
    material = np.array([["In0.53Ga0.47As", "AlAs", "In0.53Ga0.47As", "AlAs", "AlGaAs"]] * 6, dtype=object)
    material[::2, 2] = "InAs"
    fraction = np.full((6, 5), np.nan)
    fraction[:, 4] = 0.3
    front_vars = {
        "objective_value": (("design", "objective"), objective[front_rows]),
        "thickness_nm": (("design", "layer"), thickness, {"units": "nm"}),
        "material": (("design", "layer"), material),
        "fraction": (("design", "layer"), fraction),
    }
    front_coords = {"design": front_rows, "layer": list(LAYERS), "objective": labels}
    front_attrs = {"campaign_toml": CAMPAIGN_TOML, "sampler": "nsga2",
                   "n_complete_trials": int(np.sum(states == "COMPLETE"))}
    trial_vars = {"objective_value": (("trial", "objective"), objective), "state": (("trial",), states)}
    if with_extras:
        energy_eV = np.linspace(0.0, 0.6, 301)
        bias_V = np.linspace(0.0, 0.6, 31)
        centres = rng.uniform(0.08, 0.25, 6)
        transmission = 1e-7 + 0.8 * _lorentzian(energy_eV[None, :], centres[:, None], 4e-3)
        current = 1e5 * np.exp(-(((bias_V[None, :] - 2 * centres[:, None]) / 0.08) ** 2)) + 2e4 * bias_V ** 2
        front_vars.update({
            "transmission": (("design", "energy"), transmission),
            "current_density": (("design", "bias"), current, {"units": "A cm-2"}),
            "monolayers": (("design", "layer"), np.round(thickness / 0.2934)),
            "peak_voltage_V": (("design",), 2 * centres),
            "peak_current_A_cm2": (("design",), current.max(axis=1)),
        })
        for k, label in enumerate(LABELS):
            front_vars[label] = (("design",), metric[front_rows, k])
            trial_vars[label] = (("trial",), metric[:, k])
        front_coords.update({"energy": energy_eV, "bias": bias_V})
        front_attrs["hypervolume"] = 1.2
        front_attrs["hypervolume_reference_point"] = 1.1
        finished = np.cumsum(states == "COMPLETE").astype(float)
        trial_vars["hypervolume"] = (("trial",), 1.2 * (1 - np.exp(-finished / 30.0)))
        trial_vars["feasible"] = (("trial",), rng.uniform(size=n_trials) > 0.15)
    else:
        front_attrs["campaign_toml"] = '[campaign]\nname = "invented rtd search"\n'
    front = xr.Dataset(front_vars, coords=front_coords, attrs=front_attrs)
    trials = xr.Dataset(trial_vars, coords={"trial": np.arange(n_trials), "objective": labels})
    return front, trials


def make_tolerance(*, with_extras=True, seed=5) -> xr.Dataset:
    rng = np.random.default_rng(seed)
    samples = 400
    energy = rng.normal(0.15, 0.006, samples)
    pvcr = rng.lognormal(np.log(4.0), 0.15, samples)
    pvcr[:7] = np.nan
    leakage = 10 ** rng.normal(-1.0, 0.5, samples)
    ds = xr.Dataset(
        {
            "thickness_nm": (("sample", "layer"), rng.normal(2.0, 0.1, (samples, len(LAYERS)))),
            "fraction": (("sample", "layer"), np.full((samples, len(LAYERS)), np.nan)),
            "resonance_energy_eV": (("sample",), energy, {"units": "eV"}),
            "pvcr": (("sample",), pvcr),
            "leakage_A_cm2@0.05V": (("sample",), leakage, {"units": "A cm-2"}),
            "sensitivity": (("metric", "layer"), np.array([
                [0.0, 0.004, -0.011, 0.004, 0.0005],
                [0.01, -0.4, 0.25, -0.4, 0.02],
                [0.0, -0.02, 0.001, -0.02, np.nan],
            ])),
        },
        coords={"sample": np.arange(samples), "layer": list(LAYERS),
                "metric": ["resonance_energy_eV", "pvcr", "leakage_A_cm2@0.05V"]},
        attrs={"campaign_toml": 'name = "invented tolerance study"\n'},
    )
    if with_extras:
        ds.attrs.update({
            "window_min_resonance_energy_eV": 0.14, "window_max_resonance_energy_eV": 0.16,
            "yield_resonance_energy_eV": 0.905, "yield_ci_low_resonance_energy_eV": 0.873,
            "yield_ci_high_resonance_energy_eV": 0.93,
            "window_min_pvcr": 3.0, "yield_pvcr": 0.91,
            "window_max_leakage_A_cm2@0.05V": 1.0, "yield_leakage_A_cm2@0.05V": 0.98,
            "yield_all": 0.80, "confidence_level": 0.95,
        })
        ds["nominal"] = ("metric", [0.15, 4.0, 0.1])
    return ds


# ----------------------------------------------------------------------------- checks


@pytest.fixture(autouse=True)
def fast_rendering(monkeypatch):
    """Draw at a low resolution: the checks concern files and layout, not detail."""
    monkeypatch.setattr(plots, "_DPI", 60)


def assert_pngs(paths, out_dir, expected_names, min_width=400):
    """Every path is a readable PNG of sensible size and nothing else is left in out_dir."""
    assert [p.name for p in paths] == list(expected_names)
    for path in paths:
        assert path.parent == out_dir
        assert path.read_bytes()[:8] == PNG_MAGIC
        pixels = mpimg.imread(path)
        height, width = pixels.shape[:2]
        assert 0.9 * min_width <= width <= 4000 and 150 <= height <= 4000, (path.name, width, height)
        # a figure with real content: not a single flat colour
        assert float(np.ptp(pixels[..., :3])) > 0.5
    assert sorted(p.name for p in out_dir.iterdir()) == sorted(expected_names)




def test_band_diagram_positions_come_from_position_nm():
    ds = make_solution()
    positions = plots._coord_values(ds, ds["band_edge"], "position")
    assert positions[0] == -10.0 and positions[-1] == 24.5 and positions.size == ds.sizes["position"]


def test_solution_without_optional_parts_draws_transmission_only(tmp_path):
    ds = make_solution(with_states=False, with_current=False, with_band=False)
    ds = ds.drop_vars(["resonance_width"])
    paths = plots.plot_solution(ds, tmp_path)
    assert_pngs(paths, tmp_path, ["transmission.png"])


def test_solution_band_diagram_without_states_or_levels(tmp_path):
    ds = make_solution(with_states=False, with_current=False, position_coord=True)
    ds = ds.drop_vars(["resonance_energy", "resonance_width"])
    paths = plots.plot_solution(ds, tmp_path)
    assert_pngs(paths, tmp_path, ["band_diagram.png", "transmission.png"])


def test_solution_from_netcdf_draws_three_figures_at_print_resolution(tmp_path, monkeypatch):
    # strings and scalars come back from netCDF as other dtypes than they went in
    monkeypatch.setattr(plots, "_DPI", 150)
    path = tmp_path / "solution.nc"
    make_solution().to_netcdf(path)
    out_dir = tmp_path / "figures"
    with xr.open_dataset(path) as ds:
        paths = plots.plot_solution(ds, out_dir)
    assert_pngs(paths, out_dir, ["band_diagram.png", "transmission.png", "current_voltage.png"], min_width=1000)


@pytest.mark.parametrize("n_objectives", [1, 2])  # three: see the netCDF round trip
def test_campaign_full(tmp_path, n_objectives):
    front, trials = make_front_and_trials(n_objectives=n_objectives)
    paths = plots.plot_campaign(front, trials, tmp_path, best=3)
    assert_pngs(paths, tmp_path, ["pareto_front.png", "hypervolume.png", "best_designs.png"])


def test_campaign_without_optional_parts(tmp_path):
    front, trials = make_front_and_trials(n_objectives=2, with_extras=False)
    paths = plots.plot_campaign(front, trials, tmp_path, best=5)
    assert_pngs(paths, tmp_path, ["pareto_front.png", "best_designs.png"])


def test_campaign_without_trial_table(tmp_path):
    front, _ = make_front_and_trials(n_objectives=2)
    paths = plots.plot_campaign(front, None, tmp_path)
    assert_pngs(paths, tmp_path, ["pareto_front.png", "best_designs.png"])


def test_campaign_reads_goals_and_targets_from_the_stored_campaign_file():
    front, trials = make_front_and_trials(n_objectives=3)
    objectives = plots._Objectives(front, trials)
    assert objectives.targets == [None, 0.15, None]
    assert objectives.logs == [False, False, True]
    assert objectives.goals[0] == "maximize"
    assert objectives.as_metric == [True, True, True]
    # drawn in metric units, so the target line sits at the target itself
    assert objectives.target_line(1) == 0.15
    # the first objective is maximised: the leading design has the largest value
    values = objectives.values(front, "design")[:, 0]
    assert int(np.argmin(objectives.ranking_key(0, values))) == int(np.nanargmax(values))


def test_campaign_without_metric_variables_reads_objective_values_as_stored():
    front, trials = make_front_and_trials(n_objectives=3)
    front.attrs["objective_target_resonance_energy_eV"] = 0.15
    front, trials = front.drop_vars(LABELS), trials.drop_vars(LABELS)
    objectives = plots._Objectives(front, trials)
    assert objectives.as_metric == [False, False, False]
    # objective_value holds |E - 0.15| here: no target line, smallest distance ranks first
    assert objectives.target_line(1) is None
    assert objectives.axis_label(1).startswith("|resonance energy − target| (eV)")
    assert objectives.axis_label(2).startswith("log10 leakage at 0.05 V (A/cm²)")
    distance = objectives.values(front, "design")[:, 1]
    assert np.all(objectives.ranking_key(1, distance) == distance)


def test_metric_variable_accepts_the_netcdf3_safe_spelling():
    ds = xr.Dataset({"leakage_A_cm2_at_0p05V": (("design",), [1.0, 2.0])}, coords={"design": [4, 7]})
    assert plots._metric_variable(ds, "leakage_A_cm2@0.05V", "design").name == "leakage_A_cm2_at_0p05V"
    assert plots._metric_variable(ds, "pvcr", "design") is None
    ds["odd_name"] = ("design", [3.0, 4.0], {"metric_label": "pvcr"})
    assert plots._metric_variable(ds, "pvcr", "design").name == "odd_name"


def test_campaign_survives_a_netcdf_round_trip(tmp_path):
    front, trials = make_front_and_trials(n_objectives=3)
    front.to_netcdf(tmp_path / "front.nc")
    trials.to_netcdf(tmp_path / "trials.nc")
    out_dir = tmp_path / "figures"
    with xr.open_dataset(tmp_path / "front.nc") as f, xr.open_dataset(tmp_path / "trials.nc") as t:
        paths = plots.plot_campaign(f, t, out_dir)
    assert_pngs(paths, out_dir, ["pareto_front.png", "hypervolume.png", "best_designs.png"])


def test_tolerance_full(tmp_path):
    paths = plots.plot_tolerance(make_tolerance(), tmp_path)
    assert_pngs(paths, tmp_path, ["tolerance_yield.png", "tolerance_sensitivity.png"])


def test_tolerance_without_windows_or_sensitivity(tmp_path):
    ds = make_tolerance(with_extras=False).drop_vars("sensitivity")
    ds["pvcr"][:] = np.nan  # a metric no sample defines still gets its (empty) panel
    paths = plots.plot_tolerance(ds, tmp_path)
    assert_pngs(paths, tmp_path, ["tolerance_yield.png"])


def test_tolerance_attributes_survive_a_netcdf_round_trip(tmp_path):
    # attribute names carry the metric label verbatim, "@" and "." included
    make_tolerance().to_netcdf(tmp_path / "tolerance.nc")
    with xr.open_dataset(tmp_path / "tolerance.nc") as ds:
        assert plots._metric_value(ds, "yield", "leakage_A_cm2@0.05V") == pytest.approx(0.98)
        assert plots._metric_value(ds, "nominal", "pvcr") == pytest.approx(4.0)
        assert plots._tolerance_metrics(ds) == ["resonance_energy_eV", "pvcr", "leakage_A_cm2@0.05V"]


def test_metric_labels_carry_units():
    assert plots._metric_axis_label("leakage_A_cm2@0.05V") == "leakage at 0.05 V (A/cm²)"
    assert plots._metric_axis_label("resonance_energy_eV") == "resonance energy (eV)"
    assert plots._metric_axis_label("pvcr") == "peak-to-valley current ratio"


def test_failed_save_leaves_no_temporary_file(tmp_path, monkeypatch):
    def broken_savefig(self, fname, **kwargs):
        with open(fname, "wb") as handle:  # a partial file, as a crash mid-write would leave
            handle.write(PNG_MAGIC)
        raise OSError("disk full")

    monkeypatch.setattr(plots.Figure, "savefig", broken_savefig)
    with pytest.raises(OSError, match="disk full"):
        plots.plot_tolerance(make_tolerance(), tmp_path)
    assert list(tmp_path.iterdir()) == []


def test_existing_figure_is_replaced(tmp_path):
    (tmp_path / "transmission.png").write_bytes(b"stale")
    ds = make_solution(with_states=False, with_current=False, with_band=False)
    paths = plots.plot_solution(ds, tmp_path)
    assert paths[0].read_bytes()[:8] == PNG_MAGIC


def test_campaign_with_empty_front_and_history_variables(tmp_path):
    front, trials = make_front_and_trials(n_objectives=2)
    front = front.isel(design=slice(0, 0))
    finished = np.arange(1.0, 11.0)
    trials = trials.drop_vars("hypervolume").assign(
        history_finished=("history", finished), history_hypervolume=("history", np.sqrt(finished)))
    paths = plots.plot_campaign(front, trials, tmp_path)
    assert_pngs(paths, tmp_path, ["pareto_front.png", "hypervolume.png"])


def test_every_figure_carries_the_model_caution(tmp_path, monkeypatch):
    footers = []

    def recording_save(figure, out_dir, file_name):  # records instead of drawing: keeps the test fast
        footers.append(any(text.get_text() == plots.FOOTER for text in figure.texts))
        return out_dir / file_name

    monkeypatch.setattr(plots, "_save", recording_save)
    front, trials = make_front_and_trials(n_objectives=2)
    count = len(plots.plot_campaign(front, trials, tmp_path))
    count += len(plots.plot_tolerance(make_tolerance(), tmp_path))
    count += len(plots.plot_solution(make_solution(), tmp_path))
    assert footers == [True] * count and count == 8
    assert "does not replace wafer measurements" in plots.FOOTER


def test_trial_feasibility_follows_the_constraint_sign():
    # Optuna's convention: every constraint value <= 0 is feasible (common practice in Optuna)
    trials = xr.Dataset(
        {"state": ("trial", np.array(["COMPLETE", "COMPLETE", "FAIL", "COMPLETE"], dtype=object)),
         "constraint_value": (("trial", "constraint"), [[-1.0, 0.0], [0.5, -2.0], [np.nan, np.nan], [-0.1, -0.1]])},
        coords={"trial": np.arange(4)},
    )
    values = np.array([[1.0], [2.0], [np.nan], [3.0]])
    complete, feasible = plots._trial_masks(trials, values)
    assert complete.tolist() == [True, True, False, True]
    assert feasible[complete].tolist() == [True, False, True]
