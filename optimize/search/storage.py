"""Campaign storages: the run's journal file (with group commit) or an Optuna RDB.
"""

from __future__ import annotations

import contextlib
import functools
import math
import os
import sys
import threading
import time
import warnings
from datetime import datetime, timezone
from pathlib import Path
from typing import Any
from optuna.distributions import BaseDistribution
from optuna.exceptions import UpdateFinishedTrialError
from optuna.storages import JournalStorage, RDBStorage
from optuna.trial import TrialState
from tunnelsmith.optimize.errors import InputError, StorageWriteError
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


def _seconds_from_env(name: str, default: float) -> float:
    """A number of seconds (zero or more, fractions allowed) from the environment; an
    unreadable value is reported and the default kept."""
    text = os.environ.get(name, "").strip()
    if not text:
        return default
    try:
        value = float(text)
    except ValueError:
        value = -1.0
    if not (math.isfinite(value) and value >= 0):
        print(f"warning: {name}={text!r} is not a number of seconds (0 or more); using {default:g}",
              file=sys.stderr)
        return default
    return value


#: Seconds a worker waits for an unreachable campaign database (a server restart, a
#: fail-over) before it stops; ``TUNNELSMITH_DB_OUTAGE_S`` changes it, 0 stops at once.
DB_OUTAGE_S = _seconds_from_env("TUNNELSMITH_DB_OUTAGE_S", 120.0)


#: Pause after the first failed attempt while the database does not answer; it doubles
#: after every further failure up to :data:`DB_RETRY_MAX_DELAY_S`.
DB_RETRY_FIRST_DELAY_S = 0.5


DB_RETRY_MAX_DELAY_S = 10.0


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


class DatabaseOutageError(StorageWriteError):
    """The campaign database stayed unreachable for longer than the worker waits for it.

    A :class:`~tunnelsmith.optimize.errors.StorageWriteError`, so the command line prints
    the message as one paragraph without a traceback and exits with status 1.

    Parameters
    ----------
    url : str
        The storage URL with its password removed (:func:`redact_url`).
    waited_s : float
        How long the worker waited for the database, in seconds.
    limit_s : float
        The wait the worker allows (:data:`DB_OUTAGE_S`).
    reason : str
        The driver's account of the last failed attempt.
    """

    def __init__(self, url: str, waited_s: float, limit_s: float, reason: str):
        super().__init__(url, reason)
        self.waited_s, self.limit_s = waited_s, limit_s

    def __str__(self) -> str:
        return (f"{self.path}: the campaign database did not answer for {self.waited_s:.0f} s ({self.reason}), "
                f"so this worker stopped. Every trial that finished is kept in the database; the trials this "
                f"worker had running are failed, or retried as stale by the next worker. Fix: check the database "
                f"server, then run the same command again: no finished trial is lost. A worker waits "
                f"{self.limit_s:g} s for the database; set TUNNELSMITH_DB_OUTAGE_S (seconds) to wait longer "
                f"through a restart")


#: SQLSTATEs of a lost or refused connection: class 08 (connection exception) and the
#: server's shutdown and start-up (admin_shutdown, crash_shutdown, cannot_connect_now).
_CONNECTION_SQLSTATE_CLASS = "08"


_SHUTDOWN_SQLSTATES = frozenset({"57P01", "57P02", "57P03"})


#: What drivers say when the connection is gone, for errors that carry no SQLSTATE
#: (the client noticed: a closed socket, a refused connection).
_CONNECTION_PHRASES = (
    "server closed the connection", "terminating connection due to administrator command",
    "connection refused", "could not connect", "connection failed", "the connection is closed",
    "connection already closed", "the database system is shutting down", "the database system is starting up",
    "the database system is in recovery mode", "consuming input failed", "ssl connection has been closed",
    "lost connection", "server has gone away", "no connection to the server",
)


