"""Stack and campaign files: schema, validation and description.

A *stack file* describes one layer structure between two doped contacts. A *campaign
file* is a stack file in which layer values may be search ranges, plus objectives,
constraints, search settings and growth tolerances. Both are TOML; the format is the
contract of section 4 of the design document. :func:`load` reads either into an
immutable :class:`StackSpec`; :func:`describe` renders one for ``tunnelsmith check``.

Every problem in a file is raised as :class:`~optimize.errors.InputError` naming the
file, the dotted key (``layer "well".thickness_nm``, ``objective[2].target``; array
entries count from 1) and a concrete fix. Misspelt keys are matched to the nearest
valid key with :mod:`difflib`.

Ties
----
``like = "other"`` makes a layer a copy of another one: in the loaded spec the tied
layer carries the material, fraction and thickness of the layer it is tied to (ranges
included) and its ``like`` names the *root* of the tie chain, so a search draws one
value for the whole group. A tied layer keeps its own ``absorption_eV`` when it sets
one and otherwise inherits the root's.

Units follow the key names: eV, nm, monolayers (ml), K, V, cm^-3, A/cm^2.
"""

from __future__ import annotations

import math
import os
import re
import stat
import tomllib
import unicodedata
import warnings
from dataclasses import replace
from pathlib import Path
from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.inputs import limits
from tunnelsmith.physics import materials as _materials
from tunnelsmith.physics.metrics import CATALOGUE as METRICS
from tunnelsmith.optimize.inputs.dimensions import design_count
from tunnelsmith.optimize.inputs.schema import BiasSweep, Choices, ConstraintSpec, ContactSpec, EnergyGrid, FloatRange, IntRange, LayerSpec, ModelSpec, ObjectiveSpec, RobustSpec, SAMPLERS, SearchSpec, StackSpec, ToleranceSpec, WindowSpec, YIELD, _MIN_IV_STEPS
from tunnelsmith.optimize.inputs.plausibility import plausibility_warnings
from tunnelsmith.optimize.inputs.tables import _MISSING, _nearest, _quoted, _rename_fix, _shown
from tunnelsmith.optimize.inputs.tables import KeyHomes, _Table, _fmt


_TOP_KEYS = (
    "campaign", "temperature_K", "emitter", "collector", "layer", "materials",
    "bias", "energy", "model", "objective", "constraint", "search", "tolerance",
)  # fmt: skip


_CAMPAIGN_KEYS = ("name", "description")


_CONTACT_KEYS = ("material", "fraction", "doping_cm3")


_LAYER_KEYS = ("name", "material", "fraction", "thickness_ml", "thickness_nm", "like", "absorption_eV")


_TIED_KEYS = ("material", "fraction", "thickness_ml", "thickness_nm")


_USER_MATERIAL_KEYS = ("conduction_band_eV", "mass", "lattice_nm", "gap_eV")


_BIAS_KEYS = ("from_V", "to_V", "steps")


_ENERGY_KEYS = ("from_eV", "to_eV", "points")


_MODEL_KEYS = ("nonparabolic", "slice_nm", "max_levels", "series_resistance_ohm_cm2")


_OBJECTIVE_KEYS = ("metric", "goal", "target", "log", "at_bias_V")


_BOUNDED_KEYS = ("metric", "min", "max", "at_bias_V")


_SEARCH_KEYS = ("sampler", "trials", "batch", "seed", "timeout_h")


_TOLERANCE_KEYS = (
    "thickness_sigma_ml",
    "growth_rate_sigma",
    "fraction_sigma",
    "samples",
    "seed",
    "robust",
    "spec",
)


_ROBUST_KEYS = ("samples", "quantile", "statistic")


_GOALS = ("maximize", "minimize")


_STATISTICS = ("quantile", "mean")


#: Largest file read. A campaign of the most layers allowed (limits.MAX_LAYERS), one key
#: per line with a comment on every line, stays under 150 kB; a file beyond this is not
#: a stack file, and reading it (or parsing it, ~1.4 MB/s) would only delay the answer.
MAX_FILE_BYTES = 512 * 2**10

#: Special files and what they are called in messages; none of them is read, because a
#: FIFO blocks until a writer comes and a device such as /dev/zero never ends.
_SPECIAL_FILES = (
    (stat.S_ISFIFO, "a FIFO (named pipe)"),
    (stat.S_ISCHR, "a character device"),
    (stat.S_ISBLK, "a block device"),
    (stat.S_ISSOCK, "a socket"),
)

#: Scatter of the growth model beyond which it no longer describes a tolerance: the
#: thing itself is unknown. Calibrated molecular-beam epitaxy has +-1 monolayer
#: interface steps, a 1-2 % growth-rate drift and fractions known to ~0.005 (common
#: practice; the defaults of ToleranceSpec). At growth_rate_sigma = 0.5 the factor
#: 1 + eps is already negative (clipped to zero thickness) in 2.3 % of the samples.
MAX_THICKNESS_SIGMA_ml = 5.0
MAX_GROWTH_RATE_SIGMA = 0.5
MAX_FRACTION_SIGMA = 0.1

#: Thickest single layer: beyond 10 um a layer is a substrate or a bulk region, not a
#: layer of a tunnelling stack (common practice; the model already warns past 50 nm).
#: In monolayers: 40 000 ml is 11-13 um for monolayers of 0.28-0.33 nm.
MAX_LAYER_nm = 10_000.0
MAX_LAYER_ml = 40_000

#: Seeds go to numpy's legacy generator inside Optuna's samplers, which takes 32-bit
#: unsigned seeds only (a larger one is a ValueError there); the tolerance seed is
#: stored as a netCDF attribute and kept in the same range.
MAX_SEED = 2**32 - 1

#: Longest [search] timeout_h: a year, as for --timeout on the command line; anything
#: longer is a typo and overflows the deadline arithmetic.
MAX_TIMEOUT_h = 366 * 24.0

#: A user material's conduction-band mass and cubic lattice constant: beyond these it is
#: no semiconductor, and both feed the sizes of a run (thicknesses in monolayers, the
#: number of levels a layer holds).
MAX_USER_MASS = 10.0
MAX_USER_LATTICE_nm = 1.0
_USER_MASS_REASON = ("conduction-band effective masses lie between about 0.01 m0 (InSb) and 2 m0 (the heavy "
                     "valleys), common practice")
