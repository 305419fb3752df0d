"""Crash-safe output: every result file appears whole or not at all.

Files are written to a temporary name in the destination directory and moved into
place with :func:`os.replace`, which is atomic on POSIX file systems: a reader (or a
campaign killed mid-write) never sees a half-written ``.nc`` or ``.png``.

A writer killed mid-write leaves its temporary file behind. The temporary name says
whose it is, ``.<name>.<host>.<pid>.<random>.part`` (e.g. ``.front.nc.node7.4711.k3j2x9_a.part``),
and every write first removes the leftovers in its directory
(:func:`remove_stale_parts`): those of a process of this host that no longer runs, and
those it cannot attribute (another host's, or the earlier unattributed form
``.<stem>.<random><suffix>.part``) once untouched for :data:`STALE_PART_AGE_S`.
"""

from __future__ import annotations

import contextlib
import os
import re
import socket
import tempfile
import time
from collections.abc import Iterator
from datetime import datetime, timezone
from pathlib import Path


#: Seconds after which a temporary file whose writer cannot be checked is a leftover: no
#: output of this program takes that long to write, and a writer keeps touching its file.
STALE_PART_AGE_S = 3600.0


_PART_SUFFIX = ".part"


def process_running(pid: int) -> bool:
    """Whether process ``pid`` of this host runs (one that exited but was not reaped does not).

    A process of another user counts as running: it exists, only signals are refused.
    """
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    try:  # a zombie (exited, not yet reaped by its parent) runs no more
        with open(f"/proc/{pid}/stat", "rb") as handle:
            return handle.read().rsplit(b")", 1)[1].split()[0] != b"Z"
    except (OSError, IndexError):
        return True  # no /proc (not Linux): kill(pid, 0) succeeded, so it exists


def _part_prefix(path: Path) -> str:
    return f".{path.name}.{socket.gethostname()}.{os.getpid()}."


def remove_stale_parts(directory: str | os.PathLike) -> list[Path]:
    """Remove temporary files that killed writers left in ``directory``; returns them.

    Only this program's temporary files are considered: hidden names ending in
    ``.part``. One that names a process of this host is removed when that process no
    longer runs, however recent; any other (another host's, or the earlier form without
    a writer) when untouched for :data:`STALE_PART_AGE_S`. A file that cannot be
    removed (another user's) is left alone.
    """
    host = socket.gethostname()
    # Host names may contain dots, so the writer is read from the known host backwards.
    here = re.compile(rf"\..+\.{re.escape(host)}\.(\d+)\.[^.]+{re.escape(_PART_SUFFIX)}")
    can_check_pids = os.name == "posix"  # Windows' os.kill(pid, 0) would send Ctrl-C
    removed = []
    try:
        entries = list(os.scandir(directory))
    except OSError:
        return removed
    now_s = time.time()
    for entry in entries:
        if not (entry.name.startswith(".") and entry.name.endswith(_PART_SUFFIX)):
            continue
        try:
            if not entry.is_file(follow_symlinks=False):
                continue
            match = here.fullmatch(entry.name)
            if match is not None and can_check_pids:
                stale = not process_running(int(match.group(1)))
            else:
                stale = now_s - entry.stat(follow_symlinks=False).st_mtime > STALE_PART_AGE_S
            if stale:
                os.unlink(entry.path)
                removed.append(Path(entry.path))
        except OSError:
            continue  # gone already (another writer cleaned up), or not ours to remove
    return removed


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it onto ``path`` on success.

    The temporary name carries this host and process id, and the leftovers of killed
    writers in the directory are removed first (:func:`remove_stale_parts`).
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    remove_stale_parts(path.parent)
    handle, temporary = tempfile.mkstemp(prefix=_part_prefix(path), suffix=_PART_SUFFIX, dir=path.parent)
    os.close(handle)
    temporary = Path(temporary)
    _WritingState.temporaries.add(temporary)
    try:
        yield temporary
        # mkstemp creates owner-only files; give results the usual umask permissions.
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(temporary, 0o666 & ~umask)
        os.replace(temporary, path)
    finally:
        temporary.unlink(missing_ok=True)
        _WritingState.temporaries.discard(temporary)


def write_netcdf(dataset, path: str | os.PathLike) -> Path:
    """Write an xarray Dataset to ``path`` atomically (netCDF4 format)."""
    with atomic_path(path) as temporary:
        dataset.to_netcdf(temporary, engine="netcdf4")
    return Path(path)


def write_text(path: str | os.PathLike, text: str) -> Path:
    """Write a UTF-8 text file to ``path`` atomically."""
    with atomic_path(path) as temporary:
        temporary.write_text(text, encoding="utf-8")
    return Path(path)


def save_figure(figure, path: str | os.PathLike, **savefig_kwargs) -> Path:
    """Save a matplotlib figure to ``path`` atomically (format from the suffix)."""
    path = Path(path)
    savefig_kwargs.setdefault("format", path.suffix.lstrip(".") or "png")
    with atomic_path(path) as temporary:
        figure.savefig(temporary, **savefig_kwargs)
    return path


