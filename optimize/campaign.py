"""Campaigns: batched ask-and-tell search over the vectorised model, resumable and shared.

The loop
--------
Each worker repeats: ask ``batch`` trials of the Optuna study, turn their parameters
into one :class:`~optimize.stack.DesignBatch`, evaluate the whole batch in one call
into the physics (:func:`optimize.objectives.evaluate_batch`), tell every trial its
objective values. Constraint values are stored with Optuna 5's core constraint API
(:meth:`optuna.trial.Trial.set_constraint`, ``<= 0`` feasible), which every sampler
reads from the trial. A design the physics cannot rank (no resonance in the window,
no valley in the sweep, a non-finite value) is told ``FAIL`` with the reason in the
user attribute ``"failure"``; it counts towards the budget and the campaign goes on.
Metric values, their reasons and the design itself (materials, fractions, nm) are user
attributes of the trial, so fronts and tables are rebuilt from the storage alone.

Budget: the campaign stops when its *finished* trials — ``COMPLETE`` plus those failed
by the evaluation — reach ``[search] trials`` (or ``--trials``). Trials abandoned on an
interrupt, trials of a worker that died, and surplus trials of a race between workers
are ``FAIL`` too but do not count (:func:`counts_toward_budget`). Each worker asks only
for the room left (budget − finished − running, over all workers) and, near the end of
the budget, drops any of its new trials ranked beyond it by trial number (``FAIL``,
not counted), so several workers end at the budget exactly.

Samplers and the default
------------------------
``nsga2`` (default), ``tpe``, ``gp`` (needs PyTorch: ``pip install tunnelsmith[gp]``),
``random``, ``qmc`` (scrambled Sobol). Optuna 5 made multi-objective TPE its own default,
but its cost per trial grows with the history. Measured on this 2-core machine by
``benchmarks/bench_campaign.py`` (the demo campaign's five parameters and two
objectives, sampler only, in memory, no physics), after 2000 finished trials:

==========  ====================
NSGA-II     0.8–0.9 ms per trial
TPE         150–165 ms per trial
==========  ====================

A 10 000-trial zero-bias campaign evaluates about 1500 designs per second, so TPE
would spend a hundred times longer choosing designs than the physics spends judging
them. NSGA-II is the default; TPE and GP earn their cost only on small budgets (a
few hundred trials) of an expensive I–V campaign. NSGA-II's population is
``max(batch, 50)``: the batch is its natural unit. Batches of 64 are the default of the
example campaigns: the physics evaluates a batch of 64 about twice as fast per design
as a batch of 32 and the per-batch bookkeeping is spread over more trials.

Measured throughput (``benchmarks/results/campaign.json``; NSGA-II, journal file, one
process): 314 finished trials/s for a 10 000-trial zero-bias campaign and 23/s for a
full I–V campaign (21 biases), against targets of 50/s and 5/s. Outside the physics
(sampler, storage, bookkeeping) the I–V campaign spends 4 % of its wall time; the
zero-bias campaign spends 79 %, because its physics takes only 0.7 ms per design
while Optuna's per-trial ask/tell machinery costs about 2 ms whatever the storage —
the 30 % target is out of reach there, the throughput target is exceeded sixfold.
Two measures keep the bookkeeping from growing with the history:

* :class:`BatchNSGAIISampler` decides the generation of new trials once per batch and
  remembers parent populations, where Optuna's sampler rescans every trial of the study
  on every ask (cost growing with the history);
* :class:`CoalescingJournalStorage` writes a batch's new trials with one append, their
  parameters with one more, and their results — metrics, constraint values, final
  states — with a third, instead of one locked, ``fsync``-ed append per value
  (:class:`GroupCommitFileBackend`). The file stays a plain Optuna journal.

Storage
-------
Default: an Optuna journal file ``RUN_DIR/campaign.journal`` (``RUN_DIR`` defaults to
``runs/<campaign name>/`` below the current directory), safe for several processes on
one machine. ``--storage URL`` takes an Optuna RDB URL (``postgresql+psycopg://user@host/db``,
``sqlite:///file.db``); the study is named after the campaign. The campaign text and
its SHA-256 are study user attributes: re-running the same command resumes, and a
changed file is refused (start a fresh run with ``--out NEW_DIR``). The tells of a batch
reach the journal in one append (on a database, every value is its own transaction),
and a trial
is finished only once its final state is stored: a SIGKILL at any moment loses no
finished trial (a killed batch comes back as retries, see below). The journal is forced
to the disk (``fsync``) after every batch, so an operating-system crash or power cut
loses at most that batch.

Credentials never go into campaign files or results. For PostgreSQL give a URL without
password and let libpq find it in ``PGPASSWORD`` or the password file (``~/.pgpass`` or
``PGPASSFILE``); across a network require TLS with ``?sslmode=verify-full`` (and
``sslrootcert=...``). Optuna's RDB storage costs about 60 queries per trial in this
loop (measured on this loaded 2-core machine against a local PostgreSQL: 12 finished
trials/s with one worker, 24/s with two): a database campaign scales by adding workers. Every URL written to an output or a log goes through
:func:`redact_url`. Local worker processes receive the URL through the environment
variable ``TUNNELSMITH_STORAGE`` (never on a command line that ``ps`` shows), which
also works for workers started by hand.

Workers, heartbeats, stale trials
---------------------------------
``--workers N`` starts ``N − 1`` worker processes (``python -m optimize.cli optimize ...
--workers 1 --quiet``, logs in ``RUN_DIR/worker-<k>.log``) beside the main process;
all of them stop at the budget and the main process writes the outputs. Workers
started at the same moment on an empty storage tolerate each other creating the schema
and the study. Each worker's sampler seed is derived from ``[search] seed``, the worker
index (``TUNNELSMITH_WORKER_INDEX``) and the number of the first trial it creates (unique
in the study, even for workers started together), so workers and resumed runs do not
repeat each other's designs; a single fresh run is reproducible.

Optuna beats hearts only inside ``study.optimize``; this loop keeps its own. A daemon
thread records a heartbeat every :data:`HEARTBEAT_INTERVAL_S` seconds: per running
trial through ``RDBStorage.record_heartbeat`` on a database, and per worker as a study
system attribute on the journal (Optuna 5's journal storage has no heartbeat support).
Before each batch a worker fails the running trials of other workers that are stale —
no heartbeat for :data:`GRACE_PERIOD_S` seconds, or (on this host) whose process is
gone — and enqueues their parameters once more (user attribute ``retry_of``; at most
:data:`MAX_RETRIES` retries of one design). On a database the first part is Optuna's
``fail_stale_trials``. Both periods can be set with the environment variables
``TUNNELSMITH_HEARTBEAT_S`` and ``TUNNELSMITH_GRACE_S``.

Interrupts
----------
SIGINT or SIGTERM: stop asking, finish the batch under evaluation (a second signal
abandons it: its trials are told ``FAIL`` with failure ``"interrupted"`` and do not
count), stop the worker processes, write the outputs, exit 130. No trial of an
interrupted worker is left ``RUNNING``. ``--timeout`` (or ``[search] timeout_h``) stops
asking after that wall time and exits 0.
"""

