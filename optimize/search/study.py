"""The Optuna study of a campaign: created once, resumed, refused when the file changed.
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
from tunnelsmith.optimize.search.storage import redact_url


def _changed_campaign(spec, run_dir: Path, url: str | None, stored_sha: str) -> InputError:
    where = f"the database {redact_url(url)}" if url else f"the run directory {run_dir}"
    fix = ("restore the file as it was to resume, or start a new run in a fresh directory with "
           "--out NEW_DIR" + (" and a new [campaign] name (the study is named after it)" if url else ""))
    return InputError(spec.path, None,
                      f'{where} holds campaign "{spec.name}" started from a different version of this file '
                      f"(sha256 {stored_sha[:12]}, the file now has {spec.sha256[:12]})", fix)


def open_study(storage, spec, run_dir: Path, url: str | None = None) -> optuna.Study:
    """Create the campaign's study, or load it to resume; refuse a changed campaign file.

    Study name: the campaign name. Study user attributes: ``campaign_name``,
    ``campaign_sha256``, ``campaign_toml``, ``objective_labels``, ``constraint_keys``,
    ``sampler_seed``, ``software_version``, ``created_utc``. Several workers may call this
    at the same moment on an empty storage.
    """
    import sqlalchemy.exc

    from tunnelsmith.optimize.version import software_version

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
