"""Growth tolerance: Monte Carlo yield, per-monolayer sensitivities, robust objectives.

A stack that meets its specification on paper may miss it after growth. This module
draws grown variants of a design from a simple model of epitaxial growth error,
evaluates them in vectorised batches, and reports the spread of every metric, the
yield of each specification window and the sensitivity of each metric to one added
monolayer of each layer. The same error model scores designs under growth error
inside a campaign (:func:`robust_metric_values`).

Error model
-----------
For each growth sample ``s`` and each layer ``j`` of nominal thickness ``d_j`` (nm)
and monolayer ``a_j`` (nm, half the cubic lattice constant of the layer's nominal
material, growth on (001); :func:`optimize.stack.monolayer_nm`)::

    d_j(s) = max(0, (1 + eps_s) * d_j + n_j(s) * a_j)
    n_j(s) = round(N(0, thickness_sigma_ml))          whole monolayers, per layer
    eps_s  ~ N(0, growth_rate_sigma)                    one factor per sample
    x_A(s) = clip(x_A + delta_A(s), 0, 1)
    delta_A(s) ~ N(0, fraction_sigma)                   one shift per alloy per sample

* Interface steps: an interface is never flatter than one monolayer, so the thickness
  of each layer scatters by whole monolayers. Each layer is its own growth step and
  draws its own ``n_j``, also a layer tied to another one with ``like``.
* Growth-rate calibration drift: one factor ``1 + eps`` scales every layer of a
  sample, because all layers of one wafer are grown with the same calibration.
* Composition: an alloy's fraction is set by a cell temperature (flux ratio), so one
  shift ``delta_A`` applies to every layer of alloy ``A`` in the sample, the doped
  contacts included (the emitter is the energy reference; shifting the well but not an
  emitter of the same alloy would move levels that do not move in a real wafer).
  The shift is keyed by the alloy (``"AlGaAs"``, ``"InGaAs"``, ...); binaries and
  user-defined materials do not shift.
* Layers of zero nominal thickness are not grown and stay at zero.

The defaults of :class:`optimize.spec.ToleranceSpec` (``thickness_sigma_ml = 0.5``,
so about one layer in three is one monolayer off; ``growth_rate_sigma = 0.01``;
``fraction_sigma = 0.005``) follow common practice for calibrated molecular-beam
epitaxy: ±1 monolayer interface steps, a 1–2 % growth-rate uncertainty and alloy
fractions known to about half a percent.

Yield
-----
The yield of a window is the share of samples whose metric lies in ``[min, max]``
(an undefined metric fails). Its 95 % interval is the Wilson score interval (E. B.
Wilson, "Probable inference, the law of succession, and statistical inference",
J. Am. Stat. Assoc. 22, 209, 1927), which unlike the normal approximation stays
inside [0, 1] and behaves at yields of 0 and 1.

Sensitivity
-----------
``sensitivity(metric, layer)`` is the change of the metric per added monolayer of that
layer, by central differences: ``(m(d_j + a_j) - m(d_j - a_j)) / 2`` with every other
layer nominal. Where a layer is thinner than one monolayer the lower point is clipped
at zero thickness and the difference is divided by the actual step.
"""

from __future__ import annotations

import math
import sys
import time
from collections import Counter
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from optimize.errors import InputError
from optimize.spec import YIELD
from optimize.stack import DesignBatch, material_arrays, monolayer_nm, nominal_batch, split_material, to_device
from physics import materials

#: Two-sided 95 % standard-normal quantile for the Wilson score interval.
Z_95 = 1.959963984540054

#: Metrics reported when a stack names no window (I–V ones added when the sweep allows).
DEFAULT_ZERO_BIAS_METRICS = ("resonance_energy_eV", "resonance_width_eV")
DEFAULT_IV_METRICS = ("peak_current_A_cm2", "peak_voltage_V", "valley_current_A_cm2", "pvcr")

#: Energy points times designs per physics call. Measured on the example stacks: the
#: kernel is memory-bound, and calls of ~2-6e5 points (about 600 designs on a 601-point
#: grid, 200 on a 2001-point grid) run up to 1.5x faster per sample than calls of 4096
#: designs, whose work arrays no longer fit in cache, while still amortising the Python
#: overhead of the layer loop.
POINTS_PER_CALL = 400_000
MIN_DESIGNS_PER_CALL, MAX_DESIGNS_PER_CALL = 16, 4096

