"""TOML tables that answer every problem with the file, the dotted key and a fix.
"""

from __future__ import annotations

import difflib
import math
import sys
from collections.abc import Iterable, Mapping
from typing import Any
from tunnelsmith.optimize.errors import InputError


_MISSING = object()


def _fmt(value: float) -> str:
    """A number as ``%g``; an integer in full up to 16 digits, and beyond the double range
    (TOML integers are unbounded) in the exponent form of ``%g``."""
    if isinstance(value, int) and abs(value) < 10**16:
        return str(value)  # a seed or a count reads better in full than as 4.29497e+09
    if isinstance(value, int) and not _fits_double(value):
        # As %g would write it: six significant digits, trailing zeros dropped.
        digits = str(abs(value))
        mantissa = f"{digits[0]}.{digits[1:6]}".rstrip("0").rstrip(".")
        return f"{'-' if value < 0 else ''}{mantissa}e+{len(digits) - 1}"
    return f"{value:g}"


def _fits_double(value: int) -> bool:
    """Whether an integer converts to a finite double (``float()`` raises beyond ~1.8e308)."""
    return abs(value) <= sys.float_info.max


def _shown(value: Any) -> str:
    """A value as the user wrote it, with its TOML kind."""
    if isinstance(value, bool):
        return f"{str(value).lower()} (a true/false value)"
    if isinstance(value, str):
        return f'"{value}" (a string)'
    if isinstance(value, int):
        return f"{_fmt(value)} (an integer)"
    if isinstance(value, float):
        return f"{_fmt(value)} (a number)"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, list):
        return "an array"
    return f"{value} (a {type(value).__name__})"


def _nearest(word: str, candidates: Iterable[str]) -> list[str]:
    """The candidates closest to ``word`` (case-insensitive), all equally close; maybe empty."""
    by_lower = {c.lower(): c for c in candidates}
    matcher = difflib.SequenceMatcher(b=word.lower())
    scored = []
    for lower, original in by_lower.items():
        matcher.set_seq1(lower)
        scored.append((matcher.ratio(), original))
    best = max((score for score, _ in scored), default=0.0)
    if best < 0.6:
        return []
    return [original for score, original in scored if score == best]


def _quoted(names: Iterable[str]) -> str:
    return " or ".join(f'"{name}"' for name in names)


def _rename_fix(word: str, candidates: Iterable[str], what: str) -> str:
    candidates = list(candidates)
    near = _nearest(word, candidates)
    allowed = f"the {what} are {', '.join(candidates)}"
    return f"did you mean {_quoted(near)}? ({allowed})" if near else f"use one of them: {allowed}"


def header_of(kind: str, arrays: frozenset[str] = frozenset()) -> str:
    """How a table kind is written in a file: ``[search]``, ``[[layer]]``, ``[materials.NAME]``."""
    if kind in arrays:
        return f"[[{kind}]]"
    return f"[{kind.replace('*', 'NAME')}]"


class KeyHomes:
    """Where every key of the schema is valid, to tell a misplaced key where it belongs.

    Parameters
    ----------
    tables : mapping of str to iterable of str
        Table kind → its keys. The kind is the dotted table path without entry labels:
        ``""`` for the top level, ``"search"``, ``"tolerance.spec"``; ``*`` stands for a
        user-chosen name (``"materials.*"``).
    arrays : iterable of str
        Kinds written as arrays of tables (``[[layer]]``).
    """

    def __init__(self, tables: Mapping[str, Iterable[str]], arrays: Iterable[str] = ()):
        self.tables = {kind: tuple(keys) for kind, keys in tables.items()}
        self.arrays = frozenset(arrays)

    def homes(self, key: str, *, besides: str) -> list[str]:
        """The kinds other than ``besides`` where ``key`` is valid."""
        return [kind for kind, keys in self.tables.items() if kind != besides and key in keys]

    def advice(self, key: str, kind: str) -> str | None:
        """How to move ``key`` out of a table of ``kind`` to where it belongs, or None."""
        homes = self.homes(key, besides=kind)
        if not homes:
            return None
        tables = [f"{home}.{key}" if home else key for home in homes]
        tables = [table for table in tables if table in self.tables]
        if tables:
            header = header_of(tables[0], self.arrays)
            return f"{header} is a table of its own: write it under its own {header} header, not inside this one"
        if "" in homes:
            return (f"{key} is a top-level key: put it above the first [table] header of the file "
                    f"(TOML puts every key below a header into that table)")
        enclosing = [home for home in homes if kind.startswith(home + ".")]
        if enclosing:
            home = header_of(enclosing[0], self.arrays)
            others = [header_of(other, self.arrays) for other in homes if other != enclosing[0]]
            also = f" (it is also a key of {' and '.join(others)})" if others else ""
            return (f"{key} belongs in {home}: move it into {home}, above its first "
                    f"{header_of(kind, self.arrays)} header{also}")
        where = " or ".join(header_of(home, self.arrays) for home in homes)
        return f"{key} belongs in {where}: move it there"


