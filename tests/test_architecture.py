"""The house: imports go one way, and the package works from any directory.

The floors, lowest first (DEVELOPERS.md draws them): physics → base (version, errors,
io) → inputs → model → search → results → plots → commands → the two interfaces (the
command line and the Python API). A module may import from its own floor or below; a
command module is imported only by the command line. The walk reads every module with
:mod:`ast` and executes nothing.
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from conftest import CONTACTS

ROOT = Path(__file__).resolve().parents[1]

#: (module prefix, floor). The longest matching prefix decides.
FLOORS = {
    "tunnelsmith.physics": 0,
    "tunnelsmith.optimize.version": 1,
    "tunnelsmith.optimize.errors": 1,
    "tunnelsmith.optimize.io": 1,
    "tunnelsmith.optimize.inputs": 2,
    "tunnelsmith.optimize.model": 3,
    "tunnelsmith.optimize.search": 4,
    "tunnelsmith.optimize.results": 5,
    "tunnelsmith.optimize.plots": 6,
    "tunnelsmith.optimize.commands": 7,
    "tunnelsmith.optimize.cli": 8,
    "tunnelsmith.api": 8,
    "tunnelsmith.__main__": 8,
    "tunnelsmith": 8,
    "tunnelsmith.optimize": 1,  # the package __init__ (a docstring)
}
COMMANDS = {f"tunnelsmith.optimize.commands.{name}"
            for name in ("solve", "optimize", "front", "tolerance", "check", "materials", "export", "report")}
INTERFACES = {"tunnelsmith.optimize.cli"}


def floor_of(module: str) -> int:
    matches = [prefix for prefix in FLOORS if module == prefix or module.startswith(prefix + ".")]
    return FLOORS[max(matches, key=len)]


def project_modules() -> dict[str, Path]:
    modules = {}
    for folder, package in (("physics", "tunnelsmith.physics"), ("optimize", "tunnelsmith.optimize"),
                            ("tunnelsmith", "tunnelsmith")):
        for path in (ROOT / folder).rglob("*.py"):
            parts = list(path.relative_to(ROOT / folder).with_suffix("").parts)
            if parts[-1] == "__init__":
                parts = parts[:-1]
            modules[".".join([package, *parts])] = path
    return modules


def imported_modules(path: Path, module: str) -> set[str]:
    """Every project module ``path`` imports (top level and inside functions)."""
    found = set()
    package = module if path.name == "__init__.py" else module.rsplit(".", 1)[0]
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            names = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                base = ".".join(package.split(".")[: len(package.split(".")) - node.level + 1] + ([base] if base else []))
            # `from package import module` imports the module; `from module import name` the module.
            names = [f"{base}.{alias.name}" for alias in node.names] + [base]
        else:
            continue
        found.update(name for name in names if name.split(".")[0] in ("tunnelsmith", "physics", "optimize"))
    return found


MODULES = project_modules()


def test_the_walk_sees_every_floor():
    assert {floor_of(m) for m in MODULES} == set(range(9))
    assert len(MODULES) > 40


@pytest.mark.parametrize("module", sorted(MODULES))
def test_imports_never_climb(module):
    own = floor_of(module)
    for target in imported_modules(MODULES[module], module):
        assert target.split(".")[0] == "tunnelsmith", f"{module} imports {target} outside the namespace"
        if target not in MODULES and target.rsplit(".", 1)[0] in MODULES:
            target = target.rsplit(".", 1)[0]  # `from module import name`
        if target not in MODULES:
            continue  # a package prefix such as `tunnelsmith.optimize`
        assert floor_of(target) <= own, f"{module} (floor {own}) imports {target} (floor {floor_of(target)})"
        if target in COMMANDS:
            assert module in INTERFACES, f"{module} imports the command {target}; only the command line may"


def test_physics_knows_nothing_of_the_floors_above():
    for module, path in MODULES.items():
        if module.startswith("tunnelsmith.physics"):
            assert all(t.startswith("tunnelsmith.physics") for t in imported_modules(path, module)), module


def test_the_namespace_wins_over_a_decoy_physics_folder(tmp_path):
    """Run from a folder holding its own ``physics/`` and ``optimize/``: ours are still found."""
    for decoy in ("physics", "optimize"):
        (tmp_path / decoy).mkdir()
        (tmp_path / decoy / "__init__.py").write_text("raise ImportError('the decoy was imported')\n")
    probe = ("import tunnelsmith, tunnelsmith.physics.transfer as t, tunnelsmith.optimize.cli; "
             "print(tunnelsmith.__version__, t.__name__, callable(tunnelsmith.load))")
    result = subprocess.run([sys.executable, "-c", probe], cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr
    assert "tunnelsmith.physics.transfer True" in result.stdout
    stack = ROOT / "campaigns" / "demo.toml"
    check = subprocess.run([sys.executable, "-m", "tunnelsmith", "check", str(stack)], cwd=tmp_path,
                           capture_output=True, text=True, timeout=120)
    assert check.returncode == 0, check.stderr


def test_the_public_api_solves_and_reads_a_front(tmp_path):
    import tunnelsmith

    stack = tmp_path / "stack.toml"
    stack.write_text(CONTACTS + """
[[layer]]
name = "barrier_in"
material = "AlAs"
thickness_ml = 6

[[layer]]
name = "well"
material = "In0.53Ga0.47As"
thickness_ml = 16

[[layer]]
name = "barrier_out"
like = "barrier_in"

[energy]
from_eV = 0.0
to_eV = 0.6
points = 301
""", encoding="utf-8")
    t = tunnelsmith.transmission(stack, bias_V=[0.0, 0.1])
    assert t.dims == ("bias", "energy") and t.shape == (2, 301)
    solution = tunnelsmith.solve(stack)
    # A symmetric double barrier is fully transparent at its resonance (Davies, The Physics
    # of Low-Dimensional Semiconductors, 1998, sec. 5.5): T(E_r) = 1 within the pole's accuracy.
    level_eV = float(solution["resonance_energy"].isel(bias=0, level=0))
    assert float(tunnelsmith.transmission(stack, energy_eV=[level_eV]).max()) > 0.9
    first_bias = float(solution["bias"][0])
    again = tunnelsmith.transmission(stack, bias_V=first_bias)
    np.testing.assert_allclose(solution["transmission"].isel(bias=0).values, again.isel(bias=0).values, rtol=1e-12)
    assert sorted(tunnelsmith.__all__) == sorted(dir(tunnelsmith))
