"""Band parameters of III-V semiconductors and their ternary alloys for Γ-valley tunnelling.

Sources
-------
* Binary band parameters and ternary bowing parameters: I. Vurgaftman, J. R. Meyer and
  L. R. Ram-Mohan, "Band parameters for III-V compound semiconductors and their alloys",
  J. Appl. Phys. 89, 5815 (2001), cited as "Vurgaftman 2001". The numbers of the table
  below were entered from memory of that review and have not been checked against the
  printed tables; every value carries its own source string (``Material.sources``), and
  the values recalled with less confidence are marked "uncertain" there.
* Temperature dependence of the gaps: Y. P. Varshni, Physica 34, 149 (1967),
  ``Eg(T) = Eg(0) - alpha T^2 / (T + beta)``.
* Alloy lattice constants: Vegard's law (L. Vegard, Z. Phys. 5, 17, 1921), which
  Vurgaftman 2001 recommends for the III-V ternaries.

Conventions
-----------
* Energies in eV on one absolute scale, the valence-band-offset (VBO) scale of
  Vurgaftman 2001 on which the valence-band maximum of InSb is zero. The Γ-valley
  conduction-band edge is ``E_c = VBO + Eg_Γ(T)``, so the edges of any two materials of
  this module line up directly. User-defined materials give their edge on this scale.
* Unstrained bulk values. Pseudomorphic strain (e.g. AlAs on InP) shifts the edges by a
  few tenths of an eV and is not included.
* Gaps (Γ, X, L) are measured from the valence-band maximum. The Γ gap is the one used
  for the optional non-parabolicity ``m(E) = m (1 + (E - E_c) / Eg_Γ)``.
* Masses are Γ-valley band-edge masses in units of m0, taken as temperature independent.
* Lengths in nm. The (001) monolayer is half the cubic lattice constant. Lattice
  constants are the 300 K values with a linear thermal expansion.
* Temperatures in K.
* Alloy ``A_x B_(1-x) C`` (key ``"AlGaAs"``, ``"InGaAs"``, ``"InAlAs"``): ``x`` is the
  fraction of the first-named cation. Each property follows
  ``P(x) = x P_AC + (1 - x) P_BC - x (1 - x) C(x)`` with the bowing ``C(x)`` of
  Vurgaftman 2001 (a polynomial in ``x``; only the AlGaAs Γ gap has a linear term).
  Gaps are evaluated at temperature for the two binaries first and then interpolated
  with temperature-independent bowing.
* A material whose X or L edge lies below its Γ edge conducts through a valley this
  package does not model; :func:`material` warns with :class:`IndirectValleyWarning`.
"""

from __future__ import annotations

import difflib
import math
import re
import warnings
from dataclasses import dataclass, field
from typing import Mapping, NamedTuple

import numpy as np
from numpy.polynomial import polynomial as _polynomial

VURGAFTMAN_2001 = "Vurgaftman, Meyer & Ram-Mohan, J. Appl. Phys. 89, 5815 (2001)"
VARSHNI_1967 = "Varshni, Physica 34, 149 (1967)"
VEGARD_1921 = "Vegard, Z. Phys. 5, 17 (1921)"

#: Largest allowed deviation of the sum of the two cation fractions in a name from 1.
COMPOSITION_TOLERANCE = 1e-6

#: Temperature (K) at which the tabulated lattice constants hold.
LATTICE_REFERENCE_K = 300.0

#: Conduction valleys considered, in the order used to break ties (Γ wins a tie).
VALLEYS = ("Gamma", "X", "L")


class UnknownMaterialError(ValueError):
    """A material name that is neither in the table, an alloy composition, nor user-defined.

    Attributes
    ----------
    name : str
        The name that was not recognised.
    suggestions : list of str
        The nearest valid names (``difflib``), possibly empty.
    """

    def __init__(self, name: str, suggestions: list[str], known: list[str]):
        self.name = name
        self.suggestions = list(suggestions)
        hint = f"; did you mean {' or '.join(repr(s) for s in self.suggestions)}?" if self.suggestions else "."
        super().__init__(
            f"unknown material {name!r}{hint} Known materials: {', '.join(known)}; "
            f"alloys {', '.join(ALLOYS)} take a composition, either as fraction= "
            f"(fraction of the first-named cation) or in the name, e.g. "
            f"{', '.join(canonical_name(k, x) for k, x in REPRESENTATIVE_FRACTIONS.items())}."
        )