from __future__ import annotations

import contextlib
import math
import os
import signal
import socket
import subprocess
import sys
import threading
import time
import warnings
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np
import optuna
from optuna.distributions import BaseDistribution
from optuna.exceptions import DuplicatedStudyError, UpdateFinishedTrialError
from optuna.samplers import NSGAIISampler
from optuna.storages import JournalStorage
from optuna.trial import FrozenTrial, TrialState

from optimize import objectives as objectives_module
from optimize import space
from optimize.errors import InputError, StorageWriteError
from optimize.io import write_text
from optimize.journal_file import CrashSafeJournalFileBackend, report_torn_tail
from physics.materials import IndirectValleyWarning

__all__ = [
    "BatchNSGAIISampler",
    "CoalescingJournalStorage",
    "counts_toward_budget",
    "default_run_dir",
    "make_sampler",
    "open_storage",
    "open_study",
    "redact_url",
    "run_campaign",
]

JOURNAL_NAME = "campaign.journal"
CAMPAIGN_COPY = "campaign.toml"

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
#: How often one design is retried after its worker died.
MAX_RETRIES = 2

WORKER_INDEX_ENV = "TUNNELSMITH_WORKER_INDEX"
STORAGE_ENV = "TUNNELSMITH_STORAGE"

# Trial user attributes (the storage is the record: everything needed to rebuild the
# front lives on the trials).
ATTR_FAILURE = "failure"
ATTR_METRICS = "metrics"
ATTR_REASONS = "metric_reasons"
ATTR_DESIGN = "design"
ATTR_RETRY_OF = "retry_of"
ATTR_RETRIES = "retries"
# Trial system attribute naming the worker that runs it ("host:pid:token").
SYSTEM_WORKER = "tunnelsmith:worker"
_BEAT_PREFIX = "tunnelsmith:beat:"

INTERRUPTED = "interrupted"
SURPLUS = "surplus: the budget was reached by other workers"
INTERNAL_ERROR = "internal error"
_NOT_COUNTED = (INTERRUPTED, SURPLUS, INTERNAL_ERROR)

EXIT_OK, EXIT_INTERRUPTED = 0, 130


def counts_toward_budget(trial: FrozenTrial) -> bool:
    """Whether a trial is *finished* in the sense of the campaign budget.

    ``COMPLETE`` trials, and ``FAIL`` trials whose evaluation failed (they carry the
    reason in user attribute ``"failure"``). Trials interrupted, surplus, lost with
    their worker (failed without a reason) or still running do not count.
    """
    if trial.state == TrialState.COMPLETE:
        return True
    if trial.state != TrialState.FAIL:
        return False
    failure = trial.user_attrs.get(ATTR_FAILURE)
    return bool(failure) and not str(failure).startswith(_NOT_COUNTED)


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


