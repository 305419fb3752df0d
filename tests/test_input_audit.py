"""Audit of the input reader: absurd values, hostile files and run sizes are refused
with an InputError (exit status 2) that names the file, the key, the value and a bound
with its reason, before any physics runs.

Covers :mod:`tunnelsmith.optimize.inputs.reader` (file reading, TOML parsing, value
bounds) and :mod:`tunnelsmith.optimize.inputs.limits` (hard bounds on counts and the
memory estimate of a run).
"""

from __future__ import annotations

import os
import stat
import threading
from pathlib import Path

import pytest
from conftest import CAMPAIGNS, small_campaign, tunnelsmith, write_campaign
from conftest import STACK as GAAS_STACK
from conftest import stack_file as write_stack_file
from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.inputs.reader import load

DATA = Path(__file__).parent / "data"

# The shared invented GaAs / Al0.3Ga0.7As double barrier, with an I–V sweep.
STACK = GAAS_STACK + "\n[bias]\nfrom_V = 0.0\nto_V = 0.5\nsteps = 11\n"


def stack_file(tmp_path: Path, text: str = STACK, name: str = "stack.toml") -> Path:
    return write_stack_file(tmp_path, text, name)


def refused(path) -> InputError:
    """The InputError that loading ``path`` raises (fails the test if it loads)."""
    with pytest.raises(InputError) as info:
        load(path)
    return info.value


def refused_text(tmp_path: Path, text: str) -> InputError:
    return refused(stack_file(tmp_path, text))


def load_within(path, seconds: float = 10.0):
    """``load(path)`` in a daemon thread: the result or exception, or a failure when it
    has not returned after ``seconds`` (a read that blocks on a FIFO or never ends)."""
    outcome: dict = {}

    def run():
        try:
            outcome["spec"] = load(path)
        except BaseException as error:  # handed to the test thread, which judges it
            outcome["error"] = error

    worker = threading.Thread(target=run, daemon=True)
    worker.start()
    worker.join(seconds)
    assert not worker.is_alive(), f"load({path}) did not return within {seconds} s"
    return outcome


def assert_one_paragraph(error: InputError, path) -> None:
    text = str(error)
    assert text.startswith(str(path)) and "Fix:" in text and "\n" not in text


# --------------------------------------------------------------------------- tolerance sigmas


@pytest.mark.parametrize("key,value,bound,reason", [
    ("thickness_sigma_ml", "1e308", "5", "thickness itself is unknown"),
    ("thickness_sigma_ml", "5.5", "5", "thickness itself is unknown"),
    ("growth_rate_sigma", "1e308", "0.5", "negative"),
    ("growth_rate_sigma", "0.75", "0.5", "negative"),
    ("fraction_sigma", "1e308", "0.1", "composition itself is unknown"),
    ("fraction_sigma", "0.3", "0.1", "composition itself is unknown"),
])
def test_absurd_growth_sigmas_are_refused_with_bound_and_reason(tmp_path, key, value, bound, reason):
    path = stack_file(tmp_path, STACK + f"\n[tolerance]\n{key} = {value}\n")
    error = refused(path)
    assert error.key == f"tolerance.{key}"
    assert f"{float(value):g}" in error.problem and bound in error.problem and reason in error.problem
    assert_one_paragraph(error, path)


def test_the_largest_sensible_sigmas_still_load(tmp_path):
    spec = load(stack_file(tmp_path, STACK + "\n[tolerance]\nthickness_sigma_ml = 5\ngrowth_rate_sigma = 0.5\n"
                           "fraction_sigma = 0.1\n"))
    assert (spec.tolerance.thickness_sigma_ml, spec.tolerance.growth_rate_sigma,
            spec.tolerance.fraction_sigma) == (5.0, 0.5, 0.1)


def test_absurd_sigma_is_exit_2_on_the_command_line(tmp_path):
    path = stack_file(tmp_path, STACK + "\n[tolerance]\nthickness_sigma_ml = 1e308\n")
    result = tunnelsmith("check", path, cwd=tmp_path, timeout=120)
    assert result.returncode == 2 and "Traceback" not in result.stderr
    assert "tolerance.thickness_sigma_ml" in result.stderr