class IndirectValleyWarning(UserWarning):
    """The Γ valley is not the lowest conduction valley; X- or L-valley transport is not modelled."""


class Varshni(NamedTuple):
    """Varshni parameters of one gap: ``Eg(T) = gap0_eV - alpha_eV_K T^2 / (T + beta_K)``.

    ``beta_K = 0`` gives a gap linear in temperature (used where the source gives one).
    """

    gap0_eV: float
    alpha_eV_K: float
    beta_K: float


@dataclass(frozen=True)
class _Binary:
    """One row of the binary table (Vurgaftman 2001 parameters, units in the names)."""

    vbo_eV: float
    gap_gamma: Varshni
    gap_X: Varshni
    gap_L: Varshni
    mass: float
    lattice_300K_nm: float
    expansion_nm_K: float
    uncertain: tuple[str, ...] = ()


@dataclass(frozen=True)
class _Bowing:
    """Bowing parameters of one ternary, each a polynomial ``C(x) = c0 + c1 x + ...`` in eV (m0 for mass)."""

    source_name: str
    vbo: tuple[float, ...] = (0.0,)
    gap_gamma: tuple[float, ...] = (0.0,)
    gap_X: tuple[float, ...] = (0.0,)
    gap_L: tuple[float, ...] = (0.0,)
    mass: tuple[float, ...] = (0.0,)
    uncertain: tuple[str, ...] = ()


def _meV(alpha_meV_K: float) -> float:
    return alpha_meV_K * 1e-3


# Vurgaftman 2001, binary tables: alpha in meV/K as printed there, lattice constants in
# angstrom at 300 K (converted to nm), thermal expansion in angstrom/K (to nm/K).
# InP's X gap is given as linear in T (2.384 eV - 0.37 meV/K T), hence beta = 0.
_BINARIES: dict[str, _Binary] = {
    "GaAs": _Binary(-0.80, Varshni(1.519, _meV(0.5405), 204.0), Varshni(1.981, _meV(0.460), 204.0),
                    Varshni(1.815, _meV(0.605), 204.0), 0.067, 0.565325, 3.88e-6),
    "AlAs": _Binary(-1.33, Varshni(3.099, _meV(0.885), 530.0), Varshni(2.24, _meV(0.70), 530.0),
                    Varshni(2.46, _meV(0.605), 204.0), 0.15, 0.56611, 2.90e-6, uncertain=("gap_L",)),
    "InAs": _Binary(-0.59, Varshni(0.417, _meV(0.276), 93.0), Varshni(1.433, _meV(0.276), 93.0),
                    Varshni(1.133, _meV(0.276), 93.0), 0.026, 0.60583, 2.74e-6, uncertain=("gap_X", "gap_L")),
    "InP": _Binary(-0.94, Varshni(1.4236, _meV(0.363), 162.0), Varshni(2.384, _meV(0.37), 0.0),
                   Varshni(2.014, _meV(0.363), 162.0), 0.0795, 0.58697, 2.79e-6, uncertain=("gap_X",)),
    "GaSb": _Binary(-0.03, Varshni(0.812, _meV(0.417), 140.0), Varshni(1.141, _meV(0.475), 94.0),
                    Varshni(0.875, _meV(0.597), 140.0), 0.039, 0.60959, 4.72e-6, uncertain=("gap_X",)),
    "AlSb": _Binary(-0.41, Varshni(2.386, _meV(0.42), 140.0), Varshni(1.696, _meV(0.39), 140.0),
                    Varshni(2.329, _meV(0.58), 140.0), 0.14, 0.61355, 2.60e-6),
    "InSb": _Binary(0.0, Varshni(0.235, _meV(0.32), 170.0), Varshni(0.63, _meV(0.32), 170.0),
                    Varshni(0.93, _meV(0.32), 170.0), 0.0135, 0.64794, 3.48e-6, uncertain=("gap_X", "gap_L")),
}

#: Alloy key -> (binary of the first-named cation, binary of the second).
ALLOYS: dict[str, tuple[str, str]] = {
    "AlGaAs": ("AlAs", "GaAs"),
    "InGaAs": ("InAs", "GaAs"),
    "InAlAs": ("InAs", "AlAs"),
}

