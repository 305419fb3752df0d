"""Every key of the schema, written into every table where it does not belong, is told
where it belongs ("seed belongs in [search] or [tolerance]", "temperature_K is a
top-level key: put it above the first [table] header"), never just "remove it".

The walk takes the schema's own table of keys (``KEY_HOMES``), so a key added to the
format is covered without touching this test.
"""

from __future__ import annotations

import pytest

from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.inputs.reader import KEY_HOMES, load
from tunnelsmith.optimize.inputs.tables import header_of

# A campaign with every table of the schema once (an invented test scenario).
EVERY_TABLE = """temperature_K = 77.0

[campaign]
name = "every_table"

[emitter]
material = "GaAs"
doping_cm3 = 1e18

[collector]
material = "GaAs"
doping_cm3 = 1e18

[materials.mine]
conduction_band_eV = -4.07
mass = 0.067
lattice_nm = 0.56533

[[layer]]
name = "barrier_in"
material = "Al0.35Ga0.65As"
thickness_ml = { min = 8, max = 12 }

[[layer]]
name = "well"
material = "GaAs"
thickness_ml = 16

[[layer]]
name = "barrier_out"
like = "barrier_in"

[bias]
from_V = 0.0
to_V = 0.4
steps = 5

[energy]
from_eV = 0.0
to_eV = 0.3
points = 301

[model]
nonparabolic = false

[[objective]]
metric = "resonance_energy_eV"
target = 0.07

[[constraint]]
metric = "resonance_width_eV"
max = 0.05

[search]
trials = 96
batch = 32
seed = 3

[tolerance]
seed = 5

[tolerance.robust]
samples = 8
quantile = 0.2

[[tolerance.spec]]
metric = "resonance_energy_eV"
min = 0.060
max = 0.080
"""


def header_line(kind: str) -> str:
    return header_of(kind.replace("*", "mine"), KEY_HOMES.arrays)


def with_key(kind: str, key: str) -> str:
    """EVERY_TABLE with ``key = 1`` written first thing in the table of ``kind``."""
    if kind == "":
        return f"{key} = 1\n" + EVERY_TABLE
    header = header_line(kind) + "\n"
    assert header in EVERY_TABLE, header
    return EVERY_TABLE.replace(header, header + f"{key} = 1\n", 1)


CASES = [(key, kind) for key in sorted({k for keys in KEY_HOMES.tables.values() for k in keys})
         for kind in KEY_HOMES.tables if key not in KEY_HOMES.tables[kind]]


def test_the_base_file_is_valid(tmp_path):
    path = tmp_path / "every.toml"
    path.write_text(EVERY_TABLE, encoding="utf-8")
    assert load(path).is_campaign


def test_the_walk_covers_the_schema():
    assert len(CASES) > 300
    assert ("temperature_K", "campaign") in CASES and ("seed", "campaign") in CASES
    assert ("samples", "tolerance.spec") in CASES


@pytest.mark.parametrize("key,kind", CASES)
def test_a_misplaced_key_is_told_where_it_belongs(tmp_path, key, kind):
    path = tmp_path / "misplaced.toml"
    path.write_text(with_key(kind, key), encoding="utf-8")
    with pytest.raises(InputError) as caught:
        load(path)
    error = caught.value
    assert error.file == str(path)
    assert error.key is not None and error.key.endswith(key), error
    assert "remove it" not in error.fix, error
    homes = [home for home, keys in KEY_HOMES.tables.items() if key in keys]
    tables = [f"{home}.{key}" if home else key for home in homes]
    tables = [t for t in tables if t in KEY_HOMES.tables]
    if tables:
        assert f"{header_of(tables[0], KEY_HOMES.arrays)} is a table of its own" in error.fix, error
    elif "" in homes:
        assert f"{key} is a top-level key: put it above the first [table] header" in error.fix, error
    else:
        for home in homes:
            assert header_of(home, KEY_HOMES.arrays) in error.fix, error
        if any(kind.startswith(home + ".") for home in homes):
            assert f"above its first {header_of(kind, KEY_HOMES.arrays)} header" in error.fix, error


@pytest.mark.parametrize("text,advice", [
    # The three traps a new user fell into, word for word.
    ('[campaign]\nname = "x"\ntemperature_K = 77\n',
     "temperature_K is a top-level key: put it above the first [table] header"),
    ('[campaign]\nname = "x"\nseed = 4\n', "seed belongs in [search] or [tolerance]: move it there"),
    ('[tolerance]\nseed = 5\n[[tolerance.spec]]\nmetric = "resonance_energy_eV"\nmin = 0.06\nmax = 0.08\nsamples = 50\n',
     "samples belongs in [tolerance]: move it into [tolerance], above its first [[tolerance.spec]] header"),
])
def test_the_reported_traps(tmp_path, text, advice):
    from conftest import tunnelsmith

    base = EVERY_TABLE.split("[campaign]")[0] if "[campaign]" in text else EVERY_TABLE.split("[tolerance]")[0]
    rest = EVERY_TABLE.split("[emitter]", 1)[1].split("[tolerance]")[0] if "[campaign]" in text else ""
    path = tmp_path / "trap.toml"
    path.write_text(base + text + ("\n[emitter]" + rest if rest else ""), encoding="utf-8")
    result = tunnelsmith("check", path, cwd=tmp_path)
    assert result.returncode == 2, result.stderr
    assert "Traceback" not in result.stderr
    assert advice in result.stderr, result.stderr
