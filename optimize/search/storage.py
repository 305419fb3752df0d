"""Campaign storages: the run's journal file (with group commit) or an Optuna RDB.
"""

from __future__ import annotations

import contextlib
import math
import os
import sys
import time
import warnings
from datetime import datetime, timezone
from pathlib import Path
from typing import Any
from optuna.distributions import BaseDistribution
from optuna.exceptions import UpdateFinishedTrialError
from optuna.storages import JournalStorage
from optuna.trial import TrialState
from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.search.journal_file import CrashSafeJournalFileBackend, report_torn_tail
from tunnelsmith.optimize.search.layout import journal_path


def _whole_seconds_from_env(name: str, default: int) -> int:
    """A positive whole number of seconds from the environment (Optuna's RDB storage
    takes whole seconds); an unreadable value is reported and the default kept."""
    text = os.environ.get(name, "").strip()
    if not text:
        return default
    try:
        value = math.ceil(float(text))
    except ValueError:
        value = 0
    if value < 1:
        print(f"warning: {name}={text!r} is not a positive number of seconds; using {default}", file=sys.stderr)
        return default
    return value


#: Seconds between heartbeats of a worker.
HEARTBEAT_INTERVAL_S = _whole_seconds_from_env("TUNNELSMITH_HEARTBEAT_S", 5)


#: Seconds without a heartbeat after which a running trial is failed and retried.
GRACE_PERIOD_S = _whole_seconds_from_env("TUNNELSMITH_GRACE_S", 30)


def redact_url(url: str | None) -> str | None:
    """A storage URL with any password removed (safe to print and to store).

    Both the ``user:password@`` part and a ``password=`` query parameter are dropped.
    """
    if url is None:
        return None
    from urllib.parse import parse_qsl, urlencode, urlsplit

    try:
        parts = urlsplit(url)
    except ValueError:
        return "<storage URL not shown>"
    netloc, query = parts.netloc, parts.query
    if ":" not in netloc.rpartition("@")[0] and "password" not in query.lower():
        return url
    if "@" in netloc:
        credentials, _, host = netloc.rpartition("@")
        netloc = f"{credentials.partition(':')[0]}@{host}"
    query = urlencode([(k, v) for k, v in parse_qsl(query, keep_blank_values=True) if k.lower() != "password"])
    return f"{parts.scheme}://{netloc}{parts.path}" + (f"?{query}" if query else "") + \
        (f"#{parts.fragment}" if parts.fragment else "")


