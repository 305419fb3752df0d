"""Workers: identity, heartbeats, recovery of stale trials, local worker processes.
"""

from __future__ import annotations

import contextlib
import os
import signal
import socket
import subprocess
import sys
import threading
import time
import warnings
from pathlib import Path
from typing import Any
import numpy as np
import optuna
from optuna.exceptions import UpdateFinishedTrialError
from optuna.trial import FrozenTrial, TrialState
from tunnelsmith.optimize.io import process_running
from tunnelsmith.optimize.search.layout import PARENT_PID_ENV, STORAGE_ENV, WORKER_INDEX_ENV
from tunnelsmith.optimize.search.records import ATTR_RETRIES, ATTR_RETRY_OF, SYSTEM_WORKER, _BEAT_PREFIX
from tunnelsmith.optimize.search.storage import GRACE_PERIOD_S, HEARTBEAT_INTERVAL_S, _is_rdb


#: How often one design is retried after its worker died.
MAX_RETRIES = 2


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
    return not process_running(pid)


class _Heartbeat:
    """Daemon thread recording this worker's heartbeat every :data:`HEARTBEAT_INTERVAL_S`.

    A beat is a study system attribute naming the worker (both storages) and, on a
    database, Optuna's heartbeat of every tracked trial. Each beat is tried once, also
    while the database does not answer: a missed beat is made up by the next one, and the
    grace period covers several, so an outage never stalls or ends this thread.

    Parameters
    ----------
    storage, study_id, worker_id
        Where the beats go and whose they are.
    parent_pid : int, optional
        The main process of a local worker: at every beat the thread checks that it is
        still this process's parent, and calls ``on_orphaned`` once when it is not
        (the portable way to notice; on Linux the kernel's parent-death signal is
        usually first, see :func:`_watch_parent`).
    on_orphaned : callable, optional
        Called from this thread, without arguments, when the parent is gone.
    """

    def __init__(self, storage, study_id: int, worker_id: str, parent_pid: int | None = None,
                 on_orphaned=None) -> None:
        self._storage, self._study_id, self._worker_id = storage, study_id, worker_id
        self._parent_pid, self._on_orphaned = parent_pid, on_orphaned
        self._trial_ids: set[int] = set()
        self._missed = 0  # beats missed in a row; the first and the recovery are reported
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
        """Record one beat; a failure is reported (once for a run of them), never raised."""
        # A storage that waits out database outages is told not to wait here: the
        # heartbeat thread must keep its rhythm, and the main thread waits anyway.
        once = getattr(self._storage, "single_attempt", contextlib.nullcontext)
        try:
            with once():
                if _is_rdb(self._storage):
                    with self._lock:
                        ids = sorted(self._trial_ids)
                    for trial_id in ids:
                        self._storage.record_heartbeat(trial_id)
                # On a database too: a trial whose own heartbeat never reached the
                # database (it went away right after creating the trial) is still
                # recognised as stale by the silence of its worker.
                self._storage.set_study_system_attr(self._study_id, _BEAT_PREFIX + self._worker_id, time.time())
        except Exception as error:  # a missed beat is retried; the grace period covers several
            with self._lock:
                self._missed += 1
                first = self._missed == 1
            if first:
                reason = getattr(error, "reason", None) or f"{type(error).__name__}: {error}"
                print(f"warning: heartbeat not recorded ({reason}); trying again every {HEARTBEAT_INTERVAL_S} s",
                      file=sys.stderr, flush=True)
            return
        with self._lock:
            missed, self._missed = self._missed, 0
        if missed:
            print(f"note: heartbeat recorded again after {missed} missed", file=sys.stderr, flush=True)

    def _run(self) -> None:
        while not self._stop.wait(HEARTBEAT_INTERVAL_S):
            if self._parent_pid is not None and _parent_gone(self._parent_pid):
                self._parent_pid = None  # once is enough
                if self._on_orphaned is not None:
                    self._on_orphaned()
            self.beat()


def _parent_gone(parent_pid: int) -> bool:
    """Whether the process that started this one has exited.

    An orphan is adopted by init or by the nearest subreaper, so its parent id changes;
    the old id may since have been given to another process, which is why the parent id
    is compared rather than the old process probed.
    """
    return os.getppid() != parent_pid


def _parent_to_watch(worker_index: int) -> int | None:
    """The main process a local worker belongs to (``TUNNELSMITH_PARENT_PID``), else None.

    Only workers started by ``--workers N`` carry it; workers started by hand or by a
    scheduler have no main process to outlive.
    """
    text = os.environ.get(PARENT_PID_ENV, "").strip()
    if worker_index == 0 or not text.isdigit():
        return None
    return int(text)


#: ``prctl`` option of Linux: the signal this process receives when its parent dies.
_PR_SET_PDEATHSIG = 1


#: The parent-death signal. Not SIGTERM: the kernel sends it again each time the child
#: is handed on (to another thread of the dying parent, then to init), and a second
#: SIGTERM would abandon the batch, whereas every SIGUSR1 only asks for the one stop.
PARENT_DEATH_SIGNAL = getattr(signal, "SIGUSR1", None)


_PARENT_GONE = "the main process of this worker is gone"


