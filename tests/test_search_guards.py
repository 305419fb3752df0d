"""Crash safety of the campaign search: frozen workers, orphaned workers, clashing
campaigns in one run directory, and temporary files left by a kill.

Most tests drive the real command line in subprocesses on small zero-bias campaigns,
with the heartbeat interval and grace period shortened through the environment
(``TUNNELSMITH_HEARTBEAT_S``, ``TUNNELSMITH_GRACE_S``) so that a stale worker is
noticed within seconds; a few check one piece (the heartbeat's watch of the parent,
the temporary file names) in this process or a short child.
"""

from __future__ import annotations

import os
import re
import signal
import socket
import subprocess
import sys
import threading
import time

import optuna
import pytest
from optuna.trial import TrialState

from tunnelsmith.optimize.search.records import ATTR_RETRY_OF, SYSTEM_WORKER, counts_toward_budget
from tunnelsmith.optimize.search.storage import open_storage

from conftest import finished, small_campaign, start, stored_trials, tunnelsmith, wait_for_finished, write_campaign

# Short periods: a worker without a heartbeat for 3 s is stale.
HEARTBEAT_S, GRACE_S = 1, 3


def short_heartbeats(monkeypatch) -> None:
    """Give every command started from this test the short heartbeat periods."""
    monkeypatch.setenv("TUNNELSMITH_HEARTBEAT_S", str(HEARTBEAT_S))
    monkeypatch.setenv("TUNNELSMITH_GRACE_S", str(GRACE_S))
    for name in ("TUNNELSMITH_WORKER_INDEX", "TUNNELSMITH_STORAGE", "TUNNELSMITH_PARENT_PID"):
        monkeypatch.delenv(name, raising=False)


def owner_pid(trial) -> int | None:
    """Process id of the worker that asked a trial (system attribute ``host:pid:token``)."""
    owner = trial.system_attrs.get(SYSTEM_WORKER)
    return int(owner.rsplit(":", 2)[1]) if owner else None


def reader(run_dir, name: str) -> optuna.Study:
    """The run's study read from its journal; each ``get_trials`` reads only what is new
    (re-reading a journal of thousands of trials from the start takes about a second)."""
    return optuna.load_study(study_name=name, storage=open_storage(run_dir, writer=False))


# --------------------------------------------------------------------------------------
# A worker frozen past the grace period
# --------------------------------------------------------------------------------------


def test_a_worker_frozen_past_the_grace_period_drops_its_failed_trials_and_goes_on(tmp_path, monkeypatch):
    """SIGSTOP with a batch in flight until the other worker has failed and retried it, then SIGCONT.

    What a cluster scheduler does when it suspends a job. The thawed worker must find
    its batch taken from it, drop it without writing, and work on to the budget.
    """
    short_heartbeats(monkeypatch)
    budget, name = 3000, "frozen"
    path = write_campaign(tmp_path, small_campaign(name=name, trials=budget))
    run_dir = tmp_path / "run"
    frozen = start("optimize", path, "--out", run_dir, "--quiet", cwd=tmp_path)
    other = None
    try:
        wait_for_finished(run_dir, name, 64, frozen)
        other = start("optimize", path, "--out", run_dir, "--quiet", cwd=tmp_path)
        study = reader(run_dir, name)
        deadline = time.monotonic() + 60
        while other.pid not in {owner_pid(t) for t in study.get_trials(deepcopy=False)}:
            assert other.poll() is None, other.communicate()
            assert time.monotonic() < deadline, "the second worker never asked a trial"
            time.sleep(0.2)

        # Catch the first worker with a batch in flight (running trials with parameters).
        for _ in range(300):
            assert frozen.poll() is None, frozen.communicate()
            frozen.send_signal(signal.SIGSTOP)
            trials = study.get_trials(deepcopy=False)
            caught = [t.number for t in trials
                      if t.state == TrialState.RUNNING and owner_pid(t) == frozen.pid and t.params]
            # Not while it holds the journal's lock (a symbolic link beside it): the other
            # worker would wait for the lock instead of working.
            if caught and not os.path.lexists(f"{run_dir / 'campaign.journal'}.lock"):
                break
            frozen.send_signal(signal.SIGCONT)
            time.sleep(0.02)
        else:
            raise AssertionError("the first worker never had a batch in flight")
        stopped_at = time.monotonic()
        finished_before = {t.number: t.values for t in finished(trials)}

        # Frozen until the other worker has failed the caught batch as stale.
        deadline = stopped_at + 60
        while True:
            trials = study.get_trials(deepcopy=False)
            if (all(trials[n].state == TrialState.FAIL for n in caught)
                    and time.monotonic() - stopped_at > GRACE_S + 1):
                break
            assert other.poll() is None, other.communicate()
            assert time.monotonic() < deadline, "the other worker did not fail the frozen batch in 60 s"
            time.sleep(0.2)
        frozen.send_signal(signal.SIGCONT)

        _, frozen_err = frozen.communicate(timeout=180)
        _, other_err = other.communicate(timeout=180)
    finally:
        for process in (frozen, other):
            if process is not None and process.poll() is None:
                process.send_signal(signal.SIGCONT)
                process.kill()
                process.communicate()
    assert frozen.returncode == 0, frozen_err
    assert other.returncode == 0, other_err
    assert "Traceback" not in frozen_err + other_err
    assert "were failed by another worker while this one was held up" in frozen_err

    trials = stored_trials(run_dir, name)
    assert len(finished(trials)) == budget
    assert not [t for t in trials if t.state in (TrialState.RUNNING, TrialState.WAITING)]
    for number, values in finished_before.items():
        assert counts_toward_budget(trials[number]) and trials[number].values == values
    # The frozen batch stays failed (not counted); each of its designs counts once, as its retry.
    counted_retries = [t.user_attrs[ATTR_RETRY_OF] for t in finished(trials) if ATTR_RETRY_OF in t.user_attrs]
    for number in caught:
        assert trials[number].state == TrialState.FAIL and not counts_toward_budget(trials[number])
        assert counted_retries.count(number) == 1, number


