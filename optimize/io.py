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
    try:
        yield temporary
        # mkstemp creates owner-only files; give results the usual umask permissions.
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(temporary, 0o666 & ~umask)
        os.replace(temporary, path)
    finally:
        temporary.unlink(missing_ok=True)


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
