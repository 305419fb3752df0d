"""The Optuna study of a campaign: created once, resumed, refused when the file changed
or when the run directory belongs to a campaign of another name.
"""

from __future__ import annotations

import os
import time
import warnings
from datetime import datetime, timezone
from pathlib import Path
import optuna
from optuna.exceptions import DuplicatedStudyError
from tunnelsmith.optimize.model import objectives as objectives_module
from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.search.layout import CAMPAIGN_COPY, journal_path
from tunnelsmith.optimize.search.storage import redact_url


def _changed_campaign(spec, run_dir: Path, url: str | None, stored_sha: str) -> InputError:
    where = f"the database {redact_url(url)}" if url else f"the run directory {run_dir}"
    fix = ("restore the file as it was to resume, or start a new run in a fresh directory with "
           "--out NEW_DIR" + (" and a new [campaign] name (the study is named after it)" if url else ""))
    return InputError(spec.path, None,
                      f'{where} holds campaign "{spec.name}" started from a different version of this file '
                      f"(sha256 {stored_sha[:12]}, the file now has {spec.sha256[:12]})", fix)


def _name_in_copy(copy: Path) -> str | None:
    """``[campaign] name`` of the campaign copy in a run directory; None without a readable one.

    The copy is written by this program from a file that was read and validated, so a
    copy that cannot be read was damaged afterwards; it then tells nothing, and the
    journal (when there is one) still names the campaign of the run.
    """
    import tomllib

    try:
        name = tomllib.loads(copy.read_text(encoding="utf-8"))["campaign"]["name"]
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError, KeyError, TypeError):
        return None
    return name if isinstance(name, str) else None


def refuse_other_campaign(storage, spec, run_dir: Path, url: str | None = None) -> None:
    """Refuse to run ``spec`` in a run directory that belongs to a campaign of another name.

    The run directory's outputs (``front.nc``, ``trials.nc``, plots, the campaign copy)
    carry no campaign name in their file names, so a second campaign there would
    overwrite the first one's. The owner is the campaign named in the copy
    ``RUN_DIR/campaign.toml``; for the run's own journal (no ``--storage``), also any
    campaign the journal holds. A database legitimately holds several campaigns, so
    with ``--storage`` only the copy speaks.

    Raises
    ------
    InputError
        Naming the campaign file, the key ``campaign.name`` and the fix.
    """
    run_dir = Path(run_dir)
    copy = run_dir / CAMPAIGN_COPY
    owner = _name_in_copy(copy)
    where = f"its copy {copy}"
    if owner is None and not url:
        names = optuna.study.get_all_study_names(storage)
        if names and spec.name not in names:
            owner, where = names[0], f"its journal {journal_path(run_dir)}"
    if owner is None or owner == spec.name:
        return
    raise InputError(spec.path, "campaign.name",
                     f'the run directory {run_dir} belongs to campaign "{owner}" (named in {where}), and this '
                     f'file names campaign "{spec.name}": running it there would overwrite the outputs of '
                     f'"{owner}"',
                     f'give this campaign its own --out directory, or keep the name "{owner}" to resume that '
                     "campaign")


def open_study(storage, spec, run_dir: Path, url: str | None = None) -> optuna.Study:
    """Create the campaign's study, or load it to resume; refuse a changed campaign file.

    Study name: the campaign name. Study user attributes: ``campaign_name``,
    ``campaign_sha256``, ``campaign_toml``, ``objective_labels``, ``constraint_keys``,
    ``sampler_seed``, ``software_version``, ``created_utc``. Several workers may call this
    at the same moment on an empty storage. A run directory that belongs to a campaign
    of another name is refused (:func:`refuse_other_campaign`).
    """
    import sqlalchemy.exc

    from tunnelsmith.optimize.version import software_version

    refuse_other_campaign(storage, spec, run_dir, url)
    directions = objectives_module.directions(spec)
    study = None
    for attempt in range(10):
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                study = optuna.create_study(storage=storage, study_name=spec.name, directions=directions,
                                            load_if_exists=True, sampler=optuna.samplers.RandomSampler())
            break
        except (DuplicatedStudyError, KeyError, sqlalchemy.exc.IntegrityError, sqlalchemy.exc.OperationalError):
            # Another worker is creating the same study this instant.
            if attempt == 9:
                raise
            time.sleep(0.1 * (attempt + 1))
    attrs = study.user_attrs
    stored = attrs.get("campaign_sha256")
    if stored is not None and stored != spec.sha256:
        raise _changed_campaign(spec, run_dir, url, stored)
    if [d.name.lower() for d in study.directions] != directions:
        raise _changed_campaign(spec, run_dir, url, stored or "unknown")
    if stored is None:
        seed = spec.search.seed if spec.search.seed is not None else int.from_bytes(os.urandom(4), "little")
        for key, value in {
            "campaign_name": spec.name,
            "campaign_toml": spec.text,
            "objective_labels": objectives_module.objective_labels(spec),
            "constraint_keys": objectives_module.constraint_keys(spec),
            "sampler": spec.search.sampler,
            "sampler_seed": seed,
            "software_version": software_version(),
            "created_utc": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
            "campaign_sha256": spec.sha256,  # last: its presence marks a complete set
        }.items():
            study.set_user_attr(key, value)
    return study