def default_run_dir(spec) -> Path:
    """``runs/<campaign name>/`` below the current directory."""
    safe = "".join(c if c.isalnum() or c in "-_." else "_" for c in spec.name) or "campaign"
    return Path("runs") / safe


# --------------------------------------------------------------------------------------
# Storage
# --------------------------------------------------------------------------------------


class CoalescingJournalStorage(JournalStorage):
    """An Optuna journal storage that writes a batch's bookkeeping in a few appends.

    Parameters, user and system attributes of trials are applied at once to this
    process's view of the study and queued; the queue goes to the file with the next
    direct write (a new trial, a study attribute, a state change) or on :meth:`flush`,
    in one append (one lock, one write). :meth:`create_trials` creates a batch of running
    trials with one append. Inside :meth:`batch_commit`, final states are queued too, so
    a whole batch of tells — parameters, metrics, constraint values, states — reaches the
    file in one append: each trial is committed whole or not at all. The file is an
    ordinary Optuna journal that any Optuna reader replays.
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
            apply(log)
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


def journal_path(run_dir: Path) -> Path:
    return Path(run_dir) / JOURNAL_NAME


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


# --------------------------------------------------------------------------------------
# Samplers
# --------------------------------------------------------------------------------------


class BatchNSGAIISampler(NSGAIISampler):
    """NSGA-II (Deb et al., IEEE Trans. Evol. Comput. 6, 182, 2002) for batched asks.

    Same algorithm as :class:`optuna.samplers.NSGAIISampler`; three costs that grow with
    the history are removed:

    * the search space is the campaign's fixed space (no intersection over all trials);
    * the generation of new trials is computed once per batch (:meth:`start_batch`)
      from an incremental count of completed trials per generation;
    * completed trials are indexed by generation as they complete, and parent
      populations, fixed once chosen, are remembered per generation.
    """

    def __init__(self, search_space: dict[str, BaseDistribution], **kwargs) -> None:
        super().__init__(**kwargs)
        # Sorted by name, as Optuna's intersection search space is: same draws, same designs.
        self._fixed_space = {name: d for name, d in sorted(search_space.items()) if not d.single()}
        self._members: dict[int, list[FrozenTrial]] = {}
        self._cursor = 0
        self._unfinished: list[int] = []
        self._batch_generation: int | None = None
        self._parents: dict[int, list[FrozenTrial]] = {}

    def start_batch(self) -> None:
        """Forget the generation decided for the previous batch."""
        self._batch_generation = None

    def infer_relative_search_space(self, study, trial) -> dict[str, BaseDistribution]:
        return dict(self._fixed_space)

    def _count_completed(self, study) -> None:
        key = self._get_generation_key()
        trials = study._get_trials(deepcopy=False, use_cache=True)
        still = []
        for index in self._unfinished + list(range(self._cursor, len(trials))):
            trial = trials[index]
            if not trial.state.is_finished():
                still.append(index)
            elif trial.state == TrialState.COMPLETE:
                # A completed trial never changes again: safe to keep.
                self._members.setdefault(trial.system_attrs.get(key, -1), []).append(trial)
        self._unfinished, self._cursor = still, len(trials)

    def get_trial_generation(self, study, trial: FrozenTrial) -> int:
        generation = trial.system_attrs.get(self._get_generation_key(), None)
        if generation is not None:
            return generation
        if self._batch_generation is None:
            self._count_completed(study)
            newest = max((g for g in self._members if g >= 0), default=0)
            full = len(self._members.get(newest, ())) >= self._population_size
            self._batch_generation = newest + 1 if full else newest
        study._storage.set_trial_system_attr(trial._trial_id, self._get_generation_key(), self._batch_generation)
        return self._batch_generation

    def get_population(self, study, generation: int) -> list[FrozenTrial]:
        self._count_completed(study)
        return list(self._members.get(generation, ()))

    def get_parent_population(self, study, generation: int) -> list[FrozenTrial]:
        if generation in self._parents:
            return self._parents[generation]
        parents = super().get_parent_population(study, generation)
        # Optuna returns a cached parent population in trial order: so does the memo.
        self._parents[generation] = sorted(parents, key=lambda t: t.number)
        return parents


def make_sampler(name: str, *, seed: int | None, search_space: dict[str, BaseDistribution], batch: int,
                 shared_seed: int | None = None, spec_path: str = "campaign"):
    """The Optuna sampler named in ``[search] sampler``.

    ``seed`` seeds this worker's sampler; ``shared_seed`` (equal in every worker) seeds
    the QMC sequence, which workers share by index.
    """
    samplers = optuna.samplers
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if name == "nsga2":
            return BatchNSGAIISampler(search_space, population_size=max(batch, 50), seed=seed)
        if name == "tpe":
            return samplers.TPESampler(seed=seed, constant_liar=True)
        if name == "random":
            return samplers.RandomSampler(seed=seed)
        if name == "qmc":
            return samplers.QMCSampler(qmc_type="sobol", scramble=True, seed=shared_seed,
                                       independent_sampler=samplers.RandomSampler(seed=seed),
                                       warn_independent_sampling=False, warn_asynchronous_seeding=False)
        if name == "gp":
            import importlib.util

            if importlib.util.find_spec("torch") is None:
                raise InputError(spec_path, "search.sampler",
                                 'the "gp" sampler needs PyTorch, which is not installed',
                                 "pip install tunnelsmith[gp], or choose another sampler "
                                 '(sampler = "nsga2", "tpe", "random" or "qmc")')
            return samplers.GPSampler(seed=seed, warn_independent_sampling=False)
    raise InputError(spec_path, "search.sampler", f"unknown sampler {name!r}",
                     'choose one of "nsga2", "tpe", "gp", "random", "qmc"')


# --------------------------------------------------------------------------------------
# Study
# --------------------------------------------------------------------------------------


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

    from optimize.cli import software_version

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


# --------------------------------------------------------------------------------------
# Workers: identity, heartbeats, stale trials
# --------------------------------------------------------------------------------------


def _new_worker_id() -> str:
    return f"{socket.gethostname()}:{os.getpid()}:{os.urandom(4).hex()}"


def _local_worker_gone(worker_id: str) -> bool:
    """Whether ``worker_id`` (``"host:pid:token"``) names a process of this host that no longer runs."""
    try:
        host, pid_text, _ = worker_id.rsplit(":", 2)
        pid = int(pid_text)
    except ValueError:
        return False
    if host != socket.gethostname():
        return False
    if pid == os.getpid():
        return True  # an earlier process that had our pid: not us, so gone
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    except PermissionError:
        return False
    try:  # a zombie (exited, not yet reaped by its parent) is gone too
        with open(f"/proc/{pid}/stat", "rb") as handle:
            return handle.read().rsplit(b")", 1)[1].split()[0] == b"Z"
    except (OSError, IndexError):
        return False


def _is_rdb(storage) -> bool:
    from optuna.storages import RDBStorage

    return isinstance(storage, RDBStorage)


class _Heartbeat:
    """Daemon thread recording this worker's heartbeat every :data:`HEARTBEAT_INTERVAL_S`."""

    def __init__(self, storage, study_id: int, worker_id: str) -> None:
        self._storage, self._study_id, self._worker_id = storage, study_id, worker_id
        self._trial_ids: set[int] = set()
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="tunnelsmith-heartbeat", daemon=True)

    def start(self) -> None:
        self.beat()
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        self._thread.join(timeout=HEARTBEAT_INTERVAL_S + 5)

    def track(self, trial_ids) -> None:
        with self._lock:
            self._trial_ids.update(trial_ids)

    def untrack(self, trial_ids) -> None:
        with self._lock:
            self._trial_ids.difference_update(trial_ids)

    def beat(self) -> None:
        try:
            if _is_rdb(self._storage):
                with self._lock:
                    ids = sorted(self._trial_ids)
                for trial_id in ids:
                    self._storage.record_heartbeat(trial_id)
            else:
                self._storage.set_study_system_attr(self._study_id, _BEAT_PREFIX + self._worker_id, time.time())
        except Exception as error:  # a missed beat is retried; the grace period covers several
            print(f"warning: heartbeat not recorded ({type(error).__name__}: {error})", file=sys.stderr)

    def _run(self) -> None:
        while not self._stop.wait(HEARTBEAT_INTERVAL_S):
            self.beat()


