"""Checks of the material table against published and customary band parameters.

Every outside number names its source: Vurgaftman, Meyer & Ram-Mohan, J. Appl. Phys.
89, 5815 (2001) ("Vurgaftman 2001", recalled from memory), or "common practice" for
values device engineers routinely quote without a single source.
"""

import math
import warnings

import numpy as np
import pytest

from tunnelsmith.physics import materials as mt
from tunnelsmith.physics.materials import IndirectValleyWarning, UnknownMaterialError


def _quiet(name, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", IndirectValleyWarning)
        return mt.material(name, **kwargs)


def edge_eV(name, temperature_K=300.0):
    return mt.material(name, temperature_K).conduction_band_eV


@pytest.fixture
def no_warnings():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        yield


# ----------------------------------------------------------------- formulas by hand


def test_varshni_matches_hand_calculation():
    # GaAs, Vurgaftman 2001 (from memory): Eg(0) = 1.519 eV, alpha = 0.5405 meV/K, beta = 204 K.
    for temperature_K in (0.0, 77.0, 300.0):
        expected = 1.519 - 0.5405e-3 * temperature_K**2 / (temperature_K + 204.0)
        assert mt.material("GaAs", temperature_K).gap_eV == pytest.approx(expected, abs=1e-12)
    assert mt.material("GaAs", 300.0).gap_eV == pytest.approx(1.42248, abs=1e-5)  # by hand


def test_varshni_linear_form_is_finite_at_zero_kelvin():
    assert mt.varshni_gap_eV(2.384, 0.37e-3, 0.0, 0.0) == 2.384
    assert mt.varshni_gap_eV(2.384, 0.37e-3, 0.0, 300.0) == pytest.approx(2.384 - 0.111)
    # InP X gap is linear in T in Vurgaftman 2001 (from memory: 2.384 eV - 0.37 meV/K T).
    assert mt.material("InP", 0.0).gap_X_eV == pytest.approx(2.384)


def test_gaps_shrink_and_lattice_expands_with_temperature():
    cold, warm = mt.material("InAs", 77.0), mt.material("InAs", 300.0)
    assert warm.gap_eV < cold.gap_eV
    assert warm.lattice_nm > cold.lattice_nm


def test_monolayer_is_half_the_lattice_constant():
    gaas = mt.material("GaAs")
    assert gaas.monolayer_nm == gaas.lattice_nm / 2
    # a(GaAs, 300 K) = 5.65325 angstrom (Vurgaftman 2001, from memory) -> 0.2827 nm per monolayer.
    assert gaas.monolayer_nm == pytest.approx(0.2827, abs=1e-4)


def test_absolute_scale_is_the_vurgaftman_vbo_scale():
    # Vurgaftman 2001 (from memory): InSb VBO = 0, GaAs -0.80, AlAs -1.33, InAs -0.59,
    # InP -0.94, GaSb -0.03, AlSb -0.41 eV.
    expected = {"InSb": 0.0, "GaAs": -0.80, "AlAs": -1.33, "InAs": -0.59, "InP": -0.94,
                "GaSb": -0.03, "AlSb": -0.41}
    for name, vbo_eV in expected.items():
        record = _quiet(name)
        assert record.valence_band_eV == vbo_eV
        assert record.conduction_band_eV == pytest.approx(vbo_eV + record.gap_eV, abs=1e-15)


def test_algaas_gamma_gap_bowing_by_hand():
    # Vurgaftman 2001 (from memory): AlGaAs Γ-gap bowing C = -0.127 + 1.310 x, x = Al fraction;
    # AlAs Eg(0) = 3.099 eV, alpha = 0.885 meV/K, beta = 530 K.
    x = 0.3
    gaas = 1.519 - 0.5405e-3 * 300.0**2 / 504.0
    alas = 3.099 - 0.885e-3 * 300.0**2 / 830.0
    expected = x * alas + (1 - x) * gaas - x * (1 - x) * (-0.127 + 1.310 * x)
    assert mt.material("Al0.3Ga0.7As").gap_eV == pytest.approx(expected, abs=1e-12)


# ----------------------------------------------------------------- band offsets


def test_gaas_alas_gamma_offset():
    offset = _quiet("AlAs").conduction_band_eV - edge_eV("GaAs")
    # By hand from Vurgaftman 2001 (from memory): the AlAs valence band lies 0.53 eV below
    # that of GaAs (VBO -1.33 vs -0.80 eV), the Γ gaps differ by 3.003 - 1.4225 eV at 300 K.
    assert offset == pytest.approx(-0.53 + (3.099 - 0.885e-3 * 9e4 / 830) - (1.519 - 0.5405e-3 * 9e4 / 504), abs=1e-12)
    # Common practice: the GaAs/AlAs Γ-Γ conduction-band offset is about 1.0-1.05 eV.
    assert 1.00 <= offset <= 1.06


def test_algaas_gaas_offset():
    barrier, well = mt.material("Al0.3Ga0.7As"), mt.material("GaAs")
    offset = barrier.conduction_band_eV - well.conduction_band_eV
    share = offset / (barrier.gap_eV - well.gap_eV)
    # Common practice: Delta Ec ~ 0.22-0.25 eV for x = 0.3, about 62-65 % of Delta Eg. The
    # Vurgaftman 2001 Γ gap of Al0.3Ga0.7As at 300 K (1.84 eV) is ~40 meV above the older
    # 1.424 + 1.247 x fit (common practice), so the offset lands at 0.26 eV, share 62 %.
    assert 0.22 <= offset <= 0.27
    assert 0.60 <= share <= 0.67


def test_ingaas_inalas_offset():
    offset = edge_eV("In0.52Al0.48As") - edge_eV("In0.53Ga0.47As")
    # Common practice: In0.53Ga0.47As/In0.52Al0.48As Delta Ec ~ 0.50-0.53 eV.
    assert 0.50 <= offset <= 0.53


def test_ingaas_alas_offset_with_and_without_strain():
    alas = _quiet("AlAs")
    unstrained = alas.conduction_band_eV - edge_eV("In0.53Ga0.47As")
    assert 1.45 <= unstrained <= 1.60  # unstrained bulk, this table
    # Common practice quotes 1.2-1.3 eV for AlAs barriers pseudomorphic on InP. The
    # difference is the hydrostatic shift of strained AlAs: a_c = -5.64 eV, c11 = 1250 GPa,
    # c12 = 534 GPa (Vurgaftman 2001, from memory), biaxial strain to the InP lattice.
    in_plane = mt.material("InP").lattice_nm / alas.lattice_nm - 1.0
    volume = 2.0 * in_plane * (1.0 - 534.0 / 1250.0)
    strained = unstrained - 5.64 * volume
    assert 1.20 <= strained <= 1.30


# ----------------------------------------------------------------- InGaAs on InP


def test_ingaas_and_inalas_lattice_matched_to_inp():
    # Common practice: In0.53Ga0.47As and In0.52Al0.48As are lattice matched to InP.
    inp = mt.material("InP").lattice_nm
    for alloy, expected in (("InGaAs", 0.53), ("InAlAs", 0.52)):
        ends = mt.alloy_arrays(alloy, np.array([0.0, 1.0]))["lattice_nm"]
        matched = (inp - ends[0]) / (ends[1] - ends[0])  # Vegard's law is linear in x
        assert matched == pytest.approx(expected, abs=0.01)


def test_in053ga047as_gap_and_mass():
    ingaas = mt.material("In0.53Ga0.47As")
    # Common practice: Eg(In0.53Ga0.47As, 300 K) ~ 0.74-0.75 eV; the Vurgaftman 2001 bowing
    # (0.477 eV, from memory) gives 0.737 eV.
    assert ingaas.gap_eV == pytest.approx(0.745, abs=0.01)
    # Common practice: m ~ 0.041-0.043 m0 (this table gives 0.0430).
    assert 0.041 <= ingaas.mass <= 0.044


# ----------------------------------------------------------------- names and alloys


def test_name_and_fraction_are_equivalent():
    assert mt.material("Al0.3Ga0.7As") == mt.material("AlGaAs", fraction=0.3)
    assert mt.material("In0.53Ga0.47As", 77.0) == mt.material("InGaAs", 77.0, fraction=0.53)
    assert mt.material("Ga0.7Al0.3As") == mt.material("AlGaAs", fraction=0.3)  # cation order is free
    assert mt.material("Al0.3Ga0.7As", fraction=0.3).fraction == 0.3


def test_canonical_names_round_trip():
    assert mt.canonical_name("AlGaAs", 0.3) == "Al0.3Ga0.7As"
    assert mt.canonical_name("InGaAs", 0.53) == "In0.53Ga0.47As"
    assert mt.canonical_name("InAlAs", 0.52) == "In0.52Al0.48As"
    assert mt.canonical_name("AlGaAs", 0.25) == "Al0.25Ga0.75As"
    assert mt.canonical_name("AlGaAs", 1 / 3) == "Al0.333Ga0.667As"
    assert mt.canonical_name("AlGaAs", 1.0) == "Al1Ga0As"
    assert mt.canonical_name("GaAs") == "GaAs"
    for alloy, x in (("AlGaAs", 0.3), ("InGaAs", 0.53), ("InAlAs", 0.52), ("AlGaAs", 0.0)):
        assert mt.parse_name(mt.canonical_name(alloy, x)) == (alloy, pytest.approx(x))
    assert mt.parse_name("GaAs") == ("GaAs", None)
    assert mt.parse_name("InGaAs") == ("InGaAs", None)


def test_alloy_arrays_agree_with_material():
    fraction = np.array([[0.0, 0.2, 0.35], [0.5, 0.8, 1.0]])
    for alloy in mt.ALLOYS:
        for temperature_K in (4.2, 300.0):
            arrays = mt.alloy_arrays(alloy, fraction, temperature_K)
            for index, x in np.ndenumerate(fraction):
                record = _quiet(alloy, fraction=float(x), temperature_K=temperature_K)
                for key in ("conduction_band_eV", "mass", "gap_eV", "lattice_nm"):
                    assert arrays[key].shape == fraction.shape
                    assert arrays[key][index] == pytest.approx(getattr(record, key), rel=1e-13, abs=1e-15)
                assert arrays["gamma_lowest"][index] == (record.lowest_valley == "Gamma")


def test_alloy_endpoints_are_the_binaries():
    keys = ("conduction_band_eV", "mass", "gap_eV", "lattice_nm", "gap_X_eV", "gap_L_eV")
    for alloy, (first, second) in mt.ALLOYS.items():
        for temperature_K in (10.0, 300.0):
            for x, binary in ((1.0, first), (0.0, second)):
                mixed = _quiet(alloy, fraction=x, temperature_K=temperature_K)
                pure = _quiet(binary, temperature_K=temperature_K)
                for key in keys:
                    assert getattr(mixed, key) == pytest.approx(getattr(pure, key), abs=1e-12)


# ----------------------------------------------------------------- bad input


@pytest.mark.parametrize("name, message", [
    ("Al0.3Ga0.6As", "sum to 1"),
    ("Al1.3Ga-0.3As", None),  # not a composition: the minus sign does not parse
    ("Al1.2Ga0.2As", "[0, 1]"),
])
def test_bad_compositions_are_rejected(name, message):
    with pytest.raises(ValueError) as info:
        mt.material(name)
    if message:
        assert message in str(info.value)


def test_bad_fraction_arguments_are_rejected():
    with pytest.raises(ValueError, match=r"\[0, 1\]"):
        mt.material("AlGaAs", fraction=1.2)
    with pytest.raises(ValueError, match=r"\[0, 1\]"):
        mt.alloy_arrays("InGaAs", np.array([0.5, -0.1]), 300.0)
    with pytest.raises(ValueError, match=r"\[0, 1\]"):
        mt.alloy_arrays("InGaAs", np.array([np.nan]), 300.0)
    with pytest.raises(ValueError, match="needs a composition"):
        mt.material("AlGaAs")
    with pytest.raises(ValueError, match="takes no fraction"):
        mt.material("GaAs", fraction=0.3)
    with pytest.raises(ValueError, match="also given"):
        mt.material("Al0.3Ga0.7As", fraction=0.4)
    with pytest.raises(ValueError, match="temperature"):
        mt.material("GaAs", -1.0)


def test_composition_tolerance_is_one_in_a_million():
    assert mt.parse_name("In0.5300005Ga0.47As")[0] == "InGaAs"
    with pytest.raises(ValueError, match="sum to 1"):
        mt.parse_name("In0.53001Ga0.47As")


def test_unknown_names_suggest_the_nearest():
    with pytest.raises(UnknownMaterialError) as info:
        mt.material("GaAss")
    assert isinstance(info.value, ValueError)
    assert "GaAs" in info.value.suggestions
    assert "GaAs" in str(info.value)
    with pytest.raises(UnknownMaterialError) as info:
        mt.material("gaas")
    assert info.value.suggestions[0] == "GaAs"
    with pytest.raises(UnknownMaterialError) as info:
        mt.material("Al0.3In0.7Sb")  # not an alloy of the table
    assert "InAlAs" in info.value.suggestions or "AlSb" in info.value.suggestions
    with pytest.raises(UnknownMaterialError) as info:
        mt.material("Barrier-X", user={"BarrierX": {"conduction_band_eV": 1.0, "mass": 0.1, "lattice_nm": 0.58}})
    assert info.value.suggestions == ["BarrierX"]


# ----------------------------------------------------------------- user materials


def test_user_material_with_and_without_gap(no_warnings):
    user = {"HfOx": {"conduction_band_eV": 2.1, "mass": 0.3, "lattice_nm": 0.5},
            "Q": {"conduction_band_eV": 0.4, "mass": 0.05, "lattice_nm": 0.59, "gap_eV": 0.9}}
    hfox = mt.material("HfOx", user=user)
    assert (hfox.conduction_band_eV, hfox.mass, hfox.lattice_nm) == (2.1, 0.3, 0.5)
    assert hfox.gap_eV == math.inf and hfox.monolayer_nm == 0.25
    assert hfox.sources["gap_eV"].startswith("not given")
    assert mt.material("Q", user=user).gap_eV == 0.9
    assert mt.parse_name("Q", user=user) == ("Q", None)


def test_malformed_user_material_is_rejected():
    with pytest.raises(ValueError, match="missing lattice_nm"):
        mt.material("A", user={"A": {"conduction_band_eV": 1.0, "mass": 0.1}})
    with pytest.raises(ValueError, match="mass must be a positive number"):
        mt.material("A", user={"A": {"conduction_band_eV": 1.0, "mass": 0.0, "lattice_nm": 0.5}})
    with pytest.raises(ValueError, match="unknown key"):
        mt.material("A", user={"A": {"conduction_band_eV": 1.0, "mass": 0.1, "lattice_nm": 0.5, "gap": 1}})


# ----------------------------------------------------------------- valleys


@pytest.mark.parametrize("name, valley", [("AlAs", "X"), ("AlSb", "X"), ("Al0.5Ga0.5As", "X"),
                                          ("In0.2Al0.8As", "X")])
def test_indirect_materials_warn(name, valley):
    # Common practice: AlAs and AlSb are indirect (X), AlGaAs turns indirect near x ~ 0.4-0.45.
    with pytest.warns(IndirectValleyWarning, match=f"{valley}-valley transport is not modelled"):
        record = mt.material(name)
    assert record.lowest_valley == valley


@pytest.mark.parametrize("name", ["GaAs", "InAs", "InP", "GaSb", "InSb", "Al0.3Ga0.7As",
                                  "In0.53Ga0.47As", "In0.52Al0.48As"])
def test_direct_materials_are_quiet(name, no_warnings):
    assert mt.material(name).lowest_valley == "Gamma"


def test_gasb_l_valley_is_close_above_gamma():
    # Common practice: in GaSb the L valley lies less than ~0.1 eV above the Γ valley.
    gasb = mt.material("GaSb")
    assert 0.0 < gasb.gap_L_eV - gasb.gap_eV < 0.1


def test_algaas_crossover_and_quiet_arrays(no_warnings):
    fraction = np.linspace(0.0, 1.0, 1001)
    arrays = mt.alloy_arrays("AlGaAs", fraction, 300.0)
    first_indirect = fraction[np.argmin(arrays["gamma_lowest"])]
    # Common practice: AlGaAs becomes indirect at x ~ 0.4-0.45; with the Vurgaftman 2001
    # parameters (from memory) the L valley drops below Γ at x ~ 0.41 at 300 K.
    assert 0.38 <= first_indirect <= 0.47
    assert np.all(arrays["gamma_lowest"][fraction < first_indirect])
    assert not np.any(arrays["gamma_lowest"][fraction >= first_indirect])
    valleys = mt.lowest_valley("AlGaAs", fraction, 300.0)
    assert set(valleys[fraction > 0.6]) == {"X"}
    assert np.array_equal(valleys == "Gamma", arrays["gamma_lowest"])


# ----------------------------------------------------------------- catalogue


def test_catalogue_lists_every_material_with_sources(no_warnings):
    records = mt.catalogue()
    names = [r.name for r in records]
    assert set(names) >= {"GaAs", "AlAs", "InAs", "InP", "GaSb", "AlSb",
                          "Al0.3Ga0.7As", "In0.53Ga0.47As", "In0.52Al0.48As"}
    for record in records:
        for key in ("conduction_band_eV", "mass", "gap_eV", "lattice_nm"):
            assert "Vurgaftman 2001" in record.sources[key]
            assert "from memory" in record.sources[key]
    assert mt.catalogue(77.0)[0].temperature_K == 77.0
