"""From designs to the numbers a sampler sees: metrics → objectives and constraints.

This module is the single place where figures of merit become optimisation targets.
It has two halves with a clean seam between them:

* :func:`metric_values` — physics: one vectorised call for the whole batch, returning
  every requested metric (``label -> (B,)``, NaN where undefined) and why a value is
  undefined. Campaigns with ``[tolerance] robust = {...}`` get the pessimistic
  statistic over grown variants instead (:func:`tunnelsmith.optimize.model.robust.robust_metric_values`,
  ``B x K`` designs in one call); everything downstream is unchanged.
* :func:`objectives_from_metrics` — pure bookkeeping on those arrays.

Objectives
----------
For an objective on metric value ``v``:

* ``goal = "maximize" | "minimize"``: ``v`` (``log10 v`` with ``log = true``), in the
  stated direction;
* ``target = t``: ``|v - t|`` minimised; with ``log = true`` ``|log10 v - log10 t|``,
  i.e. the distance in decades, so that "within a factor of two" weighs the same at
  every scale.

Constraints
-----------
Optuna's convention (``trial.set_constraint``; Optuna 5): a constraint value ``<= 0`` is
feasible. Each bound becomes one value, scaled by the bound so that violations of
metrics of very different magnitude (A/cm² next to eV) are comparable when the
constrained-domination rule of NSGA-II sums them (Deb et al., IEEE Trans. Evol.
Comput. 6, 182, 2002)::

    min bound:  (min - v) / |min|          max bound:  (v - max) / |max|

(divided by 1 instead when the bound is 0). An undefined constraint metric (no peak
in the sweep, say) counts as a violation of :data:`UNDEFINED_VIOLATION`, i.e. as far
off as a zero current from a positive minimum.

Failures
--------
A design whose objective value is undefined or not finite cannot be ranked; it is
reported as failed with the reason the physics gave ("no resonance in window",
"no valley in sweep", ...) or ``"non-finite value"``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from tunnelsmith.optimize.model.evaluation import evaluate_metrics

__all__ = [
    "UNDEFINED_VIOLATION",
    "BatchResult",
    "constraint_keys",
    "directions",
    "evaluate_batch",
    "metric_values",
    "objective_labels",
    "objectives_from_metrics",
]

#: Constraint value given to a constraint whose metric is undefined (> 0: infeasible).
UNDEFINED_VIOLATION = 1.0


@dataclass(frozen=True)
class BatchResult:
    """Objective and constraint values of ``B`` designs.

    Attributes
    ----------
    objectives : ndarray, shape (B, n_objectives)
        Values as told to Optuna (directions from :func:`directions`); NaN where failed.
    constraints : ndarray, shape (B, n_constraint_values)
        Optuna convention, ``<= 0`` feasible; keys from :func:`constraint_keys`.
    metrics : dict label -> ndarray (B,)
        Every metric evaluated, NaN where undefined.
    reasons : dict label -> ndarray (B,) of str
        Why a metric is undefined (``""`` where defined).
    failure : ndarray (B,) of str
        ``""`` for designs that can be ranked, else why not.
    """

    objectives: np.ndarray
    constraints: np.ndarray
    metrics: dict[str, np.ndarray]
    reasons: dict[str, np.ndarray]
    failure: np.ndarray

    @property
    def ok(self) -> np.ndarray:
        """Designs with every objective defined, shape (B,)."""
        return self.failure == ""

    @property
    def feasible(self) -> np.ndarray:
        """Designs that are ok and meet every constraint, shape (B,)."""
        return self.ok & np.all(self.constraints <= 0.0, axis=1)


def objective_labels(spec) -> list[str]:
    """Label of each objective, in file order (the ``objective`` coordinate of the outputs)."""
    return [objective.label for objective in spec.objectives]


def directions(spec) -> list[str]:
    """Optuna direction (``"maximize"``/``"minimize"``) of each objective."""
    return [objective.direction for objective in spec.objectives]


def _bound_key(constraint, side: str) -> str:
    bound = constraint.min if side == "min" else constraint.max
    return f"{constraint.request.label}{'>=' if side == 'min' else '<='}{bound:g}"


def _bounds(spec):
    for constraint in spec.constraints:
        for side in ("min", "max"):
            bound = getattr(constraint, side)
            if bound is not None:
                yield constraint, side, float(bound)


def constraint_keys(spec) -> list[str]:
    """Name of each constraint value (one per bound), e.g. ``"peak_current_A_cm2>=100000"``."""
    return [_bound_key(constraint, side) for constraint, side, _ in _bounds(spec)]


def metric_values(spec, batch) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
    """Every metric the campaign needs, for a whole batch in one physics call.

    Parameters
    ----------
    spec : tunnelsmith.optimize.inputs.schema.StackSpec
    batch : tunnelsmith.optimize.model.stack.DesignBatch
        ``B`` designs.

    Returns
    -------
    values : dict label -> ndarray (B,)
        NaN where undefined.
    reasons : dict label -> ndarray (B,) of str
        ``""`` where defined.
    """
    tolerance = getattr(spec, "tolerance", None)
    if tolerance is not None and tolerance.robust is not None:
        from tunnelsmith.optimize.model.robust import robust_metric_values

        return robust_metric_values(spec, batch)

    from tunnelsmith.optimize.model.stack import to_device

    evaluation = evaluate_metrics(spec, to_device(spec, batch), spec.metric_requests)
    return dict(evaluation.values), dict(evaluation.reasons)


def _log10(values: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.log10(values)


def _objective_value(objective, value: np.ndarray) -> np.ndarray:
    if objective.log:
        value = _log10(value)
    if objective.target is None:
        return value
    target = np.log10(objective.target) if objective.log else objective.target
    return np.abs(value - target)


def _constraint_value(side: str, bound: float, value: np.ndarray) -> np.ndarray:
    scale = abs(bound) if bound != 0.0 else 1.0
    violation = (bound - value) / scale if side == "min" else (value - bound) / scale
    return np.where(np.isfinite(violation), violation, UNDEFINED_VIOLATION)


def _failure(objective, value: np.ndarray, reason: np.ndarray | None) -> np.ndarray:
    """Why each design's objective value is unusable ("" where it is finite)."""
    label = objective.request.label
    text = np.full(value.shape, "", dtype=object)
    bad = ~np.isfinite(value)
    for index in np.flatnonzero(bad):
        why = str(reason[index]) if reason is not None and reason[index] else ""
        if not why:
            why = "non-finite value" if not objective.log else "non-finite value (log10 of a value <= 0)"
        text[index] = f"{label}: {why}"
    return text