# Vurgaftman 2001, table of nonzero ternary bowing parameters; that review names the
# alloys AlGaAs, GaInAs and AlInAs. Lattice constants follow Vegard's law (no bowing).
_BOWING: dict[str, _Bowing] = {
    "AlGaAs": _Bowing("AlGaAs", gap_gamma=(-0.127, 1.310), gap_X=(0.055,)),
    "InGaAs": _Bowing("GaInAs", vbo=(-0.38,), gap_gamma=(0.477,), gap_X=(1.4,), gap_L=(0.33,), mass=(0.0091,),
                      uncertain=("gap_X", "gap_L")),
    "InAlAs": _Bowing("AlInAs", vbo=(-0.64,), gap_gamma=(0.70,), mass=(0.049,), uncertain=("gap_X", "gap_L")),
}

#: Composition of each alloy listed by :func:`catalogue` (the InP-lattice-matched ones for As alloys on InP).
REPRESENTATIVE_FRACTIONS: dict[str, float] = {"AlGaAs": 0.3, "InGaAs": 0.53, "InAlAs": 0.52}

_PARAMETER_LABELS = {
    "vbo": "valence-band offset (InSb = 0)",
    "gap_gamma": "Γ gap Eg(0), Varshni alpha, beta",
    "gap_X": "X gap Eg(0), Varshni alpha, beta",
    "gap_L": "L gap Eg(0), Varshni alpha, beta",
    "mass": "Γ electron mass",
    "lattice": "lattice constant at 300 K and thermal expansion",
}

# Material field -> table parameter it comes from (lattice is not bowed: Vegard's law).
_FIELD_PARAMETER = {
    "valence_band_eV": "vbo",
    "gap_eV": "gap_gamma",
    "gap_X_eV": "gap_X",
    "gap_L_eV": "gap_L",
    "mass": "mass",
    "lattice_nm": "lattice",
}

_USER_REQUIRED = ("conduction_band_eV", "mass", "lattice_nm")
_USER_OPTIONAL = ("gap_eV",)

_NUMBER = r"(\d+(?:\.\d*)?|\.\d+)"
_COMPOSITION = re.compile(rf"^([A-Z][a-z]?){_NUMBER}([A-Z][a-z]?){_NUMBER}([A-Z][a-z]?)$")
_ELEMENT = re.compile(r"[A-Z][a-z]?")


@dataclass(frozen=True)
class Material:
    """Band parameters of one material at one temperature.

    Attributes
    ----------
    name : str
        Display name, e.g. ``"GaAs"`` or ``"Al0.3Ga0.7As"`` (see :func:`canonical_name`).
    conduction_band_eV : float
        Γ-valley conduction-band edge on the absolute scale of the module (eV).
    mass : float
        Γ-valley electron effective mass (m0).
    gap_eV : float
        Γ gap (eV) for non-parabolicity; ``inf`` for a parabolic user material.
    lattice_nm : float
        Cubic lattice constant at ``temperature_K`` (nm).
    temperature_K : float
    alloy : str or None
        Alloy key (``"AlGaAs"``) for a ternary, else None.
    fraction : float or None
        Fraction of the first-named cation for a ternary, else None.
    sources : dict
        Field name -> citation of the value (and whether it was recalled from memory).
    valence_band_eV, gap_X_eV, gap_L_eV : float
        Valence-band maximum on the absolute scale and the X and L gaps (eV);
        NaN where unknown (user materials).
    """

    name: str
    conduction_band_eV: float
    mass: float
    gap_eV: float
    lattice_nm: float
    temperature_K: float
    alloy: str | None = None
    fraction: float | None = None
    sources: Mapping[str, str] = field(default_factory=dict, hash=False)
    valence_band_eV: float = math.nan
    gap_X_eV: float = math.nan
    gap_L_eV: float = math.nan

    @property
    def monolayer_nm(self) -> float:
        """Thickness of one (001) monolayer, half the cubic lattice constant (nm)."""
        return self.lattice_nm / 2.0

    @property
    def lowest_valley(self) -> str:
        """``"Gamma"``, ``"X"`` or ``"L"``: the conduction valley with the lowest edge."""
        return str(_lowest_valley(self.gap_eV, self.gap_X_eV, self.gap_L_eV))


