"""Fuzzing the input reader: whatever a file holds, reading it gives a StackSpec or an
InputError, never any other exception, a hang or a runaway allocation.

Random mutations of the example campaigns in ``campaigns/`` (values of another type,
NaN and infinities, huge and negative numbers, unicode strings, deleted and duplicated
tables and keys, binary garbage, truncation) are written to a file and read in-process
with :func:`tunnelsmith.optimize.inputs.reader.load`. Hypothesis runs derandomised, so
every run (and CI) tries the same inputs. A handful of end-to-end cases drive the real
command line with files that are no stack file at all (a directory, a FIFO, /dev/zero,
an unreadable file) and must answer with exit status 0 or 2 without a traceback.

Bounds: each in-process read must finish within :data:`READ_LIMIT_S` and may map at most
:data:`ADDRESS_SPACE_HEADROOM_BYTES` more address space (``RLIMIT_AS``); each
command-line case within :data:`CLI_LIMIT_S`. The whole file runs in well under a minute.
"""

from __future__ import annotations

import collections
import math
import os
import resource
import signal
import subprocess
import tomllib
from pathlib import Path

import pytest
from conftest import CAMPAIGNS, CLI, ROOT
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.inputs import limits
from tunnelsmith.optimize.inputs.reader import load
from tunnelsmith.optimize.inputs.schema import StackSpec

#: A read that takes longer than this is a hang (a valid campaign reads in ~10 ms).
READ_LIMIT_S = 10.0
#: Address space the in-process fuzz may map beyond what the test process already has;
#: reading a file of at most 512 KiB needs a few MB.
ADDRESS_SPACE_HEADROOM_BYTES = 500 * 2**20
#: Wall time of one command-line case (the interpreter starts in ~1.5 s).
CLI_LIMIT_S = 60.0

SEEDS = {path.name: path.read_text(encoding="utf-8") for path in sorted(CAMPAIGNS.glob("*.toml"))}

#: Outcomes of every fuzzed read, by kind, summed over the tests of this file.
OUTCOMES: collections.Counter = collections.Counter()


# --------------------------------------------------------------------------- a TOML writer

_BARE_KEY = frozenset("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789_-")


def _key(name: str) -> str:
    return name if name and set(name) <= _BARE_KEY else _string(name)


def _string(text: str) -> str:
    out = []
    for char in text:
        if char in '"\\':
            out.append("\\" + char)
        elif ord(char) < 0x20 or ord(char) == 0x7F:
            out.append(f"\\u{ord(char):04X}")
        else:
            out.append(char)
    return '"' + "".join(out) + '"'