class CoalescingJournalStorage(JournalStorage):
    """An Optuna journal storage that writes a batch's bookkeeping in a few appends.

    Parameters, user and system attributes of trials are applied at once to this
    process's view of the study and queued; the queue goes to the file with the next
    direct write (a new trial, a study attribute, a state change) or on :meth:`flush`,
    in one append (one lock, one write). :meth:`create_trials` creates a batch of running
    trials with one append. Inside :meth:`batch_commit`, final states are queued too, so
    a whole batch of tells — parameters, metrics, constraint values, states — reaches the
    file in one append: each trial is committed whole or not at all. There nothing is
    applied ahead of the file: the replay of the append applies it, so an update of a
    trial that another worker failed as stale before it (its worker was frozen past the
    grace period) is refused here as in every other reader, and :attr:`lost_trials`
    counts the refused logs. The file is an ordinary Optuna journal that any Optuna
    reader replays.
    """

    def __init__(self, log_storage) -> None:
        self._pending: list[dict[str, Any]] = []
        self._queue_final_states = False
        self.lost_trials = 0
        super().__init__(log_storage)

    def _log(self, op_code: int, extra_fields: dict[str, Any]) -> dict[str, Any]:
        return {"op_code": op_code, "worker_id": self._replay_result.worker_id, **extra_fields}

    def _write_log(self, op_code: int, extra_fields: dict[str, Any]) -> None:
        # Called with the thread lock held, like every write of JournalStorage.
        logs, self._pending = self._pending + [self._log(op_code, extra_fields)], []
        self._backend.append_logs(logs)

    def _defer(self, op_code: int, fields: dict[str, Any], apply) -> None:
        with self._thread_lock:
            log = self._log(op_code, fields)
            if not self._queue_final_states:
                # Applied now so that this process sees parameters at once. A trial this
                # view already shows finished raises UpdateFinishedTrialError here and
                # nothing is queued: the file never receives an update it would refuse.
                apply(log)
            # Inside a batch commit the replay of the append applies the log, in file
            # order: when another worker failed the trial as stale before this append,
            # the update is dropped in this process exactly as in every other one.
            self._pending.append(log)

    def _sync_with_backend(self) -> None:
        # Replaying a queued update of a trial that another worker failed meanwhile (its
        # heartbeat had lapsed) raises for that one log; the replay goes on after it.
        while True:
            try:
                super()._sync_with_backend()
                return
            except UpdateFinishedTrialError:
                self.lost_trials += 1

    def flush(self, *, to_disk: bool = False) -> None:
        """Append every queued log to the file now; ``to_disk``: also ``fsync`` it."""
        with self._thread_lock:
            if self._pending:
                logs, self._pending = self._pending, []
                self._backend.append_logs(logs)
                self._sync_with_backend()
            if to_disk and hasattr(self._backend, "sync"):
                self._backend.sync()

    @contextlib.contextmanager
    def batch_commit(self):
        """Queue final trial states as well, and commit everything in one append on exit."""
        self._queue_final_states = True
        try:
            yield self
        finally:
            self._queue_final_states = False
            self.flush(to_disk=True)

    def set_trial_state_values(self, trial_id: int, state: TrialState, values=None) -> bool:
        if not (self._queue_final_states and state.is_finished()):
            return super().set_trial_state_values(trial_id, state, values)
        from optuna.storages.journal._storage import JournalOperation

        fields = {"trial_id": trial_id, "state": state, "values": values,
                  "datetime_complete": datetime.now(tz=timezone.utc).isoformat(timespec="microseconds")}
        with self._thread_lock:
            # Not applied here: the replay of the append applies it, exactly once.
            self._pending.append(self._log(JournalOperation.SET_TRIAL_STATE_VALUES, fields))
        return True

    def set_trial_param(self, trial_id: int, param_name: str, param_value_internal: float,
                        distribution: BaseDistribution) -> None:
        from optuna.distributions import distribution_to_json
        from optuna.storages.journal._storage import JournalOperation

        fields = {"trial_id": trial_id, "param_name": param_name, "param_value_internal": param_value_internal,
                  "distribution": distribution_to_json(distribution)}
        self._defer(JournalOperation.SET_TRIAL_PARAM, fields, self._replay_result._apply_set_trial_param)

    def set_trial_user_attr(self, trial_id: int, key: str, value: Any) -> None:
        from optuna.storages.journal._storage import JournalOperation

        self._defer(JournalOperation.SET_TRIAL_USER_ATTR, {"trial_id": trial_id, "user_attr": {key: value}},
                    self._replay_result._apply_set_trial_user_attr)

    def set_trial_system_attr(self, trial_id: int, key: str, value: Any) -> None:
        from optuna.storages.journal._storage import JournalOperation

        self._defer(JournalOperation.SET_TRIAL_SYSTEM_ATTR, {"trial_id": trial_id, "system_attr": {key: value}},
                    self._replay_result._apply_set_trial_system_attr)

    def create_trials(self, study_id: int, count: int, system_attrs: dict[str, Any]) -> list[int]:
        """Create ``count`` running trials with one append; returns their trial ids."""
        from optuna.storages.journal._storage import JournalOperation

        now = datetime.now(tz=timezone.utc).isoformat(timespec="microseconds")
        fields = {"study_id": study_id, "datetime_start": now, "system_attrs": dict(system_attrs)}
        with self._thread_lock:
            logs = self._pending + [self._log(JournalOperation.CREATE_TRIAL, fields) for _ in range(count)]
            self._pending = []
            self._backend.append_logs(logs)
            self._sync_with_backend()
            # One append is contiguous in the file and the replay numbers trials in
            # file order, so the new ids are the last `count` ids this process created.
            last = self._replay_result._last_created_trial_id_by_this_process
        return list(range(last - count + 1, last + 1))


class GroupCommitFileBackend(CrashSafeJournalFileBackend):
    """The crash-safe journal file, flushed to the disk once per batch instead of per append.

    Each append is still one write sequence under the journal's file lock, so it is
    visible to every other process at once and survives the death of the writer
    (SIGKILL; a torn tail is cut by the next writer); :meth:`sync` (``fsync``) after
    every batch bounds what an operating-system crash or power cut could lose to the
    last batch.
    """

    def __init__(self, file_path: str) -> None:
        super().__init__(file_path, sync_each_append=False)


