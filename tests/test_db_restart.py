"""A restart of the PostgreSQL server under a running campaign.

Two workers share a zero-bias campaign on a real server (the throwaway cluster of
``tests/pg_cluster.py``) and the server is stopped under them the way an administrator's
restart does it (``pg_ctl stop -m fast``: every session is ended with "terminating
connection due to administrator command", new connections are refused until the start).

* Down for a few seconds: both workers wait for the server, go on and stop at the
  budget with exit status 0; no finished trial is lost and nothing is left running.
* Down for longer than ``TUNNELSMITH_DB_OUTAGE_S``: both stop with exit status 1 and a
  one-paragraph message without a traceback (the storage with its password removed, how
  long they waited, what to do). Running the same command again once the server is back
  recovers every trial they left running — those of a worker on another host (where the
  kernel lets this process give a child its own host name) through heartbeats alone —
  and ends at the budget.

In both cases ``tunnelsmith front`` rebuilds the results from the database afterwards.
Without PostgreSQL binaries these two tests skip loudly, except under ``CI=true`` where
they fail. Three more need no server (an SQLite database and a refused connection): the
recovery of trials whose heartbeat never reached the database, the failing of a stray
trial a retried creation can leave, and which errors count as a lost connection.
"""

from __future__ import annotations

import re
import subprocess
import time
from pathlib import Path

import optuna
import pytest
import xarray as xr
from optuna.trial import TrialState

from pg_cluster import Cluster
from test_scaleout import BATCH, campaign_text, cli, load_when_created, other_host_prefix, owner_pid, worker_env
from tunnelsmith.optimize.search.records import counts_toward_budget
from tunnelsmith.optimize.search.storage import open_storage

SECRET = "pw-of-the-restart-test"
#: The fix the stop message must give, word for word.
FIX = "check the database server, then run the same command again: no finished trial is lost"


@pytest.fixture(scope="module")
def cluster(request):
    server = Cluster()
    request.addfinalizer(server.stop)
    return server


def env_with_outage(outage_s: float) -> dict:
    env = worker_env()
    env["TUNNELSMITH_DB_OUTAGE_S"] = str(outage_s)
    return env


def start_workers(campaign: Path, urls, run_dirs, prefixes, env: dict, logs: list[Path]) -> list[subprocess.Popen]:
    handles = [open(path, "w") for path in logs]
    try:
        return [subprocess.Popen(prefix + cli("optimize", campaign, "--storage", url, "--out", run_dir, "--quiet",
                                              "--no-plots"),
                                 cwd=campaign.parent, env=env, stdout=handle, stderr=subprocess.STDOUT)
                for prefix, url, run_dir, handle in zip(prefixes, urls, run_dirs, handles)]
    finally:
        for handle in handles:
            handle.close()  # each child holds its own descriptor


def wait_for_finished(study: optuna.Study, workers, count: int, timeout_s: float = 60) -> dict[int, list[float]]:
    """Wait until ``count`` trials of both workers count toward the budget; their values by number."""
    pids = {w.pid for w in workers}
    deadline = time.monotonic() + timeout_s
    while True:
        assert all(w.poll() is None for w in workers), "a worker exited before the restart"
        trials = study.get_trials(deepcopy=False)
        finished = {t.number: t.values for t in trials if counts_toward_budget(t)}
        if len(finished) >= count and pids <= {owner_pid(t) for t in trials}:
            return finished
        assert time.monotonic() < deadline, f"fewer than {count} trials finished in {timeout_s} s"
        time.sleep(0.2)


def kill_all(workers) -> None:
    for worker in workers:
        if worker.poll() is None:
            worker.kill()
            worker.wait()


def check_study_after(url: str, name: str, budget: int, finished_before: dict[int, list[float]], log_text: str):
    study = optuna.load_study(study_name=name, storage=url)
    trials = {t.number: t for t in study.get_trials(deepcopy=False)}
    assert sum(map(counts_toward_budget, trials.values())) == budget, log_text
    assert not [n for n, t in trials.items() if t.state == TrialState.RUNNING], log_text
    for number, values in finished_before.items():  # no finished trial lost or changed
        assert counts_toward_budget(trials[number]) and trials[number].values == values, number
    return trials


def check_front(run_dir: Path, url: str, budget: int) -> None:
    """``tunnelsmith front`` rebuilds the results from the database alone."""
    for name in ("front.nc", "trials.nc"):  # written by the campaign: they must come back
        (run_dir / name).unlink(missing_ok=True)
    rebuilt = subprocess.run(cli("front", run_dir, "--storage", url, "--quiet", "--no-plots"), cwd=run_dir.parent,
                             env=worker_env(), capture_output=True, text=True, timeout=120)
    assert rebuilt.returncode == 0, rebuilt.stderr
    with xr.open_dataset(run_dir / "trials.nc") as table, xr.open_dataset(run_dir / "front.nc") as front:
        assert int(table["counted"].sum()) == budget
        assert "RUNNING" not in set(table["state"].values.tolist())
        assert front.sizes["design"] > 0


