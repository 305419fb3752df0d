"""Tests of the stack/campaign file format (tunnelsmith.optimize.inputs) and its error messages."""

from __future__ import annotations

import hashlib
import pickle
import warnings
from pathlib import Path

import numpy as np
import pytest

from tunnelsmith.optimize.inputs import schema
from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.inputs.schema import BiasSweep, Choices, EnergyGrid, FloatRange, IntRange, ModelSpec, SearchSpec
from tunnelsmith.optimize.inputs.describe import describe
from tunnelsmith.optimize.inputs.dimensions import design_count, search_dimensions
from tunnelsmith.optimize.inputs.reader import load
from tunnelsmith.physics.materials import material

DATA = Path(__file__).parent / "data"

CONTACTS = """
[emitter]
material = "GaAs"
doping_cm3 = 1e18

[collector]
material = "GaAs"
doping_cm3 = 1e18
"""

BARRIER = """
[[layer]]
name = "b"
material = "Al0.3Ga0.7As"
thickness_ml = 6
"""

STACK = CONTACTS + BARRIER

# A minimal valid campaign: one searched thickness, one objective.
CAMPAIGN = (
    CONTACTS
    + """
[[layer]]
name = "b"
material = "Al0.3Ga0.7As"
thickness_ml = { min = 4, max = 8 }

[[objective]]
metric = "resonance_energy_eV"
target = 0.1
"""
)