def _retry_stale(study, trial: FrozenTrial) -> None:
    """Enqueue the parameters of a trial whose worker died (at most :data:`MAX_RETRIES` times)."""
    retries = int(trial.user_attrs.get(ATTR_RETRIES, 0))
    if retries >= MAX_RETRIES or not trial.params:
        return
    study.enqueue_trial(dict(trial.params), user_attrs={ATTR_RETRY_OF: trial.number, ATTR_RETRIES: retries + 1})


def _started_s(trial: FrozenTrial) -> float:
    return trial.datetime_start.timestamp() if trial.datetime_start is not None else time.time()


def recover_stale_trials(study, storage, worker_id: str, trials: list[FrozenTrial]) -> int:
    """Fail the running trials of dead workers and enqueue their parameters again.

    A running trial of another worker is stale when its worker process is gone (same
    host), when its worker has not beaten for :data:`GRACE_PERIOD_S` (journal), when no
    worker ever claimed it within that time, or (database) when Optuna's heartbeat
    check finds it stale. Each stale trial is failed once — a worker that loses the race
    to fail it does not retry it — and enqueued again. Returns the number failed here.
    """
    now = time.time()
    rdb = _is_rdb(storage)
    beats = None
    stale = []
    for trial in trials:
        if trial.state != TrialState.RUNNING:
            continue
        owner = trial.system_attrs.get(SYSTEM_WORKER)
        if owner == worker_id:
            continue
        if owner is not None and _local_worker_gone(owner):
            stale.append(trial)
        elif owner is None:
            if now - _started_s(trial) > GRACE_PERIOD_S:
                stale.append(trial)
        elif not rdb:
            if beats is None:
                beats = storage.get_study_system_attrs(study._study_id)
            last = beats.get(_BEAT_PREFIX + owner, _started_s(trial))
            if now - last > GRACE_PERIOD_S:
                stale.append(trial)
    failed = 0
    for trial in stale:
        try:
            storage.set_trial_state_values(trial._trial_id, TrialState.FAIL)
        except UpdateFinishedTrialError:
            continue  # its worker finished it, or another worker failed it first
        _retry_stale(study, trial)
        failed += 1
    if rdb:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            optuna.storages.fail_stale_trials(study)  # retries through the storage's callback
    return failed


