"""How big a run may be: hard bounds on its counts, and its memory, estimated from the spec.

Two kinds of limit keep a file that ``tunnelsmith check`` accepts from exhausting the
machine later:

* **Hard bounds** on counts that are never sensible, whatever the machine (the
  ``MAX_*`` constants below, each with the reason printed when it is exceeded). The
  reader applies them while it reads the keys, so an absurd count is refused before
  anything is computed from it.
* **A memory estimate** of every computation the commands would run on the file
  (:func:`run_steps`), compared with the memory of this machine
  (:func:`available_memory_bytes`) by :func:`check_memory`, which the reader calls last.
  A run that cannot fit is refused with the key to reduce and the value that would fit.

The estimate
------------
It is arithmetic on the spec's sizes, an upper bound of the peak of the largest step,
per process (``optimize --workers N`` runs N such processes). Notation: ``B`` designs
per physics call, ``E`` energies of the zero-bias grid, ``V`` biases of the current,
``N`` = :data:`~tunnelsmith.physics.current.DEFAULT_NODES` energy nodes per bias,
``S`` slices of the stack under bias (each layer cut into slices of at most
``slice_nm``, contacts included), ``K`` levels sought per bias (``max_levels``, capped
by the closed-box levels the stack can hold below the top of the window: a pole of
the transmission sits next to a box level, module doc of :mod:`physics.resonance`).

* Zero-bias transmission and levels (:func:`physics.metrics.evaluate`): the transfer
  kernel of :mod:`physics.transfer` holds work buffers of shape (B, E) — ten complex,
  four real and four boolean arrays, 196 bytes per element — while the loop over
  layers runs; log10 T, T and the level starts add a few real arrays:
  :data:`ZERO_BIAS_BYTES` per element (measured 221).
* The I–V sweep (:func:`physics.current.current_density`): per design and bias, the
  kernel at the N current nodes (:data:`NODE_BYTES` each; twice for an absorbing
  stack, which runs both orientations), or the quantile table of the node density,
  ``66 + 64 K`` entries of :data:`TABLE_BYTES`, whichever is larger; plus the sliced
  profile, ``S`` slices of three (four with ``gap_eV``, five with the complex band
  edges of an optical potential) 8-byte arrays, copied :data:`SLICE_COPIES` times on
  the way and once for each of the ``K + 2 + NEWTON_EXTRA_POINTS`` Newton start points
  of the level search (``K + 2`` levels at the biases where the full search runs).
* ``tunnelsmith solve`` (one design): the same evaluation, the transmission at every
  bias of the sweep, shape (V, E), :data:`SOLVE_TRANSMISSION_BYTES` per element
  (measured 239-247), and the closed-box states drawn in the band diagram: the
  eigenvectors on a :data:`BOX_GRID_nm` grid across the stack, held
  :data:`BOX_COPIES` times, for every box level below the top of the energy grid.
* The growth-tolerance study: its physics calls are chunked to
  ``POINTS_PER_CALL // (E + V N)`` designs (16 to 4096; ``designs_per_call`` of
  :mod:`optimize.model.growth`), and every sample keeps its grown layers
  (:data:`SAMPLE_LAYER_BYTES` per sample and layer, measured 66-73) and its metric
  values and reasons (:data:`SAMPLE_METRIC_BYTES` per sample and metric).
* A robust campaign evaluates ``batch (1 + robust samples)`` designs in one call.
* Every process also holds the kernel's kept work buffers (up to 2^20 elements,
  :data:`KEPT_WORKSPACE_BYTES`) and the libraries a command imports after reading the
  file (:data:`LIBRARY_BYTES`).

The per-element figures were read off the code and checked against the peak traced
by :mod:`tracemalloc` on real evaluations (``tests/test_input_audit.py`` keeps them
honest: the estimate must stay above the measured peak and within a few times it).
"""

from __future__ import annotations

import math
import os
import warnings
from dataclasses import dataclass, replace

from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.inputs.dimensions import monolayer_span_nm
from tunnelsmith.optimize.inputs.schema import (
    _MIN_IV_STEPS,
    YIELD,
    Choices,
    FloatRange,
    IntRange,
    StackSpec,
    ToleranceSpec,
)
from tunnelsmith.physics import materials as _materials
from tunnelsmith.physics.constants import HBAR2_2M0_eV_nm2, KB_eV_K
from tunnelsmith.physics.current import DEFAULT_NODES, LEVEL_SEARCH_kT, fermi_level_eV
from tunnelsmith.physics.metrics import CATALOGUE, SWEEP_METRICS
from tunnelsmith.physics.profile import DEFAULT_SLICE_nm
from tunnelsmith.physics.resonance import BOX_WALL_nm