# --------------------------------------------------------------------------- formulas


def varshni_gap_eV(gap0_eV, alpha_eV_K, beta_K, temperature_K):
    """Band gap at temperature by the Varshni relation.

    ``Eg(T) = Eg(0) - alpha T^2 / (T + beta)`` (Varshni, Physica 34, 149, 1967).

    Parameters
    ----------
    gap0_eV : float or ndarray
        Gap at 0 K (eV).
    alpha_eV_K : float or ndarray
        Varshni alpha (eV/K).
    beta_K : float or ndarray
        Varshni beta (K); 0 gives the linear law ``Eg(0) - alpha T``.
    temperature_K : float or ndarray
        Temperature (K), >= 0.

    Returns
    -------
    float or ndarray
        Gap in eV, broadcast over the inputs.
    """
    temperature_K = np.asarray(temperature_K, dtype=float)
    denominator = temperature_K + np.asarray(beta_K, dtype=float)
    # T = beta = 0 is a removable 0/0 (the shift vanishes as T); avoid the NaN.
    safe = np.where(denominator > 0.0, denominator, 1.0)
    shift = np.where(denominator > 0.0, alpha_eV_K * temperature_K**2 / safe, 0.0)
    return gap0_eV - shift


def _bowed(fraction, first, second, bowing: tuple[float, ...]):
    """``x P_first + (1 - x) P_second - x (1 - x) C(x)`` with ``C`` a polynomial in ``x``."""
    return fraction * first + (1.0 - fraction) * second - fraction * (1.0 - fraction) * _polynomial.polyval(
        fraction, bowing)


def _binary_properties(name: str, temperature_K: float) -> dict[str, float]:
    row = _BINARIES[name]
    return {
        "valence_band_eV": row.vbo_eV,
        "gap_eV": float(varshni_gap_eV(*row.gap_gamma, temperature_K)),
        "gap_X_eV": float(varshni_gap_eV(*row.gap_X, temperature_K)),
        "gap_L_eV": float(varshni_gap_eV(*row.gap_L, temperature_K)),
        "mass": row.mass,
        "lattice_nm": row.lattice_300K_nm + row.expansion_nm_K * (temperature_K - LATTICE_REFERENCE_K),
    }


def _alloy_properties(alloy: str, fraction: np.ndarray, temperature_K: float) -> dict[str, np.ndarray]:
    first, second = (_binary_properties(name, temperature_K) for name in ALLOYS[alloy])
    bowing = _BOWING[alloy]
    return {
        key: _bowed(fraction, first[key], second[key],
                    getattr(bowing, parameter) if parameter != "lattice" else (0.0,))
        for key, parameter in _FIELD_PARAMETER.items()
    }


def _lowest_valley(gap_eV, gap_X_eV, gap_L_eV) -> np.ndarray:
    """Valley label of the lowest conduction edge; unknown (NaN) X or L gaps never win."""
    gaps = np.stack(np.broadcast_arrays(*(np.where(np.isnan(g), np.inf, g)
                                          for g in map(np.asarray, (gap_eV, gap_X_eV, gap_L_eV)))))
    return np.asarray(VALLEYS)[np.argmin(gaps, axis=0)]


def _with_derived(properties: dict) -> dict:
    out = dict(properties)
    out["conduction_band_eV"] = properties["valence_band_eV"] + properties["gap_eV"]
    out["gamma_lowest"] = _lowest_valley(properties["gap_eV"], properties["gap_X_eV"],
                                         properties["gap_L_eV"]) == VALLEYS[0]
    return out


# --------------------------------------------------------------------------- validation


def _check_temperature(temperature_K) -> float:
    value = float(temperature_K)
    if not math.isfinite(value) or value < 0.0:
        raise ValueError(f"temperature must be a finite number of kelvin >= 0, got {temperature_K!r}")
    return value


def _check_fractions(alloy: str, fraction) -> np.ndarray:
    values = np.asarray(fraction, dtype=float)
    bad = ~((values >= 0.0) & (values <= 1.0))  # NaN is bad too
    if np.any(bad):
        shown = ", ".join(f"{v:g}" for v in values[bad].ravel()[:5])
        raise ValueError(
            f"{alloy} composition out of range: the fraction of {_cations(alloy)[0]} must lie in [0, 1], "
            f"got {shown}")
    return values


