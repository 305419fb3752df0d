"""Any SIGINT/SIGTERM ends with exit 130 and results that are complete or untouched.

Phases: start-up (before the loop's handlers), mid-batch (tests/test_campaign.py), the
output phase (netCDF files and plots) and a second signal during it.
"""

from __future__ import annotations

import os
import signal
import time

import pytest
import xarray as xr
from conftest import small_campaign, start, write_campaign

from tunnelsmith.optimize.io import atomic_group, interrupts_deferred


def test_a_first_signal_waits_for_the_writing_and_a_second_stops_it():
    done = []
    with pytest.raises(KeyboardInterrupt):
        with interrupts_deferred("tunnelsmith front RUN"):
            os.kill(os.getpid(), signal.SIGTERM)
            time.sleep(0.05)
            done.append("finished")  # the block ran to its end despite the signal
    assert done == ["finished"]
    # A second signal ends the process at once with exit 130 (in a child: it would end pytest).
    script = ("import os, signal, time\n"
              "from tunnelsmith.optimize.io import atomic_path, interrupts_deferred\n"
              "with interrupts_deferred('tunnelsmith front RUN'):\n"
              "    with atomic_path('result.nc') as temporary:\n"
              "        temporary.write_text('half')\n"
              "        os.kill(os.getpid(), signal.SIGINT); time.sleep(0.05)\n"
              "        os.kill(os.getpid(), signal.SIGINT); time.sleep(0.05)\n"
              "        print('not reached')\n")
    import subprocess
    import sys
    import tempfile

    with tempfile.TemporaryDirectory() as directory:
        child = subprocess.run([sys.executable, "-c", script], cwd=directory, capture_output=True, text=True, timeout=60)
        assert child.returncode == 130, child.stderr
        assert "not reached" not in child.stdout and "tunnelsmith front RUN" in child.stderr
        assert os.listdir(directory) == []  # no result, and no temporary left behind


def test_files_written_together_are_renamed_together_or_not_at_all(tmp_path):
    front, trials = tmp_path / "front.nc", tmp_path / "trials.nc"
    front.write_text("old front"), trials.write_text("old trials")
    with pytest.raises(KeyboardInterrupt):
        with atomic_group([front, trials]) as (new_front, new_trials):
            new_front.write_text("new front")
            raise KeyboardInterrupt  # before the second file is written
    assert front.read_text() == "old front" and trials.read_text() == "old trials"
    assert not list(tmp_path.glob(".*.part"))
    with atomic_group([front, trials]) as (new_front, new_trials):
        new_front.write_text("new front")
        new_trials.write_text("new trials")
    assert front.read_text() == "new front" and trials.read_text() == "new trials"


def test_sigterm_at_start_up_exits_130_not_by_the_signal(tmp_path):
    campaign = write_campaign(tmp_path, small_campaign("early", trials=64, batch=32))
    process = start("optimize", campaign, "--out", "run", "--quiet", cwd=tmp_path)
    time.sleep(0.6)  # inside the imports and the file reading, before the loop's handlers
    process.send_signal(signal.SIGTERM)
    _, stderr = process.communicate(timeout=120)
    assert process.returncode == 130, stderr
    assert "Traceback" not in stderr


def _wait_for_output_phase(run_dir, process, timeout_s=120.0) -> None:
    """Until the first result file is being written (its temporary or itself appears)."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if run_dir.exists() and any(p.name.startswith(".front.nc") or p.name == "front.nc" for p in run_dir.iterdir()):
            return
        assert process.poll() is None, "the campaign ended before its outputs were seen"
        time.sleep(0.002)
    raise AssertionError("no output phase seen")


@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM])
def test_one_signal_during_the_outputs_finishes_them_then_exits_130(tmp_path, signum):
    campaign = write_campaign(tmp_path, small_campaign("late", trials=64, batch=32))
    process = start("optimize", campaign, "--out", "run", "--quiet", cwd=tmp_path)
    _wait_for_output_phase(tmp_path / "run", process)
    process.send_signal(signum)
    _, stderr = process.communicate(timeout=120)
    assert process.returncode == 130, stderr
    assert "Traceback" not in stderr
    with xr.open_dataset(tmp_path / "run" / "front.nc") as front, \
            xr.open_dataset(tmp_path / "run" / "trials.nc") as trials:
        assert front.attrs["n_finished_trials"] == trials.attrs["n_finished_trials"] == 64
    assert not list((tmp_path / "run").glob(".*.part"))


def test_a_second_signal_during_the_outputs_stops_with_files_complete_or_untouched(tmp_path):
    campaign = write_campaign(tmp_path, small_campaign("twice", trials=64, batch=32))
    process = start("optimize", campaign, "--out", "run", "--quiet", cwd=tmp_path)
    _wait_for_output_phase(tmp_path / "run", process)
    process.send_signal(signal.SIGTERM)
    time.sleep(0.05)
    process.send_signal(signal.SIGTERM)
    _, stderr = process.communicate(timeout=120)
    assert process.returncode == 130, stderr
    assert "Traceback" not in stderr
    run = tmp_path / "run"
    assert not list(run.glob(".*.part"))
    present = [(run / name).exists() for name in ("front.nc", "trials.nc")]
    assert present in ([True, True], [False, False])  # the pair, or neither
    if all(present):
        with xr.open_dataset(run / "front.nc") as front, xr.open_dataset(run / "trials.nc") as trials:
            assert front.attrs["n_finished_trials"] == trials.attrs["n_finished_trials"]
    else:
        assert "tunnelsmith front" in stderr