# --------------------------------------------------------------------------- zero doping


def test_zero_doping_of_an_iv_stack_is_refused_naming_the_fermi_level(tmp_path):
    path = stack_file(tmp_path, STACK.replace("doping_cm3 = 2e18", "doping_cm3 = 0", 1))
    error = refused(path)
    assert error.key == "emitter.doping_cm3"
    assert "Fermi level" in error.problem and "Tsu–Esaki" in error.problem
    assert "doping_cm3 = 2e18" in error.fix and "steps = 1" in error.fix


def test_zero_doping_of_an_iv_campaign_is_refused(tmp_path):
    text = (STACK.replace("doping_cm3 = 2e18", "doping_cm3 = 0")
            .replace("thickness_ml = 16", "thickness_ml = { min = 12, max = 20 }")
            + '\n[[objective]]\nmetric = "pvcr"\ngoal = "maximize"\n')
    error = refused_text(tmp_path, text)
    assert error.key == "emitter.doping_cm3" and "Fermi level" in error.problem
    assert "zero-bias" in error.fix


def test_zero_doping_of_a_zero_bias_campaign_is_accepted(tmp_path):
    # Transmission and levels at zero bias do not depend on the doping: nothing to refuse.
    text = small_campaign("undoped").replace("doping_cm3 = 2e18", "doping_cm3 = 0")
    spec = load(write_campaign(tmp_path, text))
    assert spec.emitter.doping_cm3 == 0.0 and not spec.needs_iv


@pytest.mark.parametrize("command", ["solve", "optimize"])
def test_zero_doping_is_exit_2_without_traceback_in_solve_and_optimize(tmp_path, command):
    text = STACK.replace("doping_cm3 = 2e18", "doping_cm3 = 0")
    if command == "optimize":
        text = (text.replace("thickness_ml = 16", "thickness_ml = { min = 12, max = 20 }")
                + '\n[[objective]]\nmetric = "pvcr"\ngoal = "maximize"\n\n[search]\ntrials = 4\nbatch = 4\n')
    path = stack_file(tmp_path, text)
    result = tunnelsmith(command, path, "--out", tmp_path / "out", cwd=tmp_path, timeout=120)
    assert result.returncode == 2, result.stderr
    assert "Traceback" not in result.stderr and "doping_cm3" in result.stderr and "Fermi level" in result.stderr


def test_zero_doping_of_a_stack_without_sweep_solves(tmp_path):
    text = STACK.replace("doping_cm3 = 2e18", "doping_cm3 = 0").replace("steps = 11", "steps = 1")
    path = stack_file(tmp_path, text)
    result = tunnelsmith("solve", path, "--out", tmp_path / "out", cwd=tmp_path, timeout=120)
    assert result.returncode == 0, result.stderr
    assert (tmp_path / "out" / "solution.nc").exists()


# --------------------------------------------------------------------------- file encoding and TOML structure


def test_a_utf8_byte_order_mark_is_accepted(tmp_path):
    plain = load(stack_file(tmp_path, STACK, "plain.toml"))
    path = tmp_path / "bom.toml"
    path.write_bytes(b"\xef\xbb\xbf" + STACK.encode("utf-8"))
    spec = load(path)
    assert spec.layers == plain.layers and spec.bias == plain.bias and spec.energy == plain.energy
    assert not spec.text.startswith("\ufeff")


@pytest.mark.parametrize("codec", ["utf-16", "utf-16-le", "utf-16-be"])
def test_a_utf16_file_is_named_as_such(tmp_path, codec):
    path = tmp_path / "wide.toml"
    data = STACK.encode(codec)
    if codec != "utf-16":  # the plain codec writes its own byte-order mark
        data = ("\ufeff" + STACK).encode(codec)
    path.write_bytes(data)
    error = refused(path)
    assert "UTF-16" in error.problem and "UTF-8" in error.fix


@pytest.mark.parametrize("nested", [
    "a = " + "[" * 10_000 + "]" * 10_000,
    "a = " + "{ b = " * 10_000 + "1" + " }" * 10_000,
    "a = " + "[{ b = " * 5_000 + "1" + " }]" * 5_000,
])
def test_deep_nesting_is_an_error_naming_the_file(tmp_path, nested):
    path = stack_file(tmp_path, nested + "\n")
    error = refused(path)
    assert error.key is None and "nest" in error.problem
    assert_one_paragraph(error, path)


