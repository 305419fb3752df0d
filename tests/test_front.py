"""Pareto fronts, hypervolume and the netCDF outputs of campaigns."""

from __future__ import annotations

import shutil
import signal

import numpy as np
import optuna
import pytest
import xarray as xr

from tunnelsmith.optimize.model import objectives
from tunnelsmith.optimize.results.front import HYPERVOLUME_REFERENCE, build_datasets
from tunnelsmith.optimize.search.pareto import hypervolume, merge_front, nondominated_mask
from tunnelsmith.optimize.io import netcdf_name
from tunnelsmith.optimize.commands.front import rebuild_front
from tunnelsmith.optimize.inputs.reader import load
from tunnelsmith.optimize.model.stack import DesignBatch, split_material
from conftest import (
    CONTACTS,
    finished,
    small_campaign,
    start,
    stored_trials,
    tunnelsmith,
    wait_for_finished,
    write_campaign,
)


def brute_force_front(points: np.ndarray) -> np.ndarray:
    """The definition, one pair at a time."""
    keep = []
    for i, p in enumerate(points):
        dominated = any(np.all(q <= p) and np.any(q < p) for j, q in enumerate(points) if j != i)
        keep.append(not dominated and np.all(np.isfinite(p)))
    return np.array(keep)


@pytest.mark.parametrize("m", [1, 2, 3, 4])
def test_nondominated_mask_matches_the_definition(m):
    rng = np.random.default_rng(m)
    points = rng.integers(0, 6, size=(300, m)).astype(float)  # many ties and duplicates
    points[5] = np.nan
    np.testing.assert_array_equal(nondominated_mask(points, chunk=37), brute_force_front(points))


def test_merge_front_equals_the_front_of_the_union():
    rng = np.random.default_rng(0)
    points = rng.random((400, 3))
    front = np.empty((0, 3))
    for block in np.array_split(points, 13):
        front = merge_front(front, block)
    expected = points[nondominated_mask(points)]
    assert sorted(map(tuple, front)) == sorted(map(tuple, expected))
    assert len(merge_front(front, front[:3])) == len(front)  # a repeated point is not added twice


def test_hypervolume_exact_small_cases():
    # Two points in 2-D: the union of two rectangles, by hand.
    assert hypervolume(np.array([[1.0, 3.0], [2.0, 1.0]]), [4.0, 4.0]) == pytest.approx(3 * 1 + 2 * 2)
    # One objective: the distance to the reference.
    assert hypervolume(np.array([[0.25], [0.5]]), [1.0]) == pytest.approx(0.75)
    # A point outside the reference box adds nothing; a dominated one neither.
    assert hypervolume(np.array([[0.5, 0.5, 0.5], [2.0, 0.0, 0.0], [0.6, 0.6, 0.6]]), 1.0) == pytest.approx(0.125)
    # Three boxes from the origin corner: inclusion-exclusion.
    a, b = np.array([0.2, 0.6, 0.5]), np.array([0.6, 0.2, 0.3])
    union = np.prod(1 - a) + np.prod(1 - b) - np.prod(1 - np.maximum(a, b))
    assert hypervolume(np.array([a, b]), 1.0) == pytest.approx(union)


@pytest.mark.parametrize("m", [3, 4])
def test_hypervolume_against_monte_carlo(m):
    rng = np.random.default_rng(10 + m)
    points = rng.random((12, m))
    samples = rng.random((200_000, m))
    dominated = np.zeros(len(samples), bool)
    for p in points:
        dominated |= np.all(samples >= p, axis=1)
    estimate, error = dominated.mean(), np.sqrt(dominated.mean() * (1 - dominated.mean()) / len(samples))
    assert hypervolume(points, 1.0) == pytest.approx(estimate, abs=5 * error)


def test_netcdf_names_are_valid_and_distinct():
    labels = ["leakage_A_cm2@0.05V", "leakage_A_cm2@-0.05V", "leakage_A_cm2@0.5V", "pvcr", "nominal_pvcr"]
    names = [netcdf_name(label) for label in labels]
    assert names[0] == "leakage_A_cm2_at_0p05V"
    assert len(set(names)) == len(names)
    assert all(name.replace("_", "a").isalnum() and not name[0].isdigit() for name in names)


# --------------------------------------------------------------------------------------
# Front files of a real campaign
# --------------------------------------------------------------------------------------