# --------------------------------------------------------------------------------------
# Worker processes whose main process is gone
# --------------------------------------------------------------------------------------


def process_running(pid: int) -> bool:
    """Whether ``pid`` runs; an exited process nobody has reaped yet (zombie) does not."""
    try:
        with open(f"/proc/{pid}/stat", "rb") as handle:
            return handle.read().rsplit(b")", 1)[1].split()[0] != b"Z"
    except FileNotFoundError:
        return False


@pytest.mark.skipif(not os.path.isdir("/proc/self"), reason="reads process states from /proc (Linux)")
def test_worker_processes_stop_when_the_main_process_is_killed(tmp_path, monkeypatch):
    short_heartbeats(monkeypatch)
    name = "orphans"
    path = write_campaign(tmp_path, small_campaign(name=name, trials=1_000_000))
    run_dir = tmp_path / "run"
    main = start("optimize", path, "--out", run_dir, "--workers", 2, "--quiet", cwd=tmp_path)
    worker_pids: set[int] = set()
    try:
        wait_for_finished(run_dir, name, 64, main)
        study = reader(run_dir, name)
        deadline = time.monotonic() + 60
        while not worker_pids:
            assert main.poll() is None, main.communicate()
            assert time.monotonic() < deadline, "the worker process never asked a trial"
            worker_pids = {owner_pid(t) for t in study.get_trials(deepcopy=False)} - {main.pid, None}
            time.sleep(0.2)
        # Killed while it does not hold the journal's lock: a lock left by a killed
        # holder stalls every other writer for Optuna's lock grace period (30 s).
        lock = f"{run_dir / 'campaign.journal'}.lock"
        for _ in range(300):
            main.send_signal(signal.SIGSTOP)
            if not os.path.lexists(lock):
                break
            main.send_signal(signal.SIGCONT)
            time.sleep(0.01)
        main.kill()
        main.communicate()

        # Within the heartbeat interval at most (the kernel tells at once on Linux), plus
        # the batch in flight; 30 s leaves room for a loaded machine.
        deadline = time.monotonic() + 30
        while any(map(process_running, worker_pids)):
            assert time.monotonic() < deadline, f"worker processes {worker_pids} still run 30 s after the kill"
            time.sleep(0.2)
    finally:
        for pid in worker_pids:
            if process_running(pid):
                os.kill(pid, signal.SIGKILL)
    log = (run_dir / "worker-1.log").read_text()
    assert "Traceback" not in log, log
    trials = study.get_trials(deepcopy=False)
    # The worker left nothing running: it finished or abandoned its batch on the way out.
    assert not [t.number for t in trials if t.state == TrialState.RUNNING and owner_pid(t) in worker_pids], log

    # A resume fails the killed main process's batch as stale and ends at the budget.
    budget = len(finished(trials)) + 40
    result = tunnelsmith("optimize", path, "--out", run_dir, "--trials", budget, "--quiet", cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    trials = stored_trials(run_dir, name)
    assert len(finished(trials)) == budget
    assert not [t for t in trials if t.state in (TrialState.RUNNING, TrialState.WAITING)]


def test_the_heartbeat_notices_a_parent_that_is_gone_and_the_stop_is_an_interrupt(monkeypatch):
    """The portable fallback of Linux's parent-death signal, without waiting for a real death.

    A process whose parent has exited is adopted by another, so its parent id is no
    longer the recorded one: a recorded id of an exited process stands for that.
    """
    from tunnelsmith.optimize.search import workers

    monkeypatch.setattr(workers, "HEARTBEAT_INTERVAL_S", 0.05)
    storage = optuna.storages.InMemoryStorage()
    study = optuna.create_study(storage=storage)
    exited = subprocess.Popen([sys.executable, "-c", "pass"])
    exited.wait()

    noticed, quiet = threading.Event(), threading.Event()
    orphan = workers._Heartbeat(storage, study._study_id, "here:1:aaaa", parent_pid=exited.pid,
                                on_orphaned=noticed.set)
    child = workers._Heartbeat(storage, study._study_id, "here:2:bbbb", parent_pid=os.getppid(),
                               on_orphaned=quiet.set)
    orphan.start()
    child.start()
    try:
        assert noticed.wait(10), "the heartbeat thread never noticed the missing parent"
        time.sleep(0.3)  # several beats with the real parent
        assert not quiet.is_set()
    finally:
        orphan.stop()
        child.stop()

    # The stop it asks for is a first interrupt (finish the batch): any number of such
    # requests are one; a signal after them is a second interrupt (abandon the batch).
    stop = workers._StopRequest()
    stop.request(workers._PARENT_GONE)
    stop.request(workers._PARENT_GONE)
    assert stop.requested and stop.signal is None
    with pytest.raises(KeyboardInterrupt):
        stop._handle(signal.SIGTERM, None)


#: Run in a child of the test: asks for the parent-death signal, reads back from the
#: kernel which signal that is, then receives it three times, as a child of a parent
#: with several threads does (the kernel signals at every hand-over of the orphan).
REPEATED_PARENT_DEATH = """
import ctypes, os, signal, time
from tunnelsmith.optimize.search import workers

stop = workers._StopRequest()
stop.install()
workers._watch_parent(os.getppid(), stop)
assert not stop.requested, "the parent is alive"
chosen = ctypes.c_int(0)
ctypes.CDLL(None, use_errno=True).prctl(2, ctypes.byref(chosen), 0, 0, 0)  # PR_GET_PDEATHSIG
assert chosen.value > 0, "no parent-death signal set"
for _ in range(3):
    os.kill(os.getpid(), chosen.value)
    time.sleep(0.1)  # the handler runs before the next one arrives
assert stop.requested
print("stopped once")
"""


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="the parent-death signal is Linux's")
def test_repeated_parent_death_signals_ask_for_one_stop():
    result = subprocess.run([sys.executable, "-c", REPEATED_PARENT_DEATH], capture_output=True, text=True,
                            timeout=60)
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip() == "stopped once"
    assert result.stderr.count("the main process of this worker is gone") == 1


