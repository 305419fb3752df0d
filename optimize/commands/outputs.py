"""The outputs of a campaign run (``front.nc``, ``trials.nc``, plots, summary), shared by
``tunnelsmith optimize`` and ``tunnelsmith front``.
"""

from __future__ import annotations

import sys
from pathlib import Path
from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.results.front import build_datasets
from tunnelsmith.optimize.results.front import summary_table


def write_outputs(study, spec, run_dir, *, storage_url: str | None = None, quiet: bool = False,
                  plots: bool = True) -> list[Path]:
    """Write ``front.nc``, ``trials.nc`` and the plots into ``run_dir``; print the summary.

    Every file is written under a temporary name and renamed into place; ``front.nc``
    and ``trials.nc`` are renamed together. A first SIGINT/SIGTERM meanwhile lets the
    writing finish (then exit 130); a second stops it with the previous files untouched.
    """
    from tunnelsmith.optimize.io import atomic_group, interrupts_deferred

    run_dir = Path(run_dir)
    with interrupts_deferred(f"tunnelsmith front {run_dir}"):
        front_ds, trials_ds = build_datasets(study, spec, storage_url=storage_url)
        paths = [run_dir / "front.nc", run_dir / "trials.nc"]
        # Both files or neither: a front and a trial table always describe the same trials.
        with atomic_group(paths) as temporaries:
            for dataset, temporary in zip((front_ds, trials_ds), temporaries):
                dataset.to_netcdf(temporary, engine="netcdf4")
        try:
            from tunnelsmith.optimize.plots import plot_campaign
        except ImportError:
            plot_campaign = None
        if plot_campaign is not None and plots:
            try:
                paths += list(plot_campaign(front_ds, trials_ds, run_dir))
            except Exception as error:  # a figure must not cost the campaign its results
                print(f"warning: plots not drawn ({type(error).__name__}: {error})", file=sys.stderr)
    if not quiet:
        print(summary_table(spec, front_ds, trials_ds))
    return paths


def _find_study_name(run_dir: Path, storage) -> str:
    import optuna

    names = optuna.study.get_all_study_names(storage)
    if len(names) == 1:
        return names[0]
    if run_dir.name in names:
        return run_dir.name
    listing = ", ".join(names) if names else "none"
    raise InputError(str(run_dir), None, f"cannot tell which campaign of the storage belongs here (studies: {listing})",
                     f"copy the campaign file to {run_dir / 'campaign.toml'}, or name the run directory "
                     "after the campaign")


def rebuild_outputs(run_dir, storage: str | None = None, quiet: bool = False, plots: bool = True) -> list[Path]:
    """Rebuild ``front.nc``, ``trials.nc`` and plots of a run from its storage alone.

    Reads only: safe while workers are still adding trials. The campaign text comes
    from the study (the copy ``RUN_DIR/campaign.toml`` is refreshed from it).

    Returns
    -------
    list of Path
        The files written.
    """
    import os

    import optuna

    from tunnelsmith.optimize.search.layout import CAMPAIGN_COPY, STORAGE_ENV
    from tunnelsmith.optimize.search.storage import open_storage
    from tunnelsmith.optimize.io import write_text
    from tunnelsmith.optimize.inputs.reader import load

    run_dir = Path(run_dir)
    url = storage or os.environ.get(STORAGE_ENV) or None
    if not run_dir.is_dir():
        if url is None:
            raise InputError(str(run_dir), None, "no such run directory",
                             "give the directory `tunnelsmith optimize` wrote (default runs/<campaign name>/)")
        run_dir.mkdir(parents=True)
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    store = open_storage(run_dir, url, writer=False)
    copy = run_dir / CAMPAIGN_COPY
    name = load(copy).name if copy.exists() else _find_study_name(run_dir, store)
    try:
        study = optuna.load_study(study_name=name, storage=store)
    except KeyError:
        raise InputError(str(run_dir), None, f'the storage holds no campaign named "{name}"',
                         "check --storage, or the [campaign] name in campaign.toml of the run directory") from None
    text = study.user_attrs.get("campaign_toml")
    if text is not None and (not copy.exists() or copy.read_text(encoding="utf-8") != text):
        write_text(copy, text)
    spec = load(copy)
    return write_outputs(study, spec, run_dir, storage_url=url, quiet=quiet, plots=plots)
