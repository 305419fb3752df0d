"""Robust campaign objectives: metrics scored on grown variants of each design.

The campaign's hook into the growth-error model of :mod:`~tunnelsmith.optimize.model.growth`:
a ``[search.robust]`` campaign evaluates every design on ``samples`` grown variants and
scores the pessimistic quantile (or the mean) of each metric.
"""

from __future__ import annotations

import math
from collections import Counter
import numpy as np
from tunnelsmith.optimize.inputs.schema import YIELD
from tunnelsmith.optimize.model.stack import DesignBatch
from tunnelsmith.optimize.model.growth import NOMINAL_PREFIX, _contacts, draw_growth_errors, evaluate_designs, inside_all_windows, tolerance_settings


def _pessimistic_sides(spec) -> dict[str, str]:
    """Which tail of each metric is the pessimistic one: "low", "high" or "target".

    Objectives decide first: a maximised metric is judged by its low tail, a minimised
    one by its high tail, a target by the high tail of its distance from the target.
    Constraints next: the tail towards the bound (``"bounded"`` when both bounds are
    given: the tail nearer to its bound). Metrics used only by windows have no
    pessimistic side (their windows enter through the yield): ``"centre"``.
    """
    sides: dict[str, str] = {}
    for objective in spec.objectives:
        label = objective.request.label
        if objective.metric == YIELD or label in sides:
            continue
        if objective.target is not None:
            sides[label] = "target"
        else:
            sides[label] = "low" if objective.goal == "maximize" else "high"
    for constraint in spec.constraints:
        label = constraint.request.label
        if constraint.metric == YIELD or label in sides:
            continue
        if constraint.min is not None and constraint.max is not None:
            sides[label] = "bounded"
        else:
            sides[label] = "low" if constraint.min is not None else "high"
    windows = spec.tolerance.windows if spec.tolerance is not None else ()
    for window in windows:
        sides.setdefault(window.request.label, "centre")
    return sides


def _order_statistic(samples: np.ndarray, q: float, low: bool) -> np.ndarray:
    """Conservative empirical quantile along the last axis; undefined samples count as worst.

    The low tail takes the order statistic at or below ``q`` (numpy method "lower"),
    the high tail the one at or above ``1 - q`` ("higher"): no interpolation, so the
    result is always a grown sample's value, and an undefined sample (ranked worst)
    is picked only when more than a share ``q`` of the samples are undefined.
    """
    worst = -np.inf if low else np.inf
    ranked = np.where(np.isfinite(samples), samples, worst)
    value = np.quantile(ranked, q if low else 1.0 - q, axis=-1, method="lower" if low else "higher")
    return np.where(np.isfinite(value), value, np.nan)


def _robust_reduce(samples: np.ndarray, side: str, robust, *, objective=None, constraint=None) -> np.ndarray:
    """Reduce ``(B, K)`` grown values to one pessimistic value per design."""
    if robust.statistic == "mean":
        return np.mean(samples, axis=-1)  # NaN if any sample is undefined: documented
    q = robust.quantile
    if side == "centre":
        return np.quantile(samples, 0.5, axis=-1)  # NaN if any sample is undefined
    if side == "low":
        return _order_statistic(samples, q, low=True)
    if side == "high":
        return _order_statistic(samples, q, low=False)
    if side == "target":
        target = objective.target
        if objective.log:
            with np.errstate(divide="ignore", invalid="ignore"):
                samples = np.log10(samples)
            target = math.log10(target)
        distance = _order_statistic(np.abs(samples - target), q, low=False)
        # Express the pessimistic distance as a metric value on the side the samples
        # lie, so that |value - target| (as the objective computes it) equals it.
        side_sign = np.sign(np.nanmedian(np.where(np.isfinite(samples), samples, np.nan) - target, axis=-1))
        side_sign = np.where(side_sign == 0, 1.0, np.nan_to_num(side_sign, nan=1.0))
        value = target + side_sign * distance
        return 10.0 ** value if objective.log else value
    # Both bounds: the quantile nearer to violating its bound, so the constraint holds
    # on the robust value exactly when it holds on both pessimistic quantiles.
    low = _order_statistic(samples, q, low=True)
    high = _order_statistic(samples, q, low=False)
    margin_low = low - constraint.min
    margin_high = constraint.max - high
    value = np.where(margin_low <= margin_high, low, high)
    return np.where(np.isfinite(low) & np.isfinite(high), value, np.nan)