# --------------------------------------------------------------------------------------
# Progress
# --------------------------------------------------------------------------------------


class _Tally:
    """Finished, feasible and front size over the study, updated incrementally."""

    def __init__(self, spec) -> None:
        self._signs = np.array([-1.0 if d == "maximize" else 1.0 for d in objectives_module.directions(spec)])
        self.finished = self.feasible = 0
        self._front = np.empty((0, len(self._signs)))
        self._cursor = 0
        self._unfinished: list[int] = []

    @property
    def front_size(self) -> int:
        return len(self._front)

    def update(self, trials: list[FrozenTrial]) -> None:
        from optimize.front import merge_front

        new_points = []
        still = []
        for index in self._unfinished + list(range(self._cursor, len(trials))):
            trial = trials[index]
            if not trial.state.is_finished():
                still.append(index)
                continue
            if counts_toward_budget(trial):
                self.finished += 1
            if trial.state == TrialState.COMPLETE and all(v <= 0.0 for v in trial.constraints.values()):
                self.feasible += 1
                new_points.append(trial.values)
        self._unfinished, self._cursor = still, len(trials)
        if new_points:
            self._front = merge_front(self._front, np.asarray(new_points, float) * self._signs)


class _Progress:
    """One status line: a bar redrawn in place on a terminal, else plain log lines."""

    def __init__(self, budget: int, deadline: float | None, quiet: bool, worker_index: int) -> None:
        self.budget, self.deadline, self.quiet = budget, deadline, quiet
        self.prefix = f"worker {worker_index}: " if worker_index else ""
        self.bar = not quiet and sys.stderr.isatty()
        self._start = time.monotonic()
        self._start_count: int | None = None
        self._last_line = 0.0

    def _text(self, tally: _Tally) -> str:
        if self._start_count is None:
            self._start_count = tally.finished
        elapsed = max(time.monotonic() - self._start, 1e-9)
        rate = (tally.finished - self._start_count) / elapsed
        text = (f"{tally.finished}/{self.budget} trials  {rate:6.1f}/s  feasible {tally.feasible}  "
                f"front {tally.front_size}")
        if self.deadline is not None:
            left = max(0.0, self.deadline - time.monotonic())
            text += f"  time left {int(left // 3600)}:{int(left % 3600 // 60):02d}:{int(left % 60):02d}"
        return text

    def update(self, tally: _Tally, force: bool = False) -> None:
        text = self._text(tally)
        if self.bar:
            share = min(1.0, tally.finished / max(self.budget, 1))
            filled = int(round(24 * share))
            print(f"\r[{'#' * filled}{'.' * (24 - filled)}] {text}\x1b[K", end="", file=sys.stderr, flush=True)
        elif self.quiet or force or time.monotonic() - self._last_line > 5.0:
            stamp = datetime.now().strftime("%H:%M:%S")
            print(f"{stamp} {self.prefix}{text}", file=sys.stderr, flush=True)
            self._last_line = time.monotonic()

    def close(self) -> None:
        if self.bar:
            print(file=sys.stderr, flush=True)


# --------------------------------------------------------------------------------------
# Signals
# --------------------------------------------------------------------------------------


