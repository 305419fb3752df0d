"""The installed version of tunnelsmith: the bottom of the house, importing nothing of ours."""

from __future__ import annotations


def software_version() -> str:
    """The version recorded in every result file (``0+unknown`` when run uninstalled)."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("tunnelsmith")
    except PackageNotFoundError:
        return "0+unknown"
