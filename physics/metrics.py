"""Figures of merit of a batch of stacks, computing only what the requests need.

Definitions (the catalogue keys are the names used in campaign files):

- ``resonance_energy_eV``, ``resonance_width_eV``: the first quasi-bound level inside
  the energy grid at zero bias (:func:`physics.resonance.find_resonances`) and its FWHM.
- ``transmission_contrast``: coherent transmission at the first level over the smallest
  transmission on the energy grid between the first and the second level (or, without a
  second level, up to the end of the grid). Computed from ``log10 T``, so it stays finite
  for transmissions far below 1e-308.
- ``peak_current_A_cm2``, ``peak_voltage_V``: the first interior local maximum of
  ``|J|`` along the bias sweep, refined by the parabola through it and its neighbours.
- ``valley_current_A_cm2``, ``valley_voltage_V``: the first local minimum after the
  peak, refined likewise.
- ``pvcr``: peak over valley current; ``swing_product_W_cm2``:
  ``(J_peak - J_valley) |V_valley - V_peak|``.
- ``leakage_A_cm2``: the current density at the request's ``at_bias_V``, computed at
  that bias (appended to the sweep), not interpolated.
- ``total_thickness_nm``: the sum of the layers between the contacts.

A metric that is undefined for a stack is NaN there, with the reason in
:attr:`Evaluation.reasons`; it never raises. Model limits: coherent, single-valley,
flat-band-plus-linear-drop transport (no scattering unless an optical potential is set,
no X-valley or phonon-assisted current, no space charge) overestimates the
peak-to-valley ratio; the metrics rank designs, they do not replace measurements.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from tunnelsmith.physics.current import DEFAULT_NODES, current_density
from tunnelsmith.physics.device import Device
from tunnelsmith.physics.profile import DEFAULT_SLICE_nm, biased_profile
from tunnelsmith.physics.series import applied_curve
from tunnelsmith.physics.resonance import find_resonances, fold_contact_spacers, transmission_peaks
from tunnelsmith.physics.transfer import log10_transmission, scattering


@dataclass(frozen=True)
class MetricInfo:
    """Catalogue entry: what a metric is and what it needs.

    ``needs`` is ``"zero_bias"`` (zero-bias transmission and levels) or ``"iv"`` (the
    current); ``takes_bias`` marks metrics evaluated at a requested bias; ``positive``
    metrics are strictly positive wherever defined, so their logarithm is meaningful.
    """

    name: str
    units: str
    long_name: str
    needs: str
    takes_bias: bool = False
    positive: bool = True

    @property
    def needs_iv(self) -> bool:
        """Whether the metric comes from the I–V sweep (else from zero bias alone)."""
        return self.needs == "iv"


CATALOGUE: dict[str, MetricInfo] = {
    info.name: info
    for info in (
        MetricInfo("resonance_energy_eV", "eV", "first quasi-bound level at zero bias", "zero_bias", positive=False),
        MetricInfo("resonance_width_eV", "eV", "FWHM of the first quasi-bound level", "zero_bias"),
        MetricInfo("transmission_contrast", "1", "peak over off-resonance transmission", "zero_bias"),
        MetricInfo("peak_current_A_cm2", "A/cm^2", "first current peak", "iv"),
        MetricInfo("peak_voltage_V", "V", "bias of the first current peak", "iv", positive=False),
        MetricInfo("valley_current_A_cm2", "A/cm^2", "current valley after the peak", "iv"),
        MetricInfo("valley_voltage_V", "V", "bias of the current valley", "iv", positive=False),
        MetricInfo("pvcr", "1", "peak-to-valley current ratio", "iv"),
        MetricInfo("swing_product_W_cm2", "W/cm^2", "(J_peak - J_valley) (V_valley - V_peak)", "iv"),
        MetricInfo("leakage_A_cm2", "A/cm^2", "current density at a given bias", "iv", takes_bias=True),
        MetricInfo("total_thickness_nm", "nm", "thickness between the contacts", "zero_bias"),
    )
}

_LEVEL_METRICS = {"resonance_energy_eV", "resonance_width_eV", "transmission_contrast"}
#: Metrics read off the whole I–V sweep (peak and valley), as opposed to a current at one bias.
SWEEP_METRICS = frozenset({
    "peak_current_A_cm2",
    "peak_voltage_V",
    "valley_current_A_cm2",
    "valley_voltage_V",
    "pvcr",
    "swing_product_W_cm2",
})


@dataclass(frozen=True)
class MetricRequest:
    """One metric to compute; ``at_bias_V`` only for metrics that take a bias."""

    name: str
    at_bias_V: float | None = None

    @property
    def label(self) -> str:
        """Key of the metric in :attr:`Evaluation.values` (``name`` or ``name@0.1V``)."""
        return self.name if self.at_bias_V is None else f"{self.name}@{self.at_bias_V:g}V"


@dataclass
class Evaluation:
    """Metrics and the curves they came from, for a batch of ``B`` stacks.

    Attributes
    ----------
    values : dict[str, ndarray (B,)]
        Keyed by :attr:`MetricRequest.label`; NaN where undefined.
    reasons : dict[str, ndarray (B,) of str]
        ``""`` where the value is defined, otherwise why it is NaN.
    energy_eV : ndarray (nE,)
    transmission : ndarray (B, nE)
        Coherent transmission at zero bias on ``energy_eV`` (always computed).
    resonance_energy_eV, resonance_width_eV : ndarray (B, nV or 1, levels)
        Levels per sweep bias when the sweep was computed (those that carry current, see
        :class:`physics.current.IVCurve`), else the zero-bias levels inside the energy
        grid; NaN-filled when no requested metric needed levels.
    bias_V : ndarray (nV,) or None
    current_density_A_cm2 : ndarray (B, nV) or None
        The bias sweep, present when a peak/valley metric was requested (a request for
        ``leakage_A_cm2`` alone computes only its own biases); with a series resistance,
        the current an upward sweep records at the applied biases
        (:func:`~tunnelsmith.physics.series.applied_curve`).
    intrinsic_current_density_A_cm2 : ndarray (B, nV) or None
        With a series resistance: the current at the same biases across the active
        region alone.
    bistable : ndarray (B,) of bool or None
        With a series resistance: whether the applied-bias curve folds (the sweep jumps).
    """

    values: dict[str, np.ndarray]
    reasons: dict[str, np.ndarray]
    energy_eV: np.ndarray
    transmission: np.ndarray
    resonance_energy_eV: np.ndarray
    resonance_width_eV: np.ndarray
    bias_V: np.ndarray | None = None
    current_density_A_cm2: np.ndarray | None = None
    intrinsic_current_density_A_cm2: np.ndarray | None = None
    bistable: np.ndarray | None = None


def _check(requests: Sequence[MetricRequest]) -> None:
    for request in requests:
        info = CATALOGUE.get(request.name)
        if info is None:
            raise ValueError(f"unknown metric {request.name!r}; known: {', '.join(CATALOGUE)}")
        if info.takes_bias != (request.at_bias_V is not None):
            need = "needs" if info.takes_bias else "takes no"
            raise ValueError(f"metric {request.name!r} {need} at_bias_V")


def needs_iv(requests: Sequence[MetricRequest]) -> bool:
    """True when any request needs a current (``needs == "iv"``)."""
    return any(CATALOGUE[r.name].needs == "iv" for r in requests)


def _parabola_vertex(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Vertex of the parabola through three points per row, shape (..., 3) -> (...).

    Falls back to the middle point where the three points are collinear or the vertex
    would leave the bracket of the outer points.
    """
    x0, x1, x2 = np.moveaxis(x, -1, 0)
    y0, y1, y2 = np.moveaxis(y, -1, 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        # Newton form y = y0 + d01 (x - x0) + c (x - x0)(x - x1): slope at x1, curvature 2c.
        d01 = (y1 - y0) / (x1 - x0)
        d12 = (y2 - y1) / (x2 - x1)
        curvature = (d12 - d01) / (x2 - x0)
        slope_at_x1 = d01 + curvature * (x1 - x0)
        shift = -slope_at_x1 / (2.0 * curvature)
        vertex_x = x1 + shift
        vertex_y = y1 + 0.5 * slope_at_x1 * shift
    lo, hi = np.minimum(x0, x2), np.maximum(x0, x2)
    usable = np.isfinite(vertex_x) & (curvature != 0.0) & (vertex_x >= lo) & (vertex_x <= hi)
    return np.where(usable, vertex_x, x1), np.where(usable, vertex_y, y1)


#: Relative bias step of the slope dJ/dV that corrects a leakage current for the
#: series resistance.
LEAKAGE_SLOPE_STEP = 0.01

#: A fall (or rise) of |J| smaller than this fraction of the peak (valley) current is a
#: ripple of the curve, not a negative-differential-resistance region. Measured I–V
#: curves and the adaptive current integral ripple well below 1 % (common practice).
RIPPLE_FRACTION = 0.02


def ndr_regions(magnitude: np.ndarray, ripple: float = RIPPLE_FRACTION) -> tuple[list[tuple[int, int]], int | None]:
    """Negative-differential-resistance regions of one branch of ``|J|``.

    Parameters
    ----------
    magnitude : ndarray, shape (n,)
        ``|J|`` ordered from zero bias outward (one polarity).
    ripple : float
        Relative fall that confirms a peak, and relative rise that confirms a valley.

    Returns
    -------
    regions : list of (peak index, valley index)
        Every peak followed by a fall of more than ``ripple`` and then by a rise of more
        than ``ripple`` from its lowest point (the valley), in order.
    open_peak : int or None
        A confirmed peak after the last region whose valley the branch never reaches.
    """
    regions: list[tuple[int, int]] = []
    candidate, peak, low = 0, None, 0
    for k in range(1, len(magnitude)):
        value = magnitude[k]
        if peak is None:
            if value >= magnitude[candidate]:
                candidate = k
            elif value < magnitude[candidate] * (1.0 - ripple):
                peak, low = candidate, k
        elif value <= magnitude[low]:
            low = k
        elif value > magnitude[low] * (1.0 + ripple):
            regions.append((peak, low))
            peak, candidate = None, k
    return regions, peak


def _branches(bias_V: np.ndarray) -> list[np.ndarray]:
    """Indices of each polarity of the sweep, ordered from zero bias outward.

    Zero bias, where swept, starts both branches; the order of the sweep itself
    (ascending, descending, bipolar) does not matter.
    """
    zero = np.flatnonzero(bias_V == 0.0)
    branches = []
    for sign in (1.0, -1.0):
        side = np.flatnonzero(sign * bias_V > 0.0)
        side = side[np.argsort(np.abs(bias_V[side]), kind="stable")]
        branches.append(np.concatenate([zero[:1], side]))
    return [branch for branch in branches if branch.size >= 3]


def _peak_and_valley(bias_V: np.ndarray, current: np.ndarray) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Peak/valley metrics of ``|J|`` along the sweep: name -> (value, reason).

    Rule: each polarity is analysed from zero bias outward, whatever the order of the
    sweep; of all negative-differential-resistance regions (:func:`ndr_regions`, ripples
    below :data:`RIPPLE_FRACTION` ignored) the one with the largest peak-to-valley
    ratio is reported. Peak and valley are refined by the parabola through the three
    biases around them. Voltages keep their sign; currents are magnitudes.
    """
    bias_V = np.asarray(bias_V, dtype=float)
    magnitude = np.abs(current)
    n_stacks = magnitude.shape[0]
    values = {name: np.full(n_stacks, np.nan) for name in SWEEP_METRICS}
    reason = np.full(n_stacks, "", dtype=object)
    has_peak = np.zeros(n_stacks, dtype=bool)
    has_valley = np.zeros(n_stacks, dtype=bool)
    branches = _branches(bias_V)
    if not branches:
        reason[:] = "the bias sweep has fewer than 3 points on either side of zero"
        return {name: (value, reason.astype(str)) for name, value in values.items()}

    def refined(branch: np.ndarray, row: np.ndarray, at: int) -> tuple[float, float]:
        window = branch[np.clip(at + np.arange(-1, 2), 0, branch.size - 1)]
        vertex_V, vertex_J = _parabola_vertex(bias_V[window][None, :], row[window][None, :])
        return float(vertex_V[0]), float(vertex_J[0])

    for s in range(n_stacks):
        row = magnitude[s]
        best, first_open = None, None
        for branch in branches:
            regions, open_peak = ndr_regions(row[branch])
            for peak, valley in regions:
                with np.errstate(divide="ignore"):
                    ratio = row[branch[peak]] / row[branch[valley]] if row[branch[valley]] > 0 else np.inf
                if best is None or ratio > best[0]:
                    best = (ratio, branch, peak, valley)
            if open_peak is not None and first_open is None:
                first_open = (branch, open_peak)
        if best is not None:
            _, branch, peak, valley = best
            peak_V, peak_J = refined(branch, row, peak)
            valley_V, valley_J = refined(branch, row, valley)
            has_peak[s] = has_valley[s] = True
            values["peak_voltage_V"][s], values["peak_current_A_cm2"][s] = peak_V, peak_J
            values["valley_voltage_V"][s], values["valley_current_A_cm2"][s] = valley_V, valley_J
        elif first_open is not None:
            branch, peak = first_open
            values["peak_voltage_V"][s], values["peak_current_A_cm2"][s] = refined(branch, row, peak)
            has_peak[s] = True
            reason[s] = "no valley after the current peak inside the bias sweep"
        else:
            reason[s] = "no current peak inside the bias sweep"
    peak_J, valley_J = values["peak_current_A_cm2"], values["valley_current_A_cm2"]
    with np.errstate(divide="ignore", invalid="ignore"):
        values["pvcr"] = np.where(has_valley, peak_J / valley_J, np.nan)
    values["swing_product_W_cm2"] = np.where(
        has_valley, (peak_J - valley_J) * np.abs(values["valley_voltage_V"] - values["peak_voltage_V"]), np.nan)
    reasons = {name: np.where(has_valley, "", reason).astype(str) for name in SWEEP_METRICS}
    for name in ("peak_voltage_V", "peak_current_A_cm2"):
        reasons[name] = np.where(has_peak, "", reason).astype(str)
    return {name: (values[name], reasons[name]) for name in SWEEP_METRICS}


def _level_metrics(device, profile_arrays, energy, log10_t, max_levels):
    """Zero-bias level metrics: name -> (value, reason), and the levels (B, 1, levels)."""
    n_stacks = device.n_stacks
    starts = transmission_peaks(energy, log10_t, max_levels + 2)
    levels = find_resonances(
        **profile_arrays,
        window_eV=(energy[0], energy[-1]),
        max_levels=max_levels,
        start_eV=starts,
        scan_points=0,
    )
    first, width = levels.energy_eV[:, 0], levels.width_eV[:, 0]
    found = np.isfinite(first)
    no_level = np.where(found, "", "no resonance in the energy window").astype(str)

    # Transmission at the first level (a grid may straddle a narrow peak).
    at_level = np.where(found, first, energy[0])[:, None]
    log10_peak = scattering(at_level, **profile_arrays).log10_transmission[:, 0]
    second = levels.energy_eV[:, 1] if max_levels > 1 else np.full(n_stacks, np.nan)
    end = np.where(np.isfinite(second), second, energy[-1])
    between = (energy[None, :] > first[:, None]) & (energy[None, :] < end[:, None])
    log10_min = np.min(np.where(between, log10_t, np.inf), axis=-1)
    has_between = np.any(between, axis=-1)
    with np.errstate(over="ignore", invalid="ignore"):
        contrast = 10.0 ** (log10_peak - log10_min)
    contrast_reason = np.where(
        ~found,
        "no resonance in the energy window",
        np.where(has_between, "", "no energy grid point between the first level and the next"),
    ).astype(str)
    metrics = {
        "resonance_energy_eV": (np.where(found, first, np.nan), no_level),
        "resonance_width_eV": (np.where(found, width, np.nan), no_level),
        "transmission_contrast": (np.where(found & has_between, contrast, np.nan), contrast_reason),
    }
    return metrics, levels


def evaluate(
    device: Device,
    requests: Sequence[MetricRequest],
    *,
    energy_eV,
    bias_V,
    max_levels: int = 4,
    nodes: int = DEFAULT_NODES,
    slice_nm: float = DEFAULT_SLICE_nm,
    series_resistance_ohm_cm2: float = 0.0,
) -> Evaluation:
    """Compute the requested metrics of every stack.

    Parameters
    ----------
    device : Device
        ``B`` stacks.
    requests : sequence of MetricRequest
    energy_eV : array_like (nE,)
        Ascending energy grid of the zero-bias transmission (also the window of the
        zero-bias level search).
    bias_V : array_like (nV,)
        Bias sweep for the peak/valley metrics.
    max_levels : int
        Levels searched and reported per bias.
    nodes : int
        Energy nodes per bias of the current integral.
    slice_nm : float
        Slice thickness of sloped layers (:func:`~tunnelsmith.physics.profile.biased_profile`),
        used for every biased quantity: the current, the levels along the sweep and the
        zero-bias profile, so one setting drives every metric.
    series_resistance_ohm_cm2 : float
        Area-specific series resistance; with ``R_s > 0`` every bias of ``bias_V`` and of
        a leakage request is an applied bias, ``V = V_int + J R_s``
        (:mod:`~tunnelsmith.physics.series`): the sweep metrics are read from an upward
        sweep of the applied bias, and a leakage current is taken at the intrinsic bias
        ``V_int = V - J R_s`` with ``J`` linearised about ``V`` (one Newton step, exact
        up to the curvature of ``J`` over the small ``J R_s`` of the leakage regime).

    Returns
    -------
    Evaluation
    """
    _check(requests)
    names = {r.name for r in requests}
    energy = np.asarray(energy_eV, float)
    n_stacks = device.n_stacks
    zero = biased_profile(device, [0.0], slice_nm=slice_nm)
    zero_arrays = {
        key: (None if value is None else value[:, 0]) for key, value in zero.arrays.items()
    }
    # Spacers identical to a contact change no transmission: the grid runs without them.
    zero_arrays = fold_contact_spacers(**zero_arrays)
    # One kernel call gives log10 T (finite far below 1e-308, for the level starts and
    # the contrast); T itself follows from it.
    log10_t = log10_transmission(energy, **zero_arrays)
    values: dict[str, np.ndarray] = {}
    reasons: dict[str, np.ndarray] = {}
    computed: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    no_levels = np.full((n_stacks, 1, max_levels), np.nan)
    level_energy, level_width = no_levels, no_levels

    if names & _LEVEL_METRICS:
        metrics, levels = _level_metrics(device, zero_arrays, energy, log10_t, max_levels)
        computed.update(metrics)
        level_energy, level_width = levels.energy_eV[:, None], levels.width_eV[:, None]

    sweep = np.asarray(bias_V, float) if names & SWEEP_METRICS else np.zeros(0)
    leakage_bias = sorted({float(r.at_bias_V) for r in requests if r.name == "leakage_A_cm2"})
    swept_current = None
    intrinsic_current, bistable = None, None
    resistance = float(series_resistance_ohm_cm2)
    if sweep.size or leakage_bias:
        # The intrinsic sweep needs zero bias, where the applied-bias mapping starts; with
        # a series resistance each leakage bias gets a neighbour for the slope dJ/dV.
        extra = [0.0] if resistance > 0.0 and sweep.size and not np.any(sweep == 0.0) else []
        slope_bias = [b * (1.0 - LEAKAGE_SLOPE_STEP) for b in leakage_bias] if resistance > 0.0 else []
        iv = current_density(device, np.concatenate([sweep, extra, leakage_bias, slope_bias]), nodes=nodes,
                             max_levels=max_levels, slice_nm=slice_nm)
        current = iv.current_density_A_cm2
        if sweep.size:
            swept_current = current[:, : sweep.size]
            if resistance > 0.0:
                intrinsic_current = swept_current
                swept_current, bistable = applied_curve(
                    np.concatenate([sweep, extra]), current[:, : sweep.size + len(extra)], resistance, sweep)
            computed.update(_peak_and_valley(sweep, swept_current))
            level_energy = iv.resonances.energy_eV[:, : sweep.size]
            level_width = iv.resonances.width_eV[:, : sweep.size]
        first = sweep.size + len(extra)
        leakage = current[:, first:first + len(leakage_bias)]
        if resistance > 0.0 and leakage_bias:
            # J at the intrinsic bias V_int = V - J R_s with J linearised about V:
            # J = J(V) + J'(V)(V_int - V) gives J = J(V) / (1 + J'(V) R_s) (one Newton step).
            below = current[:, first + len(leakage_bias):]
            step = np.asarray(leakage_bias) * LEAKAGE_SLOPE_STEP
            with np.errstate(divide="ignore", invalid="ignore"):
                slope = np.where(step != 0.0, (leakage - below) / step, 0.0)
            leakage = leakage / (1.0 + slope * resistance)
        for k, bias in enumerate(leakage_bias):
            label = MetricRequest("leakage_A_cm2", bias).label
            computed[label] = (leakage[:, k], np.full(n_stacks, "", dtype=str))
    if "total_thickness_nm" in names:
        computed["total_thickness_nm"] = (device.total_thickness_nm, np.full(n_stacks, "", dtype=str))

    for request in requests:
        value, reason = computed[request.label]
        values[request.label] = np.asarray(value, float)
        reasons[request.label] = reason
    return Evaluation(
        values=values,
        reasons=reasons,
        energy_eV=energy,
        transmission=np.exp(np.log(10.0) * log10_t),
        resonance_energy_eV=level_energy,
        resonance_width_eV=level_width,
        bias_V=sweep if sweep.size else None,
        current_density_A_cm2=swept_current,
        intrinsic_current_density_A_cm2=intrinsic_current,
        bistable=bistable,
    )