class _StopRequest:
    """SIGINT/SIGTERM: the first asks the loop to stop; a second abandons the batch."""

    def __init__(self) -> None:
        self.signal: int | None = None
        self._previous: dict[int, Any] = {}

    def install(self) -> None:
        if threading.current_thread() is not threading.main_thread():
            return
        for signum in (signal.SIGINT, signal.SIGTERM):
            self._previous[signum] = signal.signal(signum, self._handle)

    def restore(self) -> None:
        for signum, handler in self._previous.items():
            signal.signal(signum, handler)
        self._previous.clear()

    def _handle(self, signum, frame) -> None:
        if self.signal is None:
            self.signal = signum
            print(f"\n{signal.Signals(signum).name}: finishing the current batch, then writing results "
                  "(signal again to abandon the batch)", file=sys.stderr, flush=True)
            return
        raise KeyboardInterrupt

    @property
    def requested(self) -> bool:
        return self.signal is not None


# --------------------------------------------------------------------------------------
# The batch loop
# --------------------------------------------------------------------------------------


def _json_float(value) -> float | None:
    value = float(value)
    return value if math.isfinite(value) else None


@dataclass
class _Worker:
    spec: Any
    study: optuna.Study
    storage: Any
    budget: int
    batch: int
    deadline: float | None
    worker_id: str
    stop: _StopRequest
    progress: _Progress
    heartbeat: _Heartbeat
    #: Sampler seeded for a given first trial number (None: keep the study's sampler).
    sampler_for: Any = None

    def __post_init__(self) -> None:
        self._seeded = self.sampler_for is None
        self.tally = _Tally(self.spec)
        self.constraint_keys = objectives_module.constraint_keys(self.spec)
        self.distributions = space.distributions(self.spec)
        self.in_flight: list[optuna.Trial] = []
        self.lost = 0

    # -- asking -------------------------------------------------------------------------

    def _reset_trial_cache(self) -> None:
        # What study.ask does before each new trial: samplers see the latest trials.
        local = getattr(self.study, "_thread_local", None)
        if local is not None and hasattr(local, "cached_all_trials"):
            local.cached_all_trials = None

    def _ask(self, count: int, waiting: int) -> list[optuna.Trial]:
        sampler = self.study.sampler
        if hasattr(sampler, "start_batch"):
            sampler.start_batch()
        trials: list[optuna.Trial] = []
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for _ in range(min(count, waiting)):  # retried designs of dead workers first
                trials.append(self.study.ask())
                self.storage.set_trial_system_attr(trials[-1]._trial_id, SYSTEM_WORKER, self.worker_id)
                self.in_flight.append(trials[-1])
            rest = count - len(trials)
            if rest and isinstance(self.storage, CoalescingJournalStorage):
                new_ids = self.storage.create_trials(self.study._study_id, rest, {SYSTEM_WORKER: self.worker_id})
            else:
                # What study.ask does without its scan for queued trials (done above),
                # which on a database re-reads every running trial on every ask.
                template = optuna.trial.create_trial(state=TrialState.RUNNING,
                                                     system_attrs={SYSTEM_WORKER: self.worker_id})
                new_ids = [self.storage.create_new_trial(self.study._study_id, template_trial=template)
                           for _ in range(rest)]
            if new_ids and not self._seeded:
                self._reseed(self.storage.get_trial_number_from_id(new_ids[0]))
            for trial_id in new_ids:
                self._reset_trial_cache()
                trials.append(optuna.Trial(self.study, trial_id))
                self.in_flight.append(trials[-1])
            self.heartbeat.track(t._trial_id for t in trials)
            if _is_rdb(self.storage):
                self.heartbeat.beat()
            for trial in trials:
                space.suggest(trial, self.spec, self.distributions)
        if isinstance(self.storage, CoalescingJournalStorage):
            self.storage.flush()  # parameters on file before the (long) evaluation: retryable
        return trials

    def _reseed(self, first_number: int) -> None:
        # Workers started together on an empty study see the same trials when they seed
        # their samplers, and would propose the same designs in lockstep. The number of a
        # worker's first trial is unique; for a lone or resumed worker it equals the
        # trials present at its start, which seeded the sampler it already has.
        self._seeded = True
        self.study.sampler = self.sampler_for(first_number)
        if hasattr(self.study.sampler, "start_batch"):
            self.study.sampler.start_batch()

    def _drop_surplus(self, trials: list[optuna.Trial]) -> list[optuna.Trial]:
        """Fail the new trials ranked beyond the budget after a race with other workers."""
        everything = self.study.get_trials(deepcopy=False)
        claimed = sorted(t.number for t in everything if t.state == TrialState.RUNNING or counts_toward_budget(t))
        if len(claimed) <= self.budget:
            return trials
        last_in_budget = claimed[self.budget - 1]
        keep = [t for t in trials if t.number <= last_in_budget]
        self._abandon([t for t in trials if t.number > last_in_budget], SURPLUS)
        return keep

    # -- telling ------------------------------------------------------------------------

    def _finish(self, trial: optuna.Trial, values=None, state=None) -> None:
        from optuna.study._tell import _tell_with_warning

        try:
            _tell_with_warning(self.study, trial, values, state, suppress_warning=True)
        except UpdateFinishedTrialError:
            self.lost += 1  # failed as stale by another worker meanwhile; it retries the design
        finally:
            if trial in self.in_flight:
                self.in_flight.remove(trial)
            self.heartbeat.untrack([trial._trial_id])

    def _commit(self):
        """One append for a group of tells on the journal; a no-op on a database."""
        if isinstance(self.storage, CoalescingJournalStorage):
            return self.storage.batch_commit()
        return contextlib.nullcontext()

    def _abandon(self, trials, reason: str) -> None:
        with self._commit():
            for trial in list(trials):
                try:
                    trial.set_user_attr(ATTR_FAILURE, reason)
                except UpdateFinishedTrialError:
                    pass
                self._finish(trial, state=TrialState.FAIL)

    def abandon_in_flight(self, reason: str) -> None:
        """Leave no trial of this worker running."""
        self._abandon(self.in_flight, reason)

    def _tell(self, trials: list[optuna.Trial], batch, result) -> None:
        names = batch.material_names()
        for i, trial in enumerate(trials):
            trial.set_user_attr(ATTR_DESIGN, {
                "material": [str(name) for name in names[i]],
                "fraction": [_json_float(x) for x in batch.fraction[i]],
                "thickness_nm": [float(x) for x in batch.thickness_nm[i]],
            })
            trial.set_user_attr(ATTR_METRICS, {label: _json_float(v[i]) for label, v in result.metrics.items()})
            reasons = {label: str(r[i]) for label, r in result.reasons.items() if r[i]}
            if reasons:
                trial.set_user_attr(ATTR_REASONS, reasons)
            if result.failure[i]:
                trial.set_user_attr(ATTR_FAILURE, str(result.failure[i]))
                self._finish(trial, state=TrialState.FAIL)
                continue
            for key, value in zip(self.constraint_keys, result.constraints[i]):
                trial.set_constraint(key, float(value))
            self._finish(trial, values=[float(v) for v in result.objectives[i]])

    # -- the loop -----------------------------------------------------------------------

    def run(self) -> str:
        """Work until the budget, the deadline or a stop request; returns which."""
        while True:
            if self.stop.requested:
                return "interrupted"
            if self.deadline is not None and time.monotonic() >= self.deadline:
                return "timeout"
            trials = self.study.get_trials(deepcopy=False)
            if recover_stale_trials(self.study, self.storage, self.worker_id, trials):
                trials = self.study.get_trials(deepcopy=False)
            self.tally.update(trials)
            self.progress.update(self.tally)
            if self.tally.finished >= self.budget:
                return "budget"
            running = [t for t in trials if t.state == TrialState.RUNNING]
            waiting = sum(t.state == TrialState.WAITING for t in trials)
            room = self.budget - self.tally.finished - len(running)
            if room <= 0:
                # Other workers hold the rest of the budget: wait for them (or for their
                # trials to go stale and come back as retries).
                time.sleep(0.5)
                continue
            # Workers racing for the last places can overshoot the budget only when the
            # room left is below one batch per worker at work.
            others = {t.system_attrs.get(SYSTEM_WORKER) for t in running} - {self.worker_id}
            near_end = room < (len(others) + 2) * self.batch
            self.run_batch(min(self.batch, room), waiting, check_surplus=near_end)

    def run_batch(self, count: int, waiting: int, check_surplus: bool = True) -> None:
        from optimize.objectives import evaluate_batch

        trials = self._ask(count, waiting)
        if check_surplus:
            trials = self._drop_surplus(trials)
        if self.stop.requested:
            self._abandon(trials, INTERRUPTED)
            return
        if not trials:
            return
        batch = space.batch_from_params(self.spec, [t.params for t in trials])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            result = evaluate_batch(self.spec, batch)
        with self._commit():
            self._tell(trials, batch, result)


