"""Pareto front and trial table of a campaign, from its storage, as netCDF.

Everything here only *reads* the Optuna storage, so it runs at any time, also while
workers are adding trials (``tunnelsmith front RUN_DIR``).

The front
---------
The non-dominated set (:func:`nondominated_mask`) of the feasible ``COMPLETE`` trials
(every constraint value ``<= 0``), in the objective values as told to Optuna, each
turned to minimisation (maximised objectives negated). A design proposed more than once
appears once, as its first trial.

Hypervolume
-----------
The volume dominated by the front (Zitzler & Thiele, IEEE Trans. Evol. Comput. 3, 257,
1999) in a normalised objective space: each objective, turned to minimisation, is
mapped linearly so that 0 is the best and 1 the worst value over all feasible complete
trials; the reference point is 1.1 in every objective (stored as the attribute
``hypervolume_reference_point``; the bounds are the variables ``objective_best`` and
``objective_worst``). A value of 1.1^m would mean one design best in every one of m
objectives. :func:`hypervolume` computes it exactly by slicing along the last
objective (the "hypervolume by slicing objectives" scheme, While et al., IEEE Trans.
Evol. Comput. 10, 29, 2006) down to an exact two-objective sweep.

Files (DESIGN.md §4)
--------------------
``front.nc``: coords ``design`` (trial number), ``layer``, ``objective`` (label),
``constraint`` (key), ``energy`` (eV), ``bias`` (V, when the campaign computes
currents); ``objective_value(design, objective)``, ``thickness_nm``, ``monolayers``,
``material``, ``fraction`` ``(design, layer)``, one ``(design)`` variable per metric
(label in ``long_name`` and ``metric_label``; names made netCDF-safe by
:func:`netcdf_name`), ``transmission(design, energy)`` at zero bias and
``current_density(design, bias)`` recomputed through the physics for the front designs,
``constraint_violation(design, constraint)``, and per objective ``objective_goal``,
``objective_target``, ``objective_log``, ``objective_units``, ``objective_best``,
``objective_worst``.

``trials.nc``: coord ``trial`` (trial number); ``state`` (Optuna state name),
``objective_value(trial, objective)``, ``constraint_violation(trial, constraint)``,
``feasible``, ``counted`` (counts towards the budget), ``on_front``, the layer arrays and
metrics as in ``front.nc``, ``failure`` (why a trial failed), ``retry_of``, and the
hypervolume history ``history_hypervolume(history)`` against
``history_finished(history)`` (finished trials, in completion order).

Global attributes: ``campaign_toml``, ``software_version``, ``created_utc``,
``model_caution``, ``campaign_name``, ``campaign_sha256``, ``sampler``, ``storage``
(password removed), ``n_trials``, ``n_finished_trials``, ``n_complete_trials``,
``n_feasible_trials``, ``hypervolume``, ``hypervolume_reference_point``.
"""

from __future__ import annotations

import math
import warnings
import numpy as np
import xarray as xr
from optuna.trial import FrozenTrial, TrialState
from tunnelsmith.optimize.model import objectives as objectives_module
from tunnelsmith.optimize.io import netcdf_name
from tunnelsmith.physics.metrics import SWEEP_METRICS
from tunnelsmith.optimize.search.pareto import hypervolume, merge_front, nondominated_mask
from tunnelsmith.optimize.model.evaluation import evaluate_metrics


#: Reference point of the normalised hypervolume, in every objective.
HYPERVOLUME_REFERENCE = 1.1


#: Points of the hypervolume history in trials.nc.
HISTORY_POINTS = 200


#: Front designs re-evaluated per physics call (curves for front.nc).
_CURVE_CHUNK = 64


#: Front designs listed in the terminal summary.
SUMMARY_DESIGNS = 10


_LOST_WORKER = "abandoned: its worker stopped responding (the design was retried)"


_UNIT_SUFFIXES = (("_A_cm2", "A cm-2"), ("_W_cm2", "W cm-2"), ("_eV", "eV"), ("_nm", "nm"), ("_V", "V"))


def metric_units(label: str) -> str:
    """Units of a metric (from the catalogue, else from its name's suffix)."""
    name = label.removeprefix("nominal_").partition("@")[0]
    try:
        from tunnelsmith.physics.metrics import CATALOGUE

        if name in CATALOGUE:
            return _cf_units(CATALOGUE[name].units)
    except ImportError:
        pass
    for suffix, unit in _UNIT_SUFFIXES:
        if name.endswith(suffix):
            return unit
    return "1"


