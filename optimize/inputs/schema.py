"""What a stack or campaign file holds: immutable dataclasses, the one schema.

:func:`tunnelsmith.optimize.inputs.reader.load` fills a :class:`StackSpec` from a TOML
file; everything above this floor reads specs and never TOML. Units follow the field
names: eV, nm, monolayers (ml), K, V, cm^-3, A/cm^2.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path
import numpy as np
from tunnelsmith.physics.metrics import CATALOGUE as METRICS  # noqa: F401  (part of the schema)
from tunnelsmith.physics.metrics import MetricInfo, MetricRequest  # noqa: F401  (part of the schema)




#: Share of Monte Carlo growth samples meeting every [[tolerance.spec]] window.
YIELD = "yield"


#: Optuna samplers a campaign may name.
SAMPLERS = ("nsga2", "tpe", "gp", "random", "qmc")


# An I–V metric locates a peak and a valley, which needs at least three biases.
_MIN_IV_STEPS = 3


@dataclass(frozen=True)
class IntRange:
    """Whole numbers ``min, min + 1, ..., max`` (both ends included)."""

    min: int
    max: int

    @property
    def size(self) -> int:
        """Number of distinct values."""
        return self.max - self.min + 1


@dataclass(frozen=True)
class FloatRange:
    """Real numbers from ``min`` to ``max``; on a grid of ``step`` when one is given."""

    min: float
    max: float
    step: float | None = None

    @property
    def size(self) -> int | None:
        """Number of grid values, 1 for ``min == max``, ``None`` when continuous."""
        if self.min == self.max:
            return 1
        if self.step is None:
            return None
        return int(round((self.max - self.min) / self.step)) + 1


@dataclass(frozen=True)
class Choices:
    """A categorical choice between material names."""

    values: tuple[str, ...]

    @property
    def size(self) -> int:
        """Number of choices."""
        return len(self.values)


@dataclass(frozen=True)
class BiasSweep:
    """Evenly spaced biases from ``from_V`` to ``to_V`` (both included), in V."""

    from_V: float = 0.0
    to_V: float = 1.0
    steps: int = 51

    @property
    def values(self) -> np.ndarray:
        """The biases, shape ``(steps,)``, V."""
        return np.linspace(self.from_V, self.to_V, self.steps)


@dataclass(frozen=True)
class EnergyGrid:
    """Evenly spaced energies for zero-bias transmission, eV above the emitter edge."""

    from_eV: float = 0.0
    to_eV: float = 1.0
    points: int = 2001

    @property
    def values(self) -> np.ndarray:
        """The energies, shape ``(points,)``, eV."""
        return np.linspace(self.from_eV, self.to_eV, self.points)


@dataclass(frozen=True)
class ModelSpec:
    """Model switches: non-parabolic masses, bias slice thickness (nm), levels kept, and the
    area-specific series resistance (Ohm cm^2; 0: the intrinsic curve)."""

    nonparabolic: bool = False
    slice_nm: float | None = None
    max_levels: int = 4
    series_resistance_ohm_cm2: float = 0.0


@dataclass(frozen=True)
class ContactSpec:
    """A doped contact (emitter or collector), doping in cm^-3."""

    material: str
    fraction: float | None
    doping_cm3: float


@dataclass(frozen=True)
class LayerSpec:
    """One layer between the contacts; any value may be a search range.

    Exactly one of ``thickness_ml`` (whole monolayers) and ``thickness_nm`` is set.
    ``like`` names the root layer this layer is tied to (its values are copies of the
    root's). ``absorption_eV`` is a phenomenological optical potential W >= 0 (the band
    edge becomes U - iW) that broadens resonances.
    """

    name: str
    material: str | Choices
    fraction: float | FloatRange | None
    thickness_ml: int | IntRange | None
    thickness_nm: float | FloatRange | None
    like: str | None = None
    absorption_eV: float = 0.0

    @property
    def searched(self) -> bool:
        """Whether any value of this layer is a search range."""
        return any(
            isinstance(value, (IntRange, FloatRange, Choices))
            for value in (self.material, self.fraction, self.thickness_ml, self.thickness_nm)
        )


@dataclass(frozen=True)
class ObjectiveSpec:
    """One objective: a metric to maximise or minimise, or to bring close to a target.

    With ``target`` the objective is ``|value - target|`` (minimised); with ``log`` the
    metric (and the target) is taken as log10 first.
    """

    metric: str
    goal: str | None = None
    target: float | None = None
    log: bool = False
    at_bias_V: float | None = None

    @property
    def request(self) -> MetricRequest:
        """The metric evaluation this objective needs."""
        return MetricRequest(self.metric, self.at_bias_V)

    @property
    def direction(self) -> str:
        """Optuna study direction, ``"maximize"`` or ``"minimize"``."""
        return "minimize" if self.target is not None else self.goal

    @property
    def label(self) -> str:
        """Readable, unique name, e.g. ``pvcr`` or ``|resonance_energy_eV − 0.15|``."""
        value = f"log10 {self.request.label}" if self.log else self.request.label
        if self.target is None:
            return value
        target = f"log10 {self.target:g}" if self.log else f"{self.target:g}"
        return f"|{value} − {target}|"


@dataclass(frozen=True)
class _BoundedMetric:
    """A metric that must stay within ``[min, max]`` (either bound may be absent)."""

    metric: str
    min: float | None = None
    max: float | None = None
    at_bias_V: float | None = None

    @property
    def request(self) -> MetricRequest:
        """The metric evaluation this bound needs."""
        return MetricRequest(self.metric, self.at_bias_V)

    @property
    def label(self) -> str:
        """Readable form, e.g. ``0.14 ≤ resonance_energy_eV ≤ 0.16``."""
        text = self.request.label
        if self.min is not None:
            text = f"{self.min:g} ≤ {text}"
        if self.max is not None:
            text = f"{text} ≤ {self.max:g}"
        return text


@dataclass(frozen=True)
class ConstraintSpec(_BoundedMetric):
    """A feasibility constraint of the search."""


@dataclass(frozen=True)
class WindowSpec(_BoundedMetric):
    """A specification window of the growth-tolerance analysis (defines the yield)."""


@dataclass(frozen=True)
class SearchSpec:
    """Search settings: Optuna sampler, trial budget, batch size, seed, time limit (h)."""

    sampler: str = "nsga2"
    trials: int = 1000
    batch: int = 64
    seed: int | None = None
    timeout_h: float | None = None


@dataclass(frozen=True)
class RobustSpec:
    """Optimise under growth error: each trial is scored on ``samples`` grown variants.

    ``statistic = "quantile"`` scores the pessimistic ``quantile`` of each objective
    (the low tail for maximised objectives, the high tail for minimised ones);
    ``"mean"`` scores the mean.
    """

    samples: int = 16
    quantile: float = 0.1
    statistic: str = "quantile"


@dataclass(frozen=True)
class ToleranceSpec:
    """Growth-error model and specification windows.

    ``thickness_sigma_ml``: per-layer thickness error (monolayers, rounded to whole
    monolayers); ``growth_rate_sigma``: one relative growth-rate factor for the whole
    stack; ``fraction_sigma``: per-material composition error.
    """

    thickness_sigma_ml: float = 0.5
    growth_rate_sigma: float = 0.01
    fraction_sigma: float = 0.005
    samples: int = 500
    seed: int = 0
    robust: RobustSpec | None = None
    windows: tuple[WindowSpec, ...] = ()


@dataclass(frozen=True)
class StackSpec:
    """A validated stack or campaign file."""

    path: Path
    text: str
    name: str
    description: str
    temperature_K: float
    emitter: ContactSpec
    collector: ContactSpec
    layers: tuple[LayerSpec, ...]
    user_materials: dict[str, dict[str, float]]
    bias: BiasSweep
    energy: EnergyGrid
    model: ModelSpec
    objectives: tuple[ObjectiveSpec, ...]
    constraints: tuple[ConstraintSpec, ...]
    search: SearchSpec
    tolerance: ToleranceSpec | None
    is_campaign: bool
    warnings: tuple[str, ...] = ()

    @property
    def located_warnings(self) -> tuple[str, ...]:
        """The warnings as printed: ``<file>: <key>: <message>``."""
        return tuple(f"{self.path}: {warning}" for warning in self.warnings)

    @property
    def sha256(self) -> str:
        """SHA-256 of the file text (UTF-8), hex."""
        return hashlib.sha256(self.text.encode("utf-8")).hexdigest()

    @property
    def metric_requests(self) -> tuple[MetricRequest, ...]:
        """Metric evaluations needed by objectives, constraints and windows (no yield)."""
        bounded = self.constraints + (self.tolerance.windows if self.tolerance else ())
        requests = [item.request for item in self.objectives + bounded]
        return tuple(dict.fromkeys(r for r in requests if r.name != YIELD))

    @property
    def needs_iv(self) -> bool:
        """Whether any requested metric needs the I–V sweep."""
        return any(METRICS[r.name].needs_iv for r in self.metric_requests)
