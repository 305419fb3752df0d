"""Campaigns: batched ask-and-tell search over the vectorised model, resumable and shared.

The loop
--------
Each worker repeats: ask ``batch`` trials of the Optuna study, turn their parameters
into one :class:`~tunnelsmith.optimize.model.stack.DesignBatch`, evaluate the whole batch in one call
into the physics (:func:`tunnelsmith.optimize.model.objectives.evaluate_batch`), tell every trial its
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
``--workers N`` starts ``N − 1`` worker processes (``python -m tunnelsmith optimize ...
--workers 1 --quiet``, logs in ``RUN_DIR/worker-<k>.log``) beside the main process;
all of them stop at the budget and the main process writes the outputs. Workers
started at the same moment on an empty storage tolerate each other creating the schema
and the study. Each worker's sampler seed is derived from ``[search] seed``, the worker
index (``TUNNELSMITH_WORKER_INDEX``) and the number of the first trial it creates (unique
in the study, even for workers started together), so workers and resumed runs do not
repeat each other's designs; a single fresh run is reproducible.

Optuna beats hearts only inside ``study.optimize``; this loop keeps its own. A daemon
thread records a heartbeat every :data:`HEARTBEAT_INTERVAL_S` seconds: per worker as a
study system attribute (Optuna 5's journal storage has no heartbeat support), and on a
database also per running trial through ``RDBStorage.record_heartbeat``.
Before each batch a worker fails the running trials of other workers that are stale —
no heartbeat for :data:`GRACE_PERIOD_S` seconds, or (on this host) whose process is
gone — and enqueues their parameters once more (user attribute ``retry_of``; at most
:data:`MAX_RETRIES` retries of one design). On a database the first part is Optuna's
``fail_stale_trials``, and a worker's own beat, watched on the local clock, catches the
trials whose heartbeat never reached the database. Both periods can be set with the
environment variables ``TUNNELSMITH_HEARTBEAT_S`` and ``TUNNELSMITH_GRACE_S``.

Database outages
----------------
A restart of the database server (or a fail-over) does not end a campaign. Every
storage call that loses its connection waits for the server and is tried again, after
0.5 s, doubling up to 10 s (:class:`~tunnelsmith.optimize.search.storage.OutageTolerantRDBStorage`,
one place for every call of the loop); the worker says once that it waits and once that
the database is back, then goes on. Heartbeats are tried once per beat and never stall
or end the worker. When the database has not answered for
:data:`~tunnelsmith.optimize.search.storage.DB_OUTAGE_S` seconds (120, or the environment
variable ``TUNNELSMITH_DB_OUTAGE_S``) the worker stops with exit status 1 and one
paragraph naming the storage (password removed), the wait and the fix; it fails its
running trials if the database answers for that, and otherwise leaves them to the
heartbeat check of the next worker, which retries them. Running the same command again
resumes: no finished trial is lost.

A worker held up for longer than the grace period (a scheduler suspending its job with
SIGSTOP and resuming it with SIGCONT) wakes to find its running trials failed and their
designs retried by another worker: it drops them without writing anything more for them
(on the journal, a batch's tells are applied in file order, so a tell that comes after
the other worker's failure is refused in every process alike) and goes on; no design is
counted twice. Local worker processes stop like an interrupt when their main process is
gone: on Linux the kernel sends them SIGUSR1 when it dies (``PR_SET_PDEATHSIG``),
elsewhere the heartbeat thread notices the changed parent process id.

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
import signal
import sys
import time
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any
import optuna
from optuna.exceptions import UpdateFinishedTrialError
from optuna.trial import TrialState
from tunnelsmith.optimize.model import objectives as objectives_module
from tunnelsmith.optimize.model import space
from tunnelsmith.optimize.errors import StorageWriteError
from tunnelsmith.optimize.io import write_text
from tunnelsmith.optimize.errors import EXIT_INTERRUPTED, EXIT_OK
from tunnelsmith.optimize.search.layout import CAMPAIGN_COPY
from tunnelsmith.optimize.search.progress import _Progress, _Tally
from tunnelsmith.optimize.search.records import ATTR_DESIGN, ATTR_FAILURE, ATTR_METRICS, ATTR_REASONS, INTERNAL_ERROR, INTERRUPTED, ORPHANED, SURPLUS, SYSTEM_WORKER, counts_toward_budget
from tunnelsmith.optimize.search.sampler import make_sampler
from tunnelsmith.optimize.search.storage import GRACE_PERIOD_S, CoalescingJournalStorage, _is_rdb, open_storage
from tunnelsmith.optimize.search.study import open_study
from tunnelsmith.optimize.search.workers import _BeatSilence, _Heartbeat, _new_worker_id, _retry_stale, _start_workers, _stop_workers, _wait_workers, _worker_seed, recover_stale_trials
from tunnelsmith.optimize.search.workers import _StopRequest, _PARENT_GONE, _parent_to_watch, _watch_parent


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
        self.silence = _BeatSilence()  # how long other workers' beats have not changed

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
                trial = self.study.ask()
                try:
                    self.storage.set_trial_system_attr(trial._trial_id, SYSTEM_WORKER, self.worker_id)
                except UpdateFinishedTrialError:
                    self.lost += 1  # held up past the grace period right after popping it
                    continue
                trials.append(trial)
                self.in_flight.append(trial)
            rest = count - len(trials)
            if rest and isinstance(self.storage, CoalescingJournalStorage):
                new_ids = self.storage.create_trials(self.study._study_id, rest, {SYSTEM_WORKER: self.worker_id})
            else:
                # What study.ask does without its scan for queued trials (done above),
                # which on a database re-reads every running trial on every ask. Through
                # the study's storage, as study.ask does: on a database that is Optuna's
                # cache, which must know a trial before its parameters are suggested
                # (a sampler that reads no trials, such as random, would not teach it).
                template = optuna.trial.create_trial(state=TrialState.RUNNING,
                                                     system_attrs={SYSTEM_WORKER: self.worker_id})
                new_ids = [self.study._storage.create_new_trial(self.study._study_id, template_trial=template)
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
            taken = []
            for trial in trials:
                try:
                    space.suggest(trial, self.spec, self.distributions)
                except UpdateFinishedTrialError:
                    taken.append(trial)
            for trial in taken:
                self._drop(trial)
        if isinstance(self.storage, CoalescingJournalStorage):
            self.storage.flush()  # parameters on file before the (long) evaluation: retryable
        return [t for t in trials if t not in taken]

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

    def _taken(self, trial: optuna.Trial) -> bool:
        """Whether another worker has failed this worker's running ``trial`` as stale.

        That happens when this process was held up (suspended by a scheduler, swapped
        out) for longer than the grace period: its heartbeat lapsed, another worker
        failed its running trials and enqueued their designs again.
        """
        return self.storage.get_trial(trial._trial_id).state.is_finished()

    def _drop(self, trial: optuna.Trial) -> None:
        """Forget a trial taken by another worker: nothing more is written for it."""
        self.lost += 1
        if trial in self.in_flight:
            self.in_flight.remove(trial)
        self.heartbeat.untrack([trial._trial_id])

    def _note_lost(self, before: int) -> None:
        if self.lost > before:
            print(f"note: {self.lost - before} trials of this worker were failed by another worker while this "
                  f"one was held up (no heartbeat for more than {GRACE_PERIOD_S} s); their designs are "
                  "retried there, and this worker drops them and goes on", file=sys.stderr, flush=True)

    def _finish(self, trial: optuna.Trial, values=None, state=None) -> None:
        from optuna.study._tell import _tell_with_warning

        try:
            _tell_with_warning(self.study, trial, values, state, suppress_warning=True)
        except UpdateFinishedTrialError:
            self.lost += 1  # failed as stale by another worker meanwhile; it retries the design
        except ValueError:
            # Optuna refuses to tell a trial it reads as finished ("Cannot tell a FAIL
            # trial"): taken by another worker since the last look. Anything else is ours.
            if not self._taken(trial):
                raise
            self.lost += 1
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
        """Leave no trial of this worker running: those it holds and any stray ones."""
        self._abandon(self.in_flight, reason)
        self._fail_strays(self.study.get_trials(deepcopy=False, states=(TrialState.RUNNING,)), reason)

    def _fail_strays(self, trials: list[optuna.trial.FrozenTrial], reason: str) -> int:
        """Fail the running trials of this worker that it does not hold; returns how many.

        A trial creation retried after the database connection was lost can have been
        committed by the attempt whose reply was lost: that first trial is this worker's,
        has no parameters and no heartbeat, and would hold a place of the budget for
        ever. Between batches a worker holds no trial, so every running one it owns is
        such a stray.
        """
        held = {t._trial_id for t in self.in_flight}
        strays = [t for t in trials if t.state == TrialState.RUNNING and t._trial_id not in held
                  and t.system_attrs.get(SYSTEM_WORKER) == self.worker_id]
        with self._commit():
            for trial in strays:
                try:
                    self.storage.set_trial_user_attr(trial._trial_id, ATTR_FAILURE, reason)
                    self.storage.set_trial_state_values(trial._trial_id, TrialState.FAIL)
                except UpdateFinishedTrialError:
                    pass  # failed as stale by another worker meanwhile
        return len(strays)

    def _tell(self, trials: list[optuna.Trial], batch, result) -> None:
        names = batch.material_names()
        for i, trial in enumerate(trials):
            # A trial another worker failed during the evaluation is dropped before any
            # write: its design is retried there and must not count twice.
            if self._taken(trial):
                self._drop(trial)
                continue
            try:
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
            except UpdateFinishedTrialError:
                # A database refuses the write: failed since the look above.
                self._drop(trial)
                continue
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
            recovered = recover_stale_trials(self.study, self.storage, self.worker_id, trials, self.silence)
            if self._fail_strays(trials, ORPHANED) + recovered:
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
        from tunnelsmith.optimize.model.objectives import evaluate_batch

        lost_before = self.lost
        trials = self._ask(count, waiting)
        if check_surplus:
            trials = self._drop_surplus(trials)
        if self.stop.requested:
            self._abandon(trials, INTERRUPTED)
            return
        if not trials:
            self._note_lost(lost_before)
            return
        batch = space.batch_from_params(self.spec, [t.params for t in trials])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            result = evaluate_batch(self.spec, batch)
        with self._commit():
            self._tell(trials, batch, result)
        self._note_lost(lost_before)


def run_search(spec, run_dir: Path, url: str | None, budget: int, deadline: float | None, workers: int,
               worker_index: int, quiet: bool) -> "SearchOutcome":
    """Ask, evaluate and tell batches until the budget, the deadline or a stop signal.

    The process with ``worker_index`` 0 starts ``workers - 1`` local worker processes
    and waits for them. Returns how the search ended; writing outputs is the caller's.
    """
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

    parent_pid = _parent_to_watch(worker_index)
    stop = _StopRequest()
    stop.install()
    if parent_pid is not None:
        # A worker of `--workers N` must not outlive its main process (killed, or its
        # job ended): it would go on spending the budget with nobody to write results.
        _watch_parent(parent_pid, stop)
    worker_id = _new_worker_id()
    heartbeat = _Heartbeat(store, study._study_id, worker_id, parent_pid=parent_pid,
                           on_orphaned=lambda: stop.request(_PARENT_GONE))
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
    return SearchOutcome(study=study, why=outcome, finished=worker.tally.finished, main=main)


@dataclass(frozen=True)
class SearchOutcome:
    """How a search ended: its study, why it stopped, how many trials finished."""

    study: optuna.Study
    why: str  # "budget", "timeout" or "interrupted"
    finished: int
    main: bool  # the process the user started (worker index 0), which writes the outputs

    @property
    def exit_status(self) -> int:
        return EXIT_INTERRUPTED if self.why == "interrupted" else EXIT_OK
