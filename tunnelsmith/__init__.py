"""tunnelsmith: inverse design of resonant-tunneling and tunnel-barrier layer stacks.

The package holds two floors: :mod:`tunnelsmith.physics` (pure numpy/scipy models of
tunneling: transfer matrices, quasi-bound levels, Tsu–Esaki current) and
:mod:`tunnelsmith.optimize` (campaign files, search, results, commands). The functions
below are the interface for notebooks; ``python -m tunnelsmith`` runs the command line.

>>> import tunnelsmith
>>> spec = tunnelsmith.load("campaigns/stack_example.toml")      # doctest: +SKIP
>>> tunnelsmith.transmission(spec, bias_V=[0.0, 0.2])            # doctest: +SKIP

The names are loaded on first use, so ``import tunnelsmith.physics`` stays light.
"""

from __future__ import annotations

from tunnelsmith.optimize.version import software_version

__version__ = software_version()

_API = ("load", "solve", "transmission", "run_campaign", "open_front", "tolerance")
__all__ = [*_API, "__version__"]


def __getattr__(name: str):
    if name in _API:
        from tunnelsmith import api

        return getattr(api, name)
    raise AttributeError(f"module 'tunnelsmith' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(__all__)