IV_CAMPAIGN = f"""{CONTACTS}
[campaign]
name = "iv"

[[layer]]
name = "barrier_in"
material = "AlAs"
thickness_ml = {{ min = 5, max = 8 }}

[[layer]]
name = "well"
material = {{ choices = ["In0.53Ga0.47As", "InAs"] }}
thickness_ml = {{ min = 12, max = 20 }}

[[layer]]
name = "barrier_out"
like = "barrier_in"

[bias]
from_V = 0.0
to_V = 0.8
steps = 9

[energy]
from_eV = 0.0
to_eV = 0.6
points = 201

[[objective]]
metric = "resonance_energy_eV"
target = 0.15

[[objective]]
metric = "leakage_A_cm2"
at_bias_V = 0.1
goal = "minimize"
log = true

[search]
trials = 24
batch = 12
seed = 2
"""


@pytest.fixture(scope="module")
def zero_bias_run(tmp_path_factory):
    directory = tmp_path_factory.mktemp("front")
    path = write_campaign(directory, small_campaign(trials=96))
    result = tunnelsmith("optimize", path, "--out", directory / "run", cwd=directory)
    assert result.returncode == 0, result.stderr
    return directory, load(path), result


def fresh_evaluation(spec, front: xr.Dataset) -> dict[str, np.ndarray]:
    """Metrics of the front designs, recomputed from the stored layers alone."""
    split = [[split_material(str(name)) for name in row] for row in front["material"].values]
    base = np.array([[b for b, _ in row] for row in split], dtype=object)
    fraction = np.where(np.isnan(front["fraction"].values), [[f for _, f in row] for row in split],
                        front["fraction"].values)
    batch = DesignBatch(tuple(spec.layers[j].name for j in range(len(spec.layers))), base, fraction,
                        front["thickness_nm"].values)
    return objectives.metric_values(spec, batch)[0]


def test_front_is_nondominated_and_its_metrics_are_reproducible(zero_bias_run):
    directory, spec, _ = zero_bias_run
    front = xr.load_dataset(directory / "run" / "front.nc")
    trials = xr.load_dataset(directory / "run" / "trials.nc")
    assert front.sizes["design"] >= 1
    # Non-dominated among themselves and against every feasible complete trial.
    signs = np.where(front["objective_direction"].values == "maximize", -1.0, 1.0)
    ours = front["objective_value"].values * signs
    everyone = trials["objective_value"].values[trials["feasible"].values == 1] * signs
    assert nondominated_mask(ours).all()
    for point in ours:
        assert not np.any(np.all(everyone <= point, axis=1) & np.any(everyone < point, axis=1))
    # ... and it holds every non-dominated point of the trial table (each design once).
    expected = everyone[brute_force_front(everyone)]
    assert {tuple(p) for p in ours} == {tuple(p) for p in expected}
    assert len({tuple(p) for p in ours}) == len(ours) or front.sizes["design"] == len(
        {tuple(row) for row in front["thickness_nm"].values})
    fresh = fresh_evaluation(spec, front)
    for label, values in fresh.items():
        np.testing.assert_allclose(front[netcdf_name(label)].values, values, rtol=1e-9, atol=1e-12)
    recomputed = objectives.objectives_from_metrics(spec, fresh).objectives
    np.testing.assert_allclose(front["objective_value"].values, recomputed, rtol=1e-9, atol=1e-12)


def test_front_layout_units_and_attributes(zero_bias_run):
    directory, spec, result = zero_bias_run
    front = xr.load_dataset(directory / "run" / "front.nc")
    trials = xr.load_dataset(directory / "run" / "trials.nc")
    assert front["objective_value"].dims == ("design", "objective")
    for name in ("thickness_nm", "material", "fraction", "monolayers"):
        assert front[name].dims == ("design", "layer")
    assert front["transmission"].dims == ("design", "energy")
    assert "bias" not in front.dims and "current_density" not in front  # zero-bias campaign
    assert list(front["layer"].values) == [layer.name for layer in spec.layers]
    assert list(front["objective"].values) == objectives.objective_labels(spec)
    for ds in (front, trials):
        for name, variable in ds.variables.items():
            assert "units" in variable.attrs and "long_name" in variable.attrs, name
        assert ds.attrs["campaign_toml"] == spec.text
        assert ds.attrs["sampler"] == "nsga2" and ds.attrs["n_complete_trials"] >= 1
        assert 0.0 < ds.attrs["hypervolume"] <= HYPERVOLUME_REFERENCE ** 2
        for key in ("software_version", "created_utc", "hypervolume_reference_point"):
            assert key in ds.attrs
    # Tied layers stay equal; a whole number of monolayers where thickness is searched in ml.
    layers = list(front["layer"].values)
    np.testing.assert_array_equal(front["thickness_nm"].values[:, layers.index("barrier_in")],
                                  front["thickness_nm"].values[:, layers.index("barrier_out")])
    ml = front["monolayers"].values[:, layers.index("well")]
    np.testing.assert_allclose(ml, np.round(ml), atol=1e-9)
    # Trial table: every trial once, states as Optuna names them, the history ends at the front's volume.
    assert trials.sizes["trial"] == len(set(trials["trial"].values)) == trials.attrs["n_trials"]
    assert set(trials["state"].values) <= {"COMPLETE", "FAIL", "RUNNING", "WAITING", "PRUNED"}
    assert trials["history_finished"].values[-1] == trials.attrs["n_finished_trials"] == 96
    assert trials["history_hypervolume"].values[-1] == pytest.approx(front.attrs["hypervolume"])
    assert np.all(np.diff(trials["history_hypervolume"].values) >= -1e-12)
    # The terminal summary lists layers in monolayers and nm.
    assert "well" in result.stdout and " ml " in result.stdout and " nm" in result.stdout


