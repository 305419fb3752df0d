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
material, growth on (001); :func:`tunnelsmith.optimize.model.stack.monolayer_nm`)::

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

The defaults of :class:`tunnelsmith.optimize.inputs.schema.ToleranceSpec` (``thickness_sigma_ml = 0.5``,
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
from dataclasses import dataclass, replace
import numpy as np
from tunnelsmith.optimize.model.stack import DesignBatch, material_arrays, monolayer_nm, split_material, to_device
from tunnelsmith.physics import materials
from tunnelsmith.optimize.model.evaluation import evaluate_metrics




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
    from tunnelsmith.optimize.inputs.schema import ToleranceSpec

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
    spec : tunnelsmith.optimize.inputs.schema.StackSpec
        Supplies temperature, user materials, contacts and the ``[tolerance]`` sigmas.
    n_samples : int
        ``K``, grown variants per design.
    rng : numpy.random.Generator
        Source of all random numbers (reproducible for a given seed).
    shared : bool
        Apply the same ``K`` error draws to every design (common random numbers), so
        that differences between designs are not masked by sampling noise. Otherwise
        every design gets its own draws.
    tolerance : tunnelsmith.optimize.inputs.schema.ToleranceSpec, optional
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


def metric_requests(spec) -> list:
    """Metrics the tolerance study evaluates.

    The spec's objectives, constraints and windows; when it names none, the first
    resonance's energy and width, plus the I–V figures when the bias sweep has the
    three or more points a peak and a valley need.
    """
    from tunnelsmith.physics.metrics import CATALOGUE, MetricRequest

    requests = [r for r in spec.metric_requests if r.name in CATALOGUE]
    if requests:
        return requests
    names = list(DEFAULT_ZERO_BIAS_METRICS)
    if spec.bias.steps >= 3:
        names += list(DEFAULT_IV_METRICS)
    return [MetricRequest(name) for name in names]


def designs_per_call(spec, requests) -> int:
    """Designs per physics call: zero-bias grid points, plus the current nodes of every bias."""
    from tunnelsmith.physics.current import DEFAULT_NODES
    from tunnelsmith.physics.metrics import needs_iv

    points = spec.energy.points + (spec.bias.steps * DEFAULT_NODES if needs_iv(requests) else 0)
    return int(np.clip(POINTS_PER_CALL // max(points, 1), MIN_DESIGNS_PER_CALL, MAX_DESIGNS_PER_CALL))


def evaluate_designs(spec, batch: DesignBatch, requests, *, contact_fraction=None, chunk: int | None = None,
                     progress=None) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
    """Metric values and reasons of every design of ``batch``, in vectorised chunks.

    Returns dicts ``label -> (B,)`` of values (NaN where undefined) and of the reason
    why a value is undefined (``""`` where defined).
    """

    chunk = chunk or designs_per_call(spec, requests)
    n = batch.n_designs
    values: dict[str, list] = {r.label: [] for r in requests}
    reasons: dict[str, list] = {r.label: [] for r in requests}
    for start in range(0, n, chunk):
        index = slice(start, min(start + chunk, n))
        contacts = None if contact_fraction is None else tuple(np.asarray(c)[index] for c in contact_fraction)
        device = grown_device(spec, batch.take(index), contacts)
        result = evaluate_metrics(spec, device, requests)
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


def wilson_interval(successes: int, trials: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval of a binomial proportion, from :func:`scipy.stats.binomtest`.

    E. B. Wilson, J. Am. Stat. Assoc. 22, 209 (1927). Returns ``(nan, nan)`` for zero
    trials.
    """
    from scipy.stats import binomtest

    if trials <= 0:
        return math.nan, math.nan
    interval = binomtest(int(successes), int(trials)).proportion_ci(confidence_level=confidence, method="wilson")
    return float(interval.low), float(interval.high)