# --------------------------------------------------------------------------------------
# One run directory, one campaign
# --------------------------------------------------------------------------------------


def test_a_campaign_of_another_name_is_refused_in_a_run_directory(tmp_path):
    run_dir = tmp_path / "run"
    first = write_campaign(tmp_path, small_campaign(name="first", trials=32), "first.toml")
    assert tunnelsmith("optimize", first, "--out", run_dir, "--quiet", cwd=tmp_path).returncode == 0
    outputs = {name: (run_dir / name).read_bytes() for name in ("front.nc", "trials.nc", "campaign.toml")}
    second = write_campaign(tmp_path, small_campaign(name="second", trials=32), "second.toml")

    def refused(*extra) -> str:
        result = tunnelsmith("optimize", second, "--out", run_dir, "--quiet", *extra, cwd=tmp_path)
        assert result.returncode == 2, result.stderr
        message = result.stderr.strip()
        assert "Traceback" not in message and len(message.splitlines()) == 1
        for words in (str(second), "campaign.name", '"first"', '"second"', "--out", "Fix:"):
            assert words in message
        return message

    assert "campaign.toml" in refused()
    # Without the copy (a run killed before writing it) the journal still names its campaign.
    (run_dir / "campaign.toml").unlink()
    assert "campaign.journal" in refused()
    (run_dir / "campaign.toml").write_bytes(outputs["campaign.toml"])
    assert {name: (run_dir / name).read_bytes() for name in outputs} == outputs
    assert optuna.study.get_all_study_names(open_storage(run_dir, writer=False)) == ["first"]
    # The first campaign resumes there.
    resumed = tunnelsmith("optimize", first, "--out", run_dir, "--trials", 40, "--quiet", cwd=tmp_path)
    assert resumed.returncode == 0, resumed.stderr