def _cations(alloy: str) -> tuple[str, str]:
    return tuple(_ELEMENT.findall(binary)[0] for binary in ALLOYS[alloy])


def _anion(alloy: str) -> str:
    return _ELEMENT.findall(ALLOYS[alloy][0])[1]


# (frozenset of cations, anion) -> alloy key, so names list their cations in either order.
_ALLOY_BY_ELEMENTS = {(frozenset(_cations(key)), _anion(key)): key for key in ALLOYS}


# --------------------------------------------------------------------------- names


def _format_fraction(value: float) -> str:
    return f"{value:.3f}".rstrip("0").rstrip(".")


def canonical_name(alloy: str, fraction: float | None = None) -> str:
    """Display name of a material, e.g. ``canonical_name("AlGaAs", 0.3) == "Al0.3Ga0.7As"``.

    Fractions are rounded to 3 decimals and written without trailing zeros; the second
    cation's fraction is ``1 - x`` of the rounded ``x``, so the two always sum to 1.
    A binary name with ``fraction=None`` is returned unchanged.

    Raises
    ------
    UnknownMaterialError
        ``alloy`` is neither an alloy key nor a binary.
    ValueError
        The fraction is missing for an alloy, given for a binary, or outside [0, 1].
    """
    if alloy in _BINARIES:
        if fraction is not None:
            raise ValueError(f"{alloy} is a binary compound and takes no fraction (got {fraction!r})")
        return alloy
    if alloy not in ALLOYS:
        raise _unknown(alloy)
    if fraction is None:
        raise ValueError(f"alloy {alloy} needs the fraction of {_cations(alloy)[0]}")
    x = round(float(_check_fractions(alloy, fraction)), 3)
    first, second = _cations(alloy)
    return f"{first}{_format_fraction(x)}{second}{_format_fraction(round(1.0 - x, 3))}{_anion(alloy)}"


def parse_name(name: str, *, user: Mapping | None = None) -> tuple[str, float | None]:
    """Split a material name into (binary, alloy key or user name) and alloy fraction.

    Parameters
    ----------
    name : str
        ``"GaAs"``, an alloy key ``"AlGaAs"``, a composition ``"Al0.3Ga0.7As"`` (cations
        in either order, fractions summing to 1 within :data:`COMPOSITION_TOLERANCE`),
        or a key of ``user``.
    user : mapping, optional
        User-defined materials; their names parse as themselves.

    Returns
    -------
    (str, float or None)
        ``("GaAs", None)``, ``("AlGaAs", None)``, ``("AlGaAs", 0.3)`` or ``(user_name, None)``;
        the fraction is that of the alloy key's first-named cation.

    Raises
    ------
    ValueError
        A composition whose fractions lie outside [0, 1] or do not sum to 1.
    UnknownMaterialError
        Anything else not recognised.
    """
    stripped = name.strip()
    if (user and stripped in user) or stripped in _BINARIES or stripped in ALLOYS:
        return stripped, None
    match = _COMPOSITION.match(stripped)
    if match is None:
        raise _unknown(stripped, user)
    cation_a, fraction_a, cation_b, fraction_b, anion = match.groups()
    alloy = _ALLOY_BY_ELEMENTS.get((frozenset((cation_a, cation_b)), anion))
    if alloy is None or cation_a == cation_b:
        raise _unknown(stripped, user)
    fractions = {cation_a: float(fraction_a), cation_b: float(fraction_b)}
    for cation, value in fractions.items():
        if not 0.0 <= value <= 1.0:
            raise ValueError(f"{stripped}: the fraction of {cation} must lie in [0, 1], got {value:g}")
    total = sum(fractions.values())
    if abs(total - 1.0) > COMPOSITION_TOLERANCE:
        raise ValueError(
            f"{stripped}: the cation fractions must sum to 1, got {fraction_a} + {fraction_b} = {total:g}; "
            f"write e.g. {canonical_name(alloy, _first_fraction(alloy, cation_a, float(fraction_a)))}")
    return alloy, fractions[_cations(alloy)[0]]


