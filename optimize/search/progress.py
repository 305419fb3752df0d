"""Progress of a campaign: counts of finished trials and the progress display.
"""

from __future__ import annotations

import sys
import time
from datetime import datetime
import numpy as np
from optuna.trial import FrozenTrial, TrialState
from tunnelsmith.optimize.model import objectives as objectives_module
from tunnelsmith.optimize.search.records import counts_toward_budget


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
        from tunnelsmith.optimize.search.pareto import merge_front

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
    """A :mod:`tqdm` bar (rate, ETA) on a terminal, else plain timestamped log lines.

    Plain lines come at most every 5 s, or once per batch with ``quiet`` (a log a
    scheduler keeps); the last one is forced at the end.
    """

    def __init__(self, budget: int, deadline: float | None, quiet: bool, worker_index: int) -> None:
        self.budget, self.deadline, self.quiet = budget, deadline, quiet
        self.prefix = f"worker {worker_index}: " if worker_index else ""
        self._use_bar = not quiet and sys.stderr.isatty()
        self.bar = None
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

    def _postfix(self, tally: _Tally) -> str:
        text = f"feasible {tally.feasible}  front {tally.front_size}"
        if self.deadline is not None:
            left = max(0.0, self.deadline - time.monotonic())
            text += f"  time left {int(left // 3600)}:{int(left % 3600 // 60):02d}:{int(left % 60):02d}"
        return text

    def update(self, tally: _Tally, force: bool = False) -> None:
        if self._use_bar:
            if self.bar is None:
                from tqdm import tqdm

                # Started at the trials already finished, so rate and ETA count this run's.
                self.bar = tqdm(total=self.budget, initial=min(tally.finished, self.budget), unit="trial",
                                desc=self.prefix.rstrip(": ") or None, file=sys.stderr)
            self.bar.update(min(tally.finished, self.budget) - self.bar.n)
            self.bar.set_postfix_str(self._postfix(tally))
            return
        text = self._text(tally)
        if self.quiet or force or time.monotonic() - self._last_line > 5.0:
            stamp = datetime.now().strftime("%H:%M:%S")
            print(f"{stamp} {self.prefix}{text}", file=sys.stderr, flush=True)
            self._last_line = time.monotonic()

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