# --------------------------------------------------------------------------- hard bounds

#: Layers between the contacts. Tunnelling structures have a few to a few tens of
#: layers and superlattices of a hundred periods some 200; the kernel loops over layers
#: (and their slices) in Python, so a stack of thousands runs for hours.
MAX_LAYERS = 500
LAYERS_REASON = (f"a resonant-tunnelling stack has a few to a few tens of layers and a 100-period "
                 f"superlattice 200; the transfer kernel loops over layers, so {MAX_LAYERS}+ layers "
                 "run for hours")

#: Levels sought per bias: the metrics use the first two, and every level adds a part
#: to the node density of the current integral at every bias.
MAX_LEVELS = 100
LEVELS_REASON = ("the metrics use the first two levels, and every level sought adds work at every bias; "
                 f"{MAX_LEVELS} levels hold a whole miniband of a 100-period superlattice")

#: Zero-bias energy grid. 200 000 points over 1 eV are 5 ueV apart, finer than k_B T at
#: 1 K (86 ueV); narrow levels are found by the pole search, not by the grid.
MAX_ENERGY_POINTS = 200_000
ENERGY_REASON = ("200000 points over 1 eV are 5 µeV apart, finer than k_B T at 1 K (86 µeV); levels "
                 "narrower than the grid are found by the pole search, not by the grid")

#: Biases of the I–V sweep: 1 mV steps over 2 V; measured I–V curves are taken at
#: 1-10 mV steps, and the peak and valley are refined by a parabola (common practice).
MAX_BIAS_STEPS = 2001
BIAS_REASON = ("2001 steps are 1 mV steps over 2 V, finer than measured I–V curves (1-10 mV, common "
               "practice); the peak and valley are refined between the steps")

#: Growth samples of a tolerance study: the 95 % Wilson interval of a yield is at most
#: +-1/sqrt(n), +-0.03 % at 10^7 samples, far below the uncertainty of the growth model.
MAX_TOLERANCE_SAMPLES = 10**7
SAMPLES_REASON = ("the 95 % interval of a yield narrows as 1/sqrt(samples), to ±0.03 % at 10^7 samples, "
                  "far below the uncertainty of the growth-error model itself")

#: Grown variants per trial of a robust campaign: each multiplies the physics of every
#: trial; the 0.1 quantile of 1000 samples is known to about +-0.01.
MAX_ROBUST_SAMPLES = 1000
ROBUST_REASON = ("every variant multiplies the physics of every trial, and the level of the 0.1 quantile of 1000 "
                 "variants is already known to about ±0.01 (sqrt(q (1 - q) / n))")

# --------------------------------------------------------------------------- mirrored sizes

# Sizes of the floors above (which this floor may not import); tests/test_input_audit.py
# checks that they agree with the originals.
#: ``optimize.model.growth.POINTS_PER_CALL`` and its clip of designs per call.
POINTS_PER_CALL = 400_000
MIN_DESIGNS_PER_CALL, MAX_DESIGNS_PER_CALL = 16, 4096
#: ``optimize.results.front._CURVE_CHUNK``: front designs re-evaluated per call.
FRONT_DESIGNS_PER_CALL = 64
#: Default ``grid_nm`` of ``physics.resonance.closed_box_states`` (solve's band diagram).
BOX_GRID_nm = 0.05
#: ``physics.resonance._TRACK_EXTRA_LEVELS``: extra levels of the searched biases.
TRACK_EXTRA_LEVELS = 2
#: ``physics.transfer._KEPT_ELEMENTS``: batch elements of work buffers kept between calls.
KEPT_ELEMENTS = 2**20

# --------------------------------------------------------------------------- bytes per element