def write(tmp_path: Path, text: str, name: str = "case.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def load_text(tmp_path: Path, text: str):
    return load(write(tmp_path, text))


# --------------------------------------------------------------------------- errors


def test_input_error_is_one_paragraph_with_file_key_problem_fix():
    err = InputError("a.toml", "layer[2].thickness_nm", "must be positive.", "give a value\nabove 0")
    assert str(err) == "a.toml: layer[2].thickness_nm: must be positive. Fix: give a value above 0"
    assert (err.file, err.key, err.problem, err.fix) == (
        "a.toml",
        "layer[2].thickness_nm",
        "must be positive",
        "give a value above 0",
    )
    assert (
        str(InputError("a.toml", None, "the file is empty", "write a stack"))
        == "a.toml: the file is empty. Fix: write a stack"
    )
    # Workers may pass errors between processes.
    assert str(pickle.loads(pickle.dumps(err))) == str(err)


# --------------------------------------------------------------------------- valid files


def test_stack_file_values_and_defaults():
    path = DATA / "stack_rtd.toml"
    with warnings.catch_warnings():
        # Material warnings are collected on the spec, never emitted.
        warnings.simplefilter("error")
        spec = load(path)
    assert not spec.is_campaign
    assert spec.name == "stack_rtd"
    assert spec.description == ""
    assert spec.text == path.read_text(encoding="utf-8")
    assert spec.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert spec.temperature_K == 300.0
    assert spec.emitter.material == "In0.53Ga0.47As" and spec.emitter.fraction is None
    assert spec.collector.doping_cm3 == 2e18
    assert [layer.name for layer in spec.layers] == [
        "spacer_in",
        "barrier_in",
        "well",
        "barrier_out",
        "spacer_out",
    ]
    well = spec.layers[2]
    assert (well.material, well.fraction, well.thickness_nm, well.thickness_ml) == ("InGaAs", 0.53, 4.5, None)
    assert spec.layers[1].thickness_ml == 5 and isinstance(spec.layers[1].thickness_ml, int)
    assert all(layer.absorption_eV == 0.0 and layer.like is None for layer in spec.layers)
    # Defaults of absent tables.
    assert spec.bias == BiasSweep(0.0, 1.0, 51)
    assert spec.energy == EnergyGrid(0.0, 1.0, 2001)
    assert spec.model == ModelSpec(nonparabolic=False, slice_nm=None, max_levels=4)
    assert spec.search == SearchSpec("nsga2", 1000, 64, None, None)
    assert spec.tolerance is None and spec.objectives == () and spec.constraints == ()
    assert spec.user_materials == {} and spec.metric_requests == ()
    # AlAs is an indirect-gap material: one merged warning naming both barrier layers.
    (warning,) = [w for w in spec.warnings if "AlAs" in w]
    assert 'layer "barrier_in".material' in warning and 'layer "barrier_out".material' in warning


def test_grids_are_linspaces():
    np.testing.assert_allclose(
        BiasSweep(0.0, 0.5, 6).values, [0.0, 0.1, 0.2, 0.3, 0.4, 0.5], rtol=0, atol=1e-15
    )
    energies = EnergyGrid(0.0, 1.0, 2001).values
    assert energies.shape == (2001,) and energies[1] == pytest.approx(5e-4)


def test_campaign_with_every_feature():
    spec = load(DATA / "campaign_full.toml")
    assert spec.is_campaign and spec.name == "rtd-full"
    assert spec.description.startswith("invented")
    assert spec.temperature_K == 77.0
    assert spec.emitter.material == "InGaAs" and spec.emitter.fraction == 0.53
    assert spec.user_materials == {
        "my_barrier": {"conduction_band_eV": -3.2, "mass": 0.09, "lattice_nm": 0.5869, "gap_eV": 2.5}
    }
    assert spec.bias == BiasSweep(0.0, 0.8, 41)
    assert spec.energy == EnergyGrid(0.0, 0.6, 1201)
    assert spec.model == ModelSpec(nonparabolic=True, slice_nm=0.2, max_levels=3)

    layers = {layer.name: layer for layer in spec.layers}
    assert layers["barrier_in"].thickness_ml == IntRange(4, 12)
    well = layers["well"]
    assert well.material == Choices(("In0.53Ga0.47As", "InAs", "InGaAs"))
    assert well.fraction == FloatRange(0.5, 0.7, 0.05)
    assert well.thickness_nm == FloatRange(2.0, 5.0, 0.5)
    assert well.absorption_eV == 0.002
    assert layers["cladding"].fraction == FloatRange(0.1, 0.3, None)

    objectives = spec.objectives
    assert [o.label for o in objectives] == [
        "pvcr",
        "|resonance_energy_eV − 0.15|",
        "log10 leakage_A_cm2@0.05V",
        "yield",
    ]
    assert [o.direction for o in objectives] == ["maximize", "minimize", "minimize", "maximize"]
    assert objectives[1].goal is None and objectives[1].target == 0.15
    assert objectives[2].request.name == "leakage_A_cm2" and objectives[2].request.at_bias_V == 0.05
    assert objectives[2].log

    assert [c.label for c in spec.constraints] == [
        "100000 ≤ peak_current_A_cm2",
        "0.0001 ≤ resonance_width_eV ≤ 0.02",
    ]
    assert spec.search == SearchSpec("tpe", 20000, 64, 1, 8.0)
    assert isinstance(spec.search.trials, int)

    tolerance = spec.tolerance
    assert (tolerance.thickness_sigma_ml, tolerance.growth_rate_sigma, tolerance.fraction_sigma) == (
        0.5,
        0.01,
        0.005,
    )
    assert (tolerance.samples, tolerance.seed) == (200, 3)
    assert (tolerance.robust.samples, tolerance.robust.quantile, tolerance.robust.statistic) == (
        16,
        0.1,
        "quantile",
    )
    assert [w.label for w in tolerance.windows] == [
        "0.14 ≤ resonance_energy_eV ≤ 0.16",
        "leakage_A_cm2@0.05V ≤ 10",
    ]

    # Deduplicated, in order of first use, without the yield.
    assert [r.label for r in spec.metric_requests] == [
        "pvcr", "resonance_energy_eV", "leakage_A_cm2@0.05V", "peak_current_A_cm2", "resonance_width_eV",
    ]  # fmt: skip
    assert spec.needs_iv
    # No indirect material in this campaign, no gap missing: nothing to warn about.
    assert spec.warnings == ()


def test_ties_copy_searched_values_and_point_at_the_root():
    spec = load(DATA / "campaign_full.toml")
    layers = {layer.name: layer for layer in spec.layers}
    root = layers["barrier_in"]
    for name in ("barrier_out", "cladding_copy"):  # cladding_copy ties through barrier_out
        tied = layers[name]
        assert tied.like == "barrier_in"
        assert (tied.material, tied.fraction, tied.thickness_ml, tied.thickness_nm) == (
            root.material, root.fraction, root.thickness_ml, root.thickness_nm,
        )  # fmt: skip
    assert layers["barrier_out"].absorption_eV == 0.0  # inherited from the root
    assert layers["cladding_copy"].absorption_eV == 0.001  # its own
    dims = search_dimensions(spec)
    assert [(d.layer, d.parameter) for d in dims] == [
        ("barrier_in", "thickness_ml"), ("well", "material"), ("well", "fraction"),
        ("well", "thickness_nm"), ("cladding", "fraction"),
    ]  # fmt: skip
    assert dims[0].tied == ("barrier_out", "cladding_copy")
    assert design_count(spec) is None  # cladding.fraction is continuous


def test_tie_to_a_later_layer(tmp_path):
    text = (
        CONTACTS
        + """
[[layer]]
name = "first"
like = "second"

[[layer]]
name = "second"
material = "AlGaAs"
fraction = { min = 0.2, max = 0.4, step = 0.1 }
thickness_nm = 2.0
"""
    )
    spec = load_text(tmp_path, text + OBJ)
    first = spec.layers[0]
    assert (first.material, first.fraction, first.like) == ("AlGaAs", FloatRange(0.2, 0.4, 0.1), "second")
    assert [(d.layer, d.parameter) for d in search_dimensions(spec)] == [("second", "fraction")]


SMALL_CAMPAIGN = (
    CONTACTS
    + """
[campaign]
name = "small"

[[layer]]
name = "barrier_in"
material = "AlGaAs"
fraction = { min = 0.2, max = 0.4, step = 0.1 }
thickness_ml = { min = 4, max = 6 }

[[layer]]
name = "well"
material = { choices = ["GaAs", "AlGaAs"] }
fraction = 0.1
thickness_nm = { min = 4.0, max = 5.0, step = 0.5 }

[[layer]]
name = "barrier_out"
like = "barrier_in"

[[objective]]
metric = "resonance_energy_eV"
target = 0.1

[[constraint]]
metric = "total_thickness_nm"
max = 12
"""
)


def test_describe_small_campaign(tmp_path):
    spec = load_text(tmp_path, SMALL_CAMPAIGN)
    # barrier_in: 3 fractions x 3 thicknesses; well: 2 materials x 3 thicknesses; the
    # tied barrier_out adds nothing.
    assert design_count(spec) == 9 * 6
    text = describe(spec)
    assert 'campaign "small"' in text
    assert "temperature: 300 K" in text
    assert "distinct designs: 54" in text
    assert "search space: 4 independent dimensions" in text
    assert "barrier_in.thickness_ml: 3 values — 4–6 ml, shared with barrier_out" in text
    assert "well.material: 2 values — GaAs | AlGaAs" in text
    assert "zero-bias transmission (2001 energies, 0 to 1 eV) only" in text
    assert "minimize |resonance_energy_eV − 0.1|" in text
    assert "total_thickness_nm ≤ 12" in text
    assert "[tied to barrier_in]" in text
    # Monolayer = half the cubic lattice constant, from the material table.
    half = material("AlGaAs", 300.0, fraction=0.2).monolayer_nm
    assert f"{4 * half:.2f}" in text
    assert "\n" in text and not text.endswith("\n")


def test_describe_mentions_iv_and_warnings(tmp_path):
    text = CAMPAIGN.replace(
        'metric = "resonance_energy_eV"\ntarget = 0.1', 'metric = "pvcr"\ngoal = "maximize"'
    )
    text = text.replace('"Al0.3Ga0.7As"', '"AlAs"') + "\n[bias]\nto_V = 0.5\nsteps = 26\n"
    spec = load_text(tmp_path, text)
    out = describe(spec)
    assert "+ I–V sweep of 26 biases (0 to 0.5 V)" in out
    assert "distinct designs: 5" in out
    assert "warnings:" in out and "indirect" in out


def test_mixed_alloy_choices_count_the_fraction_once_per_alloy(tmp_path):
    text = (
        CONTACTS
        + """
[[layer]]
name = "well"
material = { choices = ["GaAs", "InAs", "InGaAs"] }
fraction = { min = 0.1, max = 0.45, step = 0.01 }
thickness_ml = 10

[[objective]]
metric = "resonance_energy_eV"
goal = "minimize"
"""
    )
    spec = load_text(tmp_path, text)
    assert design_count(spec) == 2 + 36
    assert "applies to InGaAs only" in describe(spec)


def test_campaign_name_defaults_to_file_stem(tmp_path):
    spec = load(write(tmp_path, CAMPAIGN, "my_run.toml"))
    assert spec.is_campaign and spec.name == "my_run"
    assert design_count(spec) == 5


def test_metric_request_matches_physics_metrics_when_present():
    metrics = pytest.importorskip("tunnelsmith.physics.metrics")
    assert schema.MetricRequest is metrics.MetricRequest
    assert set(schema.METRICS) == set(metrics.CATALOGUE)
    for name, info in metrics.CATALOGUE.items():
        assert schema.METRICS[name].needs_iv == (info.needs == "iv")
        assert schema.METRICS[name].takes_bias == info.takes_bias


def test_metric_catalogue_is_the_design_list():
    # The eleven names of the design document's metric table.
    assert list(schema.METRICS) == [
        "resonance_energy_eV", "resonance_width_eV", "transmission_contrast", "peak_current_A_cm2",
        "peak_voltage_V", "valley_current_A_cm2", "valley_voltage_V", "pvcr", "swing_product_W_cm2",
        "leakage_A_cm2", "total_thickness_nm",
    ]  # fmt: skip


# --------------------------------------------------------------------------- file-level errors


def test_missing_file(tmp_path):
    with pytest.raises(InputError) as info:
        load(tmp_path / "nope.toml")
    assert info.value.key is None and "nope.toml" in str(info.value) and "Fix:" in str(info.value)


def test_directory_instead_of_file(tmp_path):
    write(tmp_path, STACK, "inside.toml")
    with pytest.raises(InputError) as info:
        load(tmp_path)
    assert "directory" in info.value.problem and "inside.toml" in info.value.problem


@pytest.mark.parametrize("text", ["", "  \n\n", "# only a comment\n"])
def test_empty_file(tmp_path, text):
    with pytest.raises(InputError) as info:
        load_text(tmp_path, text)
    assert info.value.key is None and "Fix:" in str(info.value)


def test_toml_syntax_error_reports_line_and_column(tmp_path):
    text = STACK.replace("thickness_ml = 6", "thickness_ml 6")
    line = text.splitlines().index("thickness_ml 6") + 1
    with pytest.raises(InputError) as info:
        load_text(tmp_path, text)
    message = str(info.value)
    assert f"line {line}, column" in message and "thickness_ml 6" in message and "Fix:" in message
    assert "\n" not in message


def test_non_utf8_file(tmp_path):
    path = tmp_path / "latin1.toml"
    path.write_bytes(STACK.encode("utf-8") + b"# caf\xe9\n")
    with pytest.raises(InputError, match="UTF-8"):
        load(path)


# --------------------------------------------------------------------------- malformed values

L = '[[layer]]\nname = "{name}"\n{body}\n'


def layer(body: str, name: str = "b") -> str:
    return L.format(name=name, body=body)


OBJ = '[[objective]]\nmetric = "resonance_energy_eV"\ntarget = 0.1\n'

# (id, file text, expected key (substring of err.key), word expected in the fix or problem)
MALFORMED = [
    ("misspelt top key", "temprature_K = 300\n" + STACK, "temprature_K", "temperature_K"),
    (
        "misspelt layer key",
        CONTACTS + layer('material = "GaAs"\nthickness_mm = 6'),
        'layer "b".thickness_mm',
        '"thickness_ml" or "thickness_nm"',
    ),
    (
        "misspelt contact key",
        STACK.replace("doping_cm3 = 1e18", "dopping_cm3 = 1e18", 1),
        "emitter.dopping_cm3",
        "doping_cm3",
    ),
    ("temperature as string", 'temperature_K = "300"\n' + STACK, "temperature_K", "quotes"),
    ("temperature as bool", "temperature_K = true\n" + STACK, "temperature_K", "number"),
    ("temperature negative", "temperature_K = -4\n" + STACK, "temperature_K", "above 0"),
    ("temperature nan", "temperature_K = nan\n" + STACK, "temperature_K", "finite"),
    (
        "missing emitter",
        CONTACTS[CONTACTS.index("[collector]") :] + BARRIER,
        "emitter",
        "[emitter]",
    ),
    (
        "negative doping",
        STACK.replace("doping_cm3 = 1e18", "doping_cm3 = -1e18", 1),
        "emitter.doping_cm3",
        "at least 0",
    ),
    ("missing doping", STACK.replace("doping_cm3 = 1e18\n", "", 2), "emitter.doping_cm3", "doping_cm3 ="),
    (
        "contact with choices",
        STACK.replace('material = "GaAs"', 'material = { choices = ["GaAs"] }', 1),
        "emitter.material",
        "one name",
    ),
    ("no layer", CONTACTS, "layer", "[[layer]]"),
    (
        "layer as single table",
        CONTACTS + '[layer]\nname = "b"\nmaterial = "GaAs"\nthickness_ml = 6\n',
        "layer",
        "[[layer]]",
    ),
    (
        "layer without name",
        CONTACTS + '[[layer]]\nmaterial = "GaAs"\nthickness_ml = 6\n',
        "layer[1].name",
        "name =",
    ),
    ("duplicate layer name", STACK + BARRIER, "layer[2].name", "own name"),
    ("missing thickness", CONTACTS + layer('material = "GaAs"'), 'layer "b".thickness_ml', "thickness_nm"),
    (
        "both thicknesses",
        CONTACTS + layer('material = "GaAs"\nthickness_ml = 6\nthickness_nm = 1.7'),
        'layer "b".thickness_nm',
        "keep one",
    ),
    (
        "negative thickness",
        CONTACTS + layer('material = "GaAs"\nthickness_nm = -1.0'),
        'layer "b".thickness_nm',
        "above 0",
    ),
    (
        "zero monolayers",
        CONTACTS + layer('material = "GaAs"\nthickness_ml = 0'),
        'layer "b".thickness_ml',
        "at least 1",
    ),
    (
        "fractional monolayers",
        CONTACTS + layer('material = "GaAs"\nthickness_ml = 5.5'),
        'layer "b".thickness_ml',
        "thickness_nm",
    ),
    (
        "thickness as string",
        CONTACTS + layer('material = "GaAs"\nthickness_nm = "2 nm"'),
        'layer "b".thickness_nm',
        "number",
    ),
    (
        "fraction above 1",
        CONTACTS + layer('material = "AlGaAs"\nfraction = 1.3\nthickness_ml = 6'),
        'layer "b".fraction',
        "at most 1",
    ),
    (
        "alloy key without fraction",
        CONTACTS + layer('material = "AlGaAs"\nthickness_ml = 6'),
        'layer "b".material',
        "fraction = 0.3",
    ),
    (
        "full name with fraction",
        CONTACTS + layer('material = "Al0.3Ga0.7As"\nfraction = 0.3\nthickness_ml = 6'),
        'layer "b".fraction',
        "delete fraction",
    ),
    (
        "unknown material",
        CONTACTS + layer('material = "GaAz"\nthickness_ml = 6'),
        'layer "b".material',
        '"GaAs"',
    ),
    (
        "unknown choice",
        CONTACTS + layer('material = { choices = ["GaAs", "InAz"] }\nthickness_ml = 6') + OBJ,
        'layer "b".material',
        '"InAs"',
    ),
    (
        "bad composition",
        CONTACTS + layer('material = "Al0.3Ga0.6As"\nthickness_ml = 6'),
        'layer "b".material',
        "add up to 1",
    ),
    (
        "fraction on binary choices",
        CONTACTS + layer('material = { choices = ["GaAs", "InAs"] }\nfraction = 0.2\nthickness_ml = 6') + OBJ,
        'layer "b".fraction',
        "alloy key",
    ),
    (
        "range min above max",
        CONTACTS + layer('material = "GaAs"\nthickness_ml = { min = 9, max = 4 }') + OBJ,
        'layer "b".thickness_ml.min',
        "swap",
    ),
    (
        "range step zero",
        CONTACTS + layer('material = "GaAs"\nthickness_nm = { min = 1.0, max = 2.0, step = 0.0 }') + OBJ,
        'layer "b".thickness_nm.step',
        "above 0",
    ),
    (
        "range step above span",
        CONTACTS
        + layer('material = "AlGaAs"\nfraction = { min = 0.1, max = 0.2, step = 0.5 }\nthickness_ml = 6')
        + OBJ,
        'layer "b".fraction.step',
        "at most 0.1",
    ),
    (
        "range step not dividing",
        CONTACTS + layer('material = "GaAs"\nthickness_nm = { min = 1.0, max = 2.0, step = 0.3 }') + OBJ,
        'layer "b".thickness_nm.step',
        "max = 1.9",
    ),
    (
        "range with string bound",
        CONTACTS + layer('material = "GaAs"\nthickness_ml = { min = "4", max = 8 }') + OBJ,
        'layer "b".thickness_ml.min',
        "quotes",
    ),
    (
        "monolayer range with step",
        CONTACTS + layer('material = "GaAs"\nthickness_ml = { min = 4, max = 8, step = 2 }') + OBJ,
        'layer "b".thickness_ml.step',
        "remove it",
    ),
    (
        "empty choices",
        CONTACTS + layer("material = { choices = [] }\nthickness_ml = 6") + OBJ,
        'layer "b".material.choices',
        "at least one",
    ),
    (
        "repeated choice",
        CONTACTS + layer('material = { choices = ["GaAs", "GaAs"] }\nthickness_ml = 6') + OBJ,
        'layer "b".material.choices',
        "once",
    ),
    (
        "misspelt choices key",
        CONTACTS + layer('material = { choice = ["GaAs"] }\nthickness_ml = 6') + OBJ,
        'layer "b".material.choice',
        '"choices"',
    ),
    ("tie to unknown layer", STACK + layer('like = "bb"', "c"), 'layer "c".like', '"b"'),
    ("tie to itself", STACK + layer('like = "c"', "c"), 'layer "c".like', "another layer"),
    ("tie loop", STACK + layer('like = "d"', "c") + layer('like = "c"', "d"), ".like", "loop"),
    (
        "tied layer sets thickness",
        STACK + layer('like = "b"\nthickness_ml = 4', "c"),
        'layer "c".thickness_ml',
        "delete thickness_ml",
    ),
    (
        "negative absorption",
        CONTACTS + layer('material = "GaAs"\nthickness_ml = 6\nabsorption_eV = -0.01'),
        'layer "b".absorption_eV',
        "at least 0",
    ),
    (
        "user material bad mass",
        STACK + "[materials.mine]\nconduction_band_eV = -3.2\nmass = -0.1\nlattice_nm = 0.58\n",
        "materials.mine.mass",
        "above 0",
    ),
    (
        "user material missing lattice",
        STACK + "[materials.mine]\nconduction_band_eV = -3.2\nmass = 0.1\n",
        "materials.mine.lattice_nm",
        "lattice_nm =",
    ),
    (
        "user material shadows table",
        STACK + "[materials.GaAs]\nconduction_band_eV = -3.2\nmass = 0.1\nlattice_nm = 0.58\n",
        "materials.GaAs",
        "GaAs_custom",
    ),
    ("bias zero steps", STACK + "[bias]\nsteps = 0\n", "bias.steps", "at least 1"),
    ("bias empty sweep", STACK + "[bias]\nfrom_V = 0.2\nto_V = 0.2\n", "bias.to_V", "steps = 1"),
    ("energy one point", STACK + "[energy]\npoints = 1\n", "energy.points", "at least 2"),
    ("energy reversed", STACK + "[energy]\nfrom_eV = 0.5\nto_eV = 0.1\n", "energy.to_eV", "above"),
    ("model slice zero", STACK + "[model]\nslice_nm = 0\n", "model.slice_nm", "above 0"),
    ("model nonparabolic string", STACK + '[model]\nnonparabolic = "yes"\n', "model.nonparabolic", "true"),
    (
        "objective unknown metric",
        CAMPAIGN.replace('"resonance_energy_eV"', '"resonance_energy"'),
        "objective[1].metric",
        "resonance_energy_eV",
    ),
    ("objective goal and target", CAMPAIGN + 'goal = "maximize"\n', "objective[1].goal", "exactly one"),
    ("objective without goal", CAMPAIGN.replace("target = 0.1\n", ""), "objective[1].goal", "exactly one"),
    (
        "objective misspelt goal",
        CAMPAIGN.replace("target = 0.1", 'goal = "maximise"'),
        "objective[1].goal",
        '"maximize"',
    ),
    ("objective log of signed metric", CAMPAIGN + "log = true\n", "objective[1].log", "delete log"),
    (
        "objective bias on zero-bias metric",
        CAMPAIGN + "at_bias_V = 0.1\n",
        "objective[1].at_bias_V",
        "delete at_bias_V",
    ),
    (
        "leakage without bias",
        CAMPAIGN.replace('"resonance_energy_eV"\ntarget = 0.1', '"leakage_A_cm2"\ngoal = "minimize"'),
        "objective[1].at_bias_V",
        "at_bias_V =",
    ),
    (
        "leakage bias outside sweep",
        CAMPAIGN.replace(
            '"resonance_energy_eV"\ntarget = 0.1', '"leakage_A_cm2"\ngoal = "minimize"\nat_bias_V = 2.0'
        ),
        "objective[1].at_bias_V",
        "extend",
    ),
    (
        "iv metric without sweep",
        CAMPAIGN.replace('"resonance_energy_eV"\ntarget = 0.1', '"pvcr"\ngoal = "maximize"')
        + "[bias]\nsteps = 2\n",
        "objective[1].metric",
        "steps",
    ),
    (
        "log target not positive",
        CAMPAIGN.replace(
            '"resonance_energy_eV"\ntarget = 0.1', '"resonance_width_eV"\ntarget = 0.0\nlog = true'
        ),
        "objective[1].target",
        "positive",
    ),
    (
        "yield without tolerance",
        CAMPAIGN.replace('"resonance_energy_eV"\ntarget = 0.1', '"yield"\ngoal = "maximize"'),
        "objective[1].metric",
        "[[tolerance.spec]]",
    ),
    ("duplicate objective", CAMPAIGN + OBJ, "objective[2]", "delete one"),
    ("objective in stack file", STACK + OBJ, "objective", "search ranges"),
    ("campaign without objective", CAMPAIGN.replace(OBJ, ""), "objective", "[[objective]]"),
    ("nothing to search", '[campaign]\nname = "x"\n' + STACK + OBJ, "layer", "range"),
    (
        "single design",
        CONTACTS + layer('material = "GaAs"\nthickness_ml = { min = 5, max = 5 }') + OBJ,
        "layer",
        "widen",
    ),
    ("bad campaign name", '[campaign]\nname = "runs/x"\n' + CAMPAIGN, "campaign.name", "letters"),
    (
        "constraint min above max",
        CAMPAIGN + '[[constraint]]\nmetric = "total_thickness_nm"\nmin = 5\nmax = 2\n',
        "constraint[1].min",
        "swap",
    ),
    (
        "constraint without bounds",
        CAMPAIGN + '[[constraint]]\nmetric = "total_thickness_nm"\n',
        "constraint[1].min",
        "max",
    ),
    (
        "constraint as table",
        CAMPAIGN + '[constraint]\nmetric = "total_thickness_nm"\nmax = 5\n',
        "constraint",
        "[[constraint]]",
    ),
    ("unknown sampler", CAMPAIGN + '[search]\nsampler = "nsgaii"\n', "search.sampler", '"nsga2"'),
    ("zero trials", CAMPAIGN + "[search]\ntrials = 0\n", "search.trials", "at least 1"),
    ("fractional batch", CAMPAIGN + "[search]\nbatch = 2.5\n", "search.batch", "whole number"),
    ("negative timeout", CAMPAIGN + "[search]\ntimeout_h = -1\n", "search.timeout_h", "above 0"),
    (
        "robust quantile above range",
        CAMPAIGN + "[tolerance]\nrobust = { samples = 8, quantile = 1.5 }\n",
        "tolerance.robust.quantile",
        "at most 0.5",
    ),
    (
        "robust unknown statistic",
        CAMPAIGN + '[tolerance]\nrobust = { statistic = "median" }\n',
        "tolerance.robust.statistic",
        "quantile, mean",
    ),
    (
        "robust mean with quantile",
        CAMPAIGN + '[tolerance]\nrobust = { statistic = "mean", quantile = 0.2 }\n',
        "tolerance.robust.quantile",
        "delete quantile",
    ),
    (
        "negative sigma",
        STACK + "[tolerance]\nthickness_sigma_ml = -0.5\n",
        "tolerance.thickness_sigma_ml",
        "at least 0",
    ),
    (
        "window on yield",
        STACK + '[tolerance]\n[[tolerance.spec]]\nmetric = "yield"\nmin = 0.5\n',
        "tolerance.spec[1].metric",
        "cannot be a window",
    ),
    (
        "misspelt window key",
        STACK + '[tolerance]\n[[tolerance.spec]]\nmetric = "pvcr"\nminimum = 3\n',
        "tolerance.spec[1].minimum",
        '"min"',
    ),
]


@pytest.mark.parametrize(
    ("text", "key", "hint"), [case[1:] for case in MALFORMED], ids=[case[0] for case in MALFORMED]
)
def test_malformed_input_names_key_and_fix(tmp_path, text, key, hint):
    path = write(tmp_path, text)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a bad file raises InputError, nothing else
        with pytest.raises(InputError) as info:
            load(path)
    err = info.value
    message = str(err)
    assert err.key is not None and key in err.key, message
    assert message.startswith(f"{path}: {err.key}: ")
    assert "Fix:" in message and "\n" not in message
    assert hint in err.fix or hint in err.problem, message


def test_malformed_table_is_large():
    assert len(MALFORMED) >= 25


def test_warnings_for_indirect_fraction_range(tmp_path):
    # AlGaAs turns indirect near x = 0.4 (physics.materials); the upper end of the range
    # crosses over, which is worth a warning but not an error.
    text = (
        CONTACTS + layer('material = "AlGaAs"\nfraction = { min = 0.2, max = 0.6 }\nthickness_ml = 6') + OBJ
    )
    spec = load_text(tmp_path, text)
    assert any(w.startswith('layer "b".material') and "indirect" in w for w in spec.warnings)


def test_robust_in_stack_file_is_a_warning(tmp_path):
    spec = load_text(tmp_path, STACK + "[tolerance]\nrobust = { samples = 8 }\n")
    assert spec.tolerance.robust.samples == 8
    assert any(w.startswith("tolerance.robust") for w in spec.warnings)
