"""The command line end to end: solve, check, materials, and bad input."""


import numpy as np
import pytest
import xarray as xr

from conftest import CAMPAIGNS, tunnelsmith  # noqa: E402  (the shared test toolkit)


SMALL_STACK = """
# Invented test stack: GaAs / Al0.3Ga0.7As double barrier.
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
thickness_nm = 3.0
[[layer]]
name = "well"
material = "GaAs"
thickness_ml = 18
[[layer]]
name = "barrier_out"
like = "barrier_in"
[bias]
from_V = 0.0
to_V = 0.5
steps = 26
[energy]
from_eV = 0.0
to_eV = 0.4
points = 801
"""


@pytest.fixture(scope="module")
def solved(tmp_path_factory):
    folder = tmp_path_factory.mktemp("solve")
    stack = folder / "db.toml"
    stack.write_text(SMALL_STACK)
    result = tunnelsmith("solve", stack, "--out", folder / "out")
    assert result.returncode == 0, result.stderr
    return folder / "out", result


def test_solve_writes_solution_and_plots(solved):
    out, result = solved
    assert (out / "solution.nc").exists()
    assert sorted(p.suffix for p in out.glob("*.png")), "solve draws plots"
    assert not list(out.glob(".*part")), "no temporary files left"
    assert "pvcr" in result.stdout and "solution.nc" in result.stdout


def test_solution_layout_and_units(solved):
    out, _ = solved
    with xr.open_dataset(out / "solution.nc") as ds:
        assert ds.transmission.dims == ("bias", "energy")
        assert ds.current_density.dims == ("bias",)
        assert ds.resonance_energy.dims == ("bias", "level")
        assert ds.energy.attrs["units"] == "eV" and ds.bias.attrs["units"] == "V"
        for name, variable in ds.data_vars.items():
            assert "long_name" in variable.attrs, name
        assert "SMALL_STACK" not in ds.attrs["campaign_toml"] and "barrier_in" in ds.attrs["campaign_toml"]
        assert ds.attrs["software_version"]
        # J(0) = 0 exactly (no net supply at zero bias: Tsu–Esaki formula).
        assert ds.current_density.sel(bias=0.0).item() == 0.0
        # The first level at zero bias is the resonance_energy_eV metric.
        assert ds.resonance_energy_eV.item() == pytest.approx(ds.resonance_energy.isel(bias=0, level=0).item())
        assert np.all((ds.transmission.values >= 0) & (ds.transmission.values <= 1 + 1e-12))


def test_solve_default_output_directory(tmp_path):
    stack = tmp_path / "my_stack.toml"
    stack.write_text(SMALL_STACK.replace("steps = 26", "steps = 1"))
    result = tunnelsmith("solve", stack, cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    assert (tmp_path / "runs" / "my_stack" / "solution.nc").exists()


@pytest.mark.parametrize("name", ["rtd_ingaas_alas.toml", "triple_barrier_gaas.toml"])
def test_example_stacks_are_valid(name):
    result = tunnelsmith("check", CAMPAIGNS / name)
    assert result.returncode == 0, result.stderr
    assert "layers" in result.stdout


def test_materials_lists_sources_at_a_temperature():
    result = tunnelsmith("materials", "--temperature", "77")
    assert result.returncode == 0
    assert "77 K" in result.stdout and "Vurgaftman" in result.stdout
    for name in ("GaAs", "AlAs", "InAs", "InP", "GaSb", "AlSb", "In0.53Ga0.47As", "In0.52Al0.48As"):
        assert name in result.stdout


@pytest.mark.parametrize(
    "text, key",
    [
        ("", None),
        ("temperature_K = -4\n", "temperature_K"),
        ('[[layer]]\nname = "x"\nmaterial = "Unobtanium"\nthickness_nm = 1\n', "material"),
        ("temperature_K = = 3\n", None),
    ],
)
def test_bad_input_exits_2_without_traceback(tmp_path, text, key):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    for command in ("solve", "check"):
        result = tunnelsmith(command, path)
        assert result.returncode == 2
        assert "Traceback" not in result.stderr
        assert "bad.toml" in result.stderr and "Fix" in result.stderr
        if key:
            assert key in result.stderr


def test_missing_file_and_bad_timeout(tmp_path):
    result = tunnelsmith("solve", tmp_path / "nope.toml")
    assert result.returncode == 2 and "Traceback" not in result.stderr
    result = tunnelsmith("optimize", CAMPAIGNS / "demo.toml", "--timeout", "soon", "--out", tmp_path / "r")
    assert result.returncode == 2 and "--timeout" in result.stderr


def test_duration_parser():
    from tunnelsmith.optimize.cli import parse_duration_s

    assert parse_duration_s("8h") == 8 * 3600
    assert parse_duration_s("1h30m") == 5400
    assert parse_duration_s("90") == 90