def _first_fraction(alloy: str, cation: str, value: float) -> float:
    """Fraction of the alloy key's first-named cation, given ``value`` for ``cation``."""
    return value if cation == _cations(alloy)[0] else 1.0 - value


def _known_names(user: Mapping | None = None) -> list[str]:
    return [*_BINARIES, *ALLOYS, *(user or {})]


def _unknown(name: str, user: Mapping | None = None) -> UnknownMaterialError:
    known = _known_names(user)
    candidates = known + [canonical_name(k, x) for k, x in REPRESENTATIVE_FRACTIONS.items()]
    by_lower = {c.lower(): c for c in candidates}
    # Compare case-insensitively, and also the name stripped of its numbers, so that a
    # composition of an unknown alloy (e.g. "Al0.3In0.7Sb") still finds alloy keys.
    queries = [name.lower(), re.sub(_NUMBER, "", name).lower()]
    suggestions: list[str] = []
    for query in queries:
        for hit in difflib.get_close_matches(query, list(by_lower), n=3, cutoff=0.6):
            if by_lower[hit] not in suggestions:
                suggestions.append(by_lower[hit])
    return UnknownMaterialError(name, suggestions[:3], known)


# --------------------------------------------------------------------------- sources


def _cite_binary(binary: str, parameter: str) -> str:
    certainty = "from memory, uncertain" if parameter in _BINARIES[binary].uncertain else "from memory"
    return f"Vurgaftman 2001, {binary} table: {_PARAMETER_LABELS[parameter]} ({certainty})"


def _cite_bowing(alloy: str, parameter: str) -> str:
    bowing = _BOWING[alloy]
    if parameter == "lattice":
        return f"Vegard's law, no bowing ({VEGARD_1921}; recommended by Vurgaftman 2001)"
    certainty = "from memory, uncertain" if parameter in bowing.uncertain else "from memory"
    return f"bowing C = {_polynomial_text(getattr(bowing, parameter))}: Vurgaftman 2001, {bowing.source_name} ({certainty})"


def _polynomial_text(coefficients: tuple[float, ...]) -> str:
    return " + ".join(f"{c:g}" if power == 0 else f"{c:g} x" if power == 1 else f"{c:g} x^{power}"
                      for power, c in enumerate(coefficients))


def _field_sources(key: str) -> dict[str, str]:
    """Material field -> citation, for a binary name or an alloy key."""
    def cite(parameter: str) -> str:
        if key in _BINARIES:
            return _cite_binary(key, parameter)
        first, second = ALLOYS[key]
        return (f"x P({first}) + (1-x) P({second}) - x(1-x) C; {_cite_bowing(key, parameter)}; "
                f"{first}: {_cite_binary(first, parameter)}; {second}: {_cite_binary(second, parameter)}")

    varshni = f"; temperature dependence: {VARSHNI_1967}"
    sources = {name: cite(parameter) for name, parameter in _FIELD_PARAMETER.items()}
    for gap in ("gap_eV", "gap_X_eV", "gap_L_eV"):
        sources[gap] += varshni
    sources["conduction_band_eV"] = (f"E_c = VBO + Eg_Γ(T); VBO: {sources['valence_band_eV']}; "
                                     f"Eg_Γ: {sources['gap_eV']}")
    return sources


# --------------------------------------------------------------------------- public API


def _from_table(key: str, fraction: float | None, temperature_K: float) -> Material:
    if fraction is None:
        properties = _with_derived(_binary_properties(key, temperature_K))
    else:
        properties = _with_derived(_alloy_properties(key, np.asarray(fraction, dtype=float), temperature_K))
    return Material(
        name=canonical_name(key, fraction),
        temperature_K=temperature_K,
        alloy=None if fraction is None else key,
        fraction=None if fraction is None else float(fraction),
        sources=_field_sources(key),
        **{name: float(properties[name]) for name in (
            "conduction_band_eV", "mass", "gap_eV", "lattice_nm", "valence_band_eV", "gap_X_eV", "gap_L_eV")},
    )