def _value(value) -> str:
    """A value as inline TOML (nested tables as inline tables)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return _string(value)
    if isinstance(value, list):
        return "[" + ", ".join(_value(item) for item in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{_key(k)} = {_value(v)}" for k, v in value.items()) + " }"
    raise TypeError(type(value))


def _is_table_array(value) -> bool:
    return isinstance(value, list) and bool(value) and all(isinstance(item, dict) for item in value)


def dumps(data: dict, prefix: str = "") -> str:
    """TOML text of parsed data: plain keys first, then [tables] and [[arrays of tables]]."""
    lines = [f"{_key(k)} = {_value(v)}" for k, v in data.items()
             if not isinstance(v, dict) and not _is_table_array(v)]
    for name, value in data.items():
        path = f"{prefix}.{_key(name)}" if prefix else _key(name)
        if isinstance(value, dict):
            lines += ["", f"[{path}]", dumps(value, path)]
        elif _is_table_array(value):
            for item in value:
                lines += ["", f"[[{path}]]", dumps(item, path)]
    return "\n".join(lines)


def test_the_writer_round_trips_every_campaign():
    for name, text in SEEDS.items():
        data = tomllib.loads(text)
        assert tomllib.loads(dumps(data)) == data, name


# --------------------------------------------------------------------------- mutations

# Edge values are drawn as often as arbitrary ones: they are where readers break.
_NUMBERS = st.one_of(
    st.integers(min_value=-(10**30), max_value=10**30),
    st.sampled_from([0, -1, 1, 2**31, 2**32, 2**63 - 1, -(2**63), 10**400, -(10**400), 10**9, 10**12]),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0.0, -0.0, 1e-320, 1e308, -1e308, 1e-9, 0.5, 2.5, 1e6, 1e12, 1e300, math.nan, math.inf]),
)
_STRINGS = st.one_of(
    st.text(max_size=12),
    st.sampled_from(["", " ", "GaAs", "AlGaAs", "Al1.5Ga-0.5As", "InAs", "nsga2", "maximize", "pvcr",
                     "yield", "\u0000", "Γ-valley", "名前", "\U0001F600", "a" * 300, '"quoted"']),
)
_SCALARS = st.one_of(_NUMBERS, _STRINGS, st.booleans())
_VALUES = st.recursive(
    _SCALARS,
    lambda inner: st.one_of(st.lists(inner, max_size=4),
                            st.dictionaries(st.sampled_from(["min", "max", "step", "choices", "x"]), inner,
                                            max_size=3)),
    max_leaves=6,
)


def _places(data, path=()):
    """Every (container, key) of parsed data, depth first."""
    items = data.items() if isinstance(data, dict) else enumerate(data)
    for key, value in list(items):
        yield data, key
        if isinstance(value, (dict, list)):
            yield from _places(value, path + (key,))


@st.composite
def mutated_data(draw) -> str:
    """A campaign with a few of its values, keys or tables changed, as TOML text."""
    data = tomllib.loads(SEEDS[draw(st.sampled_from(sorted(SEEDS)))])
    for _ in range(draw(st.integers(1, 4))):
        places = list(_places(data))
        if not places:
            break
        action = draw(st.sampled_from(["renumber", "renumber", "replace", "replace", "delete", "duplicate",
                                       "unknown"]))
        numbers = [(c, k) for c, k in places if isinstance(c[k], (int, float)) and not isinstance(c[k], bool)]
        if action == "renumber" and numbers:
            # Numbers are where overflow, NaN and sizes matter: change one for another.
            container, key = draw(st.sampled_from(numbers))
            container[key] = draw(_NUMBERS)
            continue
        container, key = draw(st.sampled_from(places))
        if action in ("replace", "renumber"):
            container[key] = draw(_VALUES)
        elif action == "delete":
            del container[key]
        elif action == "duplicate" and isinstance(container, list):
            container.append(container[key])  # a second [[layer]] of the same name, say
        elif action == "unknown" and isinstance(container, dict):
            container[draw(st.sampled_from(["steps", "pointz", "", "Layer", "seed", "σ"]))] = draw(_SCALARS)
    return dumps(data)


@st.composite
def mutated_text(draw) -> bytes:
    """A campaign's bytes with lines duplicated, deleted or swapped, bytes inserted, or cut."""
    text = SEEDS[draw(st.sampled_from(sorted(SEEDS)))]
    raw = text.encode("utf-8")
    for _ in range(draw(st.integers(1, 3))):
        lines = raw.split(b"\n")
        action = draw(st.sampled_from(["duplicate", "delete", "swap", "garbage", "truncate", "bom", "number",
                                       "number"]))
        settings_lines = [i for i, line in enumerate(lines) if b"=" in line and not line.lstrip().startswith(b"#")]
        if action == "number" and settings_lines:
            index = draw(st.sampled_from(settings_lines))  # a key = value line, not a comment
        else:
            index = draw(st.integers(0, len(lines) - 1))
        if action == "duplicate":  # a key or table header given twice
            lines.insert(index, lines[index])
        elif action == "delete":
            del lines[index]
        elif action == "swap":
            other = draw(st.integers(0, len(lines) - 1))
            lines[index], lines[other] = lines[other], lines[index]
        elif action == "garbage":
            lines[index] = lines[index] + draw(st.binary(min_size=1, max_size=16))
        elif action == "truncate":
            return raw[: draw(st.integers(0, len(raw)))]
        elif action == "bom":
            lines[0] = b"\xef\xbb\xbf" + lines[0]
        elif action == "number" and b"=" in lines[index]:
            key = lines[index].split(b"=")[0]
            number = draw(st.sampled_from([b"nan", b"-inf", b"1e999", b"-1", b"0", b"9" * 5000, b"1" + b"0" * 400,
                                           b"0x7fffffffffffffff", b"1_000_000_000_000", b"2e18", b"\"12\""]))
            lines[index] = key + b"= " + number
        raw = b"\n".join(lines)
    return raw