def test_deep_nesting_is_exit_2_on_the_command_line(tmp_path):
    path = stack_file(tmp_path, "a = " + "[" * 10_000 + "]" * 10_000 + "\n")
    result = tunnelsmith("check", path, cwd=tmp_path, timeout=120)
    assert result.returncode == 2 and "Traceback" not in result.stderr and str(path) in result.stderr


def test_an_integer_too_long_for_python_is_refused(tmp_path):
    # TOML integers have no length limit, Python's int() parser has one (4300 digits).
    error = refused_text(tmp_path, STACK.replace("points = 201", "points = " + "9" * 5000))
    assert error.key is None and "digits" in error.problem


@pytest.mark.parametrize("key,old", [
    ("energy.to_eV", "to_eV = 0.6"),
    ("energy.points", "points = 201"),
    ('layer "well".thickness_ml', "thickness_ml = 16"),
])
def test_an_integer_beyond_the_float_range_is_refused_with_its_key(tmp_path, key, old):
    name = old.split(" = ")[0]
    error = refused_text(tmp_path, STACK.replace(old, f"{name} = 1{'0' * 400}"))
    assert error.key == key and "1e+400" in error.problem


# --------------------------------------------------------------------------- files that are not stack files


def test_a_fifo_is_refused_without_waiting_for_a_writer(tmp_path):
    path = tmp_path / "pipe.toml"
    os.mkfifo(path)
    outcome = load_within(path)
    error = outcome.get("error")
    assert isinstance(error, InputError) and "FIFO" in error.problem, outcome


def test_a_character_device_is_refused_without_reading_it(tmp_path):
    outcome = load_within("/dev/zero")
    error = outcome.get("error")
    assert isinstance(error, InputError) and "character device" in error.problem, outcome


def test_a_huge_file_is_refused_without_reading_it(tmp_path):
    # A sparse file: 8 GiB long, no disk blocks; reading it would take minutes and 8 GiB.
    path = tmp_path / "huge.toml"
    with open(path, "wb") as handle:
        handle.truncate(8 * 2**30)
    outcome = load_within(path)
    error = outcome.get("error")
    assert isinstance(error, InputError) and "8 GiB" in error.problem and "512 KiB" in error.problem, outcome


def test_a_file_just_over_the_size_limit_is_refused(tmp_path):
    from tunnelsmith.optimize.inputs.reader import MAX_FILE_BYTES

    path = stack_file(tmp_path, STACK + "#" * (MAX_FILE_BYTES - len(STACK.encode()) + 1) + "\n")
    assert "larger than" in refused(path).problem
    fits = stack_file(tmp_path, STACK + "#" * (MAX_FILE_BYTES - len(STACK.encode()) - 2) + "\n", "fits.toml")
    assert fits.stat().st_size <= MAX_FILE_BYTES and load(fits).energy.points == 201


@pytest.mark.skipif(os.geteuid() == 0, reason="root reads a chmod 000 file anyway; "
                    "test_a_file_the_kernel_refuses_to_read covers the failing read")
def test_an_unreadable_file_is_refused(tmp_path):
    path = stack_file(tmp_path)
    path.chmod(0)
    try:
        error = refused(path)
    finally:
        path.chmod(stat.S_IRUSR | stat.S_IWUSR)
    assert "cannot read" in error.problem and "Permission denied" in error.problem


@pytest.mark.skipif(not Path("/proc/self/mem").exists(), reason="needs Linux /proc")
def test_a_file_the_kernel_refuses_to_read(tmp_path):
    # /proc/self/mem is a regular file whose read at offset 0 fails (EIO) even for
    # root: an unreadable file that a privileged test run cannot read either.
    error = load_within("/proc/self/mem").get("error")
    assert isinstance(error, InputError) and "cannot read the file" in error.problem


def test_a_path_with_a_nul_byte_is_refused(tmp_path):
    error = refused(str(tmp_path / "a\0b.toml"))
    assert "NUL" in error.problem