class _Table:
    """One TOML table under a dotted key path; reads typed values or raises InputError.

    ``kind`` is the table's place in the schema (see :class:`KeyHomes`); with ``homes``,
    an unknown key that is valid in another table is answered with where it belongs.
    """

    def __init__(self, file: str, path: str, data: Mapping[str, Any], allowed: Iterable[str], *,
                 kind: str | None = None, homes: KeyHomes | None = None):
        self.file = file
        self.path = path
        self.data = data
        self.kind = path if kind is None else kind
        self.homes = homes
        allowed = tuple(allowed)
        for key in data:
            if key not in allowed:
                moved = homes.advice(key, self.kind) if homes is not None else None
                near = _nearest(key, allowed)
                if moved is not None:
                    fix = moved
                elif near:
                    fix = f"rename it to {_quoted(near)}"
                else:
                    fix = f"remove it; the keys allowed here are {', '.join(allowed)}"
                raise self.error(key, f'unknown key "{key}"', fix)

    def _child_kind(self, name: str) -> str:
        return f"{self.kind}.{name}" if self.kind else name

    def key(self, name: str | None = None) -> str | None:
        if name is None:
            return self.path or None
        return f"{self.path}.{name}" if self.path else name

    def error(self, name: str | None, problem: str, fix: str) -> InputError:
        return InputError(self.file, self.key(name), problem, fix)

    def has(self, name: str) -> bool:
        return name in self.data

    def _value(self, name: str, default: Any, example: str) -> tuple[bool, Any]:
        """``(True, raw value)`` if present, else ``(False, default)``; raises if required."""
        if name in self.data:
            return True, self.data[name]
        if default is _MISSING:
            if not self.path:
                where = "at the top of the file"
            elif "[" in self.path or '"' in self.path:
                where = f"in {self.path}"  # an entry of an array of tables
            else:
                where = f"in [{self.path}]"
            raise self.error(name, f"required key {name} is missing", f"add {name} = {example} {where}")
        return False, default

    def number(
        self,
        name: str,
        default: Any = _MISSING,
        *,
        example: str,
        above: float | None = None,
        at_least: float | None = None,
        at_most: float | None = None,
        reason: str | None = None,
    ) -> float:
        """A finite real number, optionally bounded; integers are accepted.

        ``reason`` says why the upper bound ``at_most`` is there; it is added to the
        problem when the value exceeds it.
        """
        present, value = self._value(name, default, example)
        if not present:
            return value
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            fix = f"write a plain number, e.g. {name} = {example}"
            if isinstance(value, str) and _looks_numeric(value):
                fix = f"remove the quotes: {name} = {value.strip()}"
            raise self.error(name, f"expected a number, got {_shown(value)}", fix)
        if isinstance(value, int) and not _fits_double(value):
            raise self.error(
                name,
                f"{name} = {_fmt(value)} is beyond the range of a double-precision number (about 1.8e308)",
                f"give a value of sensible size, e.g. {name} = {example}",
            )
        if not math.isfinite(value):
            raise self.error(
                name,
                f"{name} = {value} is not a finite number",
                f"give a finite value, e.g. {name} = {example}",
            )
        _check_bounds(self, name, float(value), example, above, at_least, at_most, reason)
        return float(value)

    def integer(
        self,
        name: str,
        default: Any = _MISSING,
        *,
        example: str,
        at_least: int | None = None,
        at_most: int | None = None,
        reason: str | None = None,
    ) -> int:
        """A whole number; a float with no fractional part (``2e4``) is accepted.

        ``reason`` says why the upper bound ``at_most`` is there (see :meth:`number`).
        """
        present, value = self._value(name, default, example)
        if not present:
            return value
        if isinstance(value, float) and math.isfinite(value) and value.is_integer():
            value = int(value)
        if isinstance(value, bool) or not isinstance(value, int):
            fix = f"write a whole number, e.g. {name} = {example}"
            if isinstance(value, str) and _looks_numeric(value):
                fix = f"remove the quotes and write a whole number, e.g. {name} = {example}"
            raise self.error(name, f"expected a whole number, got {_shown(value)}", fix)
        _check_bounds(self, name, value, example, None, at_least, at_most, reason)
        return value

    def string(
        self, name: str, default: Any = _MISSING, *, example: str, choices: Iterable[str] | None = None
    ) -> str:
        """A non-empty string, optionally one of ``choices``."""
        present, value = self._value(name, default, example)
        if not present:
            return value
        if not isinstance(value, str):
            raise self.error(
                name,
                f"expected a string, got {_shown(value)}",
                f"write it in double quotes, e.g. {name} = {example}",
            )
        if not value.strip():
            raise self.error(name, f"{name} is empty", f"give a value, e.g. {name} = {example}")
        if choices is not None and value not in choices:
            raise self.error(
                name, f'"{value}" is not a valid {name}', _rename_fix(value, choices, f"values of {name}")
            )
        return value

    def boolean(self, name: str, default: Any = _MISSING, *, example: str = "true") -> bool:
        present, value = self._value(name, default, example)
        if present and not isinstance(value, bool):
            raise self.error(
                name,
                f"expected true or false, got {_shown(value)}",
                f"write {name} = true or {name} = false (no quotes)",
            )
        return value

    def table(self, name: str, allowed: Iterable[str], *, example: str) -> _Table | None:
        """A sub-table, or ``None`` when absent."""
        if name not in self.data:
            return None
        value = self.data[name]
        if not isinstance(value, dict):
            raise self.error(
                name, f"expected a table, got {_shown(value)}", f"write it as a table, e.g. {example}"
            )
        return _Table(self.file, self.key(name), value, allowed, kind=self._child_kind(name), homes=self.homes)

    def tables(self, name: str, allowed: Iterable[str], *, example: str, label=None) -> list[_Table]:
        """An array of tables (``[[name]]``); ``label(index, data)`` names each entry."""
        if name not in self.data:
            return []
        value = self.data[name]
        header = f"[[{self.key(name)}]]"
        if not isinstance(value, list) or not all(isinstance(item, dict) for item in value):
            raise self.error(
                name,
                f"expected an array of tables, got {_shown(value)}",
                f"write each entry under its own {header} header (double brackets), e.g. {example}",
            )
        entries = []
        for index, item in enumerate(value, start=1):
            path = label(index, item) if label else f"{self.key(name)}[{index}]"
            entries.append(_Table(self.file, path, item, allowed, kind=self._child_kind(name), homes=self.homes))
        return entries


def _looks_numeric(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _check_bounds(table: _Table, name: str, value: float, example: str, above, at_least, at_most,
                  reason: str | None = None) -> None:
    if above is not None and not value > above:
        bound = "positive" if above == 0 else f"above {_fmt(above)}"
        raise table.error(
            name,
            f"{name} = {_fmt(value)} must be {bound}",
            f"give a value above {_fmt(above)}, e.g. {name} = {example}",
        )
    if at_least is not None and value < at_least:
        raise table.error(
            name,
            f"{name} = {_fmt(value)} is below the smallest allowed value {_fmt(at_least)}",
            f"give a value of at least {_fmt(at_least)}, e.g. {name} = {example}",
        )
    if at_most is not None and value > at_most:
        because = f": {reason}" if reason else ""
        raise table.error(
            name,
            f"{name} = {_fmt(value)} is above the largest allowed value {_fmt(at_most)}{because}",
            f"give a value of at most {_fmt(at_most)}, e.g. {name} = {example}",
        )
