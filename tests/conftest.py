"""The shared test toolkit: inline campaign files and the command-line runners.

Test modules import these helpers with ``from conftest import ...`` (pytest puts the
tests folder on ``sys.path``), so every test drives the command line the same way.
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

import optuna

from tunnelsmith.optimize.search.records import counts_toward_budget
from tunnelsmith.optimize.search.storage import open_storage

ROOT = Path(__file__).resolve().parents[1]
CAMPAIGNS = ROOT / "campaigns"
#: The command line as a user runs it (``python -m tunnelsmith``), in this interpreter.
CLI = [sys.executable, "-m", "tunnelsmith"]


CONTACTS = """
temperature_K = 300.0

[emitter]
material = "In0.53Ga0.47As"
doping_cm3 = 2e18

[collector]
material = "In0.53Ga0.47As"
doping_cm3 = 2e18
"""


def small_campaign(name: str = "small", *, target_eV: float = 0.2, trials: int = 96, batch: int = 32,
                   sampler: str = "nsga2", extra: str = "") -> str:
    """A double-barrier campaign that evaluates fast: zero-bias metrics on 301 energies."""
    return f"""{CONTACTS}
[campaign]
name = "{name}"

[[layer]]
name = "spacer_in"
material = "In0.53Ga0.47As"
thickness_nm = {{ min = 0.5, max = 2.0, step = 0.5 }}

[[layer]]
name = "barrier_in"
material = "AlAs"
thickness_ml = {{ min = 4, max = 8 }}

[[layer]]
name = "well"
material = "In0.53Ga0.47As"
thickness_ml = {{ min = 8, max = 24 }}

[[layer]]
name = "barrier_out"
like = "barrier_in"

[[layer]]
name = "spacer_out"
like = "spacer_in"

[energy]
from_eV = 0.0
to_eV = 0.6
points = 301

[[objective]]
metric = "resonance_energy_eV"
target = {target_eV}

[[objective]]
metric = "total_thickness_nm"
goal = "minimize"

[[constraint]]
metric = "resonance_width_eV"
max = 0.05

[search]
sampler = "{sampler}"
trials = {trials}
batch = {batch}
seed = 3
{extra}
"""


def write_campaign(directory: Path, text: str, name: str = "campaign.toml") -> Path:
    path = directory / name
    path.write_text(text, encoding="utf-8")
    return path


def tunnelsmith(*args, cwd: Path = ROOT, timeout: float = 300, env: dict | None = None) -> subprocess.CompletedProcess:
    """Run the command line as a user would, in ``cwd``."""
    return subprocess.run([*CLI, *map(str, args)], cwd=cwd, capture_output=True, text=True, timeout=timeout, env=env)


def start(*args, cwd: Path) -> subprocess.Popen:
    return subprocess.Popen([*CLI, *map(str, args)], cwd=cwd,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def stored_trials(run_dir: Path, name: str) -> list:
    """Every trial of a run, read from its journal alone."""
    storage = open_storage(run_dir, writer=False)
    return optuna.load_study(study_name=name, storage=storage).get_trials(deepcopy=False)


def finished(trials) -> list:
    return [t for t in trials if counts_toward_budget(t)]


def wait_for_finished(run_dir: Path, name: str, count: int, process: subprocess.Popen, timeout: float = 90) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        assert process.poll() is None, process.communicate()
        if (run_dir / "campaign.journal").exists():
            with_study = True
            try:
                done = len(finished(stored_trials(run_dir, name)))
            except KeyError:  # the study is not created yet
                with_study = False
            if with_study and done >= count:
                return
        time.sleep(0.2)
    raise AssertionError(f"fewer than {count} finished trials after {timeout} s")


# An invented GaAs / Al0.3Ga0.7As double barrier (both direct-gap: no material warning).
#: Guard-rail and audit tests start from it.
STACK = """temperature_K = 300.0

[emitter]
material = "GaAs"
doping_cm3 = 2e18

[collector]
material = "GaAs"
doping_cm3 = 2e18

[[layer]]
name = "barrier_in"
material = "Al0.3Ga0.7As"
thickness_ml = 10

[[layer]]
name = "well"
material = "GaAs"
thickness_ml = 16

[[layer]]
name = "barrier_out"
like = "barrier_in"

[energy]
from_eV = 0.0
to_eV = 0.6
points = 201
"""


def stack_file(tmp_path, text: str = STACK, name: str = "stack.toml"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path