def objectives_from_metrics(spec, values: dict[str, np.ndarray],
                            reasons: dict[str, np.ndarray] | None = None) -> BatchResult:
    """Objective and constraint values from metric values (pure array bookkeeping).

    Parameters
    ----------
    spec : tunnelsmith.optimize.inputs.schema.StackSpec
    values : dict label -> ndarray (B,)
        Must hold the label of every objective and constraint metric.
    reasons : dict label -> ndarray (B,) of str, optional
        Why a metric is undefined; used for the failure text.
    """
    reasons = reasons or {}
    n_designs = len(next(iter(values.values()))) if values else 0
    objectives = np.empty((n_designs, len(spec.objectives)))
    failure = np.full(n_designs, "", dtype=object)
    for k, objective in enumerate(spec.objectives):
        label = objective.request.label
        objectives[:, k] = _objective_value(objective, np.asarray(values[label], dtype=float))
        why = _failure(objective, objectives[:, k], reasons.get(label))
        failure = np.where(failure == "", why, failure)
    bounds = list(_bounds(spec))
    constraints = np.empty((n_designs, len(bounds)))
    for k, (constraint, side, bound) in enumerate(bounds):
        constraints[:, k] = _constraint_value(side, bound, np.asarray(values[constraint.request.label], dtype=float))
    objectives[failure != ""] = np.nan
    return BatchResult(objectives, constraints, values, reasons, failure)


def evaluate_batch(spec, batch) -> BatchResult:
    """Objectives, constraints, metrics and failure reasons of a batch of designs.

    One call into the physics for the whole batch (:func:`metric_values`), then
    :func:`objectives_from_metrics`.
    """
    values, reasons = metric_values(spec, batch)
    return objectives_from_metrics(spec, values, reasons)