def is_connection_error(error: BaseException) -> bool:
    """Whether ``error`` says the database connection is lost or refused (worth waiting out).

    The chain of causes is searched, since Optuna re-raises driver errors as
    ``StorageInternalError``: a SQLAlchemy error raised with ``connection_invalidated``,
    a driver error whose SQLSTATE means a lost connection or a server shutting down or
    starting, or an operational driver error whose text says so. Errors of the data
    (integrity, a finished trial) and :class:`DatabaseOutageError` itself are not.
    """
    import sqlalchemy.exc

    if isinstance(error, DatabaseOutageError):
        return False
    seen: set[int] = set()
    pending: list[BaseException | None] = [error]
    while pending:
        current = pending.pop()
        if current is None or id(current) in seen:
            continue
        seen.add(id(current))
        if isinstance(current, sqlalchemy.exc.DBAPIError):
            if current.connection_invalidated:
                return True
            pending.append(current.orig)
        sqlstate = getattr(current, "sqlstate", None) or getattr(current, "pgcode", None)
        if isinstance(sqlstate, str) and (sqlstate.startswith(_CONNECTION_SQLSTATE_CLASS)
                                          or sqlstate in _SHUTDOWN_SQLSTATES):
            return True
        operational = isinstance(current, (sqlalchemy.exc.OperationalError, sqlalchemy.exc.InterfaceError)) or \
            type(current).__name__ in ("OperationalError", "InterfaceError")
        if operational and any(phrase in str(current).lower() for phrase in _CONNECTION_PHRASES):
            return True
        pending += [current.__cause__, current.__context__]
    return False


def _driver_reason(error: BaseException) -> str:
    """The driver's own words for a connection error, without SQLAlchemy's SQL and links."""
    import sqlalchemy.exc

    current: BaseException | None = error
    while current is not None:
        if isinstance(current, sqlalchemy.exc.DBAPIError) and current.orig is not None:
            text = str(current.orig)
            break
        if current.__cause__ is None:
            text = str(current)
            break
        current = current.__cause__
    return " ".join(text.split()) or type(error).__name__


def _waits_out_outages(method):
    """Wrap an ``RDBStorage`` method so that it waits out a lost database connection."""

    @functools.wraps(method)
    def waiting(self, *args, **kwargs):
        return self._call_through_outage(method, args, kwargs)

    return waiting


class OutageTolerantRDBStorage(RDBStorage):
    """An Optuna RDB storage whose calls wait out a restart of the database server.

    Every storage call that fails with a connection-level error (:func:`is_connection_error`:
    the server closed the connection, ended the session for a shutdown, refuses
    connections while it restarts) is tried again after a pause of
    :data:`DB_RETRY_FIRST_DELAY_S`, doubling up to :data:`DB_RETRY_MAX_DELAY_S`, until the
    database answers or it has not answered for :data:`DB_OUTAGE_S` seconds (environment
    variable ``TUNNELSMITH_DB_OUTAGE_S``, default 120). Then :class:`DatabaseOutageError`
    is raised, and from then on each call is tried once, so that the worker's clean-up
    (failing its running trials) costs no second wait. The connection pool checks each
    connection before use (``pool_pre_ping``), so a retry runs on a new connection.

    A retried write may find that its first attempt was committed after all (the reply
    was lost with the connection): a final state already stored as asked counts as
    done. One outage is announced on stderr once, and its end too.

    Calls inside :meth:`single_attempt` (the heartbeat thread: the next beat is its
    retry) are tried once and raise :class:`DatabaseOutageError` at once.
    """

    def __init__(self, url: str, *args, outage_s: float = DB_OUTAGE_S, **kwargs) -> None:
        self.outage_s = outage_s
        self._shown_url = redact_url(url)
        self._outage_since: float | None = None  # time.monotonic() of the first failure
        self._gave_up_after_s: float | None = None  # the wait that ended in DatabaseOutageError
        self._local = threading.local()
        super().__init__(url, *args, **kwargs)

    def __getstate__(self) -> dict[Any, Any]:
        state = super().__getstate__()
        del state["_local"]  # thread-local flags belong to this process's threads
        return state

    def __setstate__(self, state: dict[Any, Any]) -> None:
        state["_local"] = threading.local()
        super().__setstate__(state)

    @contextlib.contextmanager
    def single_attempt(self):
        """Calls made by this thread inside the block are tried once, without waiting."""
        previous = getattr(self._local, "single", False)
        self._local.single = True
        try:
            yield self
        finally:
            self._local.single = previous

    def _call_through_outage(self, method, args, kwargs):
        delay_s = DB_RETRY_FIRST_DELAY_S
        failed_before = False
        while True:
            try:
                result = method(self, *args, **kwargs)
            except Exception as error:
                if not is_connection_error(error):
                    if failed_before and self._already_stored(method.__name__, error, args, kwargs):
                        return True
                    raise
                if self._gave_up_after_s is not None or getattr(self._local, "single", False):
                    raise DatabaseOutageError(self._shown_url, self._gave_up_after_s or 0.0, self.outage_s,
                                              _driver_reason(error)) from None
                now_s = time.monotonic()
                if self._outage_since is None:
                    self._outage_since = now_s
                    print(f"warning: the campaign database does not answer ({_driver_reason(error)}); waiting "
                          f"up to {self.outage_s:g} s for it (TUNNELSMITH_DB_OUTAGE_S)", file=sys.stderr,
                          flush=True)
                waited_s = now_s - self._outage_since
                if waited_s >= self.outage_s:
                    self._gave_up_after_s = waited_s
                    raise DatabaseOutageError(self._shown_url, waited_s, self.outage_s,
                                              _driver_reason(error)) from None
                time.sleep(min(delay_s, self.outage_s - waited_s))
                delay_s = min(2 * delay_s, DB_RETRY_MAX_DELAY_S)
                failed_before = True
                continue
            if (self._outage_since is not None and self._gave_up_after_s is None
                    and not getattr(self._local, "single", False)):
                print(f"note: the campaign database answers again after "
                      f"{time.monotonic() - self._outage_since:.1f} s; the campaign goes on", file=sys.stderr,
                      flush=True)
                self._outage_since = None
            return result

    def _already_stored(self, name: str, error: Exception, args, kwargs) -> bool:
        """Whether a retried final state was in fact stored by the attempt that lost its reply."""
        if name != "set_trial_state_values" or not isinstance(error, UpdateFinishedTrialError):
            return False
        call = dict(zip(("trial_id", "state", "values"), args), **kwargs)
        stored = self.get_trial(call["trial_id"])
        values = call.get("values")
        return stored.state == call["state"] and (values is None or stored.values == [float(v) for v in values])