#: Prefix of the nominal values returned next to the robust ones.
NOMINAL_PREFIX = "nominal_"


# --------------------------------------------------------------------------------------
# Error model
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class GrowthErrors:
    """Grown variants of a batch of designs and the errors that made them.

    Sample ``i * K + k`` is growth sample ``k`` of design ``i`` (design-major order).

    Attributes
    ----------
    batch : DesignBatch
        ``B * K`` grown designs.
    growth_rate_factor : ndarray, shape (B*K,)
        ``1 + eps`` of each sample.
    thickness_step_ml : ndarray of int, shape (B*K, n)
        Interface steps in monolayers.
    fraction_shift : dict[str, ndarray (B*K,)]
        Composition shift of each alloy present in the layers or the contacts.
    contact_fraction : tuple of two ndarrays (B*K,)
        Grown fraction of the emitter and the collector (NaN for non-alloys).
    """

    batch: DesignBatch
    growth_rate_factor: np.ndarray
    thickness_step_ml: np.ndarray
    fraction_shift: dict[str, np.ndarray]
    contact_fraction: tuple[np.ndarray, np.ndarray]


def tolerance_settings(spec):
    """The spec's ``[tolerance]`` settings, or the defaults when it has none."""
    from optimize.spec import ToleranceSpec

    return spec.tolerance if spec.tolerance is not None else ToleranceSpec()


def _contacts(spec) -> list[tuple[str, float]]:
    return [split_material(c.material, c.fraction) for c in (spec.emitter, spec.collector)]


def draw_growth_errors(batch: DesignBatch, spec, n_samples: int, rng: np.random.Generator, *,
                       shared: bool = False, tolerance=None) -> GrowthErrors:
    """Draw ``n_samples`` grown variants of every design of ``batch``.

    Parameters
    ----------
    batch : DesignBatch
        ``B`` nominal designs.
    spec : optimize.spec.StackSpec
        Supplies temperature, user materials, contacts and the ``[tolerance]`` sigmas.
    n_samples : int
        ``K``, grown variants per design.
    rng : numpy.random.Generator
        Source of all random numbers (reproducible for a given seed).
    shared : bool
        Apply the same ``K`` error draws to every design (common random numbers), so
        that differences between designs are not masked by sampling noise. Otherwise
        every design gets its own draws.
    tolerance : optimize.spec.ToleranceSpec, optional
        Overrides ``spec.tolerance``.

    Returns
    -------
    GrowthErrors
        ``B * K`` designs in design-major order; see the module docstring for the model.
    """
    tolerance = tolerance if tolerance is not None else tolerance_settings(spec)
    n_designs, n_layers = batch.thickness_nm.shape
    n_samples = int(n_samples)
    contacts = _contacts(spec)
    alloys = sorted({str(b) for b in batch.base.ravel() if b in materials.ALLOYS}
                    | {b for b, _ in contacts if b in materials.ALLOYS})
    draws = 1 if shared else n_designs

    # One fixed drawing order (steps, rate, alloys in sorted order) keeps a seed's
    # samples reproducible across runs and machines.
    steps = np.rint(rng.normal(0.0, tolerance.thickness_sigma_ml, (draws, n_samples, n_layers)))
    epsilon = rng.normal(0.0, tolerance.growth_rate_sigma, (draws, n_samples))
    shifts = {alloy: rng.normal(0.0, tolerance.fraction_sigma, (draws, n_samples)) for alloy in alloys}
    if shared:
        steps = np.broadcast_to(steps, (n_designs, n_samples, n_layers))
        epsilon = np.broadcast_to(epsilon, (n_designs, n_samples))
        shifts = {alloy: np.broadcast_to(s, (n_designs, n_samples)) for alloy, s in shifts.items()}

    def per_sample(values: np.ndarray) -> np.ndarray:
        # (B, n) nominal values repeated K times per design, design-major.
        return np.repeat(values, n_samples, axis=0)

    base = per_sample(batch.base)
    nominal_nm = per_sample(batch.thickness_nm)
    steps = steps.reshape(n_designs * n_samples, n_layers).astype(int)
    steps = np.where(nominal_nm > 0.0, steps, 0)
    factor = np.maximum(1.0 + epsilon.reshape(-1), 0.0)
    layer_ml = per_sample(monolayer_nm(batch, spec.temperature_K, spec.user_materials))
    thickness_nm = np.maximum(factor[:, None] * nominal_nm + steps * layer_ml, 0.0)

    fraction = per_sample(batch.fraction).copy()
    shift = {alloy: s.reshape(-1) for alloy, s in shifts.items()}
    for alloy, delta in shift.items():
        where = base == alloy
        fraction[where] = np.clip(fraction + delta[:, None], 0.0, 1.0)[where]
    contact_fraction = tuple(
        np.clip(f + shift[b], 0.0, 1.0) if b in shift else np.full(n_designs * n_samples, f)
        for b, f in contacts
    )
    grown = DesignBatch(batch.layer_names, base, fraction, thickness_nm)
    return GrowthErrors(grown, factor, steps, shift, contact_fraction)