def test_every_example_campaign_and_fixture_still_loads():
    files = sorted(CAMPAIGNS.glob("*.toml")) + sorted(DATA.glob("*.toml"))
    assert len(files) >= 9
    for path in files:
        load(path)


# --------------------------------------------------------------------------- hard bounds on counts

def many_layers(count: int) -> str:
    """A stack of ``count + 1`` layers written compactly (one inline table each)."""
    contacts = STACK.split("[[layer]]")[0].replace("temperature_K = 300.0\n", "")
    tail = STACK[STACK.index("[energy]"):]
    # A top-level key: it goes above the first [table] header.
    layers = ('layer = [{ name = "b", material = "Al0.3Ga0.7As", thickness_ml = 10 }'
              + "".join(f', {{ name = "l{i}", like = "b" }}' for i in range(count)) + "]\n")
    return "temperature_K = 300.0\n" + layers + contacts + tail


@pytest.fixture
def roomy_machine(monkeypatch):
    """A machine of 1 PiB, so that only the hard bounds decide (not this machine's memory)."""
    from tunnelsmith.optimize.inputs import limits

    monkeypatch.setattr(limits, "available_memory_bytes", lambda: 2**50)


def with_table(table: str, body: str, text: str = STACK) -> str:
    """``text`` with ``[table]`` replaced by (or extended with) the lines of ``body``."""
    header = f"[{table}]\n"
    if header in text:
        start = text.index(header)
        end = text.find("\n[", start + 1)
        end = len(text) if end < 0 else end + 1
        return text[:start] + header + body + "\n" + text[end:]
    return text + f"\n{header}{body}\n"


@pytest.mark.parametrize("table,body,key,bound", [
    ("energy", "points = 10000000", "energy.points", "200000"),
    ("bias", "steps = 1000000", "bias.steps", "2001"),
    ("model", "max_levels = 1e9", "model.max_levels", "100"),
    ("tolerance", "samples = 1000000000000", "tolerance.samples", "10000000"),
    ("tolerance", "robust = { samples = 1000000 }", "tolerance.robust.samples", "1000"),
    ("tolerance", "seed = 4294967296", "tolerance.seed", "4294967295"),
])
def test_counts_beyond_their_hard_bound_are_refused_with_the_reason(tmp_path, table, body, key, bound):
    error = refused_text(tmp_path, with_table(table, body))
    assert error.key == key and f"largest allowed value {bound}: " in error.problem
    assert len(error.problem.split(": ", 1)[1]) > 40  # the reason is a sentence, not a word


def test_a_search_seed_beyond_32_bits_is_refused(tmp_path):
    # Optuna's samplers raise ValueError for a seed of 2**32 or more.
    text = small_campaign("seeded").replace("seed = 3", "seed = 4294967296")
    error = refused(write_campaign(tmp_path, text))
    assert error.key == "search.seed" and "32-bit" in error.problem


def test_a_timeout_longer_than_a_year_is_refused(tmp_path):
    text = small_campaign("slow").replace("seed = 3", "seed = 3\ntimeout_h = 1e300")
    error = refused(write_campaign(tmp_path, text))
    assert error.key == "search.timeout_h" and "8784" in error.problem


@pytest.mark.parametrize("old,new,key", [
    ("thickness_ml = 16", "thickness_ml = 40001", 'layer "well".thickness_ml'),
    ("thickness_ml = 16", "thickness_nm = 10001", 'layer "well".thickness_nm'),
    ("thickness_ml = 16", "thickness_ml = { min = 4, max = 1e12 }", 'layer "well".thickness_ml.max'),
    ("thickness_ml = 16", "thickness_nm = { min = 4, max = 1e300 }", 'layer "well".thickness_nm.max'),
])
def test_a_layer_thicker_than_10_um_is_refused(tmp_path, old, new, key):
    error = refused_text(tmp_path, STACK.replace(old, new))
    assert error.key == key and "substrate" in error.problem


def test_more_layers_than_the_bound_are_refused_before_reading_them(tmp_path):
    from tunnelsmith.optimize.inputs.limits import MAX_LAYERS

    error = refused_text(tmp_path, many_layers(MAX_LAYERS))
    assert error.key == "layer" and f"{MAX_LAYERS + 1} layers" in error.problem and str(MAX_LAYERS) in error.fix