#: Every ``RDBStorage`` method that reaches the database, public and the private ones
#: Optuna's cache layer (``_CachedStorage``, which every study on a database uses) calls
#: directly. The heartbeat calls them inside :meth:`OutageTolerantRDBStorage.single_attempt`:
#: a missed beat is made up by the next one, and the heartbeat thread never stalls.
_DATABASE_METHODS = (
    "create_new_study", "delete_study", "set_study_user_attr", "set_study_system_attr",
    "get_study_id_from_name", "get_study_name_from_id", "get_study_directions", "get_study_user_attrs",
    "get_study_system_attrs", "get_trial_user_attrs", "get_trial_system_attrs", "get_all_studies",
    "create_new_trial", "_create_new_trial", "set_trial_param", "_set_trial_param", "get_trial_param",
    "set_trial_state_values", "set_trial_intermediate_value", "set_trial_user_attr", "set_trial_system_attr",
    "get_trial_id_from_study_id_trial_number", "get_trial", "get_all_trials", "_get_trials", "get_best_trial",
    "_get_best_trial_id", "_get_stale_trial_ids", "record_heartbeat",
)


for _name in _DATABASE_METHODS:
    # A method a later Optuna renamed is simply not wrapped (the campaign still runs).
    if hasattr(RDBStorage, _name):
        setattr(OutageTolerantRDBStorage, _name, _waits_out_outages(getattr(RDBStorage, _name)))
del _name


def _storage_error(url: str, problem: str, fix: str) -> InputError:
    return InputError("command line", "--storage", f"{problem} (storage {redact_url(url)})", fix)


#: Seconds a PostgreSQL connection attempt may take (libpq waits for the operating
#: system otherwise, two minutes for a host that does not answer): each attempt must end
#: well within the outage a worker waits out. A ``connect_timeout`` in the URL wins.
PG_CONNECT_TIMEOUT_S = 10


def _rdb_storage(url: str, retry_stale=None):
    """An RDBStorage with heartbeats that waits out database restarts
    (:class:`OutageTolerantRDBStorage`), tolerant of other workers creating the schema now."""
    import sqlalchemy.exc

    engine_kwargs: dict[str, Any] = {"pool_pre_ping": True}
    if url.startswith("postgresql") and "connect_timeout" not in url:
        engine_kwargs["connect_args"] = {"connect_timeout": PG_CONNECT_TIMEOUT_S}
    kwargs = dict(heartbeat_interval=HEARTBEAT_INTERVAL_S, grace_period=GRACE_PERIOD_S,
                  engine_kwargs=engine_kwargs)
    if retry_stale is not None:
        kwargs["heartbeat_stale_trial_callback"] = retry_stale
    delay = 0.2
    for attempt in range(8):
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                return OutageTolerantRDBStorage(url, **kwargs)
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