def perturb(batch: DesignBatch, spec, n_samples: int, rng: np.random.Generator, *,
            shared: bool = False) -> DesignBatch:
    """Grown variants of a batch: ``B * K`` designs, design-major order.

    See :func:`draw_growth_errors` (which also returns the drawn errors and the grown
    contact compositions) and the module docstring for the error model.
    """
    return draw_growth_errors(batch, spec, n_samples, rng, shared=shared).batch


def grown_device(spec, batch: DesignBatch, contact_fraction=None):
    """Device of a batch with the contacts' alloy fractions of each design.

    ``contact_fraction`` is ``(emitter (B,), collector (B,))`` as drawn by
    :func:`draw_growth_errors`; ``None`` keeps the nominal contacts.
    """
    device = to_device(spec, batch)
    if contact_fraction is None:
        return device
    arrays = {"band_edge_eV": np.array(device.band_edge_eV, dtype=float), "mass": np.array(device.mass, dtype=float)}
    if device.gap_eV is not None:
        arrays["gap_eV"] = np.array(device.gap_eV, dtype=float)
    keys = {"band_edge_eV": "conduction_band_eV", "mass": "mass", "gap_eV": "gap_eV"}
    for column, (base, _), fraction in zip((0, -1), _contacts(spec), contact_fraction):
        if base not in materials.ALLOYS:
            continue
        props = material_arrays(np.full(batch.n_designs, base, dtype=object), np.asarray(fraction),
                                spec.temperature_K, spec.user_materials)
        for field, values in arrays.items():
            values[:, column] = props[keys[field]]
    return replace(device, **arrays)


# --------------------------------------------------------------------------------------
# Evaluation in chunks
# --------------------------------------------------------------------------------------


def metric_requests(spec) -> list:
    """Metrics the tolerance study evaluates.

    The spec's objectives, constraints and windows; when it names none, the first
    resonance's energy and width, plus the I–V figures when the bias sweep has the
    three or more points a peak and a valley need.
    """
    from physics.metrics import CATALOGUE, MetricRequest

    requests = [r for r in spec.metric_requests if r.name in CATALOGUE]
    if requests:
        return requests
    names = list(DEFAULT_ZERO_BIAS_METRICS)
    if spec.bias.steps >= 3:
        names += list(DEFAULT_IV_METRICS)
    return [MetricRequest(name) for name in names]