def robust_metric_values(spec, batch: DesignBatch, rng: np.random.Generator | None = None
                         ) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
    """Metric values of ``B`` designs under growth error, for robust campaigns.

    Evaluates the ``B`` nominal designs and ``B x K`` grown variants
    (``K = spec.tolerance.robust.samples``) in one physics call. The ``K`` growth
    errors are shared by all designs (common random numbers): with a Generator seeded
    the same way for every batch the robust value is a deterministic function of the
    design, so a search can compare designs without sampling noise.

    Returned keys (each an array of shape ``(B,)``):

    * ``label`` for every objective and constraint metric: the pessimistic statistic
      over the ``K`` samples. ``statistic = "quantile"``: the low ``q`` quantile of a
      maximised metric, the high ``1 - q`` quantile of a minimised one; for a target
      objective the high ``1 - q`` quantile of ``|value - target|`` (of log10 values
      with ``log``), returned as ``target ± distance`` so that the usual objective
      formula recovers it; for a constraint without an objective on the same metric,
      the tail towards its bound (with both bounds, the tail nearer to violating);
      for a metric used only by windows, the median. An undefined sample ranks worst; the value is NaN when more than a share ``q``
      of the samples are undefined. ``statistic = "mean"``: the mean (NaN when any
      sample is undefined).
    * ``"yield"``: share of the ``K`` samples that meet every ``[[tolerance.spec]]``
      window (NaN when the spec has no window).
    * ``"nominal_<label>"``: the nominal value of every metric of
      ``spec.metric_requests`` and ``"nominal_yield"`` (1.0 or 0.0).

    Parameters
    ----------
    spec : tunnelsmith.optimize.inputs.schema.StackSpec
        A campaign with ``[tolerance] robust = {...}``.
    batch : DesignBatch
        ``B`` nominal designs.
    rng : numpy.random.Generator, optional
        Default: ``numpy.random.default_rng(spec.tolerance.seed)``.

    Returns
    -------
    values, reasons : dict label -> ndarray (B,)
        Reasons are ``""`` where a value is defined.
    """
    from tunnelsmith.physics.metrics import CATALOGUE

    tolerance = tolerance_settings(spec)
    robust = tolerance.robust
    if robust is None:
        from tunnelsmith.optimize.inputs.schema import RobustSpec

        robust = RobustSpec()
    rng = rng if rng is not None else np.random.default_rng(tolerance.seed)
    n_designs, k = batch.n_designs, robust.samples
    requests = [r for r in spec.metric_requests if r.name in CATALOGUE]

    errors = draw_growth_errors(batch, spec, k, rng, shared=True, tolerance=tolerance)
    nominal_contacts = [np.full(n_designs, f) for _, f in _contacts(spec)]
    combined = DesignBatch(
        batch.layer_names,
        np.concatenate([batch.base, errors.batch.base]),
        np.concatenate([batch.fraction, errors.batch.fraction]),
        np.concatenate([batch.thickness_nm, errors.batch.thickness_nm]),
    )
    contacts = tuple(np.concatenate([n, g]) for n, g in zip(nominal_contacts, errors.contact_fraction))
    everything = len(combined.thickness_nm)
    values, reasons = evaluate_designs(spec, combined, requests, contact_fraction=contacts, chunk=everything)

    out: dict[str, np.ndarray] = {}
    why: dict[str, np.ndarray] = {}
    for label in values:
        out[NOMINAL_PREFIX + label] = values[label][:n_designs]
        why[NOMINAL_PREFIX + label] = reasons[label][:n_designs]

    objectives = {o.request.label: o for o in spec.objectives if o.metric != YIELD}
    constraints = {c.request.label: c for c in spec.constraints if c.metric != YIELD}
    for label, side in _pessimistic_sides(spec).items():
        grown = values[label][n_designs:].reshape(n_designs, k)
        grown_reasons = reasons[label][n_designs:].reshape(n_designs, k)
        out[label] = _robust_reduce(grown, side, robust, objective=objectives.get(label),
                                    constraint=constraints.get(label))
        why[label] = _robust_reasons(out[label], grown_reasons, robust)

    windows = tolerance.windows
    if windows:
        passed = inside_all_windows(values, windows)
        out[YIELD] = passed[n_designs:].reshape(n_designs, k).mean(axis=-1)
        out[NOMINAL_PREFIX + YIELD] = passed[:n_designs].astype(float)
        why[YIELD] = why[NOMINAL_PREFIX + YIELD] = np.full(n_designs, "", dtype=object)
    else:
        out[YIELD] = out[NOMINAL_PREFIX + YIELD] = np.full(n_designs, np.nan)
        why[YIELD] = why[NOMINAL_PREFIX + YIELD] = np.full(
            n_designs, "no [[tolerance.spec]] window defines a yield", dtype=object)
    return out, why


def _robust_reasons(value: np.ndarray, grown_reasons: np.ndarray, robust) -> np.ndarray:
    """Why a robust value is undefined: the most common reason among its samples."""
    reasons = np.full(value.shape, "", dtype=object)
    for design in np.flatnonzero(~np.isfinite(value)):
        failed = [str(r) for r in grown_reasons[design] if r]
        common = Counter(failed).most_common(1)
        because = f": {common[0][0]}" if common else ""
        allowed = ("the mean needs every one" if robust.statistic == "mean"
                   else f"more than the share {robust.quantile:g} the quantile tolerates")
        reasons[design] = f"undefined in {len(failed)} of {grown_reasons.shape[-1]} grown variants " \
                          f"({allowed}){because}"
    return reasons