#: Transfer kernel, per batch element: ten complex, four real, four boolean work arrays.
KERNEL_BYTES = 196
#: Zero-bias evaluation per design and energy: the kernel, log10 T, T, level starts.
ZERO_BIAS_BYTES = 256
#: Current integral per design, bias and node: the kernel, nodes, weights, supply.
NODE_BYTES = 240
#: Per entry of the quantile table of the node density (per design and bias; measured 59).
TABLE_BYTES = 64
#: Per node while the table is inverted (bracketing indices and cell ends; measured 100).
TABLE_NODE_BYTES = 100
#: Copies of the sliced profile arrays: the profile, the biased subset, the flattened
#: and folded arrays of the level search.
SLICE_COPIES = 3
#: Newton start points of the level search per bias beyond one per level sought.
NEWTON_EXTRA_POINTS = 4
#: ``tunnelsmith solve``: transmission at every bias, per bias and energy.
SOLVE_TRANSMISSION_BYTES = 260
#: Copies of the closed-box eigenvectors (LAPACK output, |psi|^2, interpolation, stack).
BOX_COPIES = 4
#: Tolerance study: grown thickness, fraction, steps and their temporaries per sample
#: and layer; per sample; per sample and metric (value, reason string, concatenation).
SAMPLE_LAYER_BYTES = 100
SAMPLE_BYTES = 64
SAMPLE_METRIC_BYTES = 150
#: Kernel work buffers kept between calls (at most KEPT_ELEMENTS elements).
KEPT_WORKSPACE_BYTES = KEPT_ELEMENTS * KERNEL_BYTES
#: Measured: Optuna, xarray, netCDF and matplotlib add ~90 MB of resident memory.
LIBRARY_BYTES = 128 * 2**20
#: What every process holds besides the arrays of its current step.
PROCESS_BYTES = KEPT_WORKSPACE_BYTES + LIBRARY_BYTES

#: Defaults of the keys that scale a run, to tell which one a file has inflated.
_DEFAULTS = {
    "energy.points": 2001, "bias.steps": 51, "search.batch": 64, "model.max_levels": 4,
    "tolerance.samples": 500, "tolerance.robust.samples": 16, "model.slice_nm": DEFAULT_SLICE_nm,
}  # fmt: skip


@dataclass(frozen=True)
class Step:
    """One computation a command runs on the file, and the memory it needs at its peak.

    Attributes
    ----------
    command : str
        The command that runs it, e.g. ``"tunnelsmith optimize"``.
    what : str
        The computation, e.g. ``"a batch of 64 designs"``.
    work_bytes : float
        Estimated peak of the arrays of the step itself.
    keys : tuple of str
        The file's keys that scale the step (dotted, as in error messages).
    """

    command: str
    what: str
    work_bytes: float
    keys: tuple[str, ...]

    @property
    def bytes(self) -> float:
        """Peak memory of the process: the step's arrays, the kernel's kept work buffers
        and the libraries of a command (:data:`PROCESS_BYTES`)."""
        return self.work_bytes + PROCESS_BYTES


def bytes_text(size_bytes: float) -> str:
    """A size in binary units: ``512 KiB``, ``8 GiB``, ``1.2 MiB``."""
    value = float(size_bytes)
    unit = "bytes"
    for unit in ("bytes", "KiB", "MiB", "GiB", "TiB", "PiB", "EiB"):
        if value < 1024.0 or unit == "EiB":
            break
        value /= 1024.0
    if unit == "bytes":
        return f"{int(value)} bytes"
    return f"{value:.0f} {unit}" if value >= 10 or value.is_integer() else f"{value:.1f} {unit}"


# --------------------------------------------------------------------------- what runs


def current_is_computed(spec: StackSpec) -> bool:
    """Whether a command computes a current on this file (so the contacts need Fermi levels).

    Campaigns do when an objective, constraint or window needs the I–V; ``tunnelsmith
    solve`` (and the tolerance study of a stack file) computes the I–V of a stack file
    whenever its sweep has the three biases a peak and a valley need.
    """
    return spec.needs_iv or (not spec.is_campaign and spec.bias.steps >= _MIN_IV_STEPS)


def _names(requests) -> set[str]:
    return {name for name, _ in requests}


def _campaign_requests(spec: StackSpec) -> list[tuple[str, float | None]]:
    return [(r.name, r.at_bias_V) for r in spec.metric_requests]


def _solve_requests(spec: StackSpec) -> list[tuple[str, float | None]]:
    # optimize.results.solution.solution_requests: every catalogue metric without a bias
    # (the I–V ones when the sweep has three biases), plus the file's own requests.
    requests = dict.fromkeys(_campaign_requests(spec))
    for name, info in CATALOGUE.items():
        if not info.takes_bias and not (info.needs_iv and spec.bias.steps < _MIN_IV_STEPS):
            requests[(name, None)] = None
    return list(requests)


def _tolerance_requests(spec: StackSpec) -> list[tuple[str, float | None]]:
    # optimize.model.growth.metric_requests: the file's metrics, else the first level's
    # energy and width and, with three biases, the I–V figures.
    requests = [r for r in _campaign_requests(spec) if r[0] != YIELD]
    if requests:
        return requests
    names = ["resonance_energy_eV", "resonance_width_eV"]
    if spec.bias.steps >= _MIN_IV_STEPS:
        names += ["peak_current_A_cm2", "peak_voltage_V", "valley_current_A_cm2", "pvcr"]
    return [(name, None) for name in names]