_USER_LATTICE_REASON = ("cubic lattice constants of semiconductors lie between 0.36 nm (diamond, BN) and 0.65 nm "
                        "(InSb, HgTe), common practice")
_LAYER_REASON = ("a layer thicker than 10 µm is a substrate or a bulk region, not a layer of a tunnelling "
                 "stack (common practice)")
_SEED_REASON = "seeds are 32-bit unsigned integers (the random generators of the samplers take no larger one)"

#: The temperature of a file without ``temperature_K`` (announced as a warning).
DEFAULT_TEMPERATURE_K = 300.0
#: Above this the material parameters and Fermi integrals lose all meaning: refused.
MAX_TEMPERATURE_K = 2000.0

#: Every table of the schema with its keys: tells a misplaced key where it belongs.
KEY_HOMES = KeyHomes(
    {
        "": _TOP_KEYS, "campaign": _CAMPAIGN_KEYS, "emitter": _CONTACT_KEYS, "collector": _CONTACT_KEYS,
        "layer": _LAYER_KEYS, "materials.*": _USER_MATERIAL_KEYS, "bias": _BIAS_KEYS, "energy": _ENERGY_KEYS,
        "model": _MODEL_KEYS, "objective": _OBJECTIVE_KEYS, "constraint": _BOUNDED_KEYS,
        "search": _SEARCH_KEYS, "tolerance": _TOLERANCE_KEYS, "tolerance.robust": _ROBUST_KEYS,
        "tolerance.spec": _BOUNDED_KEYS,
    },
    arrays=("layer", "objective", "constraint", "tolerance.spec"),
)  # fmt: skip


_CAMPAIGN_NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9._-]*")


_TOML_POSITION = re.compile(r"\s*\(at line (\d+), column (\d+)\)\s*$")


def load(path) -> StackSpec:
    """Read and validate a stack or campaign file.

    Parameters
    ----------
    path : str or os.PathLike
        The TOML file.

    Returns
    -------
    StackSpec
        The validated file, ties resolved, defaults filled in.

    Raises
    ------
    InputError
        For any problem a user can fix in the file (or its path).
    """
    path = Path(path)
    text = _read_text(path)
    data = _parse_toml(str(path), text)
    return _Reader(path, text, data).spec()


def _read_text(path: Path) -> str:
    """The file's text, refused before reading when it is no regular file or too large.

    A FIFO or a device is never opened (a FIFO would block until a writer comes,
    /dev/zero never ends); the file is opened without blocking and its type checked
    again on the open descriptor, in case it was replaced in between; at most
    :data:`MAX_FILE_BYTES` + 1 bytes are read. A UTF-8 byte-order mark is dropped.
    """
    file = str(path).replace("\0", "\\0")
    try:
        info = os.stat(path)
    except FileNotFoundError:
        raise InputError(
            file, None, "no such file", "check the path and the spelling of the file name"
        ) from None
    except ValueError:
        raise InputError(
            file, None, "the path holds a NUL character, which no file name can hold",
            "give the path of a stack or campaign .toml file",
        ) from None
    except OSError as exc:
        raise _unreadable(file, exc) from None
    if stat.S_ISDIR(info.st_mode):
        found = sorted(p.name for p in path.glob("*.toml"))
        hint = f"; it holds {', '.join(found)}" if found else ""
        raise InputError(
            file,
            None,
            f"this is a directory, not a file{hint}",
            "give the path of a stack or campaign .toml file",
        )
    _check_regular(file, info)
    try:
        descriptor = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except OSError as exc:
        raise _unreadable(file, exc) from None
    try:
        _check_regular(file, os.fstat(descriptor))
        chunks, size = [], 0
        while size <= MAX_FILE_BYTES:
            chunk = os.read(descriptor, MAX_FILE_BYTES + 1 - size)
            if not chunk:
                break
            chunks.append(chunk)
            size += len(chunk)
    except OSError as exc:
        raise _unreadable(file, exc) from None
    finally:
        os.close(descriptor)
    raw = b"".join(chunks)
    if len(raw) > MAX_FILE_BYTES:
        # The file grew after it was looked at, or reports no size (/proc).
        raise _too_large(file, len(raw), at_least=True)
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        raise InputError(
            file, None, "the file is UTF-16 text (it starts with a UTF-16 byte-order mark)",
            "save the file as UTF-8 text (in most editors: Save as, encoding UTF-8)",
        )
    nul = raw.find(b"\0")
    if nul >= 0:
        # TOML forbids NUL; UTF-16 text without a byte-order mark shows as every other byte 0.
        raise InputError(
            file,
            None,
            f"the file holds a NUL byte at offset {nul}, so it is binary data or UTF-16 text",
            "give the path of a stack or campaign .toml file saved as UTF-8 text",
        )
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(
            file,
            None,
            f"not UTF-8 text (undecodable byte at offset {exc.start})",
            "save the file as UTF-8 text",
        ) from None
    # Editors on Windows may start a UTF-8 file with a byte-order mark; TOML does not
    # allow one, and it carries no information.
    text = text.removeprefix("\ufeff")
    if not text.strip():
        raise InputError(
            file,
            None,
            "the file is empty",
            "describe a stack: an [emitter] and a [collector] table and at least one [[layer]]",
        )
    return text


def _unreadable(file: str, exc: OSError) -> InputError:
    return InputError(
        file, None, f"cannot read the file ({exc.strerror or exc})", "check that the file exists and is readable"
    )


def _check_regular(file: str, info: os.stat_result) -> None:
    """Refuse a special file (FIFO, device, socket) and a file larger than the limit."""
    for is_kind, kind in _SPECIAL_FILES:
        if is_kind(info.st_mode):
            raise InputError(
                file,
                None,
                f"this is {kind}, not a regular file, so it is not read (it could wait for a "
                "writer or never end)",
                "save the stack or campaign to a .toml file and give that path",
            )
    if stat.S_ISREG(info.st_mode) and info.st_size > MAX_FILE_BYTES:
        raise _too_large(file, info.st_size)


def _too_large(file: str, size_bytes: int, *, at_least: bool = False) -> InputError:
    more = "more than " if at_least else ""
    return InputError(
        file,
        None,
        f"the file is {more}{limits.bytes_text(size_bytes)}, larger than the {limits.bytes_text(MAX_FILE_BYTES)} of the "
        f"largest stack file (a campaign of {limits.MAX_LAYERS} layers with a comment on every line stays "
        "under 150 kB), so it is not read",
        "give the path of the stack or campaign .toml file itself (not a data or log file)",
    )


