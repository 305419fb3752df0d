"""``tunnelsmith front``: rebuild a run's front, trial table and plots from its storage."""

from __future__ import annotations

from tunnelsmith.optimize.commands.outputs import rebuild_outputs


def rebuild_front(run_dir, storage: str | None = None, quiet: bool = False) -> int:
    """Rebuild ``front.nc``, ``trials.nc`` and plots of ``run_dir``; returns exit status 0.

    Reads the storage only, so it is safe while workers are still adding trials.
    """
    rebuild_outputs(run_dir, storage=storage, quiet=quiet)
    return 0