def _front_requests(spec: StackSpec) -> list[tuple[str, float | None]]:
    # optimize.results.front._front_curves asks for the whole sweep when only a leakage
    # current (a few biases) needs the I–V.
    requests = _campaign_requests(spec)
    if spec.needs_iv and not _names(requests) & SWEEP_METRICS:
        requests.append(("peak_current_A_cm2", None))
    return requests


def _current_biases(spec: StackSpec, requests) -> int:
    """Biases the current is computed at for ``requests``: the sweep and each leakage bias."""
    sweep = spec.bias.steps if _names(requests) & SWEEP_METRICS else 0
    leakage = {at for name, at in requests if name == "leakage_A_cm2"}
    return sweep + len(leakage)


def _designs_per_call(spec: StackSpec, requests) -> int:
    # optimize.model.growth.designs_per_call.
    iv = any(CATALOGUE[name].needs_iv for name, _ in requests if name in CATALOGUE)
    points = spec.energy.points + (spec.bias.steps * DEFAULT_NODES if iv else 0)
    return int(min(max(POINTS_PER_CALL // max(points, 1), MIN_DESIGNS_PER_CALL), MAX_DESIGNS_PER_CALL))


# --------------------------------------------------------------------------- the stack's shape


@dataclass(frozen=True)
class _Region:
    """A stretch of the stack for the level count: thickest extent, deepest edge, heaviest mass."""

    thickness_nm: float
    band_edge_eV: float
    mass: float


def _material_extremes(spec: StackSpec, material, fraction) -> tuple[float, float]:
    """Lowest band edge (eV, absolute scale) and heaviest mass over a layer's possible materials."""
    names = material.values if isinstance(material, Choices) else (material,)
    edges, masses = [], []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for name in names:
            fractions = [None]
            if name in _materials.ALLOYS:
                if isinstance(fraction, FloatRange):
                    # Bowing can put the extreme inside the range: sample it.
                    fractions = [fraction.min + (fraction.max - fraction.min) * q for q in (0, 0.25, 0.5, 0.75, 1)]
                else:
                    fractions = [fraction]
            for x in fractions:
                record = _materials.material(name, spec.temperature_K, fraction=x, user=spec.user_materials)
                edges.append(record.conduction_band_eV)
                masses.append(record.mass)
    return min(edges), max(masses)


def _thickest_nm(spec: StackSpec, layer) -> float:
    if layer.thickness_ml is not None:
        t = layer.thickness_ml
        most = t.max if isinstance(t, IntRange) else t
        return most * monolayer_span_nm(spec, layer.material, layer.fraction)[1]
    t = layer.thickness_nm
    return t.max if isinstance(t, FloatRange) else t


@dataclass(frozen=True)
class _Shape:
    """The sizes of the stack the memory depends on (the largest design of a campaign)."""

    layers: int
    thickest_nm: tuple[float, ...]
    total_nm: float
    regions: tuple[_Region, ...]
    emitter_edge_eV: float
    iv_level_top_eV: float
    absorbing: bool
    nonparabolic: bool

    def slices(self, spec: StackSpec) -> int:
        """Slices of the stack under bias, contacts included (physics.profile.slices_per_layer:
        just enough equal slices of at most ``slice_nm`` in each layer)."""
        slice_nm = DEFAULT_SLICE_nm if spec.model.slice_nm is None else spec.model.slice_nm
        count = 2
        for thickness_nm in self.thickest_nm:
            per_layer = thickness_nm / slice_nm
            count += max(1, math.ceil(per_layer - 1e-9)) if per_layer < 1e15 else 10**15
        return count

    @property
    def slice_array_bytes(self) -> int:
        """Bytes per slice of one design at one bias: band edge, mass, thickness (and gap)."""
        return 8 * (3 + self.nonparabolic + self.absorbing)

    def levels_below(self, top_eV: float, drop_V: float) -> int:
        """Upper bound on the closed-box levels below ``top_eV`` with the bands lowered by
        up to ``drop_V``: the Prüfer phase gains ``k d`` per region and less than pi/2
        per evanescent region or interface (physics.resonance.box_phase)."""
        phase = 0.0
        for region in self.regions:
            kinetic_eV = top_eV + drop_V - (region.band_edge_eV - self.emitter_edge_eV)
            if kinetic_eV > 0.0:
                phase += math.sqrt(kinetic_eV * region.mass / HBAR2_2M0_eV_nm2) * region.thickness_nm
        if not math.isfinite(phase) or phase > 1e12:
            return 10**12
        return math.ceil(1.05 * phase / math.pi) + len(self.regions) // 2 + 2


def _shape(spec: StackSpec) -> _Shape:
    regions = []
    for layer in spec.layers:
        edge, mass = _material_extremes(spec, layer.material, layer.fraction)
        regions.append(_Region(_thickest_nm(spec, layer), edge, mass))
    contacts = []
    for contact in (spec.emitter, spec.collector):
        edge, mass = _material_extremes(spec, contact.material, contact.fraction)
        contacts.append(_Region(BOX_WALL_nm, edge, mass))
    return _Shape(
        layers=len(spec.layers),
        thickest_nm=tuple(region.thickness_nm for region in regions),
        total_nm=sum(region.thickness_nm for region in regions),
        regions=tuple(regions + contacts),
        emitter_edge_eV=contacts[0].band_edge_eV,
        iv_level_top_eV=_iv_level_top_eV(spec),
        absorbing=any(layer.absorption_eV > 0 for layer in spec.layers),
        nonparabolic=spec.model.nonparabolic,
    )


def _iv_level_top_eV(spec: StackSpec) -> float:
    """Top of the level window of the current: the higher Fermi level plus LEVEL_SEARCH_kT k_B T."""
    tops = []
    for contact in (spec.emitter, spec.collector):
        if not contact.doping_cm3 > 0:
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            record = _materials.material(contact.material, spec.temperature_K, fraction=contact.fraction,
                                         user=spec.user_materials)
            tops.append(float(fermi_level_eV(contact.doping_cm3, record.mass, spec.temperature_K)))
    fermi = max(tops, default=0.0)
    reverse = max(0.0, -min(spec.bias.from_V, spec.bias.to_V))
    top = fermi + reverse + LEVEL_SEARCH_kT * KB_eV_K * spec.temperature_K
    return top if math.isfinite(top) else 1e300


# --------------------------------------------------------------------------- bytes of each computation


def _evaluation_bytes(spec: StackSpec, shape: _Shape, designs: int, requests) -> float:
    """Peak of one :func:`physics.metrics.evaluate` call on ``designs`` designs (module doc)."""
    levels = spec.model.max_levels
    drop_V = max(abs(spec.bias.from_V), abs(spec.bias.to_V))
    zero_levels = min(levels, shape.levels_below(spec.energy.to_eV, 0.0))
    energies = spec.energy.points
    complex_factor = 1.25 if shape.absorbing else 1.0
    zero = designs * energies * ZERO_BIAS_BYTES * complex_factor
    # Zero-bias level search: 3 K + 4 start points per design, each with its own layers.
    zero += designs * (3 * zero_levels + 4) * (shape.layers + 2) * shape.slice_array_bytes
    biases = _current_biases(spec, requests)
    if biases == 0:
        return zero
    iv_levels = min(levels, shape.levels_below(shape.iv_level_top_eV, drop_V)) + TRACK_EXTRA_LEVELS
    orientations = 2 if shape.absorbing else 1
    table = 66 + 64 * iv_levels
    per_bias = max(DEFAULT_NODES * NODE_BYTES * orientations * complex_factor,
                   table * TABLE_BYTES + DEFAULT_NODES * TABLE_NODE_BYTES)
    # Newton start points of the level search, each with its own copy of the slices: one
    # per level carried from the searched biases, and a few more (measured: one per level
    # when every level is found, on a 20-period superlattice).
    per_bias += shape.slices(spec) * shape.slice_array_bytes * (SLICE_COPIES + iv_levels + NEWTON_EXTRA_POINTS)
    # The zero-bias results (log10 T and T) are kept while the current runs.
    return max(zero, designs * biases * per_bias + designs * energies * 16)


def _box_bytes(spec: StackSpec, shape: _Shape) -> tuple[float, int, int]:
    """Closed-box states of ``tunnelsmith solve``: bytes, levels, grid points."""
    drop_V = max(abs(spec.bias.from_V), abs(spec.bias.to_V))
    grid = math.ceil((shape.total_nm + 2 * BOX_WALL_nm) / BOX_GRID_nm) if math.isfinite(shape.total_nm) else 10**15
    states = min(shape.levels_below(spec.energy.to_eV, drop_V), grid)
    return BOX_COPIES * states * grid * 8.0, states, grid


def _solve_bytes(spec: StackSpec, shape: _Shape) -> tuple[float, float, float]:
    """``tunnelsmith solve``: (evaluation, transmission at every bias, box states) bytes."""
    evaluation = _evaluation_bytes(spec, shape, 1, _solve_requests(spec))
    steps = spec.bias.steps
    transmission = steps * spec.energy.points * SOLVE_TRANSMISSION_BYTES
    # The level search at every bias of the sweep (no continuation in solve).
    levels = min(spec.model.max_levels, shape.levels_below(spec.energy.to_eV, max(abs(spec.bias.from_V),
                                                                                  abs(spec.bias.to_V))))
    transmission += steps * shape.slices(spec) * shape.slice_array_bytes * (SLICE_COPIES + 2 * levels + 2)
    return evaluation, transmission, _box_bytes(spec, shape)[0]


def _tolerance_bytes(spec: StackSpec, shape: _Shape, samples: int) -> tuple[float, float]:
    """Growth-tolerance study: (one chunk of the physics, the samples' arrays) bytes."""
    requests = _tolerance_requests(spec)
    chunk = _evaluation_bytes(spec, shape, _designs_per_call(spec, requests), requests)
    arrays = samples * (shape.layers * SAMPLE_LAYER_BYTES + SAMPLE_BYTES + len(requests) * SAMPLE_METRIC_BYTES)
    return chunk, arrays


def run_steps(spec: StackSpec, *, samples: int | None = None, shape: _Shape | None = None) -> list[Step]:
    """The computations the commands would run on ``spec``, with their peak memory.

    Parameters
    ----------
    spec : StackSpec
        A validated spec.
    samples : int, optional
        Growth samples of the tolerance study (``tunnelsmith tolerance --samples``);
        default ``[tolerance] samples``.
    shape : optional
        The stack's sizes as computed for ``spec`` before (they do not depend on the
        keys that :func:`check_memory` varies, so its search reuses them).

    Returns
    -------
    list of Step
        A stack file: ``tunnelsmith solve`` (evaluation, transmission at every bias,
        closed-box states) and, with ``[tolerance]``, the tolerance study. A campaign:
        a batch of ``tunnelsmith optimize``, the front curves of ``tunnelsmith front``
        and, with ``[tolerance]``, the tolerance study of a front design. Each step
        includes the fixed cost of a process (kept work buffers and libraries).
    """
    shape = _shape(spec) if shape is None else shape
    grid_keys = ("energy.points",)
    iv_keys = ("bias.steps", "model.max_levels", "model.slice_nm")
    steps: list[Step] = []
    if spec.is_campaign:
        requests = _campaign_requests(spec)
        iv = iv_keys if _current_biases(spec, requests) else ()
        robust = spec.tolerance.robust if spec.tolerance is not None else None
        batch = spec.search.batch * (1 + robust.samples) if robust is not None else spec.search.batch
        robust_keys = ("tolerance.robust.samples",) if robust is not None else ()
        per_batch = _evaluation_bytes(spec, shape, batch, requests)
        if robust is not None:
            # The grown variants of the batch (their layers), drawn before the physics.
            per_batch += spec.search.batch * robust.samples * shape.layers * SAMPLE_LAYER_BYTES
        steps.append(Step("tunnelsmith optimize", f"a batch of {spec.search.batch} designs"
                          + (f" × {1 + robust.samples} grown variants" if robust is not None else ""),
                          per_batch, grid_keys + iv + ("search.batch",) + robust_keys))
        front = _front_requests(spec)
        steps.append(Step("tunnelsmith front", f"{FRONT_DESIGNS_PER_CALL} front designs per call",
                          _evaluation_bytes(spec, shape, FRONT_DESIGNS_PER_CALL, front),
                          grid_keys + (iv_keys if _current_biases(spec, front) else ())))
    else:
        evaluation, transmission, box = _solve_bytes(spec, shape)
        iv = iv_keys if _current_biases(spec, _solve_requests(spec)) else ()
        steps.append(Step("tunnelsmith solve", "the metrics", evaluation, grid_keys + iv))
        steps.append(Step("tunnelsmith solve", f"the transmission at {spec.bias.steps} biases × "
                          f"{spec.energy.points} energies", transmission,
                          grid_keys + ("bias.steps", "model.slice_nm")))
        _, states, grid = _box_bytes(spec, shape)
        steps.append(Step("tunnelsmith solve", f"up to {states} closed-box states on {grid} grid points across "
                          f"the {_nm_text(shape.total_nm)} nm stack", box, ("layer",)))
    if spec.tolerance is not None:
        count = spec.tolerance.samples if samples is None else int(samples)
        chunk, arrays = _tolerance_bytes(spec, shape, count)
        iv = iv_keys if _current_biases(spec, _tolerance_requests(spec)) else ()
        steps.append(Step("tunnelsmith tolerance", f"{count} growth samples", chunk + arrays,
                          ("tolerance.samples",) + grid_keys + iv))
    return steps


# --------------------------------------------------------------------------- the machine


def _physical_memory_bytes() -> int | None:
    """The machine's physical memory: ``SC_PAGE_SIZE * SC_PHYS_PAGES``, else /proc/meminfo."""
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        pass
    try:
        with open("/proc/meminfo", encoding="ascii") as handle:
            for line in handle:
                name, _, value = line.partition(":")
                if name == "MemTotal":
                    return int(value.split()[0]) * 1024  # the file counts in kB
    except (OSError, ValueError, IndexError):
        return None
    return None


def _cgroup_limit_bytes() -> int | None:
    """The memory limit of this process's control group (cgroup v2, then v1), or None."""
    for limit_file in ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes"):
        try:
            with open(limit_file, encoding="ascii") as handle:
                limit = handle.read().strip()
        except OSError:
            continue
        if not limit.isdigit() or int(limit) >= 2**60:
            return None  # "max" (v2) or a huge number (v1): no limit
        return int(limit)
    return None


def _address_space_headroom_bytes() -> int | None:
    """What ``RLIMIT_AS`` still lets this process map, or None without a limit."""
    try:
        import resource

        soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    except (ImportError, OSError, ValueError):
        return None
    if soft == resource.RLIM_INFINITY:
        return None
    mapped = 0
    try:
        with open("/proc/self/status", encoding="ascii") as handle:
            for line in handle:
                if line.startswith("VmSize:"):
                    mapped = int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    return max(soft - mapped, 0)


def available_memory_bytes() -> int | None:
    """The most memory a run can have on this machine, or None when it cannot be told.

    The smallest of the physical memory (``SC_PAGE_SIZE * SC_PHYS_PAGES``), the limit of
    the process's memory control group (a container's share) and what ``RLIMIT_AS``
    leaves this process. It is the machine's capacity, not what happens to be free at
    the moment: whether a file can run on a machine does not change with the load of
    the moment, so ``tunnelsmith check`` gives the same answer every time.
    """
    candidates = [_physical_memory_bytes(), _cgroup_limit_bytes(), _address_space_headroom_bytes()]
    known = [c for c in candidates if c is not None and c > 0]
    return min(known) if known else None


# --------------------------------------------------------------------------- the check


def _with(spec: StackSpec, key: str, value) -> StackSpec:
    """``spec`` with one scaling key set to ``value``."""
    if key == "energy.points":
        return replace(spec, energy=replace(spec.energy, points=value))
    if key == "bias.steps":
        return replace(spec, bias=replace(spec.bias, steps=value))
    if key == "search.batch":
        return replace(spec, search=replace(spec.search, batch=value))
    if key == "model.max_levels":
        return replace(spec, model=replace(spec.model, max_levels=value))
    if key == "model.slice_nm":
        return replace(spec, model=replace(spec.model, slice_nm=value))
    if key == "tolerance.samples":
        return replace(spec, tolerance=replace(spec.tolerance or ToleranceSpec(), samples=value))
    if key == "tolerance.robust.samples":
        return replace(spec, tolerance=replace(spec.tolerance, robust=replace(spec.tolerance.robust, samples=value)))
    raise KeyError(key)


def _value(spec: StackSpec, key: str):
    section, _, name = key.rpartition(".")
    holder = {"energy": spec.energy, "bias": spec.bias, "search": spec.search, "model": spec.model,
              "tolerance": spec.tolerance, "tolerance.robust": spec.tolerance.robust if spec.tolerance else None}
    value = getattr(holder[section], name)
    return DEFAULT_SLICE_nm if key == "model.slice_nm" and value is None else value


def _inflation(spec: StackSpec, key: str) -> float:
    """How far a key is above its default (below, for slice_nm): the likelier culprit first."""
    value = _value(spec, key)
    return _DEFAULTS[key] / value if key == "model.slice_nm" else value / _DEFAULTS[key]


def _nm_text(length_nm: float) -> str:
    """A length in nm as written in a file: whole nanometres from 100 nm up."""
    return f"{length_nm:.0f}" if 100 <= length_nm < 1e15 else f"{length_nm:.3g}"


def _fmt_value(value) -> str:
    return str(value) if isinstance(value, int) else f"{value:g}"


def _peak(spec: StackSpec, command: str, samples: int | None, shape: _Shape) -> float:
    steps = run_steps(spec, samples=samples, shape=shape)
    return max((s.bytes for s in steps if s.command == command), default=0.0)


def _fitting_value(spec: StackSpec, step: Step, key: str, available: float, samples: int | None, shape: _Shape):
    """The value of ``key`` closest to the file's for which ``step``'s command fits, or None."""
    def fits(value) -> bool:
        return _peak(_with(spec, key, value), step.command, samples, shape) <= available

    current = _value(spec, key)
    if key == "model.slice_nm":
        # A coarser slice needs less, but only down to the default is it as accurate.
        if current >= DEFAULT_SLICE_nm or not fits(DEFAULT_SLICE_nm):
            return None
        lo, hi = current, DEFAULT_SLICE_nm  # fits(hi), not fits(lo)
        for _ in range(40):
            middle = math.sqrt(lo * hi)
            lo, hi = (lo, middle) if fits(middle) else (middle, hi)
        return float(f"{hi:.2g}") if fits(float(f"{hi:.2g}")) else hi
    smallest = {"bias.steps": _MIN_IV_STEPS if current_is_computed(spec) else 1, "energy.points": 2,
                "tolerance.robust.samples": 2}.get(key, 1)
    if key == "tolerance.samples" and samples is not None:
        return None  # the command line sets the samples, not the file
    if current <= smallest or not fits(smallest):
        return None
    lo, hi = smallest, current  # fits(lo), not fits(hi)
    while hi - lo > 1:
        middle = (lo + hi) // 2
        lo, hi = (middle, hi) if fits(middle) else (lo, middle)
    return lo


def check_memory(spec: StackSpec, *, available_bytes: float | None = None, samples: int | None = None) -> None:
    """Refuse a spec whose largest step would not fit in this machine's memory.

    Parameters
    ----------
    spec : StackSpec
        A validated spec.
    available_bytes : float, optional
        Memory the run may take; default :func:`available_memory_bytes` (no check when
        that cannot be told).
    samples : int, optional
        Growth samples given on the command line (overrides ``[tolerance] samples``).

    Raises
    ------
    InputError
        Naming the key to reduce (the one furthest above its default that can make the
        step fit), the memory the step needs and the value that fits on this machine.
    """
    available = available_memory_bytes() if available_bytes is None else available_bytes
    if available is None:
        return
    shape = _shape(spec)
    steps = run_steps(spec, samples=samples, shape=shape)
    step = max(steps, key=lambda s: s.bytes)
    if step.bytes <= available:
        return
    need = (f"{step.command} needs about {bytes_text(step.bytes)} of memory ({step.what}), more than the "
            f"{bytes_text(available)} of this machine")
    if step.keys == ("layer",):
        # Grid points and levels both grow with the thickness: the memory with its square.
        scale = math.sqrt(max(available - PROCESS_BYTES, 0.0) / max(step.work_bytes, 1.0))
        raise InputError(spec.path, "layer", need,
                         f"a stack up to about {_nm_text(shape.total_nm * scale)} nm thick (this one is "
                         f"{_nm_text(shape.total_nm)} nm) fits on this machine: make the layers thinner or "
                         "fewer, or run on a machine with more memory")
    keys = sorted((k for k in step.keys if k != "layer"), key=lambda k: -_inflation(spec, k))
    for key in keys:
        value = _fitting_value(spec, step, key, available, samples, shape)
        if value is not None:
            others = _other_remedies(spec, [k for k in keys if k != key])
            also = f" (or {others})" if others else ""
            if key == "model.slice_nm":
                fix = f"set {key} = {value} or more (coarser slices), which fits on this machine{also}"
            else:
                fix = f"set {key} = {value} or less, which fits on this machine{also}"
            name = key.rpartition(".")[2]
            raise InputError(spec.path, key, f"with {name} = {_fmt_value(_value(spec, key))}, {need}", fix)
    key = keys[0] if keys else None
    remedies = _other_remedies(spec, keys)
    raise InputError(spec.path, key, need,
                     f"{remedies + ', or ' if remedies else ''}run on a machine with more memory")


def _other_remedies(spec: StackSpec, keys: list[str]) -> str:
    """``reduce a, b or raise model.slice_nm``: what else makes a step smaller."""
    reduce = [k for k in keys if k != "model.slice_nm"]
    parts = [f"reduce {', '.join(reduce)}"] if reduce else []
    if "model.slice_nm" in keys and _value(spec, "model.slice_nm") < DEFAULT_SLICE_nm:
        parts.append("raise model.slice_nm")  # only up to the default is it as accurate
    return " or ".join(parts)