def designs_per_call(spec, requests) -> int:
    """Designs per physics call: zero-bias grid points, plus the current nodes of every bias."""
    from physics.current import DEFAULT_NODES
    from physics.metrics import needs_iv

    points = spec.energy.points + (spec.bias.steps * DEFAULT_NODES if needs_iv(requests) else 0)
    return int(np.clip(POINTS_PER_CALL // max(points, 1), MIN_DESIGNS_PER_CALL, MAX_DESIGNS_PER_CALL))


def evaluate_designs(spec, batch: DesignBatch, requests, *, contact_fraction=None, chunk: int | None = None,
                     progress=None) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
    """Metric values and reasons of every design of ``batch``, in vectorised chunks.

    Returns dicts ``label -> (B,)`` of values (NaN where undefined) and of the reason
    why a value is undefined (``""`` where defined).
    """
    from physics.metrics import evaluate

    chunk = chunk or designs_per_call(spec, requests)
    n = batch.n_designs
    values: dict[str, list] = {r.label: [] for r in requests}
    reasons: dict[str, list] = {r.label: [] for r in requests}
    for start in range(0, n, chunk):
        index = slice(start, min(start + chunk, n))
        contacts = None if contact_fraction is None else tuple(np.asarray(c)[index] for c in contact_fraction)
        device = grown_device(spec, batch.take(index), contacts)
        result = evaluate(device, requests, energy_eV=spec.energy.values, bias_V=spec.bias.values,
                          max_levels=spec.model.max_levels)
        for label in values:
            values[label].append(np.asarray(result.values[label], dtype=float))
            reasons[label].append(np.asarray(result.reasons[label], dtype=object))
        if progress is not None:
            progress(index.stop, n)
    return ({k: np.concatenate(v) for k, v in values.items()},
            {k: np.concatenate(v) for k, v in reasons.items()})


def monolayer_sensitivity(spec, batch: DesignBatch, requests) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Change of each metric per added monolayer of each layer (central differences).

    Parameters
    ----------
    batch : DesignBatch
        One nominal design.

    Returns
    -------
    sensitivity : ndarray, shape (n_metrics, n_layers)
        Metric units per monolayer; NaN where the metric is undefined at either point.
    nominal : dict label -> float
        The nominal values, from the same physics call.
    """
    n_layers = len(batch.layer_names)
    layer_ml = monolayer_nm(batch, spec.temperature_K, spec.user_materials)[0]
    nominal_nm = batch.thickness_nm[0]
    # Rows: nominal, then +1 ML of each layer, then -1 ML of each layer.
    thickness = np.repeat(nominal_nm[None, :], 1 + 2 * n_layers, axis=0)
    layers = np.arange(n_layers)
    thickness[1 + layers, layers] += layer_ml
    thickness[1 + n_layers + layers, layers] = np.maximum(nominal_nm - layer_ml, 0.0)
    step_ml = (thickness[1 + layers, layers] - thickness[1 + n_layers + layers, layers]) / layer_ml
    rows = np.zeros(1 + 2 * n_layers, dtype=int)
    probe = DesignBatch(batch.layer_names, batch.base[rows], batch.fraction[rows], thickness)
    values, _ = evaluate_designs(spec, probe, requests)
    sensitivity = np.array([
        (values[r.label][1:1 + n_layers] - values[r.label][1 + n_layers:]) / step_ml for r in requests
    ])
    return sensitivity, {r.label: float(values[r.label][0]) for r in requests}


# --------------------------------------------------------------------------------------
# Windows and yield
# --------------------------------------------------------------------------------------


def inside_window(values: np.ndarray, window) -> np.ndarray:
    """Whether each value lies in ``[window.min, window.max]``; undefined values fail."""
    values = np.asarray(values, dtype=float)
    inside = np.isfinite(values)
    if window.min is not None:
        inside &= values >= window.min
    if window.max is not None:
        inside &= values <= window.max
    return inside


def inside_all_windows(values: dict[str, np.ndarray], windows) -> np.ndarray:
    """Whether each design meets every window (requires at least one window)."""
    return np.logical_and.reduce([inside_window(values[w.request.label], w) for w in windows])


def wilson_interval(successes: int, trials: int, z: float = Z_95) -> tuple[float, float]:
    """Wilson score interval of a binomial proportion.

    E. B. Wilson, J. Am. Stat. Assoc. 22, 209 (1927). ``z = 1.96`` gives 95 %.
    Returns ``(nan, nan)`` for zero trials.
    """
    if trials <= 0:
        return math.nan, math.nan
    p = successes / trials
    z2n = z * z / trials
    centre = (p + z2n / 2.0) / (1.0 + z2n)
    half = z / (1.0 + z2n) * math.sqrt(p * (1.0 - p) / trials + z2n / (4.0 * trials))
    return max(0.0, centre - half), min(1.0, centre + half)


# --------------------------------------------------------------------------------------
# Robust objectives (campaign hook)
# --------------------------------------------------------------------------------------


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
    spec : optimize.spec.StackSpec
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
    from physics.metrics import CATALOGUE

    tolerance = tolerance_settings(spec)
    robust = tolerance.robust
    if robust is None:
        from optimize.spec import RobustSpec

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


# --------------------------------------------------------------------------------------
# The tolerance study: `tunnelsmith tolerance`
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Study:
    """Everything one tolerance run computed (the content of ``tolerance.nc``)."""

    spec: object
    tolerance: object
    nominal: DesignBatch
    errors: GrowthErrors
    requests: list
    values: dict[str, np.ndarray]
    reasons: dict[str, np.ndarray]
    nominal_values: dict[str, float]
    sensitivity: np.ndarray
    source: str


def run_study(spec, nominal: DesignBatch, *, samples: int | None = None, requests=None, progress=None,
              source: str = "") -> Study:
    """Monte Carlo growth-error study of one nominal design.

    Draws ``samples`` (default ``[tolerance] samples``) grown variants with the
    ``[tolerance]`` seed, evaluates ``requests`` (default :func:`metric_requests`) in
    chunks, and computes the per-monolayer sensitivities and nominal values.
    ``progress(done, total)`` is called after each chunk.
    """
    tolerance = tolerance_settings(spec)
    if samples is not None:
        tolerance = replace(tolerance, samples=int(samples))
    requests = list(requests) if requests is not None else metric_requests(spec)
    rng = np.random.default_rng(tolerance.seed)
    errors = draw_growth_errors(nominal, spec, tolerance.samples, rng, tolerance=tolerance)
    sensitivity, nominal_values = monolayer_sensitivity(spec, nominal, requests)
    values, reasons = evaluate_designs(spec, errors.batch, requests, contact_fraction=errors.contact_fraction,
                                       progress=progress)
    return Study(spec, tolerance, nominal, errors, requests, values, reasons, nominal_values, sensitivity, source)


def window_yields(study: Study) -> dict[str, tuple[int, int]]:
    """``label -> (samples inside, samples)`` for every window, and ``"all"``."""
    windows = study.tolerance.windows
    n = study.errors.batch.n_designs
    result = {w.request.label: (int(inside_window(study.values[w.request.label], w).sum()), n) for w in windows}
    if windows:
        result["all"] = (int(inside_all_windows(study.values, windows).sum()), n)
    return result


def tolerance_dataset(study: Study):
    """The study as an xarray Dataset (layout of ``tolerance.nc``, design section 4).

    Per-metric variables and attributes are named by the metric label itself
    (``pvcr``, ``leakage_A_cm2@0.05V``): netCDF-4 names may hold ``@``, ``.`` and
    ``-``, so the label needs no translation.
    """
    import xarray as xr

    from optimize.io import provenance_attrs
    from physics.metrics import CATALOGUE

    spec, tolerance, errors = study.spec, study.tolerance, study.errors
    labels = [r.label for r in study.requests]
    layer_names = list(study.nominal.layer_names)
    n = errors.batch.n_designs
    coords = {
        "sample": ("sample", np.arange(n), {"long_name": "growth sample"}),
        "layer": ("layer", layer_names, {"long_name": "layer name"}),
        "metric": ("metric", labels, {"long_name": "metric label"}),
    }
    data = {
        "thickness_nm": (("sample", "layer"), errors.batch.thickness_nm,
                         {"units": "nm", "long_name": "grown layer thickness"}),
        "fraction": (("sample", "layer"), errors.batch.fraction,
                     {"units": "1", "long_name": "grown alloy fraction of the first-named cation (NaN: not an alloy)"}),
        "growth_rate_factor": (("sample",), errors.growth_rate_factor,
                               {"units": "1", "long_name": "growth-rate factor 1 + eps of the sample"}),
        "thickness_step_ml": (("sample", "layer"), errors.thickness_step_ml,
                              {"units": "monolayer", "long_name": "interface step of the layer"}),
        "nominal_thickness_nm": (("layer",), study.nominal.thickness_nm[0],
                                 {"units": "nm", "long_name": "nominal layer thickness"}),
        "nominal_fraction": (("layer",), study.nominal.fraction[0],
                             {"units": "1", "long_name": "nominal alloy fraction (NaN: not an alloy)"}),
        "material": (("layer",), np.array(study.nominal.material_names()[0], dtype=str),
                     {"long_name": "nominal layer material"}),
        "monolayer_nm": (("layer",), monolayer_nm(study.nominal, spec.temperature_K, spec.user_materials)[0],
                         {"units": "nm", "long_name": "monolayer thickness (half the cubic lattice constant)"}),
        "nominal": (("metric",), np.array([study.nominal_values[label] for label in labels]),
                    {"long_name": "metric of the nominal design"}),
        "sensitivity": (("metric", "layer"), study.sensitivity,
                        {"units": "metric units per monolayer",
                         "long_name": "change of the metric per added monolayer (central difference, +-1 ML)"}),
    }
    for alloy, shift in errors.fraction_shift.items():
        data[f"fraction_shift_{alloy}"] = (("sample",), shift, {
            "units": "1", "long_name": f"composition shift of every {alloy} layer and contact in the sample"})
    for request in study.requests:
        info = CATALOGUE[request.name]
        values = study.values[request.label]
        attrs = {"units": info.units, "long_name": info.long_name, "metric": request.label,
                 "undefined_samples": int(np.sum(~np.isfinite(values)))}
        common = Counter(str(r) for r in study.reasons[request.label] if r).most_common(1)
        if common:
            attrs["undefined_because"] = common[0][0]
        data[request.label] = (("sample",), values, attrs)

    attrs = provenance_attrs(spec.text)
    attrs.update(
        title=f"tunnelsmith growth tolerance of {study.source}",
        source_input=study.source,
        temperature_K=spec.temperature_K,
        samples=n,
        seed=tolerance.seed,
        thickness_sigma_ml=tolerance.thickness_sigma_ml,
        growth_rate_sigma=tolerance.growth_rate_sigma,
        fraction_sigma=tolerance.fraction_sigma,
        error_model="per layer: whole-monolayer step round(N(0, thickness_sigma_ml)); per sample: growth-rate "
                    "factor 1 + N(0, growth_rate_sigma) on every layer; per alloy and sample: fraction shift "
                    "N(0, fraction_sigma) shared by its layers and contacts, clipped to [0, 1]",
        yield_interval="Wilson score interval, 95 % (E. B. Wilson, J. Am. Stat. Assoc. 22, 209, 1927)",
        confidence_level=0.95,
    )
    for label, value in study.nominal_values.items():
        attrs[f"nominal_{label}"] = value
    for key, (inside, total) in window_yields(study).items():
        name = key
        low, high = wilson_interval(inside, total)
        attrs[f"yield_{name}"] = inside / total
        attrs[f"yield_ci_low_{name}"] = low
        attrs[f"yield_ci_high_{name}"] = high
    for window in tolerance.windows:
        name = window.request.label
        if window.min is not None:
            attrs[f"window_min_{name}"] = float(window.min)
        if window.max is not None:
            attrs[f"window_max_{name}"] = float(window.max)
    return xr.Dataset({k: xr.Variable(*v) for k, v in data.items()},
                      coords={k: xr.Variable(*v) for k, v in coords.items()}, attrs=attrs)


def summary_table(study: Study) -> str:
    """Terminal summary: metric, nominal, mean, std, window, yield [95 % CI]."""
    tolerance = study.tolerance
    windows = {w.request.label: w for w in tolerance.windows}
    yields = window_yields(study)
    header = f"{'metric':<28}{'nominal':>12}{'mean':>12}{'std':>11}  {'window':<22}{'yield [95 % CI]':<24}"
    lines = [
        f"{study.errors.batch.n_designs} growth samples (seed {tolerance.seed}): interface steps "
        f"round(N(0, {tolerance.thickness_sigma_ml:g})) ML per layer, growth rate sigma "
        f"{100 * tolerance.growth_rate_sigma:g} %, alloy fraction sigma {tolerance.fraction_sigma:g}",
        "",
        header,
        "-" * len(header),
    ]
    for request in study.requests:
        label = request.label
        values = study.values[label]
        finite = values[np.isfinite(values)]
        mean = f"{np.mean(finite):.4g}" if finite.size else "-"
        std = f"{np.std(finite, ddof=1):.3g}" if finite.size > 1 else "-"
        window_text, yield_text = "", ""
        if label in windows:
            window = windows[label]
            lo = "-inf" if window.min is None else f"{window.min:g}"
            hi = "inf" if window.max is None else f"{window.max:g}"
            window_text = f"[{lo}, {hi}]"
            yield_text = _yield_text(*yields[label])
        undefined = values.size - finite.size
        note = f"  ({undefined} undefined)" if undefined else ""
        lines.append(f"{label:<28}{study.nominal_values[label]:>12.4g}{mean:>12}{std:>11}  "
                     f"{window_text:<22}{yield_text}{note}")
    if "all" in yields:
        lines.append(f"{'all windows':<28}{'':>12}{'':>12}{'':>11}  {'':<22}{_yield_text(*yields['all'])}")
    else:
        lines.append("(no [[tolerance.spec]] window: no yield; add windows to the stack file to get one)")
    lines += ["", "largest sensitivity per metric (change per added monolayer):"]
    for row, request in zip(study.sensitivity, study.requests):
        if not np.any(np.isfinite(row)):
            lines.append(f"  {request.label:<26} undefined")
            continue
        index = int(np.nanargmax(np.abs(row)))
        lines.append(f"  {request.label:<26} {row[index]:+.3g} per ML of {study.nominal.layer_names[index]}")
    return "\n".join(lines)


def _yield_text(inside: int, total: int) -> str:
    low, high = wilson_interval(inside, total)
    return f"{100 * inside / total:5.1f} % [{100 * low:.1f}, {100 * high:.1f}]"


class _ProgressBar:
    """A one-line progress bar on stderr, redrawn in place with a carriage return."""

    def __init__(self, label: str, quiet: bool, width: int = 30):
        self.label, self.quiet, self.width = label, quiet, width
        self.start = time.perf_counter()

    def __call__(self, done: int, total: int) -> None:
        if self.quiet:
            return
        filled = int(self.width * done / max(total, 1))
        elapsed = time.perf_counter() - self.start
        rate = done / elapsed if elapsed > 0 else 0.0
        sys.stderr.write(f"\r{self.label} [{'#' * filled}{'.' * (self.width - filled)}] {done}/{total} "
                         f"({rate:.0f}/s)")
        if done >= total:
            sys.stderr.write("\n")
        sys.stderr.flush()


def _load_stack(path: Path, design, storage):
    from optimize import spec as spec_module

    if design is not None and not path.exists():
        raise InputError(path, None, "no such run directory",
                         "give the directory `tunnelsmith optimize` wrote (default runs/<campaign name>/)")
    if design is not None:
        raise InputError("command line", "--design", f"--design picks a design of a campaign run, but {path} is a file",
                         f"give the run directory instead (tunnelsmith tolerance RUN_DIR --design {design}), "
                         "or drop --design to study the stack file")
    if storage is not None:
        raise InputError("command line", "--storage", "--storage belongs to a campaign run directory",
                         "drop --storage when studying a stack file")
    spec = spec_module.load(path)
    try:
        return spec, nominal_batch(spec)
    except InputError as error:
        raise InputError(error.file, error.key, f"{error.problem}; a tolerance study needs one concrete design",
                         "give every layer fixed values, or run the campaign and study a design of its front: "
                         "tunnelsmith tolerance RUN_DIR --design N") from None


def _load_front_design(run_dir: Path, design, storage, out_dir: Path):
    """Spec and nominal design of trial ``design`` on the front of a campaign run."""
    import xarray as xr

    from optimize import spec as spec_module
    from optimize.io import atomic_path

    if design is None:
        raise InputError("command line", "--design", f"{run_dir} is a directory (a campaign run), which holds "
                         "many designs", f"pick one with --design N (a trial number on the front, see {run_dir}/front.nc), "
                         "or give a stack file")
    if storage is not None:
        from optimize.front import rebuild_front

        rebuild_front(run_dir, storage=storage, quiet=True)
    front_path = run_dir / "front.nc"
    if not front_path.exists():
        raise InputError(run_dir, None, "the directory has no front.nc (not a campaign run, or its front was "
                         "never written)", f"run `tunnelsmith front {run_dir}` first, or give the run directory "
                         "of a campaign")
    try:
        front = xr.load_dataset(front_path)
    except (OSError, ValueError) as error:
        raise InputError(front_path, None, f"cannot read the file ({error})",
                         f"rebuild it with `tunnelsmith front {run_dir}`") from None
    missing = [v for v in ("thickness_nm", "material", "fraction") if v not in front.variables]
    if "design" not in front.coords or missing or "campaign_toml" not in front.attrs:
        raise InputError(front_path, None, "not a front file of this program (no design coordinate, layer "
                         "variables or campaign_toml attribute)", f"rebuild it with `tunnelsmith front {run_dir}`")
    designs = [int(d) for d in front["design"].values]
    if design not in designs:
        shown = ", ".join(map(str, designs[:20])) + (", ..." if len(designs) > 20 else "")
        raise InputError(front_path, "--design", f"trial {design} is not on the front "
                         f"(trials on the front: {shown or 'none'})",
                         f"choose one of the trial numbers on the front, e.g. --design {designs[0]}" if designs
                         else "let the campaign finish some trials first")
    # The campaign text as the run saw it, stored beside the results (load needs a file).
    campaign_path = out_dir / "campaign.toml"
    with atomic_path(campaign_path) as temporary:
        temporary.write_text(str(front.attrs["campaign_toml"]), encoding="utf-8")
    spec = spec_module.load(campaign_path)
    row = front.sel(design=design)
    layer_names = tuple(str(name) for name in front["layer"].values)
    if layer_names != tuple(layer.name for layer in spec.layers):
        raise InputError(front_path, "layer", "the front's layers do not match the campaign text it stores",
                         f"rebuild the front with `tunnelsmith front {run_dir}`")
    base, fraction = [], []
    for name, stored in zip(row["material"].values, row["fraction"].values):
        b, f = split_material(str(name))
        if b in materials.ALLOYS and np.isfinite(stored):
            f = float(stored)  # the stored fraction is exact; the display name is rounded
        base.append(b)
        fraction.append(f)
    nominal = DesignBatch(layer_names, np.array([base], dtype=object), np.array([fraction], dtype=float),
                          np.array([row["thickness_nm"].values], dtype=float))
    return spec, nominal


def run_tolerance(target, *, design: int | None = None, samples: int | None = None, out_dir=None,
                  storage: str | None = None, quiet: bool = False) -> int:
    """Entry point of ``tunnelsmith tolerance``; returns the exit status.

    Parameters
    ----------
    target : path
        A stack file (its ``[tolerance]`` settings and ``[[tolerance.spec]]`` windows are
        used; defaults without them), or a campaign run directory together with
        ``design``.
    design : int, optional
        Trial number of a design on the run's front (``RUN_DIR/front.nc``).
    samples : int, optional
        Growth samples (overrides ``[tolerance] samples``).
    out_dir : path, optional
        Default ``runs/<stack stem>/`` or ``RUN_DIR/tolerance_design_<N>/``.
    storage : str, optional
        Optuna storage URL of the run: the front is rebuilt from it first.
    quiet : bool
        No progress bar.
    """
    from optimize.io import MODEL_CAUTION, write_netcdf

    target = Path(target)
    if samples is not None and int(samples) < 1:
        raise InputError("command line", "--samples", f"{samples} samples cannot give a yield",
                         "give at least one sample, e.g. --samples 500")
    if target.is_dir():
        out = Path(out_dir) if out_dir is not None else target / f"tolerance_design_{design}"
        spec, nominal = _load_front_design(target, design, storage, out)
        source = f"design {design} of {target}"
    else:
        spec, nominal = _load_stack(target, design, storage)
        out = Path(out_dir) if out_dir is not None else Path("runs") / target.stem
        source = str(target)
    for warning in getattr(spec, "warnings", ()):
        print(f"warning: {warning}", file=sys.stderr)

    progress = _ProgressBar("growth samples", quiet)
    study = run_study(spec, nominal, samples=samples, progress=progress, source=source)
    dataset = tolerance_dataset(study)
    if design is not None:
        dataset.attrs["design"] = int(design)
    path = write_netcdf(dataset, out / "tolerance.nc")
    figures = []
    try:
        from optimize.plots import plot_tolerance
    except ImportError:
        plot_tolerance = None
    if plot_tolerance is not None:
        figures = plot_tolerance(dataset, out)

    print(f"tunnelsmith tolerance: {source}")
    print(summary_table(study))
    print(f"\ntolerance: {path}")
    for figure in figures:
        print(f"plot:      {figure}")
    print(f"\nnote: {MODEL_CAUTION}")
    return 0
