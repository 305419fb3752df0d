"""``tunnelsmith check``: validate a stack or campaign file and describe it."""

from __future__ import annotations

from pathlib import Path

from tunnelsmith.optimize.errors import EXIT_OK, InputError
from tunnelsmith.optimize.inputs.describe import describe
from tunnelsmith.optimize.inputs.reader import load


def run_check(path) -> int:
    """Print the description of the file at ``path`` (raises InputError when it is bad)."""
    print(describe(load(path)))
    return EXIT_OK


def refuse_warnings(path) -> None:
    """``--strict``: raise InputError for the first warning of the file at ``path``.

    A run directory stands for the campaign copy it holds (``RUN_DIR/campaign.toml``).
    """
    from tunnelsmith.optimize.search.layout import CAMPAIGN_COPY

    path = Path(path)
    if path.is_dir():
        path = path / CAMPAIGN_COPY
        if not path.exists():
            return  # the command itself reports the missing campaign
    spec = load(path)
    if spec.warnings:
        key, _, message = spec.warnings[0].partition(": ")
        more = f" ({len(spec.warnings) - 1} more warnings: see `tunnelsmith check {path}`)" if len(spec.warnings) > 1 else ""
        raise InputError(path, key, f"{message}{more}",
                         "change the value, or run without --strict to accept it with a warning")
