"""Guard rails on input: no silent physics default, warnings for implausible values,
``--strict`` for pipelines, and clear answers to inputs that used to crash.

Every warning names the file, the key, the value and the usual range with its source.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import CAMPAIGNS, STACK, small_campaign, stack_file, tunnelsmith, write_campaign

from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.inputs.reader import load

def warnings_of(tmp_path, text: str) -> list[str]:
    return list(load(stack_file(tmp_path, text)).located_warnings)


def test_a_usual_stack_has_no_warning(tmp_path):
    assert warnings_of(tmp_path, STACK) == []


def test_a_missing_temperature_is_announced_not_silent(tmp_path):
    path = stack_file(tmp_path, STACK.replace("temperature_K = 300.0\n", ""))
    spec = load(path)
    assert spec.temperature_K == 300.0
    (warning,) = spec.located_warnings
    assert warning.startswith(f"{path}: temperature_K: ") and "computed at 300 K" in warning
    result = tunnelsmith("solve", path, "--out", tmp_path / "out", cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    assert result.stderr.splitlines()[0].startswith(f"warning: {path}: temperature_K")
    import xarray as xr

    with xr.open_dataset(tmp_path / "out" / "solution.nc") as solution:
        assert solution.attrs["temperature_K"] == 300.0


@pytest.mark.parametrize("edit,key,words", [
    (("doping_cm3 = 2e18", "doping_cm3 = 1e24"), "emitter.doping_cm3", "1e+24 is outside the usual 1e+14 to 1e+20"),
    (("temperature_K = 300.0", "temperature_K = 0.5"), "temperature_K", "Vurgaftman"),
    (("thickness_ml = 16", "thickness_ml = 200"), 'layer "well".thickness', "more than the 50 nm"),
    (("points = 201", "points = 201\n\n[bias]\nfrom_V = 0.0\nto_V = 500.0\nsteps = 11"), "bias", "beyond +-5 V"),
])
def test_implausible_values_warn_with_key_value_and_range(tmp_path, edit, key, words):
    text = STACK.replace(*edit, 1)
    assert text != STACK
    (warning,) = [w for w in warnings_of(tmp_path, text) if f": {key}" in w]
    assert words in warning and ("common practice" in warning or "Vurgaftman" in warning)


def test_a_target_outside_the_energy_window_and_an_oversized_budget_warn(tmp_path):
    text = small_campaign("warned", target_eV=0.9, trials=5000)
    spec = load(write_campaign(tmp_path, text))
    assert any("objective[1].target" in w and "outside the energy window" in w for w in spec.located_warnings)
    assert any("search.trials" in w and "distinct designs" in w for w in spec.located_warnings)


def test_strict_turns_a_warning_into_exit_2_and_without_it_exit_0(tmp_path):
    path = stack_file(tmp_path, STACK.replace("doping_cm3 = 2e18", "doping_cm3 = 1e24", 1))
    relaxed = tunnelsmith("check", path, cwd=tmp_path)
    assert relaxed.returncode == 0, relaxed.stderr
    assert "1e+24" in relaxed.stdout
    strict = tunnelsmith("check", path, "--strict", cwd=tmp_path)
    assert strict.returncode == 2 and "Traceback" not in strict.stderr
    assert f"{path}: emitter.doping_cm3:" in strict.stderr and "without --strict" in strict.stderr
    solve = tunnelsmith("solve", path, "--strict", "--out", tmp_path / "o", cwd=tmp_path)
    assert solve.returncode == 2 and not (tmp_path / "o").exists()
    clean = tunnelsmith("check", stack_file(tmp_path, STACK, "clean.toml"), "--strict", cwd=tmp_path)
    assert clean.returncode == 0, clean.stderr


def test_an_absurd_temperature_is_refused(tmp_path):
    with pytest.raises(InputError) as caught:
        load(stack_file(tmp_path, STACK.replace("temperature_K = 300.0", "temperature_K = 1e308")))
    assert caught.value.key == "temperature_K"


@pytest.mark.parametrize("command", ["solve", "tolerance"])
def test_out_naming_an_existing_file_is_a_clear_error(tmp_path, command):
    target = stack_file(tmp_path)
    taken = tmp_path / "taken"
    taken.write_text("not a directory\n", encoding="utf-8")
    result = tunnelsmith(command, target, "--out", taken, cwd=tmp_path)
    assert result.returncode == 2, result.stderr
    assert "Traceback" not in result.stderr and "--out" in result.stderr and "existing file" in result.stderr
    assert taken.read_text(encoding="utf-8") == "not a directory\n"


def test_a_huge_timeout_is_a_clear_error(tmp_path):
    result = tunnelsmith("optimize", CAMPAIGNS / "demo.toml", "--timeout", "99999999999999999999h",
                         "--out", tmp_path / "run", cwd=tmp_path)
    assert result.returncode == 2, result.stderr
    assert "Traceback" not in result.stderr and "--timeout" in result.stderr


def test_slice_nm_drives_the_current_and_every_metric_not_only_the_transmission(tmp_path):
    """[model] slice_nm changed the stored transmission but not the current or any metric."""
    from tunnelsmith.optimize.results.solution import solve_dataset

    iv = STACK + "\n[bias]\nfrom_V = 0.0\nto_V = 0.6\nsteps = 13\n"
    coarse = solve_dataset(load(stack_file(tmp_path, iv + "\n[model]\nslice_nm = 2.0\n", "coarse.toml")))
    fine = solve_dataset(load(stack_file(tmp_path, iv + "\n[model]\nslice_nm = 0.05\n", "fine.toml")))
    # A 2 nm slice turns each sloped barrier into one flat step; 0.05 nm follows the slope.
    biased = coarse["bias"] > 0
    assert not np.allclose(coarse["transmission"][biased], fine["transmission"][biased], rtol=1e-3)
    assert not np.allclose(coarse["current_density"][biased], fine["current_density"][biased], rtol=1e-3)
    assert not np.isclose(float(coarse["peak_current_A_cm2"]), float(fine["peak_current_A_cm2"]), rtol=1e-3)
    # The metric and the stored curve come from the same computation: the peak current is
    # the stored current near the peak voltage (the metric refines the peak between biases).
    at_peak = fine["current_density"].sel(bias=float(fine["peak_voltage_V"]), method="nearest")
    assert float(fine["peak_current_A_cm2"]) == pytest.approx(float(at_peak), rel=0.05)


def _pair(tmp_path, contact: str, barrier: str, nonparabolic: bool, name: str) -> list[str]:
    text = (f'temperature_K = 300.0\n[emitter]\nmaterial = "{contact}"\ndoping_cm3 = 1e18\n'
            f'[collector]\nmaterial = "{contact}"\ndoping_cm3 = 1e18\n'
            f'[[layer]]\nname = "b"\nmaterial = "{barrier}"\nthickness_ml = 8\n'
            f"[model]\nnonparabolic = {'true' if nonparabolic else 'false'}\n")
    return [w for w in load(stack_file(tmp_path, text, name)).located_warnings if "pair" in w]


def test_broken_gap_and_staggered_neighbours_warn_in_nonparabolic_mode(tmp_path):
    # InAs/GaSb is the textbook broken-gap (type III) pair and InP/In0.52Al0.48As a
    # staggered (type II) one; In0.53Ga0.47As/AlAs is straddling (type I). Vurgaftman,
    # Meyer & Ram-Mohan, J. Appl. Phys. 89, 5815 (2001), sec. IV.
    (broken,) = _pair(tmp_path, "InAs", "GaSb", True, "broken.toml")[:1]
    assert 'layer "b".material' in broken and "broken-gap (type III)" in broken
    staggered = _pair(tmp_path, "InP", "In0.52Al0.48As", True, "staggered.toml")
    assert staggered and "staggered (type II)" in staggered[0]
    assert _pair(tmp_path, "In0.53Ga0.47As", "AlAs", True, "straddling.toml") == []
    assert _pair(tmp_path, "InAs", "GaSb", False, "parabolic.toml") == []


def test_tolerance_samples_on_the_command_line_obey_the_file_bounds(tmp_path):
    from tunnelsmith.optimize.inputs import limits

    stack = CAMPAIGNS / "filter_tolerance.toml"
    result = tunnelsmith("tolerance", stack, "--samples", str(10 * limits.MAX_TOLERANCE_SAMPLES), "--out",
                         tmp_path / "t", cwd=tmp_path)
    assert result.returncode == 2 and "--samples" in result.stderr and "Traceback" not in result.stderr
    assert not (tmp_path / "t" / "tolerance.nc").exists()
    # The memory estimate counts the command-line samples: 10^7 samples do not fit in 1 GiB.
    with pytest.raises(InputError):
        limits.check_memory(load(stack), samples=limits.MAX_TOLERANCE_SAMPLES, available_bytes=2**30)
    limits.check_memory(load(stack), samples=1000, available_bytes=2**30)