# --------------------------------------------------------------------------- the in-process read


class _Hang(Exception):
    """A read that outlived READ_LIMIT_S."""


@pytest.fixture
def bounded(monkeypatch):
    """Reads under a wall-time alarm and an address-space limit; a fixed-size machine.

    The machine is taken to have 16 GiB, so that the memory check gives the same outcome
    on every machine, and is not confused by the address-space limit of the fuzz itself.
    """
    monkeypatch.setattr(limits, "available_memory_bytes", lambda: 16 * 2**30)

    def alarm(signum, frame):
        raise _Hang(f"a read took more than {READ_LIMIT_S} s")

    previous_handler = signal.signal(signal.SIGALRM, alarm)
    soft, hard = resource.getrlimit(resource.RLIMIT_AS)
    with open("/proc/self/status", encoding="ascii") as handle:
        mapped = next(int(line.split()[1]) * 1024 for line in handle if line.startswith("VmSize:"))
    cap = mapped + ADDRESS_SPACE_HEADROOM_BYTES
    if hard != resource.RLIM_INFINITY:
        cap = min(cap, hard)
    resource.setrlimit(resource.RLIMIT_AS, (cap, hard))
    try:
        yield
    finally:
        resource.setrlimit(resource.RLIMIT_AS, (soft, hard))
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous_handler)


def read_outcome(path: Path) -> str:
    """``"spec"`` or ``"input error"``; any other exception propagates and fails the test."""
    signal.setitimer(signal.ITIMER_REAL, READ_LIMIT_S)
    try:
        result = load(path)
    except InputError as error:
        assert str(error) and "\n" not in str(error) and "Fix:" in str(error)
        OUTCOMES["input error"] += 1
        return "input error"
    except BaseException as error:
        OUTCOMES["other"] += 1
        raise AssertionError(f"load raised {type(error).__name__}: {error}") from error
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
    assert isinstance(result, StackSpec)
    OUTCOMES["spec"] += 1
    return "spec"


FUZZ = settings(max_examples=400, deadline=None, derandomize=True, database=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])


@FUZZ
@given(text=mutated_data())
def test_mutated_values_read_as_a_spec_or_an_input_error(tmp_path, bounded, text):
    path = tmp_path / "fuzz.toml"
    path.write_text(text, encoding="utf-8")
    read_outcome(path)


@FUZZ
@given(raw=mutated_text())
def test_mutated_bytes_read_as_a_spec_or_an_input_error(tmp_path, bounded, raw):
    path = tmp_path / "fuzz.toml"
    path.write_bytes(raw)
    read_outcome(path)