# --------------------------------------------------------------------------------------
# Entry point
# --------------------------------------------------------------------------------------


def _worker_seed(study: optuna.Study, worker_index: int, first_number: int) -> int:
    base = int(study.user_attrs.get("sampler_seed", 0))
    return int(np.random.SeedSequence([base, worker_index, first_number]).generate_state(1)[0])


def _start_workers(count: int, spec, run_dir: Path, url: str | None, budget: int,
                   deadline: float | None) -> list[tuple[subprocess.Popen, Any]]:
    children = []
    for index in range(1, count):
        command = [sys.executable, "-m", "optimize.cli", "optimize", str(Path(spec.path).resolve()),
                   "--out", str(run_dir.resolve()), "--trials", str(budget), "--workers", "1", "--quiet"]
        if deadline is not None:
            command += ["--timeout", f"{max(1.0, deadline - time.monotonic()):.0f}s"]
        env = dict(os.environ, **{WORKER_INDEX_ENV: str(index)})
        if url:
            env[STORAGE_ENV] = url  # not on the command line, where `ps` would show it
        log = open(run_dir / f"worker-{index}.log", "ab")
        # Own session: a Ctrl-C in the terminal reaches the main process only, which
        # then stops its workers once, cleanly.
        process = subprocess.Popen(command, stdout=log, stderr=subprocess.STDOUT, env=env,
                                   start_new_session=True)
        children.append((process, log))
    return children


