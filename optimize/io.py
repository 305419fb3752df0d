"""Crash-safe output: every result file appears whole or not at all.

Files are written to a temporary name in the destination directory and moved into
place with :func:`os.replace`, which is atomic on POSIX file systems: a reader (or a
campaign killed mid-write) never sees a half-written ``.nc`` or ``.png``.
"""

from __future__ import annotations

import contextlib
import os
import re
import tempfile
from collections.abc import Iterator
from datetime import datetime, timezone
from pathlib import Path


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it onto ``path`` on success."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    handle, temporary = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=f"{path.suffix}.part", dir=path.parent)
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