def _cf_units(units: str) -> str:
    text = str(units).strip()
    return {"": "1", "A/cm^2": "A cm-2", "A/cm2": "A cm-2", "A/cm²": "A cm-2", "W/cm^2": "W cm-2",
            "W/cm2": "W cm-2", "W/cm²": "W cm-2", "dimensionless": "1"}.get(text, text)


def _metric_long_name(label: str) -> str:
    name = label.removeprefix("nominal_").partition("@")[0]
    try:
        from tunnelsmith.physics.metrics import CATALOGUE

        if name in CATALOGUE:
            long_name = CATALOGUE[name].long_name
            if "@" in label:
                long_name += f" at {label.partition('@')[2]}"
            return ("nominal " if label.startswith("nominal_") else "") + long_name
    except ImportError:
        pass
    return label


def _objective_units(objective) -> str:
    if objective.log:
        return "1"  # decades
    return metric_units(objective.metric)


def _float(value) -> float:
    return np.nan if value is None else float(value)


def _design_arrays(spec, trials: list[FrozenTrial]):
    """(material names, fraction, thickness_nm, monolayers), each (n, L), from the storage."""
    from tunnelsmith.optimize.model import space
    from tunnelsmith.optimize.search.records import ATTR_DESIGN
    from tunnelsmith.optimize.model.stack import material_arrays, split_material

    n, n_layers = len(trials), len(spec.layers)
    material = np.full((n, n_layers), "", dtype=object)
    fraction = np.full((n, n_layers), np.nan)
    thickness = np.full((n, n_layers), np.nan)
    from_params = []
    for i, trial in enumerate(trials):
        design = trial.user_attrs.get(ATTR_DESIGN)
        if design is not None and len(design.get("material", ())) == n_layers:
            material[i] = design["material"]
            fraction[i] = [_float(x) for x in design["fraction"]]
            thickness[i] = [_float(x) for x in design["thickness_nm"]]
        elif trial.params:
            from_params.append(i)
    wanted = set(space.distributions(spec))
    from_params = [i for i in from_params if wanted <= set(trials[i].params)]
    if from_params:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            batch = space.batch_from_params(spec, [trials[i].params for i in from_params])
        material[from_params] = batch.material_names()
        fraction[from_params] = batch.fraction
        thickness[from_params] = batch.thickness_nm

    monolayers = np.full((n, n_layers), np.nan)
    known = material != ""
    if known.any():
        split = {name: split_material(name) for name in set(material[known].tolist())}
        base = np.where(known, material, "GaAs").astype(object)
        frac = fraction.copy()
        for name, (b, f) in split.items():
            where = material == name
            base[where] = b
            frac[where] = np.where(np.isnan(fraction[where]), f, fraction[where])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            lattice = material_arrays(base, frac, spec.temperature_K, spec.user_materials)["lattice_nm"]
        monolayers = np.where(known, thickness / (lattice / 2.0), np.nan)
    return material, fraction, thickness, monolayers


def _failure_text(trial: FrozenTrial) -> str:
    from tunnelsmith.optimize.search.records import ATTR_FAILURE

    failure = trial.user_attrs.get(ATTR_FAILURE)
    if failure:
        return str(failure)
    if trial.state == TrialState.FAIL:
        return _LOST_WORKER
    return ""


def _minimised(spec, values: np.ndarray) -> np.ndarray:
    signs = np.array([-1.0 if d == "maximize" else 1.0 for d in objectives_module.directions(spec)])
    return values * signs


def _metric_labels(spec, trials: list[FrozenTrial]) -> list[str]:
    from tunnelsmith.optimize.search.records import ATTR_METRICS

    labels = [r.label for r in spec.metric_requests]
    seen = set(labels)
    for trial in trials:
        for label in trial.user_attrs.get(ATTR_METRICS, {}):
            if label not in seen:
                seen.add(label)
                labels.append(label)
    return labels