def _stop_workers(children, signum: int) -> None:
    for process, _ in children:
        if process.poll() is None:
            with contextlib.suppress(ProcessLookupError):
                process.send_signal(signum)


def _wait_workers(children, stop: _StopRequest, forwarded: bool) -> list[int]:
    """Wait for the worker processes; pass a stop request (first or second) on to them."""
    codes = []
    for process, log in children:
        while True:
            try:
                codes.append(process.wait(timeout=0.5))
                break
            except subprocess.TimeoutExpired:
                if stop.requested and not forwarded:
                    _stop_workers(children, signal.SIGTERM)
                    forwarded = True
            except KeyboardInterrupt:
                _stop_workers(children, signal.SIGTERM)  # a second signal: workers abandon their batches
        log.close()
    return codes


def run_campaign(path, *, out_dir=None, trials: int | None = None, timeout_s: float | None = None,
                 workers: int = 1, storage: str | None = None, quiet: bool = False) -> int:
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
    from optimize.spec import load

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
        for text in spec.warnings:
            print(f"warning: {text}", file=sys.stderr)
    with warnings.catch_warnings():
        # Material warnings were given once above (and by `tunnelsmith check`); the
        # physics would repeat them for every batch.
        warnings.simplefilter("ignore", IndirectValleyWarning)
        return _run(spec, run_dir, url, budget, deadline, workers, worker_index, quiet)


def _run(spec, run_dir: Path, url: str | None, budget: int, deadline: float | None, workers: int,
         worker_index: int, quiet: bool) -> int:
    main = worker_index == 0
    store = open_storage(run_dir, url, retry_stale=_retry_stale)
    study = open_study(store, spec, run_dir, url)

    def sampler_for(first_number: int):
        return make_sampler(spec.search.sampler, seed=_worker_seed(study, worker_index, first_number),
                            search_space=space.distributions(spec), batch=spec.search.batch,
                            shared_seed=int(study.user_attrs.get("sampler_seed", 0)), spec_path=str(spec.path))

    study.sampler = sampler_for(len(study.get_trials(deepcopy=False)))
    if main:
        write_text(run_dir / CAMPAIGN_COPY, spec.text)

    stop = _StopRequest()
    stop.install()
    worker_id = _new_worker_id()
    heartbeat = _Heartbeat(store, study._study_id, worker_id)
    progress = _Progress(budget, deadline, quiet, worker_index)
    worker = _Worker(spec, study, store, budget, spec.search.batch, deadline, worker_id, stop, progress, heartbeat,
                     sampler_for)
    children = []
    outcome = None
    try:
        heartbeat.start()
        if main and workers > 1:
            children = _start_workers(workers, spec, run_dir, url, budget, deadline)
        try:
            outcome = worker.run()
        except KeyboardInterrupt:
            outcome = "interrupted"
        finally:
            # Whatever ended the loop, no trial of this worker stays RUNNING.
            try:
                worker.abandon_in_flight(INTERRUPTED if outcome == "interrupted" or stop.requested
                                         else f"{INTERNAL_ERROR}: the worker stopped on an error")
                if isinstance(store, CoalescingJournalStorage):
                    store.flush(to_disk=True)
            except StorageWriteError:
                # The storage refuses writes (disk full): the trials left RUNNING have no
                # heartbeat any more and the next run retries them as stale. Report the
                # first failure, the one that stopped the loop, when there was one.
                if outcome is not None:
                    raise
            finally:
                heartbeat.stop()
        if stop.requested:
            outcome = "interrupted"
        if children:
            if outcome == "interrupted":
                _stop_workers(children, signal.SIGTERM)
            codes = _wait_workers(children, stop, forwarded=outcome == "interrupted")
            if stop.requested:
                outcome = "interrupted"
            if any(code not in (EXIT_OK, EXIT_INTERRUPTED) for code in codes):
                print(f"warning: a worker process failed (exit {codes}); see {run_dir}/worker-*.log",
                      file=sys.stderr)
        worker.tally.update(study.get_trials(deepcopy=False))
        progress.update(worker.tally, force=True)
        progress.close()
    finally:
        stop.restore()
    if main:
        from optimize.front import write_outputs

        write_outputs(study, spec, run_dir, storage_url=url, quiet=quiet)
    if not quiet and main:
        why = {"budget": "budget reached", "timeout": "time limit reached", "interrupted": "interrupted"}[outcome]
        print(f"{why}: {worker.tally.finished} finished trials, results in {run_dir}", file=sys.stderr)
    return EXIT_INTERRUPTED if outcome == "interrupted" else EXIT_OK
