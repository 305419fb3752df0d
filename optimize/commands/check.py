"""``tunnelsmith check``: validate a stack or campaign file and describe it."""

from __future__ import annotations

from tunnelsmith.optimize.errors import EXIT_OK
from tunnelsmith.optimize.inputs.describe import describe
from tunnelsmith.optimize.inputs.reader import load


def run_check(path) -> int:
    """Print the description of the file at ``path`` (raises InputError when it is bad)."""
    print(describe(load(path)))
    return EXIT_OK