def test_netcdf_round_trip(zero_bias_run, tmp_path):
    directory, spec, _ = zero_bias_run
    storage = optuna.storages.JournalStorage(optuna.storages.journal.JournalFileBackend(
        str(directory / "run" / "campaign.journal")))
    study = optuna.load_study(study_name="small", storage=storage)
    front, trials = build_datasets(study, spec)
    for name, ds in (("front", front), ("trials", trials)):
        ds.to_netcdf(tmp_path / f"{name}.nc", engine="netcdf4")
        back = xr.load_dataset(tmp_path / f"{name}.nc")
        assert set(back.variables) == set(ds.variables)
        for key in ds.variables:
            a, b = ds[key].values, back[key].values
            if a.dtype.kind in "OUS":
                assert [str(x) for x in a.ravel()] == [str(x) for x in b.ravel()], key
            else:
                np.testing.assert_array_equal(a, b, err_msg=key)
            assert back[key].attrs == ds[key].attrs, key
        assert back.attrs == ds.attrs


def test_rebuild_from_the_storage_alone(zero_bias_run, tmp_path):
    directory, _, _ = zero_bias_run
    copy = tmp_path / "copy"
    shutil.copytree(directory / "run", copy)
    for name in ("front.nc", "trials.nc", "campaign.toml"):
        (copy / name).unlink()
    assert rebuild_front(copy, quiet=True) == 0
    original = xr.load_dataset(directory / "run" / "front.nc")
    rebuilt = xr.load_dataset(copy / "front.nc")
    np.testing.assert_array_equal(original["design"].values, rebuilt["design"].values)
    np.testing.assert_allclose(original["transmission"].values, rebuilt["transmission"].values)
    assert (copy / "campaign.toml").read_text() == original.attrs["campaign_toml"]


def test_front_command_while_a_campaign_runs(tmp_path):
    path = write_campaign(tmp_path, small_campaign(trials=100000))
    run_dir = tmp_path / "run"
    process = start("optimize", path, "--out", run_dir, "--quiet", cwd=tmp_path)
    try:
        wait_for_finished(run_dir, "small", 32, process)
        result = tunnelsmith("front", run_dir, "--quiet", cwd=tmp_path)
        assert result.returncode == 0, result.stderr
        trials = xr.load_dataset(run_dir / "trials.nc")
        assert trials.attrs["n_finished_trials"] >= 32
        assert process.poll() is None  # the campaign was not disturbed
    finally:
        process.send_signal(signal.SIGINT)
        process.communicate(timeout=120)
    assert process.returncode == 130
    assert len(finished(stored_trials(run_dir, "small"))) >= 32


def test_iv_campaign_front_carries_currents(tmp_path):
    path = write_campaign(tmp_path, IV_CAMPAIGN)
    result = tunnelsmith("optimize", path, "--out", tmp_path / "run", "--quiet", cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    front = xr.load_dataset(tmp_path / "run" / "front.nc")
    assert front["current_density"].dims == ("design", "bias")
    np.testing.assert_allclose(front["bias"].values, np.linspace(0.0, 0.8, 9))
    assert front["current_density"].attrs["units"] == "A cm-2"
    label = "leakage_A_cm2@0.1V"
    assert front[netcdf_name(label)].attrs["metric_label"] == label
    assert np.all(np.isfinite(front["current_density"].values[:, 1:]))


def test_the_sorted_nondominated_mask_matches_the_definition_on_ties_and_gaps():
    """The sort-based mask (any number of objectives) against the pairwise definition."""
    from tunnelsmith.optimize.search.pareto import nondominated_mask

    rng = np.random.default_rng(11)
    for m in (1, 2, 3, 4):
        for case in range(25):
            # Small integer grids make many exact ties and repeated points.
            points = rng.integers(0, 4, size=(int(rng.integers(0, 80)), m)).astype(float)
            if len(points) and case % 4 == 0:
                points[int(rng.integers(0, len(points)))] = np.nan
            for chunk in (3, 1024):
                np.testing.assert_array_equal(nondominated_mask(points, chunk=chunk), brute_force_front(points))
