"""Choosing among the front: balanced order, best per objective, mirror twins, --pick."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.results.choice import (
    apply_pick,
    balanced_order,
    best_of_each_objective,
    mirror_of,
    parse_pick,
)


def front(objectives, directions, materials, thickness, energy):
    n = len(objectives)
    return xr.Dataset(
        {
            "objective_value": (("design", "objective"), np.asarray(objectives, float)),
            "objective_direction": (("objective",), np.asarray(directions)),
            "material": (("design", "layer"), np.asarray(materials)),
            "thickness_nm": (("design", "layer"), np.asarray(thickness, float)),
            "fraction": (("design", "layer"), np.full(np.shape(thickness), np.nan)),
            "resonance_energy_eV": (("design",), np.asarray(energy, float)),
        },
        coords={"design": np.arange(10, 10 + n), "layer": ["a", "b", "c"]},
    )


STACKS = [["AlAs", "GaAs", "AlGaAs"], ["AlGaAs", "GaAs", "AlAs"], ["AlAs", "GaAs", "AlAs"], ["AlAs", "InAs", "AlAs"]]
THICK = [[1.0, 5.0, 2.0], [2.0, 5.0, 1.0], [1.0, 5.0, 1.0], [1.0, 4.0, 1.0]]


@pytest.fixture
def ds():
    # Objective 1 minimised, objective 2 maximised (stored as is).
    return front([[0.0, 1.0], [0.0, 1.0], [0.5, 5.0], [1.0, 10.0]], ["minimize", "maximize"], STACKS, THICK,
                 [0.150, 0.150, 0.152, 0.2])


def test_balanced_order_is_the_distance_to_the_ideal_point(ds):
    # Scaled minimised points: (0, 1), (0, 1), (0.5, 0.5556), (1, 0): norms 1, 1, 0.747, 1.
    assert int(balanced_order(ds)[0]) == 2
    assert best_of_each_objective(ds) == [0, 3]


def test_a_reversed_stack_is_a_mirror_twin_and_a_symmetric_one_is_not(ds):
    np.testing.assert_array_equal(mirror_of(ds), [-1, 0, -1, -1])


def test_pick_filters_and_ranks(ds):
    chosen = apply_pick(ds, parse_pick("resonance_energy_eV within 0.005 of 0.15, then max resonance_energy_eV"))
    assert chosen.tolist() == [2, 0, 1]
    assert apply_pick(ds, parse_pick("resonance_energy_eV > 0.151")).tolist() == [2, 3]
    assert apply_pick(ds, parse_pick("resonance_energy_eV between 0.149 and 0.151, then closest "
                                     "resonance_energy_eV to 0.1")).tolist() == [0, 1]


@pytest.mark.parametrize("text,words", [
    ("", "empty"),
    ("resonance_energy_eV near 0.15", 'cannot read the clause "resonance_energy_eV near 0.15"'),
    ("then max resonance_energy_eV, resonance_energy_eV < 1", "must come last"),
    ("then best resonance_energy_eV", "cannot read the ranking"),
])
def test_a_bad_pick_is_a_clear_error(text, words):
    with pytest.raises(InputError) as caught:
        parse_pick(text)
    assert caught.value.key == "--pick" and words in str(caught.value)


def test_an_unknown_metric_names_the_stored_ones(ds):
    with pytest.raises(InputError) as caught:
        apply_pick(ds, parse_pick("pvcr > 3"))
    assert "resonance_energy_eV" in caught.value.fix