def test_a_layer_name_with_a_control_character_is_refused(tmp_path):
    error = refused_text(tmp_path, STACK.replace('name = "well"', 'name = "we\\u0000ll"'))
    assert error.key == "layer[2].name" and "U+0000" in error.problem


@pytest.mark.parametrize("table,body", [
    ("energy", "from_eV = 0.0\nto_eV = 0.6\npoints = 200000"),
    ("bias", "from_V = 0.0\nto_V = 0.5\nsteps = 2001"),
    ("model", "max_levels = 100"),
    ("tolerance", "samples = 10000000\nrobust = { samples = 1000 }\nseed = 4294967295"),
])
def test_counts_at_their_hard_bound_still_load(tmp_path, roomy_machine, table, body):
    load(stack_file(tmp_path, with_table(table, body)))


def test_the_most_layers_allowed_still_load(tmp_path, roomy_machine):
    from tunnelsmith.optimize.inputs.limits import MAX_LAYERS

    assert len(load(stack_file(tmp_path, many_layers(MAX_LAYERS - 1))).layers) == MAX_LAYERS


@pytest.mark.parametrize("name,text", [
    ("energy", with_table("energy", "points = 10000000")),
    ("bias", with_table("bias", "steps = 1000000")),
    ("levels", with_table("model", "max_levels = 1e9")),
    ("samples", with_table("tolerance", "samples = 1000000000000")),
    ("layers-20000", many_layers(20_000)),
    ("layers-2500", many_layers(2_500)),
    ("batch", small_campaign("huge", batch=10**9)),
])
def test_check_refuses_absurd_sizes_at_once(tmp_path, name, text):
    # The timeout guards against a check that starts to compute: each case is refused
    # while reading, which takes well under a second after the interpreter starts.
    path = stack_file(tmp_path, text, f"{name}.toml")
    result = tunnelsmith("check", path, cwd=tmp_path, timeout=60)
    assert result.returncode == 2, result.stdout + result.stderr
    assert "Traceback" not in result.stderr and str(path) in result.stderr and "Fix:" in result.stderr


# --------------------------------------------------------------------------- the memory estimate


@pytest.fixture
def one_gib_machine(monkeypatch):
    """A machine with 1 GiB of memory: the suggested values are the same on every machine."""
    from tunnelsmith.optimize.inputs import limits

    monkeypatch.setattr(limits, "available_memory_bytes", lambda: 2**30)


def suggested(error: InputError, key: str) -> float:
    """The value the fix of a memory error suggests for ``key``."""
    words = error.fix.split(f"set {key} = ", 1)[1].split()
    return float(words[0])


@pytest.mark.parametrize("edit,key", [
    (("batch = 32", "batch = 100000"), "search.batch"),
    (("points = 301", "points = 200000"), "energy.points"),
])
def test_a_campaign_too_big_for_the_machine_names_the_key_and_what_fits(tmp_path, one_gib_machine, edit, key):
    text = small_campaign("big").replace(*edit)
    error = refused(write_campaign(tmp_path, text))
    assert error.key == key and "1 GiB of this machine" in error.problem and "tunnelsmith " in error.problem
    fits = int(suggested(error, key))
    loaded = load(write_campaign(tmp_path, small_campaign("big").replace(edit[0], edit[0].split(" = ")[0]
                                                                        + f" = {fits}"), "fits.toml"))
    assert loaded.search.batch == fits if key == "search.batch" else loaded.energy.points == fits
    with pytest.raises(InputError):
        load(write_campaign(tmp_path, small_campaign("big").replace(edit[0], edit[0].split(" = ")[0]
                                                                    + f" = {fits + 1}"), "over.toml"))


def test_the_inflated_key_is_named_not_a_default_one(tmp_path, one_gib_machine):
    # A huge energy grid with the usual batch: the grid is the culprit.
    text = small_campaign("grid", batch=64).replace("points = 301", "points = 150000")
    error = refused(write_campaign(tmp_path, text))
    assert error.key == "energy.points" and "search.batch" in error.fix