def _watch_parent(parent_pid: int, stop: "_StopRequest") -> None:
    """Stop this worker like an interrupt when its main process dies.

    On Linux the kernel signals the moment the parent dies (``prctl`` with
    ``PR_SET_PDEATHSIG``, through :mod:`ctypes`, with :data:`PARENT_DEATH_SIGNAL`);
    elsewhere, or where that is refused, the heartbeat thread's check of the parent id
    notices within one heartbeat interval. The parent-death signal follows the *thread*
    that started the child: the main process starts its workers from the thread that
    waits for them, so it outlives them. Call from the main thread (signal handlers are
    installed there only; elsewhere the heartbeat's check remains).
    """
    if (sys.platform.startswith("linux") and PARENT_DEATH_SIGNAL is not None
            and threading.current_thread() is threading.main_thread()):
        import ctypes

        # Installed before the request, for good: the signal's default action ends the
        # process, and a late notice must never do that.
        signal.signal(PARENT_DEATH_SIGNAL, lambda signum, frame: stop.request(_PARENT_GONE))
        try:
            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(ctypes.c_int(_PR_SET_PDEATHSIG), ctypes.c_ulong(int(PARENT_DEATH_SIGNAL)),
                       ctypes.c_ulong(0), ctypes.c_ulong(0), ctypes.c_ulong(0))
        except (OSError, AttributeError):
            pass  # no prctl here: the heartbeat's check of the parent id remains
    # A parent that died before the request above sends no signal any more.
    if _parent_gone(parent_pid):
        stop.request(_PARENT_GONE)


def _retry_stale(study, trial: FrozenTrial) -> None:
    """Enqueue the parameters of a trial whose worker died (at most :data:`MAX_RETRIES` times)."""
    retries = int(trial.user_attrs.get(ATTR_RETRIES, 0))
    if retries >= MAX_RETRIES or not trial.params:
        return
    study.enqueue_trial(dict(trial.params), user_attrs={ATTR_RETRY_OF: trial.number, ATTR_RETRIES: retries + 1})


def _started_s(trial: FrozenTrial) -> float:
    return trial.datetime_start.timestamp() if trial.datetime_start is not None else time.time()


class _BeatSilence:
    """How long each worker's beat has stayed unchanged, as this process has watched it.

    Measured on this process's monotonic clock from the moment it first saw a beat's
    current value, so the clocks of different hosts are never compared (a database
    shared across hosts); a process that has just started waits a whole grace period
    before it calls a worker silent.
    """

    def __init__(self) -> None:
        self._seen: dict[str, tuple[Any, float]] = {}

    def silent_s(self, owner: str, beat) -> float:
        """Seconds since ``owner``'s beat last changed (0 when it changed since the last look)."""
        now_s = time.monotonic()
        seen = self._seen.get(owner)
        if seen is None or seen[0] != beat:
            self._seen[owner] = (beat, now_s)
            return 0.0
        return now_s - seen[1]


def recover_stale_trials(study, storage, worker_id: str, trials: list[FrozenTrial],
                         silence: _BeatSilence | None = None) -> int:
    """Fail the running trials of dead workers and enqueue their parameters again.

    A running trial of another worker is stale when its worker process is gone (same
    host), when its worker has not beaten for :data:`GRACE_PERIOD_S` (journal), when no
    worker ever claimed it within that time, or (database) when Optuna's heartbeat
    check finds it stale, or when ``silence`` (kept by the caller from one call to the
    next) has seen the worker's own beat unchanged for :data:`GRACE_PERIOD_S` — which
    catches trials whose own heartbeat never reached the database, such as those a
    worker created just before the database went away and it gave up. Each stale trial
    is failed once — a worker that loses the race to fail it does not retry it — and
    enqueued again. Returns the number failed here.
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
        elif silence is not None:
            if beats is None:
                beats = storage.get_study_system_attrs(study._study_id)
            # A worker without a beat of its own (an older version) is left to Optuna's
            # heartbeat check below.
            beat = beats.get(_BEAT_PREFIX + owner)
            if beat is not None and silence.silent_s(owner, beat) > GRACE_PERIOD_S:
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


def _worker_seed(study: optuna.Study, worker_index: int, first_number: int) -> int:
    base = int(study.user_attrs.get("sampler_seed", 0))
    return int(np.random.SeedSequence([base, worker_index, first_number]).generate_state(1)[0])


def _start_workers(count: int, spec, run_dir: Path, url: str | None, budget: int,
                   deadline: float | None) -> list[tuple[subprocess.Popen, Any]]:
    children = []
    for index in range(1, count):
        command = [sys.executable, "-m", "tunnelsmith", "optimize", str(Path(spec.path).resolve()),
                   "--out", str(run_dir.resolve()), "--trials", str(budget), "--workers", "1", "--quiet"]
        if deadline is not None:
            command += ["--timeout", f"{max(1.0, deadline - time.monotonic()):.0f}s"]
        env = dict(os.environ, **{WORKER_INDEX_ENV: str(index), PARENT_PID_ENV: str(os.getpid())})
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


class _StopRequest:
    """SIGINT/SIGTERM: the first asks the loop to stop; a second abandons the batch.

    :meth:`request` asks for the same stop without a signal (a worker whose main
    process is gone); any number of requests count as one.
    """

    def __init__(self) -> None:
        self.signal: int | None = None
        self.reason: str | None = None
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
        if not self.requested:
            self.signal = signum
            print(f"\n{signal.Signals(signum).name}: finishing the current batch, then writing results "
                  "(signal again to abandon the batch)", file=sys.stderr, flush=True)
            return
        raise KeyboardInterrupt

    def request(self, reason: str) -> None:
        """Ask the loop to stop as a first signal does, from any thread or signal handler.

        Only the first request is announced. The announcement is one raw write to the
        standard error descriptor: a signal handler may interrupt the main thread in the
        middle of a ``print`` to the same stream, where a second ``print`` would fail.
        """
        if self.requested:
            return
        self.reason = reason
        with contextlib.suppress(OSError):
            os.write(2, f"\n{reason}: finishing the current batch, then stopping\n".encode())

    @property
    def requested(self) -> bool:
        return self.signal is not None or self.reason is not None
