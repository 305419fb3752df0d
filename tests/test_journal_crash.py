"""A torn or refused journal write never corrupts a campaign.

A writer killed in the middle of an append, or a full disk, leaves the journal ending in
an unfinished line. These tests cut a real campaign journal at every byte of its last
line and check that our writer repairs the tail before appending, that Optuna's own,
unmodified reader (``optuna.storages.JournalFileBackend``) still reads every complete
trial afterwards, and that a write the disk refuses is taken back whole and reported as
a clear error (exit 1), not a traceback.
"""

from __future__ import annotations

import errno
import os
from pathlib import Path

import optuna
import pytest

from tunnelsmith.optimize.errors import StorageWriteError
from tunnelsmith.optimize.search.journal_file import TORN_SUFFIX, CrashSafeJournalFileBackend, torn_tail_bytes
from conftest import small_campaign, tunnelsmith, write_campaign


def stock_trials(path: Path) -> list:
    """All trials of the one study in ``path``, read by Optuna's stock journal backend."""
    storage = optuna.storages.JournalStorage(optuna.storages.journal.JournalFileBackend(str(path)))
    (summary,) = optuna.get_all_study_summaries(storage)
    return optuna.load_study(study_name=summary.study_name, storage=storage).get_trials(deepcopy=False)


@pytest.fixture(scope="module")
def finished_run(tmp_path_factory) -> Path:
    """A real campaign journal of 32 finished trials (one batch)."""
    directory = tmp_path_factory.mktemp("journal")
    campaign = write_campaign(directory, small_campaign("torn", trials=32, batch=32))
    result = tunnelsmith("optimize", campaign, "--out", "run", "--quiet", cwd=directory)
    assert result.returncode == 0, result.stderr
    return directory / "run"


def test_every_torn_tail_is_cut_and_stock_optuna_reads_on(finished_run, tmp_path):
    original = (finished_run / "campaign.journal").read_bytes()
    body, last = original[:-1].rsplit(b"\n", 1)
    body += b"\n"
    complete = len(stock_trials(finished_run / "campaign.journal"))
    assert complete == 32
    # Cut the file inside its last line at every length: 1 byte of the line up to all of
    # it but the newline. (The last line is the end of the batch commit.)
    for kept in range(1, len(last) + 1):
        path = tmp_path / f"cut{kept}.journal"
        path.write_bytes(body + last[:kept])
        assert torn_tail_bytes(path) == kept
        backend = CrashSafeJournalFileBackend(str(path))
        backend.append_logs([{"op_code": 0, "worker_id": "probe", "study_name": f"extra-{kept}",
                              "directions": [1]}])
        repaired = path.read_bytes()
        assert repaired.startswith(body) and repaired.endswith(b"\n")
        assert backend.torn_bytes_removed == kept
        # The torn bytes are kept, not thrown away.
        assert (tmp_path / f"cut{kept}.journal{TORN_SUFFIX}").read_bytes() == last[:kept] + b"\n"
        storage = optuna.storages.JournalStorage(optuna.storages.journal.JournalFileBackend(str(path)))
        names = {s.study_name for s in optuna.get_all_study_summaries(storage)}
        assert f"extra-{kept}" in names
        study = optuna.load_study(study_name="torn", storage=storage)
        # Everything before the torn line survives: with the last log of the batch
        # torn, at most the trials whose final state sat on that line are not complete.
        assert len(study.get_trials(deepcopy=False)) == complete