def test_a_database_shares_campaigns_but_a_run_directory_keeps_one(tmp_path):
    url = f"sqlite:///{tmp_path / 'campaigns.db'}"
    first = write_campaign(tmp_path, small_campaign(name="first", trials=8, batch=8), "first.toml")
    second = write_campaign(tmp_path, small_campaign(name="second", trials=8, batch=8), "second.toml")
    ok = tunnelsmith("optimize", first, "--storage", url, "--out", tmp_path / "run-first", "--quiet", cwd=tmp_path)
    assert ok.returncode == 0, ok.stderr
    clash = tunnelsmith("optimize", second, "--storage", url, "--out", tmp_path / "run-first", "--quiet",
                        cwd=tmp_path)
    assert clash.returncode == 2 and "Traceback" not in clash.stderr
    assert "campaign.name" in clash.stderr and '"first"' in clash.stderr
    ok = tunnelsmith("optimize", second, "--storage", url, "--out", tmp_path / "run-second", "--quiet", cwd=tmp_path)
    assert ok.returncode == 0, ok.stderr
    assert sorted(optuna.study.get_all_study_names(url)) == ["first", "second"]


# --------------------------------------------------------------------------------------
# Temporary files of writers that were killed
# --------------------------------------------------------------------------------------


def test_atomic_writes_name_their_writer_in_the_temporary_name(tmp_path):
    from tunnelsmith.optimize.io import atomic_path

    target = tmp_path / "out" / "front.nc"
    with atomic_path(target) as temporary:
        pattern = rf"\.front\.nc\.{re.escape(socket.gethostname())}\.{os.getpid()}\.[^.]+\.part"
        assert re.fullmatch(pattern, temporary.name), temporary.name
        temporary.write_text("whole", encoding="utf-8")
    assert target.read_text(encoding="utf-8") == "whole"
    assert os.listdir(target.parent) == ["front.nc"]


def test_the_next_writer_removes_part_files_of_dead_writers_and_keeps_live_ones(tmp_path):
    name, run_dir = "parts", tmp_path / "run"
    path = write_campaign(tmp_path, small_campaign(name=name, trials=32))
    assert tunnelsmith("optimize", path, "--out", run_dir, "--quiet", cwd=tmp_path).returncode == 0
    host = socket.gethostname()
    exited = subprocess.Popen([sys.executable, "-c", "pass"])
    exited.wait()
    hours_ago = time.time() - 2 * 3600
    stale = {
        f".front.nc.{host}.{exited.pid}.k3j2x9_a.part": None,  # its writer (this host) has exited
        ".trials.q8w7e6r5.nc.part": hours_ago,  # the earlier form, without a writer: old
        f".front.nc.elsewhere.{exited.pid}.p0o9i8u7.part": hours_ago,  # another host's: old
    }
    kept = {
        f".trials.nc.{host}.{os.getpid()}.m5n4b3v2.part": hours_ago,  # a live writer (this test), however old
        ".front.z1x2c3v4.nc.part": None,  # the earlier form, recent: perhaps still written
        f".front.nc.elsewhere.{exited.pid}.a1s2d3f4.part": None,  # another host's, recent
        "download.part": hours_ago,  # not a temporary file of this program
    }
    for file_name, mtime_s in {**stale, **kept}.items():
        (run_dir / file_name).write_bytes(b"half a file")
        if mtime_s is not None:
            os.utime(run_dir / file_name, (mtime_s, mtime_s))

    result = tunnelsmith("front", run_dir, "--quiet", cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    left = set(os.listdir(run_dir))
    assert not left & set(stale), left & set(stale)
    assert set(kept) <= left, set(kept) - left