def _coalescing_supported() -> bool:
    """Whether this Optuna's journal internals are the ones the coalescing storage builds on."""
    from optuna.storages.journal import _storage as journal_module

    replay = getattr(journal_module, "JournalStorageReplayResult", None)
    if replay is None or not hasattr(journal_module, "JournalOperation"):
        return False
    appliers = ("_apply_set_trial_param", "_apply_set_trial_user_attr", "_apply_set_trial_system_attr",
                "_apply_create_trial")
    if not all(hasattr(replay, name) for name in appliers):
        return False
    return ("_last_created_trial_id_by_this_process" in replay._apply_create_trial.__code__.co_names
            and hasattr(JournalStorage, "_write_log") and hasattr(JournalStorage, "_sync_with_backend")
            and {"_lock", "_file_path"} <= set(CrashSafeJournalFileBackend.__mro__[1].__init__.__code__.co_names))


def _storage_error(url: str, problem: str, fix: str) -> InputError:
    return InputError("command line", "--storage", f"{problem} (storage {redact_url(url)})", fix)


def _rdb_storage(url: str, retry_stale=None):
    """An RDBStorage with heartbeats, tolerant of other workers creating the schema now."""
    import sqlalchemy.exc

    from optuna.storages import RDBStorage

    kwargs = dict(heartbeat_interval=HEARTBEAT_INTERVAL_S, grace_period=GRACE_PERIOD_S,
                  engine_kwargs={"pool_pre_ping": True})
    if retry_stale is not None:
        kwargs["heartbeat_stale_trial_callback"] = retry_stale
    delay = 0.2
    for attempt in range(8):
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                return RDBStorage(url, **kwargs)
        except ModuleNotFoundError as error:
            raise _storage_error(url, f"the database driver is not installed ({error.name})",
                                 "pip install tunnelsmith[postgres] (for postgresql+psycopg:// URLs)") from None
        except sqlalchemy.exc.ArgumentError as error:
            raise _storage_error(url, f"not a database URL: {error}",
                                 "give an Optuna RDB URL such as postgresql+psycopg://user@host/db or "
                                 "sqlite:///campaign.db") from None
        except (sqlalchemy.exc.IntegrityError, sqlalchemy.exc.ProgrammingError) as error:
            # Another worker is creating the same tables this instant: try again.
            if attempt == 7:
                raise _storage_error(url, f"cannot create the Optuna tables ({error.orig})",
                                     "check that the database exists and the user may create tables") from None
        except sqlalchemy.exc.OperationalError as error:
            if attempt == 7:
                raise _storage_error(url, f"cannot connect ({str(error.orig).strip()})",
                                     "check host, port, database name and credentials (PGPASSWORD or "
                                     "~/.pgpass / PGPASSFILE; never in the URL)") from None
        time.sleep(delay)
        delay = min(2 * delay, 2.0)
    raise AssertionError("unreachable")


def open_storage(run_dir: Path, url: str | None = None, *, writer: bool = True, retry_stale=None):
    """The campaign's Optuna storage: ``RUN_DIR/campaign.journal`` or the RDB at ``url``.

    ``writer=False`` opens the journal for reading only (a plain JournalStorage).
    """
    if url:
        return _rdb_storage(url, retry_stale)
    path = journal_path(run_dir)
    if not writer and not path.exists():
        raise InputError(str(run_dir), None, f"no campaign storage here (expected {path.name})",
                         "give the run directory written by `tunnelsmith optimize`, or --storage URL "
                         "for a campaign kept in a database")
    _refuse_foreign_journal(path)
    if not writer:
        report_torn_tail(path)
        return JournalStorage(CrashSafeJournalFileBackend(str(path)))
    path.parent.mkdir(parents=True, exist_ok=True)
    backend = GroupCommitFileBackend(str(path))
    backend.repair()
    if _coalescing_supported():
        return CoalescingJournalStorage(backend)
    return JournalStorage(backend)


def _refuse_foreign_journal(path: Path) -> None:
    """Refuse a file at the journal's place that is not an Optuna journal (never append to it)."""
    import json

    if not path.exists():
        return
    if not path.is_file():
        raise InputError(str(path), None, "is not a regular file, so it cannot hold the campaign journal",
                         "move it away or give another --out directory")
    with open(path, "rb") as handle:
        first = handle.readline(1 << 20)
    if not first:
        return
    try:
        log = json.loads(first)
        ok = isinstance(log, dict) and "op_code" in log
    except ValueError:
        ok = not first.endswith(b"\n") and first.startswith(b'{"op_code"')  # a torn first line
    if not ok:
        raise InputError(str(path), None, "exists but is not a campaign journal (its first line is not an "
                         "Optuna journal record), so it is left untouched",
                         "move the file away, or give --out a directory of its own for this campaign")


def _is_rdb(storage) -> bool:
    from optuna.storages import RDBStorage

    return isinstance(storage, RDBStorage)