def test_workers_ride_out_a_restart_of_the_database_server(cluster, tmp_path):
    name, budget = "restart-ride-out", 12 * BATCH
    campaign = tmp_path / "campaign.toml"
    campaign.write_text(campaign_text(name, budget), encoding="utf-8")
    run_dirs = [tmp_path / f"host-{i}" for i in range(2)]
    logs = [tmp_path / f"worker-{i}.log" for i in range(2)]
    workers = start_workers(campaign, [cluster.url] * 2, run_dirs, [[], []], env_with_outage(60), logs)
    try:
        study = load_when_created(cluster.url, name, workers)
        finished_before = wait_for_finished(study, workers, budget // 4)
        cluster.restart(down_s=3.0)
        codes = [w.wait(timeout=90) for w in workers]
    finally:
        kill_all(workers)
    log_text = "\n".join(f"--- worker {i}\n" + path.read_text() for i, path in enumerate(logs))
    assert codes == [0, 0], log_text
    assert "Traceback" not in log_text, log_text
    # Both felt the outage (their heartbeats, tried once a second, missed it and came
    # back); a worker that waited for the database says so once and that it came back.
    # (Optuna itself retries a trial creation for a few seconds, which can hide a short
    # outage from the worker's own wait.)
    for path in logs:
        text = path.read_text()
        assert "heartbeat not recorded" in text and "heartbeat recorded again" in text, text
        waits = text.count("the campaign database does not answer")
        assert waits == text.count("the campaign database answers again") <= 1, text
    check_study_after(cluster.url, name, budget, finished_before, log_text)
    check_front(run_dirs[0], cluster.url, budget)


def test_workers_stop_cleanly_when_the_outage_outlasts_the_limit_and_a_rerun_finishes(cluster, tmp_path):
    name, budget, limit_s = "restart-give-up", 8 * BATCH, 3
    campaign = tmp_path / "campaign.toml"
    campaign.write_text(campaign_text(name, budget), encoding="utf-8")
    run_dirs = [tmp_path / f"host-{i}" for i in range(2)]
    logs = [tmp_path / f"worker-{i}.log" for i in range(2)]
    secret_url = cluster.url.replace("tunnelsmith@", f"tunnelsmith:{SECRET}@")
    prefixes = [[], other_host_prefix()]
    workers = start_workers(campaign, [secret_url, cluster.url], run_dirs, prefixes, env_with_outage(limit_s), logs)
    try:
        study = load_when_created(cluster.url, name, workers)
        finished_before = wait_for_finished(study, workers, budget // 2)
        down_from = time.monotonic()
        cluster.stop_server()
        codes = [w.wait(timeout=60) for w in workers]
        stopped_after_s = time.monotonic() - down_from
    finally:
        kill_all(workers)
        cluster.start_server()
    log_text = "\n".join(f"--- worker {i}\n" + path.read_text() for i, path in enumerate(logs))
    assert codes == [1, 1], log_text
    assert stopped_after_s >= limit_s, log_text
    assert "Traceback" not in log_text and SECRET not in log_text, log_text
    for path in logs:
        errors = [line for line in path.read_text().splitlines() if line.startswith("error:")]
        assert len(errors) == 1, path.read_text()
        assert cluster.url in errors[0]  # the storage named, without its password
        waited = re.search(r"did not answer for (\d+) s", errors[0])
        assert waited and int(waited.group(1)) >= limit_s, errors[0]
        assert f"waits {limit_s} s for the database" in errors[0]
        assert FIX in errors[0] and "TUNNELSMITH_DB_OUTAGE_S" in errors[0]

    # What the stopped workers left running: the server went away under a batch.
    study = optuna.load_study(study_name=name, storage=cluster.url)
    left_running = {t.number for t in study.get_trials(deepcopy=False) if t.state == TrialState.RUNNING}

    rerun = subprocess.run(cli("optimize", campaign, "--storage", secret_url, "--out", run_dirs[0], "--quiet",
                               "--no-plots"),
                           cwd=tmp_path, env=env_with_outage(limit_s), capture_output=True, text=True, timeout=120)
    assert rerun.returncode == 0, rerun.stderr
    assert SECRET not in rerun.stdout + rerun.stderr
    trials = check_study_after(cluster.url, name, budget, finished_before, log_text + rerun.stderr)
    # Every trial left running was failed by the rerun (none counted twice), not finished late.
    assert all(trials[n].state == TrialState.FAIL and not counts_toward_budget(trials[n]) for n in left_running)
    check_front(run_dirs[0], cluster.url, budget)


def test_a_silent_worker_s_trials_without_heartbeats_are_recovered_on_a_database(tmp_path, monkeypatch):
    """Trials whose own heartbeat never reached the database (their worker went away right
    after creating them) are failed once their worker's beat has stayed unchanged for the
    grace period, on this process's clock; a worker that beats keeps its trials, and one
    that keeps no beat of its own (an older version) is left to Optuna's check."""
    from tunnelsmith.optimize.search import workers
    from tunnelsmith.optimize.search.records import _BEAT_PREFIX, SYSTEM_WORKER as WORKER

    grace_s = 0.3
    monkeypatch.setattr(workers, "GRACE_PERIOD_S", grace_s)
    store = open_storage(tmp_path, f"sqlite:///{tmp_path / 'campaign.db'}")
    study = optuna.create_study(storage=store, study_name="silence")
    owners = {"silent": "elsewhere:1:aaaa", "alive": "elsewhere:2:bbbb", "old": "elsewhere:3:cccc"}
    ids = {role: store.create_new_trial(study._study_id, optuna.trial.create_trial(
        state=TrialState.RUNNING, system_attrs={WORKER: owner})) for role, owner in owners.items()}
    for role in ("silent", "alive"):
        store.set_study_system_attr(study._study_id, _BEAT_PREFIX + owners[role], time.time())

    silence = workers._BeatSilence()
    me = "here:4:dddd"
    assert workers.recover_stale_trials(study, store, me, study.get_trials(deepcopy=False), silence) == 0
    time.sleep(2 * grace_s)
    store.set_study_system_attr(study._study_id, _BEAT_PREFIX + owners["alive"], time.time())
    assert workers.recover_stale_trials(study, store, me, study.get_trials(deepcopy=False), silence) == 1
    states = {role: store.get_trial(trial_id).state for role, trial_id in ids.items()}
    assert states == {"silent": TrialState.FAIL, "alive": TrialState.RUNNING, "old": TrialState.RUNNING}


def test_a_stray_trial_of_the_worker_itself_is_failed_and_the_budget_is_reached(tmp_path):
    """A trial creation retried after a lost reply can leave a second, parameterless
    running trial of this very worker; it must not hold a place of the budget for ever
    (the worker would wait for it at the end of the budget until its deadline)."""
    from conftest import small_campaign, write_campaign
    from tunnelsmith.optimize.inputs.reader import load
    from tunnelsmith.optimize.search import loop, progress, workers
    from tunnelsmith.optimize.search.records import ATTR_FAILURE, ORPHANED, SYSTEM_WORKER as WORKER
    from tunnelsmith.optimize.search.study import open_study

    budget = 16
    spec = load(write_campaign(tmp_path, small_campaign("stray", trials=budget, batch=budget)))
    store = open_storage(tmp_path, f"sqlite:///{tmp_path / 'campaign.db'}")
    study = open_study(store, spec, tmp_path, "sqlite://")
    me = workers._new_worker_id()
    stray = store.create_new_trial(study._study_id, optuna.trial.create_trial(
        state=TrialState.RUNNING, system_attrs={WORKER: me}))
    heartbeat = workers._Heartbeat(store, study._study_id, me)
    worker = loop._Worker(spec, study, store, budget, budget, time.monotonic() + 30, me, workers._StopRequest(),
                          progress._Progress(budget, None, True, 0), heartbeat)
    assert worker.run() == "budget"
    trials = study.get_trials(deepcopy=False)
    assert sum(map(counts_toward_budget, trials)) == budget
    left = store.get_trial(stray)
    assert left.state == TrialState.FAIL and left.user_attrs[ATTR_FAILURE] == ORPHANED
    assert not counts_toward_budget(left)


def test_connection_errors_are_told_from_errors_of_the_data(tmp_path):
    """A refused connection (a real one, to a port where nothing listens) is waited out;
    a refused write of the data is not."""
    import sqlalchemy
    import sqlalchemy.exc
    from optuna.exceptions import UpdateFinishedTrialError
    from pg_cluster import free_port

    from tunnelsmith.optimize.search.storage import DatabaseOutageError, is_connection_error

    pytest.importorskip("psycopg")
    engine = sqlalchemy.create_engine(f"postgresql+psycopg://nobody@127.0.0.1:{free_port()}/none")
    with pytest.raises(sqlalchemy.exc.OperationalError) as refused:
        engine.connect()
    assert is_connection_error(refused.value)
    try:  # as Optuna re-raises it: the cause is what counts
        raise optuna.exceptions.StorageInternalError("An exception is raised during the commit") from refused.value
    except optuna.exceptions.StorageInternalError as wrapped:
        assert is_connection_error(wrapped)

    sqlite = sqlalchemy.create_engine(f"sqlite:///{tmp_path / 'data.db'}")
    with sqlite.begin() as connection:
        connection.exec_driver_sql("create table t (k integer primary key)")
        connection.exec_driver_sql("insert into t values (1)")
    with pytest.raises(sqlalchemy.exc.IntegrityError) as duplicate, sqlite.begin() as connection:
        connection.exec_driver_sql("insert into t values (1)")
    assert not is_connection_error(duplicate.value)
    assert not is_connection_error(UpdateFinishedTrialError("Trial#1 has already finished and can not be updated."))
    assert not is_connection_error(DatabaseOutageError("postgresql://db", 120.0, 120.0, "connection refused"))