def test_too_many_growth_samples_name_the_samples(tmp_path, one_gib_machine):
    error = refused_text(tmp_path, STACK + "\n[tolerance]\nsamples = 10000000\n")
    assert error.key == "tolerance.samples" and "tunnelsmith tolerance" in error.problem
    fits = int(suggested(error, "tolerance.samples"))
    assert 1000 < fits < 10_000_000
    load(stack_file(tmp_path, STACK + f"\n[tolerance]\nsamples = {fits}\n", "fits.toml"))


def test_a_fine_slice_suggests_a_coarser_one(tmp_path, one_gib_machine):
    text = (STACK.replace("thickness_ml = 16", "thickness_ml = { min = 12, max = 20 }")
            + '\n[model]\nslice_nm = 0.0001\n\n[[objective]]\nmetric = "pvcr"\ngoal = "maximize"\n')
    error = refused_text(tmp_path, text)
    assert error.key == "model.slice_nm" and "or more (coarser slices)" in error.fix
    coarser = suggested(error, "model.slice_nm")
    assert 0.0001 < coarser <= 0.25
    load(stack_file(tmp_path, text.replace("slice_nm = 0.0001", f"slice_nm = {coarser}"), "fits.toml"))


def test_a_thick_stack_is_refused_for_the_band_diagram_states(tmp_path, one_gib_machine):
    # 40 layers of 5 um (each below the 10 um bound), no sweep and a coarse grid: only the
    # closed-box states that solve draws grow with the square of the thickness.
    head = STACK.split("[[layer]]")[0]
    layers = "".join(f'[[layer]]\nname = "l{i}"\nmaterial = "{"GaAs" if i % 2 else "Al0.3Ga0.7As"}"\n'
                     "thickness_nm = 5000\n\n" for i in range(40))
    text = head + layers + "[energy]\npoints = 21\n\n[bias]\nsteps = 1\n"
    error = refused_text(tmp_path, text)
    assert error.key == "layer" and "closed-box states" in error.problem and "200000 nm stack" in error.problem
    thinner = float(error.fix.split("a stack up to about ")[1].split(" nm")[0])
    assert 100 < thinner < 200_000


def test_a_run_that_fits_no_machine_is_refused_on_this_one(tmp_path):
    # 10^9 designs of 200 000 energies: about 5e16 bytes, more than any machine has.
    text = small_campaign("galactic", batch=10**9).replace("points = 301", "points = 200000")
    path = write_campaign(tmp_path, text)
    result = tunnelsmith("check", path, cwd=tmp_path, timeout=60)
    assert result.returncode == 2 and "Traceback" not in result.stderr
    assert "of this machine" in result.stderr and "fits on this machine" in result.stderr


def test_example_campaigns_and_fixtures_fit_in_a_few_gigabytes():
    from tunnelsmith.optimize.inputs import limits

    for path in sorted(CAMPAIGNS.glob("*.toml")) + sorted(DATA.glob("*.toml")):
        largest = max(limits.run_steps(load(path)), key=lambda step: step.bytes)
        # campaign_full.toml (a robust I–V campaign of 64 × 17 designs per batch) is the
        # largest: about 4.6 GiB; every example campaign stays under 1 GiB.
        bound = 5 * 2**30 if path.parent == DATA else 2**30
        assert largest.bytes < bound, (path.name, largest)