class _Table:
    """Every trial of a study as arrays (rows in trial-number order)."""

    def __init__(self, study, spec) -> None:
        from tunnelsmith.optimize.search.records import ATTR_METRICS, ATTR_RETRY_OF, counts_toward_budget

        trials = sorted(study.get_trials(deepcopy=False), key=lambda t: t.number)
        self.trials = trials
        n, m = len(trials), len(spec.objectives)
        self.number = np.array([t.number for t in trials], dtype=np.int64)
        self.state = np.array([t.state.name for t in trials], dtype=object)
        self.values = np.full((n, m), np.nan)
        for i, trial in enumerate(trials):
            if trial.state == TrialState.COMPLETE and trial.values is not None and len(trial.values) == m:
                self.values[i] = trial.values
        self.constraint_keys = objectives_module.constraint_keys(spec)
        self.violation = np.full((n, len(self.constraint_keys)), np.nan)
        for i, trial in enumerate(trials):
            constraints = trial.constraints
            for k, key in enumerate(self.constraint_keys):
                if key in constraints:
                    self.violation[i, k] = constraints[key]
        complete = self.state == "COMPLETE"
        self.feasible = complete & np.all(~(self.violation > 0.0), axis=1) & np.all(np.isfinite(self.values), axis=1)
        self.counted = np.array([counts_toward_budget(t) for t in trials], dtype=bool)
        self.failure = np.array([_failure_text(t) for t in trials], dtype=object)
        self.retry_of = np.array([int(t.user_attrs.get(ATTR_RETRY_OF, -1)) for t in trials], dtype=np.int64)
        self.metric_labels = _metric_labels(spec, trials)
        self.metrics = {label: np.array([_float(t.user_attrs.get(ATTR_METRICS, {}).get(label)) for t in trials])
                        for label in self.metric_labels}
        self.material, self.fraction, self.thickness_nm, self.monolayers = _design_arrays(spec, trials)
        self.minimised = _minimised(spec, self.values)
        self.on_front = np.zeros(n, bool)
        feasible = np.flatnonzero(self.feasible)
        self.on_front[feasible[nondominated_mask(self.minimised[feasible])]] = True
        # A sampler may propose a design again: the front lists each design once, as
        # its first trial.
        seen = set()
        for i in np.flatnonzero(self.on_front):
            key = (tuple(self.material[i]), tuple(np.round(self.thickness_nm[i], 9)),
                   tuple(np.nan_to_num(self.fraction[i], nan=-1.0).round(9)))
            if key in seen:
                self.on_front[i] = False
            seen.add(key)
        finite = self.minimised[self.feasible]
        self.best = finite.min(axis=0) if len(finite) else np.full(m, np.nan)
        self.worst = finite.max(axis=0) if len(finite) else np.full(m, np.nan)
        completed = [t.datetime_complete.timestamp() if t.datetime_complete else math.inf for t in trials]
        self.completion_order = np.argsort(np.array(completed), kind="stable")

    def normalised(self, rows) -> np.ndarray:
        span = np.where(self.worst > self.best, self.worst - self.best, 1.0)
        return (self.minimised[rows] - self.best) / span

    def front_hypervolume(self) -> float:
        if not self.on_front.any():
            return 0.0
        return hypervolume(self.normalised(self.on_front), HYPERVOLUME_REFERENCE)

    def history(self) -> tuple[np.ndarray, np.ndarray]:
        """Hypervolume of the front of the first k finished trials (completion order)."""
        order = [i for i in self.completion_order if self.counted[i]]
        if not order:
            return np.zeros(0, np.int64), np.zeros(0)
        marks = np.unique(np.linspace(1, len(order), min(HISTORY_POINTS, len(order))).round().astype(int))
        normalised = self.normalised(np.arange(len(self.trials)))
        order = np.asarray(order)
        front = np.empty((0, normalised.shape[1]))
        volumes = []
        start = 0
        # One merge per history point (at most HISTORY_POINTS), not one per trial: the
        # history costs O(n log n) in the trials instead of a Python step for each.
        for mark in marks:
            segment = order[start:mark]
            segment = segment[self.feasible[segment]]
            if segment.size:
                front = merge_front(front, normalised[segment])
            volumes.append(hypervolume(front, HYPERVOLUME_REFERENCE))
            start = mark
        return marks.astype(np.int64), np.array(volumes)


def _attrs(units: str, long_name: str, **extra) -> dict:
    return {"units": units, "long_name": long_name, **extra}


def _text_array(values) -> np.ndarray:
    return np.asarray(values, dtype=object).astype(str).astype(object)


