"""The tolerance study of one design and its Dataset (``tolerance.nc``) and summary.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, replace
import numpy as np
from tunnelsmith.optimize.model.stack import DesignBatch, monolayer_nm
from tunnelsmith.optimize.model.growth import GrowthErrors, draw_growth_errors, evaluate_designs, inside_all_windows, inside_window, metric_requests, monolayer_sensitivity, tolerance_settings, wilson_interval


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

    from tunnelsmith.optimize.io import provenance_attrs
    from tunnelsmith.physics.metrics import CATALOGUE

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
