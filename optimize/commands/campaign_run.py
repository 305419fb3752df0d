"""Start or resume a campaign, then write its outputs: the work of ``tunnelsmith optimize``
and of ``tunnelsmith.run_campaign``.
"""

from __future__ import annotations

import os
import sys
import time
import warnings
from pathlib import Path
import optuna
from tunnelsmith.optimize.errors import InputError
from tunnelsmith.physics.materials import IndirectValleyWarning
from tunnelsmith.optimize.search.layout import STORAGE_ENV, WORKER_INDEX_ENV, default_run_dir
from tunnelsmith.optimize.commands.outputs import write_outputs
from tunnelsmith.optimize.search.loop import run_search


def run_campaign(path, *, out_dir=None, trials: int | None = None, timeout_s: float | None = None,
                 workers: int = 1, storage: str | None = None, quiet: bool = False, plots: bool = True) -> int:
    """Start or resume the campaign of ``path``; returns the exit status (0, or 130 if interrupted).

    Parameters
    ----------
    path : path-like
        Campaign file.
    out_dir : path-like, optional
        Run directory (default ``runs/<campaign name>/``): journal, outputs, worker logs.
    trials : int, optional
        Total budget of finished trials (default ``[search] trials``).
    timeout_s : float, optional
        Stop asking after this wall time in seconds (default ``[search] timeout_h``).
    workers : int
        Local processes working on the campaign (this one included).
    storage : str, optional
        Optuna RDB URL; default the journal file in the run directory (or the URL in the
        environment variable ``TUNNELSMITH_STORAGE``).
    quiet : bool
        One plain log line per batch instead of a progress bar, no summary table.

    Raises
    ------
    InputError
        Bad campaign file, storage or options; a changed campaign file on resume.
    """
    from tunnelsmith.optimize.inputs.reader import load

    spec = load(path)
    if not spec.is_campaign:
        raise InputError(spec.path, None, "this is a stack file: it has no search range and no [[objective]]",
                         "solve it with `tunnelsmith solve`, or make it a campaign: give ranges such as "
                         "thickness_ml = { min = 4, max = 12 } and at least one [[objective]]")
    url = storage or os.environ.get(STORAGE_ENV) or None
    worker_index = int(os.environ.get(WORKER_INDEX_ENV, "0") or 0)
    run_dir = Path(out_dir) if out_dir is not None else default_run_dir(spec)
    budget = int(trials if trials is not None else spec.search.trials)
    if timeout_s is None and spec.search.timeout_h is not None:
        timeout_s = 3600.0 * spec.search.timeout_h
    deadline = None if timeout_s is None else time.monotonic() + timeout_s
    try:
        run_dir.mkdir(parents=True, exist_ok=True)
    except OSError as error:
        raise InputError("command line", "--out", f"cannot create the run directory {run_dir} ({error.strerror})",
                         "choose a writable directory with --out DIR") from None

    optuna.logging.set_verbosity(optuna.logging.WARNING)
    if worker_index == 0 and not quiet:
        for text in spec.located_warnings:
            print(f"warning: {text}", file=sys.stderr)
    with warnings.catch_warnings():
        # Material warnings were given once above (and by `tunnelsmith check`); the
        # physics would repeat them for every batch.
        warnings.simplefilter("ignore", IndirectValleyWarning)
        outcome = run_search(spec, run_dir, url, budget, deadline, workers, worker_index, quiet)
    if outcome.main:
        write_outputs(outcome.study, spec, run_dir, storage_url=url, quiet=quiet, plots=plots)
        if not quiet:
            why = {"budget": "budget reached", "timeout": "time limit reached", "interrupted": "interrupted"}
            print(f"{why[outcome.why]}: {outcome.finished} finished trials, results in {run_dir}", file=sys.stderr)
    return outcome.exit_status