def test_available_memory_is_the_machines_and_honours_an_address_space_limit():
    from tunnelsmith.optimize.inputs import limits

    physical = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    assert 0 < limits.available_memory_bytes() <= physical
    script = ("import resource; resource.setrlimit(resource.RLIMIT_AS, (3 * 2**30, resource.RLIM_INFINITY)); "
              "from tunnelsmith.optimize.inputs import limits; print(limits.available_memory_bytes())")
    import subprocess
    import sys

    out = subprocess.run([sys.executable, "-c", script], check=False, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert 0 < int(out.stdout) < 3 * 2**30


def test_mirrored_sizes_agree_with_the_floors_above():
    import inspect

    from tunnelsmith.optimize.inputs import limits
    from tunnelsmith.optimize.model import growth
    from tunnelsmith.optimize.results import front
    from tunnelsmith.physics import resonance, transfer

    assert limits.POINTS_PER_CALL == growth.POINTS_PER_CALL
    assert (limits.MIN_DESIGNS_PER_CALL, limits.MAX_DESIGNS_PER_CALL) == (
        growth.MIN_DESIGNS_PER_CALL, growth.MAX_DESIGNS_PER_CALL)
    assert limits.FRONT_DESIGNS_PER_CALL == front._CURVE_CHUNK
    assert limits.BOX_GRID_nm == inspect.signature(resonance.closed_box_states).parameters["grid_nm"].default
    assert limits.TRACK_EXTRA_LEVELS == resonance._TRACK_EXTRA_LEVELS
    assert limits.KEPT_ELEMENTS == transfer._KEPT_ELEMENTS


MEASURE = r"""
import json, sys, tracemalloc, warnings
import numpy as np
warnings.simplefilter("ignore")
from tunnelsmith.optimize.inputs import limits
from tunnelsmith.optimize.inputs.reader import load
from tunnelsmith.optimize.model.stack import DesignBatch, nominal_batch, to_device
from tunnelsmith.optimize.model.evaluation import evaluate_metrics
from tunnelsmith.optimize.results.solution import solve_dataset
from tunnelsmith.optimize.results.tolerance import run_study
from tunnelsmith.physics.metrics import MetricRequest

# Every module is imported before tracing starts: a module's objects are no array of the run.
spec = load(sys.argv[1])
kind, designs = sys.argv[2], int(sys.argv[3])
nominal = nominal_batch(spec)
tracemalloc.start()
if kind == "evaluate":
    batch = DesignBatch(nominal.layer_names, *(np.repeat(a, designs, axis=0)
                        for a in (nominal.base, nominal.fraction, nominal.thickness_nm)))
    requests = [MetricRequest(name) for name in sys.argv[4].split(",")]
    evaluate_metrics(spec, to_device(spec, batch), requests)
    estimate = limits._evaluation_bytes(spec, limits._shape(spec), designs, [(r.name, None) for r in requests])
elif kind == "solve":
    solve_dataset(spec)
    estimate = max(s.work_bytes for s in limits.run_steps(spec) if s.command == "tunnelsmith solve")
else:
    run_study(spec, nominal)
    estimate = max(s.work_bytes for s in limits.run_steps(spec) if s.command == "tunnelsmith tolerance")
print(json.dumps({"measured": tracemalloc.get_traced_memory()[1], "estimate": estimate}))
"""


@pytest.mark.parametrize("case,text,args", [
    ("zero-bias batch", STACK.replace("steps = 11", "steps = 1").replace("points = 201", "points = 2001"),
     ("evaluate", "64", "resonance_energy_eV,transmission_contrast")),
    ("I–V batch", STACK, ("evaluate", "16", "pvcr")),
    ("solve", STACK.replace("points = 201", "points = 2001").replace("steps = 11", "steps = 51"), ("solve", "1")),
    ("solve, thick well", STACK.replace("thickness_ml = 16", "thickness_nm = 150").replace("steps = 11", "steps = 3"),
     ("solve", "1")),
    ("tolerance", STACK.replace("steps = 11", "steps = 1") + "\n[tolerance]\nsamples = 3000\n", ("tolerance", "1")),
])
def test_the_estimate_bounds_the_measured_peak(tmp_path, case, text, args):
    """The estimate is an upper bound of the peak that tracemalloc sees in a fresh process,
    and not a loose one: at most 4 times it (the kernel's kept work buffers, which a
    fresh process has few of, are left out of both)."""
    import json
    import subprocess
    import sys

    from tunnelsmith.optimize.inputs import limits

    path = stack_file(tmp_path, text)
    out = subprocess.run([sys.executable, "-c", MEASURE, str(path), *args], check=False, capture_output=True, text=True,
                         timeout=300)
    assert out.returncode == 0, out.stderr
    figures = json.loads(out.stdout.splitlines()[-1])
    measured, estimate = figures["measured"], figures["estimate"]
    # Work buffers kept from an earlier call of the same run may add to the measured peak.
    assert measured <= estimate + limits.KEPT_WORKSPACE_BYTES, (case, figures)
    assert measured <= estimate or measured - estimate < 0.2 * measured, (case, figures)
    assert estimate <= 4 * measured, (case, figures)