_LONG_INTEGER = re.compile(r"\d[\d_]{4300,}")


def _parse_toml(file: str, text: str) -> dict:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        message = str(exc)
        position = _TOML_POSITION.search(message)
        if position is None:
            raise InputError(file, None, f"not valid TOML: {message}", "correct the TOML syntax") from None
        line, column = int(position.group(1)), int(position.group(2))
        reason = message[: position.start()]
        lines = text.splitlines()
        quoted = lines[line - 1].strip() if 0 < line <= len(lines) else ""
        near = f" in `{quoted[:80]}{'…' if len(quoted) > 80 else ''}`" if quoted else ""
        raise InputError(
            file,
            None,
            f"not valid TOML at line {line}, column {column}{near}: {reason}",
            f"correct line {line}: settings are written key = value, strings in double quotes, "
            "tables as [name], repeated tables as [[name]], and no key is given twice",
        ) from None
    except RecursionError:
        # tomllib reads nested arrays and inline tables recursively; a few hundred
        # levels exhaust Python's recursion limit. No stack file nests more than three.
        raise InputError(
            file,
            None,
            "the file nests arrays or inline tables hundreds of levels deep, deeper than the TOML "
            "reader can follow",
            "remove the extra brackets: a stack file nests at most three levels, e.g. "
            'thickness_ml = { min = 4, max = 12 } or material = { choices = ["GaAs", "InAs"] }',
        ) from None
    except ValueError as exc:
        # Python's int() refuses more than 4300 digits (sys.get_int_max_str_digits), which
        # the TOML grammar allows; tomllib lets that ValueError through.
        long = _LONG_INTEGER.search(text)
        where = f" at line {text.count(chr(10), 0, long.start()) + 1}" if long else ""
        raise InputError(
            file,
            None,
            f"the file holds an integer of more than 4300 digits{where}, more than Python reads ({exc})",
            "write the number with an exponent, e.g. 1e18, or correct it",
        ) from None
    if not data:
        raise InputError(
            file,
            None,
            "the file holds no settings, only comments",
            "describe a stack: an [emitter] and a [collector] table and at least one [[layer]]",
        )
    return data