def provenance_attrs(input_text: str) -> dict[str, str]:
    """Global attributes every output file carries: input text, version, time."""
    from tunnelsmith.optimize.version import software_version

    return {
        "campaign_toml": input_text,
        "software_version": software_version(),
        "created_utc": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "model_caution": MODEL_CAUTION,
    }


#: The limits every report states (README "Model limits").
MODEL_CAUTION = (
    "Coherent, single-valley (Gamma) effective-mass transport with a linear bias drop: no scattering, "
    "no X-valley or phonon-assisted valley current, no space charge. The peak-to-valley ratio is "
    "overestimated. Results rank designs; they do not replace measurements of grown wafers."
)


_NOT_NAME = re.compile(r"[^A-Za-z0-9_]")


def netcdf_name(label: str) -> str:
    """A valid netCDF/CF variable name for a metric label.

    ``"leakage_A_cm2@0.05V"`` → ``"leakage_A_cm2_at_0p05V"``: ``@`` becomes ``_at_``, a
    decimal point ``p``, a minus sign ``m``; anything else outside ``[A-Za-z0-9_]``
    becomes ``_``.
    """
    text = label.replace("@", "_at_").replace(".", "p").replace("-", "m").replace("+", "")
    text = _NOT_NAME.sub("_", text).strip("_")
    return text if text and not text[0].isdigit() else f"m_{text}"


class _WritingState:
    """What the output phase's signal handler must know: temporaries alive, renames running."""

    temporaries: set[Path] = set()
    renaming = False
    stop_after_renames = False


def _stop_now(message: str) -> None:
    """End the process at once (exit 130): own temporaries removed, complete files kept.

    A raised exception could land inside the netCDF library and leave its state (and
    its lock) half-way; the writing is abandoned instead. Nothing else is written
    during the output phase, so nothing is lost.
    """
    from tunnelsmith.optimize.errors import EXIT_INTERRUPTED

    for temporary in list(_WritingState.temporaries):
        with contextlib.suppress(OSError):
            temporary.unlink()
    with contextlib.suppress(OSError):
        os.write(2, message.encode())
    os._exit(EXIT_INTERRUPTED)


@contextlib.contextmanager
def atomic_group(paths) -> Iterator[list[Path]]:
    """Temporaries for several files, renamed into place together once all are written.

    An exception (or interrupt) before the end renames none of them: the previous
    complete files stay as they were, so files that belong together (``front.nc`` and
    ``trials.nc``) never mix two runs. A stop signal during the renames waits for them.
    """
    with contextlib.ExitStack() as stack:
        temporaries = [stack.enter_context(atomic_path(path)) for path in paths]
        yield temporaries
        _WritingState.renaming = True
        stack.callback(setattr, _WritingState, "renaming", False)
    if _WritingState.stop_after_renames:
        _stop_now("stopped after writing the results\n")




def stop_at_once(signum: int, frame) -> None:
    """SIGINT/SIGTERM handler outside the campaign loop and the output phase: exit 130 now.

    Raising KeyboardInterrupt from a handler can land where it is swallowed (a
    destructor, a callback) or outside any handler; ending the process is reliable, and
    every file is written atomically, so nothing is left half-written.
    """
    import signal

    _stop_now(f"\n{signal.Signals(signum).name}: interrupted; no file was left half-written "
              "(for a campaign, `tunnelsmith front RUN_DIR` rebuilds its outputs)\n")


@contextlib.contextmanager
def interrupts_deferred(rebuild_hint: str) -> Iterator[None]:
    """While results are written, a first SIGINT/SIGTERM waits for the writing to finish.

    The first signal is announced and held: the block runs to its end and then
    KeyboardInterrupt is raised (the command exits 130 with complete results). A second
    signal ends the process at once with exit 130 (:func:`_stop_now`); files written
    atomically are then either complete or untouched, and the message names
    ``rebuild_hint``, the command that rebuilds them. Outside the main thread this is a no-op (signals go to the main thread).
    """
    import signal
    import sys
    import threading

    if threading.current_thread() is not threading.main_thread():
        yield
        return
    received: list[int] = []

    def handle(signum, frame) -> None:
        received.append(signum)
        name = signal.Signals(signum).name
        if len(received) == 1:
            with contextlib.suppress(OSError):
                os.write(2, f"\n{name}: finishing the results first (signal again to stop now)\n".encode())
            return
        message = (f"\n{name}: stopped while writing results; the files written so far are complete and the "
                   f"others are as before. `{rebuild_hint}` rebuilds them\n")
        if _WritingState.renaming:
            _WritingState.stop_after_renames = True  # a pair of renames is never split
            return
        _stop_now(message)

    previous = {signum: signal.signal(signum, handle) for signum in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield
    finally:
        for signum, handler in previous.items():
            signal.signal(signum, handler)
    if received:
        sys.stderr.flush()
        raise KeyboardInterrupt