def test_a_refused_write_is_taken_back_whole(finished_run, tmp_path, monkeypatch):
    path = tmp_path / "full.journal"
    path.write_bytes((finished_run / "campaign.journal").read_bytes())
    before = path.read_bytes()
    backend = CrashSafeJournalFileBackend(str(path))
    real_write = os.write

    calls = []

    def half_then_full(descriptor, data):
        # The disk takes half of the first write, then is full: the state a real ENOSPC
        # leaves when it strikes in the middle of a large append.
        calls.append(len(data))
        if len(calls) == 1:
            return real_write(descriptor, bytes(data[: len(data) // 2]))
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(os, "write", half_then_full)
    with pytest.raises(StorageWriteError) as caught:
        backend.append_logs([{"op_code": 0, "worker_id": "w", "study_name": "x" * 4000, "directions": [1]}])
    monkeypatch.undo()
    assert len(calls) == 2  # the partial write really happened before the refusal
    assert path.read_bytes() == before
    message = str(caught.value)
    assert "No space left on device" in message and "run the same command again" in message
    assert len(stock_trials(path)) == 32


def test_resume_after_a_torn_tail_loses_no_finished_trial(tmp_path):
    campaign = write_campaign(tmp_path, small_campaign("resume-torn", trials=64, batch=32))
    first = tunnelsmith("optimize", campaign, "--out", "run", "--trials", "32", "--quiet", cwd=tmp_path)
    assert first.returncode == 0, first.stderr
    journal = tmp_path / "run" / "campaign.journal"
    finished = {t.number for t in stock_trials(journal) if t.state == optuna.trial.TrialState.COMPLETE}
    # What a kill in the middle of an append leaves (the repro of the fault).
    os.truncate(journal, journal.stat().st_size - 150)
    torn = torn_tail_bytes(journal)
    assert torn > 0
    survivors = {t.number for t in stock_trials(journal) if t.state == optuna.trial.TrialState.COMPLETE}
    assert survivors <= finished and len(survivors) >= len(finished) - 32

    front = tunnelsmith("front", "run", "--quiet", cwd=tmp_path)
    assert front.returncode == 0, front.stderr
    assert f"unfinished line of {torn} bytes" in front.stderr

    resumed = tunnelsmith("optimize", campaign, "--out", "run", "--quiet", cwd=tmp_path)
    assert resumed.returncode == 0, resumed.stderr
    assert "Traceback" not in resumed.stderr
    assert (tmp_path / "run" / f"campaign.journal{TORN_SUFFIX}").stat().st_size == torn + 1
    after = stock_trials(journal)
    complete = {t.number for t in after if t.state == optuna.trial.TrialState.COMPLETE}
    assert survivors <= complete and len(complete) >= 64
    again = tunnelsmith("front", "run", "--quiet", cwd=tmp_path)
    assert again.returncode == 0 and "Traceback" not in again.stderr
    assert (tmp_path / "run" / "front.nc").exists()


def test_a_damaged_journal_is_a_clear_error_naming_the_line(tmp_path):
    campaign = write_campaign(tmp_path, small_campaign("damaged", trials=32, batch=32))
    assert tunnelsmith("optimize", campaign, "--out", "run", "--quiet", cwd=tmp_path).returncode == 0
    journal = tmp_path / "run" / "campaign.journal"
    lines = journal.read_bytes().split(b"\n")
    # Two lines merged into one invalid line in the middle: what an older writer that
    # appended after a torn tail produced.
    lines[3] = lines[3][:20] + lines[4]
    journal.write_bytes(b"\n".join(lines))
    result = tunnelsmith("front", "run", "--quiet", cwd=tmp_path)
    assert result.returncode == 2
    assert "Traceback" not in result.stderr
    assert "damaged at line 4" in result.stderr and "head -n 3" in result.stderr


def test_a_foreign_file_at_the_journal_place_is_refused(tmp_path):
    campaign = write_campaign(tmp_path, small_campaign("foreign", trials=32, batch=32))
    (tmp_path / "run").mkdir()
    foreign = tmp_path / "run" / "campaign.journal"
    foreign.write_text("my notes about the wafer\n", encoding="utf-8")
    result = tunnelsmith("optimize", campaign, "--out", "run", "--quiet", cwd=tmp_path)
    assert result.returncode == 2, result.stderr
    assert "not a campaign journal" in result.stderr and "--out" in result.stderr
    assert foreign.read_text(encoding="utf-8") == "my notes about the wafer\n"


def test_disk_full_during_a_campaign_exits_1_with_the_fix(tmp_path):
    """The command line's answer to a refused write: exit 1, one paragraph, no traceback."""
    campaign = write_campaign(tmp_path, small_campaign("full", trials=64, batch=32))
    assert tunnelsmith("optimize", campaign, "--out", "run", "--trials", "32", "--quiet",
                       cwd=tmp_path).returncode == 0
    journal = tmp_path / "run" / "campaign.journal"
    before = len([t for t in stock_trials(journal) if t.state == optuna.trial.TrialState.COMPLETE])
    # A sitecustomize in the child makes every journal write past the first 4 KiB of
    # this run fail with ENOSPC, as a disk that fills up mid-campaign does.
    hook = tmp_path / "hook"
    hook.mkdir()
    (hook / "sitecustomize.py").write_text(
        "import errno, os\n"
        "_write, _budget = os.write, [4096]\n"
        "def write(fd, data):\n"
        "    if os.readlink(f'/proc/self/fd/{fd}').endswith('campaign.journal'):\n"
        "        if len(data) > _budget[0]:\n"
        "            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))\n"
        "        _budget[0] -= len(data)\n"
        "    return _write(fd, data)\n"
        "os.write = write\n", encoding="utf-8")
    import subprocess
    import sys

    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(hook), os.environ.get("PYTHONPATH", "")]))
    result = subprocess.run([sys.executable, "-m", "tunnelsmith", "optimize", str(campaign), "--out", "run",
                             "--quiet"], cwd=tmp_path, capture_output=True, text=True, timeout=180, env=env)
    assert result.returncode == 1, result.stderr
    assert "Traceback" not in result.stderr
    assert "No space left on device" in result.stderr and "run the same command again" in result.stderr
    assert torn_tail_bytes(journal) == 0
    after = len([t for t in stock_trials(journal) if t.state == optuna.trial.TrialState.COMPLETE])
    assert after >= before
    # With space back, the same command finishes the campaign.
    resumed = tunnelsmith("optimize", campaign, "--out", "run", "--quiet", cwd=tmp_path)
    assert resumed.returncode == 0, resumed.stderr