def _from_user(name: str, entry: Mapping, temperature_K: float) -> Material:
    if not isinstance(entry, Mapping):
        raise ValueError(f"user material {name!r} must be a table of {', '.join(_USER_REQUIRED)} "
                         f"and optionally gap_eV")
    missing = [k for k in _USER_REQUIRED if k not in entry]
    unknown = [k for k in entry if k not in _USER_REQUIRED + _USER_OPTIONAL]
    if missing or unknown:
        problems = ([f"missing {', '.join(missing)}"] if missing else []) + \
                   ([f"unknown key(s) {', '.join(map(str, unknown))}"] if unknown else [])
        raise ValueError(f"user material {name!r}: {'; '.join(problems)}; give conduction_band_eV "
                         f"(absolute scale, eV), mass (m0), lattice_nm and optionally gap_eV")
    values = {}
    for key in _USER_REQUIRED + _USER_OPTIONAL:
        raw = entry.get(key, math.inf)
        try:
            values[key] = float(raw)
        except (TypeError, ValueError):
            raise ValueError(f"user material {name!r}: {key} must be a number, got {raw!r}") from None
    if not math.isfinite(values["conduction_band_eV"]):
        raise ValueError(f"user material {name!r}: conduction_band_eV must be finite")
    for key in ("mass", "lattice_nm", "gap_eV"):
        if not values[key] > 0.0 or (key != "gap_eV" and not math.isfinite(values[key])):
            raise ValueError(f"user material {name!r}: {key} must be a positive number, got {values[key]:g}")
    given = f"user-defined ({name}), temperature independent"
    return Material(
        name=name,
        conduction_band_eV=values["conduction_band_eV"],
        mass=values["mass"],
        gap_eV=values["gap_eV"],
        lattice_nm=values["lattice_nm"],
        temperature_K=temperature_K,
        sources={"conduction_band_eV": given, "mass": given, "lattice_nm": given,
                 "gap_eV": given if "gap_eV" in entry else "not given: parabolic (gap = inf)"},
        valence_band_eV=values["conduction_band_eV"] - values["gap_eV"],
    )


def _warn_if_indirect(material_: Material) -> None:
    valley = material_.lowest_valley
    if valley == VALLEYS[0]:
        return
    edge = material_.gap_X_eV if valley == "X" else material_.gap_L_eV
    warnings.warn(
        f"{material_.name} at {material_.temperature_K:g} K is indirect: its {valley}-valley edge lies "
        f"{material_.gap_eV - edge:.3f} eV below the Γ-valley edge. {valley}-valley transport is not "
        f"modelled: the layer is treated with its Γ-valley edge only, so currents through it (and "
        f"barrier heights seen by electrons) may be wrong.",
        IndirectValleyWarning,
        stacklevel=3,
    )


def material(name: str, temperature_K: float = 300.0, *, fraction: float | None = None,
             user: Mapping[str, Mapping] | None = None) -> Material:
    """Band parameters of one material.

    Parameters
    ----------
    name : str
        A binary (``"GaAs"``, ``"AlAs"``, ``"InAs"``, ``"InP"``, ``"GaSb"``, ``"AlSb"``,
        ``"InSb"``), a composition (``"Al0.3Ga0.7As"``, ``"In0.53Ga0.47As"``,
        ``"In0.52Al0.48As"``), an alloy key (``"AlGaAs"``, ``"InGaAs"``, ``"InAlAs"``) with
        ``fraction``, or a key of ``user``. User names take precedence over the table.
    temperature_K : float
        Temperature (K), >= 0. User materials are temperature independent.
    fraction : float, optional
        Fraction of the alloy key's first-named cation, in [0, 1]. ``("AlGaAs", 0.3)``
        is the same material as ``"Al0.3Ga0.7As"``. NaN counts as not given.
    user : mapping, optional
        ``{name: {"conduction_band_eV": ..., "mass": ..., "lattice_nm": ..., "gap_eV": ...}}``
        with the edge on this module's absolute scale (eV), mass in m0, lattice constant in
        nm and the optional Γ gap in eV (omitted: ``inf``, parabolic).

    Returns
    -------
    Material

    Raises
    ------
    UnknownMaterialError
        Unknown name; ``.suggestions`` holds the nearest valid names.
    ValueError
        Bad composition (outside [0, 1], fractions not summing to 1, missing or
        contradictory ``fraction``), bad temperature, or a malformed user entry.

    Warns
    -----
    IndirectValleyWarning
        The X or L valley lies below the Γ valley (e.g. AlAs, AlSb, AlGaAs above x ~ 0.4);
        transport through those valleys is not modelled.
    """
    temperature_K = _check_temperature(temperature_K)
    if fraction is not None and math.isnan(float(fraction)):
        fraction = None
    key, parsed = parse_name(name, user=user)
    if user and key in user:
        if fraction is not None:
            raise ValueError(f"user material {key!r} takes no fraction (got {fraction!r})")
        return _from_user(key, user[key], temperature_K)
    if key in _BINARIES:
        if fraction is not None:
            raise ValueError(f"{key} is a binary compound and takes no fraction (got {fraction!r})")
        result = _from_table(key, None, temperature_K)
    else:
        if parsed is not None and fraction is not None and abs(parsed - float(fraction)) > COMPOSITION_TOLERANCE:
            raise ValueError(f"{name!r} has {_cations(key)[0]} fraction {parsed:g} but fraction={fraction!r} "
                             f"was also given; give one of them")
        x = parsed if parsed is not None else fraction
        if x is None:
            raise ValueError(f"alloy {key} needs a composition: fraction= (fraction of {_cations(key)[0]}, "
                             f"0 to 1) or a name such as {canonical_name(key, REPRESENTATIVE_FRACTIONS[key])}")
        result = _from_table(key, float(_check_fractions(key, x)), temperature_K)
    _warn_if_indirect(result)
    return result