class _Reader:
    """Builds a StackSpec from parsed TOML; collects material warnings on the way."""

    def __init__(self, path: Path, text: str, data: dict):
        self.path = path
        self.text = text
        self.file = str(path)
        self.root = _Table(self.file, "", data, _TOP_KEYS, kind="", homes=KEY_HOMES)
        # message -> keys it applies to, so that one warning about a material used in
        # several layers is reported once.
        self.warnings: dict[str, list[str]] = {}

    def warn(self, key: str, message: str) -> None:
        keys = self.warnings.setdefault(message, [])
        if key not in keys:
            keys.append(key)

    # -- top level ---------------------------------------------------------------------

    def spec(self) -> StackSpec:
        root = self.root
        self.temperature_K = root.number("temperature_K", DEFAULT_TEMPERATURE_K, example="300", above=0.0,
                                         at_most=MAX_TEMPERATURE_K)
        if not root.has("temperature_K"):
            # Temperature changes every result (band gaps, Fermi tails); never default in silence.
            self.warn("temperature_K", f"the file sets no temperature_K, so it is computed at "
                      f"{DEFAULT_TEMPERATURE_K:g} K; write temperature_K = ... above the first [table] "
                      "header to state it")
        campaign = root.table("campaign", _CAMPAIGN_KEYS, example='[campaign] with name = "my-rtd"')
        name, description = self.path.stem, ""
        if campaign is not None:
            name = campaign.string("name", self.path.stem, example='"rtd-300ghz"')
            if not _CAMPAIGN_NAME.fullmatch(name):
                raise campaign.error(
                    "name",
                    f'"{name}" cannot name a run directory',
                    'use letters, digits, ".", "_" or "-", starting with a letter or digit, e.g. '
                    'name = "rtd-300ghz"',
                )
            description = campaign.string("description", "", example='"what this campaign is for"')

        self.user = self.user_materials()
        emitter = self.contact("emitter")
        collector = self.contact("collector")
        layers = self.layers()
        is_campaign = campaign is not None or any(layer.searched for layer in layers)

        bias = self.bias()
        energy = self.energy()
        model = self.model()
        tolerance = self.tolerance(bias, is_campaign)
        has_windows = tolerance is not None and bool(tolerance.windows)
        objectives = self.objectives(bias, has_windows)
        constraints = self.constraints(bias, has_windows)
        search_table = root.table("search", _SEARCH_KEYS, example='[search] with sampler = "nsga2"')
        search = self.search(search_table)

        spec = StackSpec(
            path=self.path,
            text=self.text,
            name=name,
            description=description,
            temperature_K=self.temperature_K,
            emitter=emitter,
            collector=collector,
            layers=layers,
            user_materials=self.user,
            bias=bias,
            energy=energy,
            model=model,
            objectives=objectives,
            constraints=constraints,
            search=search,
            tolerance=tolerance,
            is_campaign=is_campaign,
            warnings=(),
        )
        self.check_campaign(spec, search_table)
        self.check_model(spec)
        self.check_doping(spec)
        for key, message in plausibility_warnings(spec):
            self.warn(key, message)
        merged = tuple(f"{', '.join(keys)}: {message}" for message, keys in self.warnings.items())
        spec = replace(spec, warnings=merged)
        # Last, when every value is known to be valid: refuse a run this machine cannot hold.
        limits.check_memory(spec)
        return spec

    def check_doping(self, spec: StackSpec) -> None:
        """An undoped contact has no Fermi level: refuse it wherever a current is computed."""
        if not limits.current_is_computed(spec):
            return  # zero-bias transmission and levels do not depend on the doping
        for side in ("emitter", "collector"):
            if getattr(spec, side).doping_cm3 > 0.0:
                continue
            if spec.is_campaign:
                other = "or use only zero-bias metrics (" + ", ".join(
                    n for n, i in METRICS.items() if not i.needs_iv) + ") in the objectives, constraints and windows"
            else:
                other = ("or set steps = 1 in [bias] to compute only the zero-bias transmission and levels, "
                         "which do not depend on the doping")
            raise InputError(
                self.file,
                f"{side}.doping_cm3",
                f"doping_cm3 = 0 leaves the {side} without free electrons, so it has no Fermi level, and "
                "the Tsu–Esaki current of the I–V sweep needs one",
                f"give the contact's donor density, e.g. doping_cm3 = 2e18, {other}",
            )

    def check_campaign(self, spec: StackSpec, search_table: _Table | None) -> None:
        root = self.root
        if not spec.is_campaign:
            for key in ("objective", "constraint"):
                if root.has(key):
                    raise root.error(
                        key,
                        f"[[{key}]] belongs to a campaign, but this file searches nothing (no "
                        "[campaign] table, no range)",
                        "give layer values search ranges to make it a campaign, or delete the "
                        f"[[{key}]] tables (tunnelsmith solve reports every metric)",
                    )
            if search_table is not None:
                raise root.error(
                    "search",
                    "[search] belongs to a campaign, but this file searches nothing (no [campaign] "
                    "table, no range)",
                    "give layer values search ranges to make it a campaign, or delete [search]",
                )
            return
        if not any(layer.searched for layer in spec.layers):
            raise root.error(
                "layer",
                "nothing to search: the campaign has no range in any layer",
                "give at least one layer a range, e.g. thickness_ml = { min = 4, max = 12 }, or "
                "delete [campaign] to solve the stack as it is",
            )
        if not spec.objectives:
            raise root.error(
                "objective",
                "the campaign has no objective",
                'add an objective, e.g. [[objective]] metric = "pvcr" goal = "maximize"',
            )
        if design_count(spec) == 1:
            raise root.error(
                "layer",
                "the search space holds a single design (every range has one value)",
                "widen at least one range, e.g. thickness_ml = { min = 4, max = 12 }",
            )

    def check_model(self, spec: StackSpec) -> None:
        if spec.model.nonparabolic:
            for name, values in spec.user_materials.items():
                if "gap_eV" not in values:
                    self.warn(
                        f"materials.{name}",
                        f"no gap_eV given, so {name} stays parabolic although [model] nonparabolic = true",
                    )
        # The resonance search looks inside the energy grid only, so a goal outside it
        # can never be met; warn instead of failing, as the grid may be set on purpose.
        lo, hi = spec.energy.from_eV, spec.energy.to_eV
        bounded = spec.constraints + (spec.tolerance.windows if spec.tolerance else ())
        values = [
            ("target", o.target) for o in spec.objectives if o.metric == "resonance_energy_eV" and not o.log
        ]
        values += [
            (k, getattr(b, k)) for b in bounded if b.metric == "resonance_energy_eV" for k in ("min", "max")
        ]
        for label, value in values:
            if value is not None and not lo <= value <= hi:
                self.warn(
                    "energy",
                    f"resonance_energy_eV {label} {_fmt(value)} eV lies outside the energy grid "
                    f"{_fmt(lo)} to {_fmt(hi)} eV, where resonances are sought",
                )

    # -- materials ---------------------------------------------------------------------

    def user_materials(self) -> dict[str, dict[str, float]]:
        raw = self.root.data.get("materials", {})
        if not isinstance(raw, dict) or not all(isinstance(v, dict) for v in raw.values()):
            raise self.root.error(
                "materials",
                f"expected one table per material, got {_shown(raw)}",
                "define each material as [materials.NAME] with conduction_band_eV, mass and lattice_nm",
            )
        user: dict[str, dict[str, float]] = {}
        for name, values in raw.items():
            table = _Table(self.file, f"materials.{name}", values, _USER_MATERIAL_KEYS, kind="materials.*",
                           homes=KEY_HOMES)
            self._check_user_name(table, name)
            user[name] = {
                "conduction_band_eV": table.number("conduction_band_eV", example="-3.2"),
                "mass": table.number("mass", example="0.09", above=0.0, at_most=MAX_USER_MASS,
                                     reason=_USER_MASS_REASON),
                "lattice_nm": table.number("lattice_nm", example="0.5869", above=0.0, at_most=MAX_USER_LATTICE_nm,
                                           reason=_USER_LATTICE_REASON),
            }
            if table.has("gap_eV"):
                user[name]["gap_eV"] = table.number("gap_eV", example="1.5", above=0.0)
        return user

    def _check_user_name(self, table: _Table, name: str) -> None:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                _materials.material(name, self.temperature_K)
            except _materials.UnknownMaterialError:
                return
            except ValueError:
                pass  # an alloy key or a composition formula: still a table name
        raise InputError(
            self.file,
            table.path,
            f'"{name}" is already a material of the built-in table or an alloy formula',
            f"rename it, e.g. [materials.{name}_custom], and use that name in the layers",
        )

    def check_material(
        self, table: _Table, name: str, fraction: float | FloatRange | None, *, material_key: str = "material"
    ) -> None:
        """Validate one material name with its fixed or searched fraction."""
        is_alloy = name in _materials.ALLOYS
        if is_alloy and fraction is None:
            first = _materials.ALLOYS[name][0]
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                example = _materials.material(name, self.temperature_K, fraction=0.3).name
            raise table.error(
                material_key,
                f'"{name}" is an alloy key and needs a composition',
                f"add fraction = 0.3 (the share of {first} in the alloy), or write a full "
                f'composition such as "{example}"',
            )
        fractions = [None]
        if is_alloy:
            fractions = [fraction.min, fraction.max] if isinstance(fraction, FloatRange) else [fraction]
        for x in fractions:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                try:
                    _materials.material(name, self.temperature_K, fraction=x, user=self.user)
                except _materials.UnknownMaterialError as exc:
                    raise table.error(
                        material_key, f'unknown material "{name}"', self._unknown_material_fix(name, exc)
                    ) from None
                except ValueError as exc:
                    key = "fraction" if x is not None else material_key
                    raise table.error(
                        key,
                        f'"{name}"'
                        + (f" with fraction {_fmt(x)}" if x is not None else "")
                        + f" is not a valid composition: {exc}",
                        "give compositions between 0 and 1 whose cation shares add up to 1, e.g. "
                        '"Al0.3Ga0.7As", or an alloy key with fraction',
                    ) from None
            for record in caught:
                if issubclass(record.category, _materials.IndirectValleyWarning):
                    self.warn(table.key(material_key), str(record.message))
                else:
                    warnings.warn_explicit(record.message, record.category, record.filename, record.lineno)

    def _unknown_material_fix(self, name: str, exc) -> str:
        suggestions = list(dict.fromkeys(_nearest(name, self.user) + list(exc.suggestions)))
        hint = f"did you mean {_quoted(suggestions)}? " if suggestions else ""
        return (
            f"{hint}Use a name listed by `tunnelsmith materials`, an alloy key such as "
            f'"AlGaAs" with fraction, or define it under [materials.{name}]'
        )

    # -- contacts and layers -----------------------------------------------------------

    def contact(self, which: str) -> ContactSpec:
        example = f'[{which}] with material = "GaAs" and doping_cm3 = 2e18'
        table = self.root.table(which, _CONTACT_KEYS, example=example)
        if table is None:
            raise self.root.error(which, f"the [{which}] contact is missing", f"add {example}")
        material = table.data.get("material")
        if isinstance(material, dict):
            raise table.error(
                "material",
                "a contact cannot be searched: its material must be one name",
                'write material = "GaAs" (search ranges belong to [[layer]] tables)',
            )
        material = table.string("material", example='"GaAs"')
        fraction = self.fraction(table, allow_range=False)
        if fraction is not None and material not in _materials.ALLOYS:
            raise _fraction_not_used(table, (material,))
        self.check_material(table, material, fraction)
        doping = table.number("doping_cm3", example="2e18", at_least=0.0)
        return ContactSpec(material=material, fraction=fraction, doping_cm3=doping)

    def layers(self) -> tuple[LayerSpec, ...]:
        def label(index: int, data: dict) -> str:
            name = data.get("name")
            if isinstance(name, str) and name.strip() and '"' not in name and name.isprintable():
                return f'layer "{name}"'
            return f"layer[{index}]"

        tables = self.root.tables(
            "layer",
            _LAYER_KEYS,
            example='[[layer]] name = "barrier" material = "AlAs" thickness_ml = 6',
            label=label,
        )
        if len(tables) > limits.MAX_LAYERS:
            raise self.root.error(
                "layer",
                f"the stack has {len(tables)} layers, more than the {limits.MAX_LAYERS} allowed: "
                f"{limits.LAYERS_REASON}",
                f"keep at most {limits.MAX_LAYERS} [[layer]] tables: describe the active region (barriers, "
                "wells and spacers); thick bulk regions belong to the contacts",
            )
        if not tables:
            raise self.root.error(
                "layer",
                "the stack has no layer between the contacts",
                "add at least one [[layer]] with name, material and a thickness, e.g. [[layer]] "
                'name = "barrier" material = "AlAs" thickness_ml = 6',
            )
        raw: list[tuple[_Table, LayerSpec]] = []
        seen: dict[str, int] = {}
        for index, table in enumerate(tables, start=1):
            name = table.string("name", example='"barrier_in"')
            if '"' in name:
                raise table.error(
                    "name",
                    "a layer name cannot contain double quotes",
                    'use letters, digits and "_", e.g. name = "barrier_in"',
                )
            control = next((c for c in name if unicodedata.category(c) == "Cc"), None)
            if control is not None:
                # Names are printed in tables and stored in netCDF files; a control
                # character (a NUL ends a C string) garbles or truncates both.
                raise table.error(
                    "name",
                    f"the layer name holds the control character U+{ord(control):04X}",
                    'use letters, digits and "_", e.g. name = "barrier_in"',
                )
            if name in seen:
                raise InputError(
                    self.file,
                    f"layer[{index}].name",
                    f'layer name "{name}" is already used by layer[{seen[name]}]',
                    "give every layer its own name",
                )
            seen[name] = index
            raw.append((table, self.layer(table, name)))
        return self.resolve_ties(raw)

    def layer(self, table: _Table, name: str) -> LayerSpec:
        absorption = (
            table.number("absorption_eV", None, example="0.005", at_least=0.0)
            if table.has("absorption_eV")
            else None
        )
        if table.has("like"):
            like = table.string("like", example='"barrier_in"')
            for key in _TIED_KEYS:
                if table.has(key):
                    raise table.error(
                        key,
                        f'a layer with like = "{like}" takes {key} from that layer',
                        f"delete {key} here, or delete like to give this layer its own values",
                    )
            return LayerSpec(name, "", None, None, None, like=like, absorption_eV=absorption)

        material = self.layer_material(table)
        fraction = self.fraction(table, allow_range=True)
        names = material.values if isinstance(material, Choices) else (material,)
        alloys = [n for n in names if n in _materials.ALLOYS]
        if fraction is not None and not alloys:
            raise _fraction_not_used(table, names)
        for n in names:
            self.check_material(table, n, fraction if n in alloys else None)
        thickness_ml, thickness_nm = self.thickness(table)
        return LayerSpec(
            name, material, fraction, thickness_ml, thickness_nm, like=None, absorption_eV=absorption
        )

    def layer_material(self, table: _Table) -> str | Choices:
        value = table.data.get("material", _MISSING)
        if not isinstance(value, dict):
            return table.string("material", example='"AlAs"')
        choices_table = _Table(self.file, table.key("material"), value, ("choices",))
        _, values = choices_table._value("choices", _MISSING, '["GaAs", "InAs"]')
        if not isinstance(values, list) or not all(isinstance(v, str) and v.strip() for v in values):
            raise choices_table.error(
                "choices",
                f"expected an array of material names, got {_shown(values)}",
                'write material = { choices = ["In0.53Ga0.47As", "InAs"] }',
            )
        if not values:
            raise choices_table.error(
                "choices",
                "the list of choices is empty",
                'list at least one material, e.g. material = { choices = ["In0.53Ga0.47As", "InAs"] }',
            )
        duplicates = sorted({v for v in values if values.count(v) > 1})
        if duplicates:
            raise choices_table.error(
                "choices", f'"{duplicates[0]}" is listed twice', "list each material once"
            )
        return Choices(tuple(values))

    def fraction(self, table: _Table, *, allow_range: bool) -> float | FloatRange | None:
        if not table.has("fraction"):
            return None
        if allow_range and isinstance(table.data["fraction"], dict):
            return self.float_range(
                table, "fraction", examples=("0.1", "0.4", "0.01"), at_least=0.0, at_most=1.0
            )
        return table.number("fraction", example="0.3", at_least=0.0, at_most=1.0)

    def thickness(self, table: _Table) -> tuple[int | IntRange | None, float | FloatRange | None]:
        has_ml, has_nm = table.has("thickness_ml"), table.has("thickness_nm")
        if has_ml and has_nm:
            raise table.error(
                "thickness_nm",
                "both thickness_ml and thickness_nm are given",
                "keep one of them: whole monolayers (thickness_ml) or nanometres (thickness_nm)",
            )
        if not (has_ml or has_nm):
            raise table.error(
                "thickness_ml",
                "the layer has no thickness",
                "add thickness_ml = 6 (whole monolayers) or thickness_nm = 1.7, or like = "
                '"other_layer" to copy another layer',
            )
        if has_nm:
            if isinstance(table.data["thickness_nm"], dict):
                return None, self.float_range(
                    table, "thickness_nm", examples=("2.0", "6.0", "0.1"), above=0.0, at_most=MAX_LAYER_nm,
                    reason=_LAYER_REASON,
                )
            return None, table.number("thickness_nm", example="1.7", above=0.0, at_most=MAX_LAYER_nm,
                                      reason=_LAYER_REASON)
        value = table.data["thickness_ml"]
        if isinstance(value, dict):
            rng = _Table(self.file, table.key("thickness_ml"), value, ("min", "max"))
            lo = rng.integer("min", example="4", at_least=1, at_most=MAX_LAYER_ml, reason=_LAYER_REASON)
            hi = rng.integer("max", example="12", at_least=1, at_most=MAX_LAYER_ml, reason=_LAYER_REASON)
            _check_order(rng, lo, hi)
            return IntRange(lo, hi), None
        if isinstance(value, float) and math.isfinite(value) and not value.is_integer():
            raise table.error(
                "thickness_ml",
                f"thickness_ml = {value:g} is not a whole number of monolayers",
                f"write thickness_ml = {round(value)} or give the thickness in nanometres with thickness_nm",
            )
        return table.integer("thickness_ml", example="6", at_least=1, at_most=MAX_LAYER_ml,
                             reason=_LAYER_REASON), None

    def float_range(
        self,
        table: _Table,
        name: str,
        *,
        examples: tuple[str, str, str],
        above=None,
        at_least=None,
        at_most=None,
        reason=None,
    ) -> FloatRange:
        """A ``{ min, max, step? }`` range; ``examples`` of min, max and step for messages."""
        rng = _Table(self.file, table.key(name), table.data[name], ("min", "max", "step"))
        bounds = dict(above=above, at_least=at_least, at_most=at_most, reason=reason)
        lo = rng.number("min", example=examples[0], **bounds)
        hi = rng.number("max", example=examples[1], **bounds)
        _check_order(rng, lo, hi)
        step = None
        if rng.has("step"):
            step = rng.number("step", example=examples[2], above=0.0)
            span = hi - lo
            if step > span:
                raise rng.error(
                    "step",
                    f"step {_fmt(step)} is larger than the span {_fmt(span)} from min to max",
                    f"use a step of at most {_fmt(span)}, or widen the range",
                )
            intervals = span / step
            if abs(intervals - round(intervals)) > 1e-6 * max(1.0, intervals):
                below = lo + math.floor(intervals) * step
                raise rng.error(
                    "step",
                    f"the span {_fmt(span)} from min to max is not a whole number of steps {_fmt(step)}",
                    f"set max = {below:.10g} or max = {below + step:.10g}, or choose a step that "
                    "divides the span",
                )
        return FloatRange(lo, hi, step)

    def resolve_ties(self, raw: list[tuple[_Table, LayerSpec]]) -> tuple[LayerSpec, ...]:
        by_name = {layer.name: layer for _, layer in raw}
        for table, layer in raw:
            if layer.like is None:
                continue
            if layer.like == layer.name:
                raise table.error(
                    "like",
                    f'the layer is tied to itself (like = "{layer.like}")',
                    "name another layer in like, or delete like and give the layer its own values",
                )
            if layer.like not in by_name:
                raise table.error(
                    "like",
                    f'no layer is named "{layer.like}"',
                    _rename_fix(layer.like, [n for n in by_name if n != layer.name], "layer names"),
                )
        resolved = []
        for table, layer in raw:
            if layer.like is None:
                resolved.append(replace(layer, absorption_eV=layer.absorption_eV or 0.0))
                continue
            chain = [layer.name]
            root = layer
            while root.like is not None:
                if root.like in chain:
                    loop = " → ".join(chain + [root.like])
                    raise table.error(
                        "like",
                        f"the ties form a loop: {loop}",
                        "let one layer of the loop carry its own material and thickness instead of like",
                    )
                chain.append(root.like)
                root = by_name[root.like]
            absorption = (
                layer.absorption_eV if layer.absorption_eV is not None else (root.absorption_eV or 0.0)
            )
            resolved.append(
                replace(
                    layer,
                    material=root.material,
                    fraction=root.fraction,
                    thickness_ml=root.thickness_ml,
                    thickness_nm=root.thickness_nm,
                    like=root.name,
                    absorption_eV=absorption,
                )
            )
        return tuple(resolved)

    # -- grids and model ---------------------------------------------------------------

    def bias(self) -> BiasSweep:
        table = self.root.table(
            "bias", _BIAS_KEYS, example="[bias] with from_V = 0.0, to_V = 1.0, steps = 51"
        )
        if table is None:
            return BiasSweep()
        default = BiasSweep()
        from_V = table.number("from_V", default.from_V, example="0.0")
        to_V = table.number("to_V", default.to_V, example="1.0")
        steps = table.integer("steps", default.steps, example="51", at_least=1, at_most=limits.MAX_BIAS_STEPS,
                              reason=limits.BIAS_REASON)
        if steps > 1 and from_V == to_V:
            raise table.error(
                "to_V",
                f"a sweep of {steps} steps needs to_V different from from_V (both {_fmt(from_V)} V)",
                "set to_V to the end of the sweep, or steps = 1 for a single bias",
            )
        return BiasSweep(from_V, to_V, steps)

    def energy(self) -> EnergyGrid:
        table = self.root.table(
            "energy", _ENERGY_KEYS, example="[energy] with from_eV = 0.0, to_eV = 1.0, points = 2001"
        )
        if table is None:
            return EnergyGrid()
        default = EnergyGrid()
        from_eV = table.number("from_eV", default.from_eV, example="0.0")
        to_eV = table.number("to_eV", default.to_eV, example="1.0")
        points = table.integer("points", default.points, example="2001", at_least=2,
                               at_most=limits.MAX_ENERGY_POINTS, reason=limits.ENERGY_REASON)
        if not to_eV > from_eV:
            raise table.error(
                "to_eV",
                f"to_eV = {_fmt(to_eV)} must lie above from_eV = {_fmt(from_eV)}",
                "make to_eV the upper end of the energy window, e.g. from_eV = 0.0 and to_eV = 1.0",
            )
        return EnergyGrid(from_eV, to_eV, points)

    def model(self) -> ModelSpec:
        table = self.root.table("model", _MODEL_KEYS, example="[model] with nonparabolic = true")
        if table is None:
            return ModelSpec()
        default = ModelSpec()
        nonparabolic = table.boolean("nonparabolic", default.nonparabolic)
        slice_nm = table.number("slice_nm", None, example="0.1", above=0.0) if table.has("slice_nm") else None
        max_levels = table.integer("max_levels", default.max_levels, example="4", at_least=1,
                                   at_most=limits.MAX_LEVELS, reason=limits.LEVELS_REASON)
        # Contact and access resistances of real diodes are 1e-8 to 1e-5 Ohm cm^2 (common
        # practice); the bound only catches a value in the wrong unit.
        series = table.number("series_resistance_ohm_cm2", default.series_resistance_ohm_cm2, example="2e-7",
                              at_least=0.0, at_most=1.0)
        return ModelSpec(nonparabolic, slice_nm, max_levels, series)

    # -- metrics -----------------------------------------------------------------------

    def metric(
        self, table: _Table, bias: BiasSweep, *, yield_allowed: bool | None
    ) -> tuple[str, float | None]:
        """Read ``metric`` and ``at_bias_V`` and check that the campaign can compute them.

        ``yield_allowed``: ``None`` where yield is never a metric (tolerance windows),
        else whether the file defines the tolerance windows a yield needs.
        """
        known = list(METRICS) + ([YIELD] if yield_allowed is not None else [])
        name = table.string("metric", example='"pvcr"')
        if name == YIELD and yield_allowed is None:
            raise table.error(
                "metric",
                "the yield is the share of samples inside the windows, so it cannot be a window itself",
                'choose a metric of the catalogue, e.g. metric = "resonance_energy_eV"',
            )
        if name not in known:
            raise table.error(
                "metric", f'"{name}" is not a metric of the catalogue', _rename_fix(name, known, "metrics")
            )
        if name == YIELD:
            if not yield_allowed:
                raise table.error(
                    "metric",
                    "yield needs growth-tolerance windows, but the file has no [[tolerance.spec]]",
                    "add [tolerance] and at least one [[tolerance.spec]] window (metric, min, "
                    "max), or choose another metric",
                )
            if table.has("at_bias_V"):
                raise table.error("at_bias_V", "yield is not evaluated at a bias", "delete at_bias_V")
            return name, None
        info = METRICS[name]
        at_bias_V = None
        if info.takes_bias:
            at_bias_V = table.number("at_bias_V", example="0.05")
        elif table.has("at_bias_V"):
            takes = ", ".join(n for n, i in METRICS.items() if i.takes_bias)
            raise table.error(
                "at_bias_V",
                f"{name} is not evaluated at a stated bias",
                f"delete at_bias_V (only {takes} takes one)",
            )
        if info.needs_iv:
            if bias.steps < _MIN_IV_STEPS:
                raise table.error(
                    "metric",
                    f"{name} needs an I–V sweep, but [bias] has steps = {bias.steps}",
                    f"set steps of at least {_MIN_IV_STEPS} in [bias], e.g. steps = 51",
                )
            lo, hi = sorted((bias.from_V, bias.to_V))
            if at_bias_V is not None and not lo - 1e-12 <= at_bias_V <= hi + 1e-12:
                raise table.error(
                    "at_bias_V",
                    f"at_bias_V = {_fmt(at_bias_V)} V lies outside the [bias] sweep "
                    f"{_fmt(bias.from_V)} to {_fmt(bias.to_V)} V",
                    "choose a bias inside the sweep, or extend from_V/to_V in [bias]",
                )
        return name, at_bias_V

    def bounds(self, table: _Table) -> tuple[float | None, float | None]:
        lo = table.number("min", None, example="0.1") if table.has("min") else None
        hi = table.number("max", None, example="0.2") if table.has("max") else None
        if lo is None and hi is None:
            raise table.error("min", "neither min nor max is given", "add min = ..., max = ... or both")
        if lo is not None and hi is not None:
            _check_order(table, lo, hi)
        return lo, hi

    def objectives(self, bias: BiasSweep, has_windows: bool) -> tuple[ObjectiveSpec, ...]:
        tables = self.root.tables(
            "objective", _OBJECTIVE_KEYS, example='[[objective]] metric = "pvcr" goal = "maximize"'
        )
        objectives = []
        for table in tables:
            metric, at_bias_V = self.metric(table, bias, yield_allowed=has_windows)
            if table.has("goal") == table.has("target"):
                problem = (
                    "both goal and target are given"
                    if table.has("goal")
                    else "neither goal nor target is given"
                )
                raise table.error(
                    "goal",
                    problem,
                    'give exactly one: goal = "maximize" or "minimize", or target = <value> to '
                    "bring the metric close to it",
                )
            goal = table.string("goal", example='"maximize"', choices=_GOALS) if table.has("goal") else None
            target = table.number("target", example="0.15") if table.has("target") else None
            log = table.boolean("log", False)
            if log:
                if metric == YIELD or not METRICS[metric].positive:
                    positive = ", ".join(n for n, i in METRICS.items() if i.positive)
                    raise table.error(
                        "log",
                        f"log10 is taken only of metrics that are always positive, and {metric} is not",
                        f"delete log, or use it with one of {positive}",
                    )
                if target is not None and not target > 0:
                    raise table.error(
                        "target",
                        f"with log = true the target {_fmt(target)} must be positive",
                        "give a positive target, e.g. 1e-3, or delete log",
                    )
            objectives.append(ObjectiveSpec(metric, goal, target, log, at_bias_V))
        _check_unique(tables, objectives, "objective")
        return tuple(objectives)

    def constraints(self, bias: BiasSweep, has_windows: bool) -> tuple[ConstraintSpec, ...]:
        tables = self.root.tables(
            "constraint", _BOUNDED_KEYS, example='[[constraint]] metric = "peak_current_A_cm2" min = 1e5'
        )
        constraints = [
            self.bounded(ConstraintSpec, table, bias, yield_allowed=has_windows) for table in tables
        ]
        _check_unique(tables, constraints, "constraint")
        return tuple(constraints)

    def bounded(self, cls, table: _Table, bias: BiasSweep, *, yield_allowed: bool | None):
        metric, at_bias_V = self.metric(table, bias, yield_allowed=yield_allowed)
        lo, hi = self.bounds(table)
        return cls(metric, lo, hi, at_bias_V)

    # -- search and tolerance ----------------------------------------------------------

    def search(self, table: _Table | None) -> SearchSpec:
        default = SearchSpec()
        if table is None:
            return default
        return SearchSpec(
            sampler=table.string("sampler", default.sampler, example='"nsga2"', choices=SAMPLERS),
            trials=table.integer("trials", default.trials, example="1000", at_least=1),
            batch=table.integer("batch", default.batch, example="64", at_least=1),
            seed=table.integer("seed", None, example="1", at_least=0, at_most=MAX_SEED, reason=_SEED_REASON)
            if table.has("seed")
            else None,
            timeout_h=table.number("timeout_h", None, example="8", above=0.0, at_most=MAX_TIMEOUT_h,
                                   reason="a longer time limit is a typo, and overflows the deadline arithmetic")
            if table.has("timeout_h")
            else None,
        )

    def tolerance(self, bias: BiasSweep, is_campaign: bool) -> ToleranceSpec | None:
        table = self.root.table(
            "tolerance", _TOLERANCE_KEYS, example="[tolerance] with thickness_sigma_ml = 0.5"
        )
        if table is None:
            return None
        default = ToleranceSpec()
        robust = None
        robust_table = table.table(
            "robust", _ROBUST_KEYS, example="robust = { samples = 16, quantile = 0.1 }"
        )
        if robust_table is not None:
            robust = self.robust(robust_table)
            if not is_campaign:
                self.warn(
                    "tolerance.robust",
                    "ignored, because this stack file searches nothing (it applies to campaigns)",
                )
        window_tables = table.tables(
            "spec",
            _BOUNDED_KEYS,
            example='[[tolerance.spec]] metric = "resonance_energy_eV" min = 0.14 max = 0.16',
        )
        windows = tuple(self.bounded(WindowSpec, entry, bias, yield_allowed=None) for entry in window_tables)
        _check_unique(window_tables, windows, "tolerance.spec")
        return ToleranceSpec(
            thickness_sigma_ml=table.number(
                "thickness_sigma_ml", default.thickness_sigma_ml, example="0.5", at_least=0.0,
                at_most=MAX_THICKNESS_SIGMA_ml,
                reason="a scatter of more than 5 monolayers per interface means that the layer thickness itself "
                "is unknown, not a growth tolerance (calibrated epitaxy steps by ±1 monolayer, common practice)",
            ),
            growth_rate_sigma=table.number(
                "growth_rate_sigma", default.growth_rate_sigma, example="0.01", at_least=0.0,
                at_most=MAX_GROWTH_RATE_SIGMA,
                reason="beyond it the growth-rate factor 1 + eps is negative in more than 2 % of the samples, so "
                "the growth rate itself is unknown (calibrated epitaxy drifts by 1-2 %, common practice)",
            ),
            fraction_sigma=table.number(
                "fraction_sigma", default.fraction_sigma, example="0.005", at_least=0.0,
                at_most=MAX_FRACTION_SIGMA,
                reason="a scatter of more than 0.1 spans most of an alloy's range, so the composition itself is "
                "unknown (epitaxial fractions are known to about 0.005, common practice)",
            ),
            samples=table.integer("samples", default.samples, example="500", at_least=1,
                                  at_most=limits.MAX_TOLERANCE_SAMPLES, reason=limits.SAMPLES_REASON),
            seed=table.integer("seed", default.seed, example="0", at_least=0, at_most=MAX_SEED,
                               reason=_SEED_REASON),
            robust=robust,
            windows=windows,
        )

    def robust(self, table: _Table) -> RobustSpec:
        default = RobustSpec()
        statistic = table.string("statistic", default.statistic, example='"quantile"', choices=_STATISTICS)
        if statistic == "mean" and table.has("quantile"):
            raise table.error(
                "quantile",
                'quantile is not used with statistic = "mean"',
                'delete quantile, or set statistic = "quantile"',
            )
        return RobustSpec(
            samples=table.integer("samples", default.samples, example="16", at_least=2,
                                  at_most=limits.MAX_ROBUST_SAMPLES, reason=limits.ROBUST_REASON),
            quantile=table.number("quantile", default.quantile, example="0.1", above=0.0, at_most=0.5)
            if statistic == "quantile"
            else default.quantile,
            statistic=statistic,
        )


def _check_order(table: _Table, lo: float, hi: float) -> None:
    if lo > hi:
        raise table.error(
            "min",
            f"min = {_fmt(lo)} is larger than max = {_fmt(hi)}",
            f"swap them: min = {_fmt(hi)}, max = {_fmt(lo)}",
        )


def _fraction_not_used(table: _Table, names: tuple[str, ...]) -> InputError:
    given = f'"{names[0]}" is not one' if len(names) == 1 else f"none of {_quoted(names)} is one"
    return table.error(
        "fraction",
        f"fraction is only used with an alloy key ({', '.join(_materials.ALLOYS)}), and {given}",
        'delete fraction, or write the alloy key with fraction, e.g. material = "AlGaAs" and fraction = 0.3',
    )


def _check_unique(tables: list[_Table], items: list, what: str) -> None:
    first: dict[str, str] = {}
    for table, item in zip(tables, items, strict=True):
        if item.label in first:
            raise InputError(
                table.file,
                table.path,
                f"the same {what} as {first[item.label]} ({item.label})",
                f"delete one of the two [[{what}]] tables",
            )
        first[item.label] = table.path