def _layer_variables(table: _Table, rows, dim: str) -> dict:
    dims = (dim, "layer")
    return {
        "thickness_nm": (dims, table.thickness_nm[rows], _attrs("nm", "layer thickness")),
        "monolayers": (dims, table.monolayers[rows],
                       _attrs("1", "layer thickness in monolayers (half the cubic lattice constant, (001) growth)")),
        "material": (dims, _text_array(table.material[rows]), _attrs("", "layer material")),
        "fraction": (dims, table.fraction[rows],
                     _attrs("1", "alloy fraction of the first-named cation (NaN: binary or user material)")),
    }


def _metric_variables(table: _Table, rows, dim: str) -> dict:
    out = {}
    for label in table.metric_labels:
        out[netcdf_name(label)] = ((dim,), table.metrics[label][rows],
                                   _attrs(metric_units(label), _metric_long_name(label), metric_label=label))
    return out


def _objective_variables(spec, table: _Table) -> dict:
    units = [_objective_units(o) for o in spec.objectives]
    return {
        "objective_goal": (("objective",), _text_array(["target" if o.target is not None else o.goal
                                                         for o in spec.objectives]),
                           _attrs("", "objective goal: maximize, minimize, or target (minimise |value - target|)")),
        "objective_direction": (("objective",), _text_array(objectives_module.directions(spec)),
                                _attrs("", "direction told to the optimiser")),
        "objective_target": (("objective",), np.array([_float(o.target) for o in spec.objectives]),
                             _attrs("mixed (see objective_units)", "target value of the metric (NaN: none)")),
        "objective_log": (("objective",), np.array([int(bool(o.log)) for o in spec.objectives], np.int8),
                          _attrs("1", "1 when the objective is on log10 of the metric")),
        "objective_metric": (("objective",), _text_array([o.request.label for o in spec.objectives]),
                             _attrs("", "metric label of the objective")),
        "objective_units": (("objective",), _text_array(units), _attrs("", "units of objective_value")),
        "objective_best": (("objective",), table.best,
                           _attrs("mixed (see objective_units)",
                                  "best value over feasible complete trials, minimisation form (hypervolume 0)")),
        "objective_worst": (("objective",), table.worst,
                            _attrs("mixed (see objective_units)",
                                   "worst value over feasible complete trials, minimisation form (hypervolume 1)")),
    }


def _objective_value_attrs(spec) -> dict:
    units = {_objective_units(o) for o in spec.objectives}
    unit = units.pop() if len(units) == 1 else "mixed (see objective_units)"
    return _attrs(unit, "objective value as told to the optimiser (|value - target| for targets, "
                        "log10 where objective_log)")


def _global_attrs(spec, study, table: _Table, storage_url: str | None) -> dict:
    from tunnelsmith.optimize.search.storage import redact_url
    from tunnelsmith.optimize.io import provenance_attrs

    attrs = provenance_attrs(spec.text)
    attrs.update({
        "campaign_name": spec.name,
        "campaign_sha256": spec.sha256,
        "study_name": study.study_name,
        "sampler": spec.search.sampler,
        "storage": redact_url(storage_url) if storage_url else "journal file campaign.journal in the run directory",
        "n_trials": int(len(table.trials)),
        "n_finished_trials": int(table.counted.sum()),
        "n_complete_trials": int((table.state == "COMPLETE").sum()),
        "n_feasible_trials": int(table.feasible.sum()),
        "hypervolume": float(table.front_hypervolume()),
        "hypervolume_reference_point": HYPERVOLUME_REFERENCE,
        "hypervolume_space": "objectives in minimisation form, scaled to 0 (objective_best) .. 1 (objective_worst)",
        "Conventions": "CF-1.10",
    })
    return attrs


def _front_curves(spec, table: _Table, rows: np.ndarray):
    """Zero-bias transmission (n, nE) and current density (n, nV) or None, recomputed."""
    from tunnelsmith.optimize.model.stack import DesignBatch, split_material, to_device

    n_energy = spec.energy.points
    transmission = np.full((len(rows), n_energy), np.nan)
    current = np.full((len(rows), spec.bias.steps), np.nan) if spec.needs_iv else None
    if len(rows) == 0:
        return transmission, current
    split = [[split_material(str(name)) for name in table.material[r]] for r in rows]
    base = np.array([[b for b, _ in row] for row in split], dtype=object)
    parsed = np.array([[f for _, f in row] for row in split], dtype=float)
    fraction = np.where(np.isnan(table.fraction[rows]), parsed, table.fraction[rows])
    batch = DesignBatch(tuple(layer.name for layer in spec.layers), base, fraction, table.thickness_nm[rows])
    requests = list(spec.metric_requests)
    if spec.needs_iv and not any(r.name in SWEEP_METRICS for r in requests):
        # Currents at a few stated biases only (leakage): ask for the whole sweep, whose
        # curve the front file carries.
        from tunnelsmith.physics.metrics import MetricRequest

        requests.append(MetricRequest("peak_current_A_cm2"))
    for start in range(0, len(rows), _CURVE_CHUNK):
        index = slice(start, start + _CURVE_CHUNK)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            evaluation = evaluate_metrics(spec, to_device(spec, batch.take(index)), requests)
        transmission[index] = evaluation.transmission
        if current is not None and evaluation.current_density_A_cm2 is not None:
            current[index] = evaluation.current_density_A_cm2
    return transmission, current