def alloy_arrays(alloy: str, fraction, temperature_K: float = 300.0) -> dict[str, np.ndarray]:
    """Band parameters of an alloy, vectorised over its composition. Never warns.

    Parameters
    ----------
    alloy : str
        Alloy key of :data:`ALLOYS`.
    fraction : array_like
        Fractions of the first-named cation, each in [0, 1]; any shape.
    temperature_K : float
        Temperature (K).

    Returns
    -------
    dict of ndarray, each of the shape of ``fraction``
        ``conduction_band_eV`` (absolute scale), ``mass`` (m0), ``gap_eV`` (Γ gap),
        ``lattice_nm``; also ``valence_band_eV``, ``gap_X_eV``, ``gap_L_eV`` and the
        boolean ``gamma_lowest`` (False where X- or L-valley transport would matter; the
        caller decides whether to warn, see :func:`lowest_valley`).

    Raises
    ------
    UnknownMaterialError, ValueError
        Unknown alloy key; fraction outside [0, 1] or NaN; bad temperature.
    """
    if alloy not in ALLOYS:
        raise _unknown(alloy)
    temperature_K = _check_temperature(temperature_K)
    values = _check_fractions(alloy, fraction)
    return {key: np.asarray(value) for key, value in
            _with_derived(_alloy_properties(alloy, values, temperature_K)).items()}


def lowest_valley(alloy: str, fraction=None, temperature_K: float = 300.0) -> np.ndarray:
    """Label (``"Gamma"``, ``"X"`` or ``"L"``) of the lowest conduction valley, vectorised.

    Parameters
    ----------
    alloy : str
        Alloy key, or a binary name (then ``fraction`` is ignored and a 0-d array returned).
    fraction : array_like
        Fractions of the first-named cation in [0, 1].
    temperature_K : float

    Returns
    -------
    ndarray of str, shape of ``fraction``
    """
    if alloy in _BINARIES:
        gaps = _binary_properties(alloy, _check_temperature(temperature_K))
    else:
        gaps = alloy_arrays(alloy, fraction, temperature_K)
    return _lowest_valley(gaps["gap_eV"], gaps["gap_X_eV"], gaps["gap_L_eV"])


def catalogue(temperature_K: float = 300.0) -> list[Material]:
    """Every binary of the table and each alloy at its representative composition.

    The alloys appear as Al0.3Ga0.7As, In0.53Ga0.47As and In0.52Al0.48As
    (:data:`REPRESENTATIVE_FRACTIONS`). No warning is issued; indirect materials can be
    recognised by :attr:`Material.lowest_valley`.
    """
    temperature_K = _check_temperature(temperature_K)
    return [_from_table(name, None, temperature_K) for name in _BINARIES] + \
           [_from_table(key, x, temperature_K) for key, x in REPRESENTATIVE_FRACTIONS.items()]


#: Names of the binary compounds in the table.
BINARIES: tuple[str, ...] = tuple(_BINARIES)