@settings(max_examples=200, deadline=None, derandomize=True, database=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(raw=st.binary(max_size=2048))
def test_binary_garbage_reads_as_an_input_error(tmp_path, bounded, raw):
    path = tmp_path / "garbage.toml"
    path.write_bytes(raw)
    read_outcome(path)


def test_the_fuzz_reached_both_outcomes():
    # Runs after the fuzz tests of this file (pytest keeps the file order): mutations
    # that were all refused, or all accepted, would test little.
    if not OUTCOMES:
        pytest.skip("run together with the fuzz tests above")
    print(f"\nfuzzed reads: {sum(OUTCOMES.values())} — StackSpec {OUTCOMES['spec']}, "
          f"InputError {OUTCOMES['input error']}, other {OUTCOMES['other']}")
    assert OUTCOMES["other"] == 0
    assert OUTCOMES["spec"] >= 20 and OUTCOMES["input error"] >= 100


# --------------------------------------------------------------------------- the command line


def _campaign(tmp_path: Path, name: str = "campaign.toml", text: str | None = None) -> Path:
    path = tmp_path / name
    path.write_text(text if text is not None else SEEDS["demo.toml"], encoding="utf-8")
    return path


def _special(kind: str, tmp_path: Path) -> Path:
    """The input of one command-line case."""
    demo = SEEDS["demo.toml"]
    if kind == "directory":
        _campaign(tmp_path)
        return tmp_path
    if kind == "fifo":
        os.mkfifo(tmp_path / "pipe.toml")
        return tmp_path / "pipe.toml"
    if kind == "dev-zero":
        return Path("/dev/zero")
    if kind == "proc-mem":
        return Path("/proc/self/mem")
    if kind == "unreadable":
        path = _campaign(tmp_path)
        path.chmod(0)
        return path
    if kind == "missing":
        return tmp_path / "missing.toml"
    if kind == "symlink-loop":
        os.symlink(tmp_path / "b.toml", tmp_path / "a.toml")
        os.symlink(tmp_path / "a.toml", tmp_path / "b.toml")
        return tmp_path / "a.toml"
    if kind == "sparse-8GiB":
        with open(tmp_path / "huge.toml", "wb") as handle:
            handle.truncate(8 * 2**30)
        return tmp_path / "huge.toml"
    raw = {
        "empty": b"",
        "garbage": bytes(range(256)) * 4,
        "utf-16": demo.encode("utf-16"),
        "bom": b"\xef\xbb\xbf" + demo.encode(),
        "truncated": demo.encode()[: len(demo) // 2],
        "nested": b"a = " + b"[" * 10_000 + b"]" * 10_000,
        "nan": demo.replace("points = 801", "points = nan").encode(),
        "duplicate-key": demo.replace("points = 801", "points = 801\npoints = 802").encode(),
        "valid": demo.encode(),
    }[kind]
    path = tmp_path / f"{kind}.toml"
    path.write_bytes(raw)
    return path


CLI_CASES = {
    "directory": 2, "fifo": 2, "dev-zero": 2, "proc-mem": 2, "unreadable": 2, "missing": 2,
    "symlink-loop": 2, "sparse-8GiB": 2, "empty": 2, "garbage": 2, "utf-16": 2, "bom": 0,
    "truncated": 2, "nested": 2, "nan": 2, "duplicate-key": 2, "valid": 0,
}  # fmt: skip


@pytest.mark.parametrize("kind", sorted(CLI_CASES))
def test_the_command_line_answers_every_input_without_a_traceback(tmp_path, kind):
    if kind == "unreadable" and os.geteuid() == 0:
        pytest.skip("root reads a chmod 000 file anyway (the proc-mem case covers a failing read)")
    if kind == "proc-mem" and not Path("/proc/self/mem").exists():
        pytest.skip("needs Linux /proc")
    target = _special(kind, tmp_path)
    try:
        result = subprocess.run([*CLI, "check", str(target)], cwd=ROOT, check=False, capture_output=True, text=True,
                                timeout=CLI_LIMIT_S)
    finally:
        if kind == "unreadable":
            target.chmod(0o600)
    assert result.returncode == CLI_CASES[kind], (kind, result.stdout[-500:], result.stderr[-2000:])
    assert "Traceback" not in result.stderr, result.stderr[-2000:]
    if result.returncode == 2:
        line = result.stderr.strip().splitlines()[-1]
        assert line.startswith("error: ") and "Fix:" in line, result.stderr[-2000:]