def build_datasets(study, spec, *, storage_url: str | None = None, curves: bool = True) -> tuple[xr.Dataset, xr.Dataset]:
    """``front.nc`` and ``trials.nc`` Datasets of a campaign's study (layout in the module docstring).

    Parameters
    ----------
    study : optuna.Study
    spec : tunnelsmith.optimize.inputs.schema.StackSpec
        The campaign the study was run with.
    storage_url : str, optional
        Recorded (password removed) in the attributes.
    curves : bool
        Recompute transmission and current of the front designs through the physics.
    """
    table = _Table(study, spec)
    labels = objectives_module.objective_labels(spec)
    layers = [layer.name for layer in spec.layers]
    attrs = _global_attrs(spec, study, table, storage_url)

    rows = np.flatnonzero(table.on_front)
    front_vars = {
        "objective_value": (("design", "objective"), table.values[rows], _objective_value_attrs(spec)),
        "constraint_violation": (("design", "constraint"), table.violation[rows],
                                 _attrs("1", "constraint value, scaled by its bound (<= 0 feasible)")),
        **_layer_variables(table, rows, "design"),
        **_metric_variables(table, rows, "design"),
        **_objective_variables(spec, table),
    }
    coords = {
        "design": ("design", table.number[rows], _attrs("1", "trial number of the front design")),
        "layer": ("layer", _text_array(layers), _attrs("", "layer name, emitter side first")),
        "objective": ("objective", _text_array(labels), _attrs("", "objective label")),
        "constraint": ("constraint", _text_array(table.constraint_keys), _attrs("", "constraint bound")),
        "energy": ("energy", spec.energy.values, _attrs("eV", "electron energy above the emitter band edge at zero bias")),
    }
    if curves:
        transmission, current = _front_curves(spec, table, rows)
        front_vars["transmission"] = (("design", "energy"), transmission,
                                      _attrs("1", "transmission probability at zero bias"))
        if current is not None:
            coords["bias"] = ("bias", spec.bias.values, _attrs("V", "applied bias (collector lowered)"))
            front_vars["current_density"] = (("design", "bias"), current,
                                              _attrs("A cm-2", "current density (Tsu-Esaki)"))
    front_ds = xr.Dataset(front_vars, coords=coords, attrs=dict(attrs, title=f"Pareto front of campaign {spec.name}"))
    from tunnelsmith.optimize.results.choice import mirror_of

    twin = mirror_of(front_ds) if front_ds.sizes.get("design", 0) else np.zeros(0, int)
    front_ds["mirror_of"] = ("design", np.where(twin >= 0, front_ds["design"].values[np.maximum(twin, 0)], -1),
                             {"long_name": "trial number of an earlier front design that is this stack reversed "
                                           "(-1: none)", "units": "1"})

    everything = np.arange(len(table.trials))
    finished, volume = table.history()
    trial_vars = {
        "state": (("trial",), _text_array(table.state), _attrs("", "Optuna trial state")),
        "objective_value": (("trial", "objective"), table.values, _objective_value_attrs(spec)),
        "constraint_violation": (("trial", "constraint"), table.violation,
                                 _attrs("1", "constraint value, scaled by its bound (<= 0 feasible)")),
        "feasible": (("trial",), table.feasible.astype(np.int8),
                     _attrs("1", "1: complete and every constraint met")),
        "counted": (("trial",), table.counted.astype(np.int8),
                    _attrs("1", "1: finished in the sense of the budget (complete, or failed by the evaluation)")),
        "on_front": (("trial",), table.on_front.astype(np.int8), _attrs("1", "1: on the Pareto front")),
        "failure": (("trial",), _text_array(table.failure), _attrs("", "why the trial failed (empty: it did not)")),
        "retry_of": (("trial",), table.retry_of,
                     _attrs("1", "trial whose design this trial retries after its worker died (-1: none)")),
        **_layer_variables(table, everything, "trial"),
        **_metric_variables(table, everything, "trial"),
        **_objective_variables(spec, table),
        "history_finished": (("history",), finished, _attrs("1", "finished trials, in completion order")),
        "history_hypervolume": (("history",), volume,
                                _attrs("1", "normalised hypervolume of the front of the first finished trials")),
    }
    trial_coords = {key: value for key, value in coords.items() if key not in ("design", "energy", "bias")}
    trial_coords["trial"] = ("trial", table.number, _attrs("1", "Optuna trial number"))
    trials_ds = xr.Dataset(trial_vars, coords=trial_coords, attrs=dict(attrs, title=f"Trials of campaign {spec.name}"))
    return front_ds, trials_ds


