"""What a trial records: the names of its attributes and the reasons it failed.

The storage is the record of a campaign: everything needed to rebuild the outputs is
kept in trial user attributes under these names. The search writes them; the results
read them.
"""

from __future__ import annotations

from optuna.trial import FrozenTrial, TrialState


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


ORPHANED = "orphaned: created twice by a database call retried after a lost connection"


_NOT_COUNTED = (INTERRUPTED, SURPLUS, INTERNAL_ERROR, ORPHANED)


def counts_toward_budget(trial: FrozenTrial) -> bool:
    """Whether a trial is *finished* in the sense of the campaign budget.

    ``COMPLETE`` trials, and ``FAIL`` trials whose evaluation failed (they carry the
    reason in user attribute ``"failure"``). Trials interrupted, surplus, orphaned, lost
    with their worker (failed without a reason) or still running do not count.
    """
    if trial.state == TrialState.COMPLETE:
        return True
    if trial.state != TrialState.FAIL:
        return False
    failure = trial.user_attrs.get(ATTR_FAILURE)
    return bool(failure) and not str(failure).startswith(_NOT_COUNTED)