def _fmt(value: float) -> str:
    return "nan" if not np.isfinite(value) else f"{value:.4g}"


def design_lines(front_ds: xr.Dataset, d: int, note: str = "") -> list[str]:
    """The objectives and layers of front design ``d`` (index), as indented text lines."""
    labels = [str(x) for x in front_ds["objective"].values]
    layers = [str(x) for x in front_ds["layer"].values]
    width = max(len(name) for name in layers)
    number = int(front_ds["design"].values[d])
    objectives_text = ", ".join(f"{label} = {_fmt(v)}" for label, v in zip(labels, front_ds["objective_value"].values[d]))
    lines = [f"  trial {number}{note}: {objectives_text}"]
    for j, name in enumerate(layers):
        material = str(front_ds["material"].values[d, j])
        ml = float(front_ds["monolayers"].values[d, j])
        nm = float(front_ds["thickness_nm"].values[d, j])
        ml_text = f"{ml:5.0f} ml" if np.isfinite(ml) and abs(ml - round(ml)) < 0.05 else f"{ml:5.1f} ml"
        lines.append(f"      {name:<{width}}  {material:<18} {ml_text}  {nm:7.3f} nm")
    return lines


def summary_table(spec, front_ds: xr.Dataset, trials_ds: xr.Dataset | None = None,
                  limit: int = SUMMARY_DESIGNS) -> str:
    """Terminal summary: the balanced design, the best of each objective, then the rest.

    Order: :func:`~tunnelsmith.optimize.results.choice.balanced_order` (distance to the
    ideal point); mirror-image twins of a design already listed are left out and counted.
    """
    from tunnelsmith.optimize.results.choice import balanced_order, best_of_each_objective

    n_front = front_ds.sizes.get("design", 0)
    attrs = front_ds.attrs
    lines = [f'campaign "{spec.name}": {attrs.get("n_finished_trials", "?")} finished trials, '
             f'{attrs.get("n_feasible_trials", "?")} feasible, {n_front} on the front, '
             f'hypervolume {attrs.get("hypervolume", float("nan")):.4g} (normalised, reference '
             f'{HYPERVOLUME_REFERENCE:g})']
    if n_front == 0:
        lines.append("  no feasible design yet")
        return "\n".join(lines)
    labels = [str(x) for x in front_ds["objective"].values]
    twins = np.asarray(front_ds["mirror_of"].values)  # trial number of the twin listed first, or -1
    balanced = balanced_order(front_ds)
    notes = {int(balanced[0]): " (balanced: nearest the ideal point)"}
    for k, d in enumerate(best_of_each_objective(front_ds)):
        notes[d] = notes.get(d, "") + f" (best {labels[k]})"
    order = list(dict.fromkeys([int(balanced[0]), *best_of_each_objective(front_ds), *map(int, balanced)]))
    order = [d for d in order if twins[d] < 0]
    shown = order[:limit]
    lines.append("front designs: the balanced one, the best of each objective, then by distance to the ideal point:")
    for d in shown:
        lines += design_lines(front_ds, d, notes.get(d, ""))
    hidden = int(np.count_nonzero(twins >= 0))
    if hidden:
        lines.append(f"  {hidden} designs are mirror images of others (the same stack reversed) and are not listed")
    if len(order) > len(shown):
        lines.append(f"  ... {len(order) - len(shown)} more designs in front.nc (tunnelsmith front RUN_DIR --pick ...)")
    return "\n".join(lines)
