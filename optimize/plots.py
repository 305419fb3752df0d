"""Engineering figures drawn from the saved result Datasets.

Every figure is drawn from an xarray Dataset with the layouts of ``solution.nc``,
``front.nc``/``trials.nc`` and ``tolerance.nc`` (DESIGN.md §4), never from live
solver objects, so any run can be re-plotted later without recomputation. The
readers are tolerant: a variable or attribute that a run did not produce is simply
not drawn.

Conventions follow the rest of the package: energies in eV relative to the emitter
band edge at zero bias, positions in nm from the emitter side, bias in V, current
density in A/cm², thicknesses in nm (monolayers where stored).

Each public function writes PNG files atomically (drawn to a hidden temporary name in
the target directory, then moved into place, by :func:`optimize.io.save_figure`) so that a reader
polling the run directory, e.g. while a campaign is running, never sees a half-written
image. Colours come from the Okabe–Ito palette (Okabe & Ito, "Color Universal Design",
2008), which stays distinguishable under the common colour-vision deficiencies.
"""

from __future__ import annotations

import functools
import math
import re
import sys
import tomllib
from collections.abc import Callable, Iterable
from pathlib import Path

import matplotlib

# Headless rendering for command-line runs and workers. When pyplot is already loaded
# (an interactive session) its backend is left alone: switching it would close the
# user's open figures, and these functions never go through pyplot anyway.
if "matplotlib.pyplot" not in sys.modules:
    matplotlib.use("Agg")

import numpy as np
import xarray as xr
from matplotlib import transforms
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import MaxNLocator

from tunnelsmith.optimize.io import netcdf_name, save_figure

__all__ = ["FOOTER", "plot_solution", "plot_campaign", "plot_tolerance"]

FOOTER = "coherent single-valley model — ranks designs, does not replace wafer measurements"

# Okabe–Ito colours, ordered for line plots (yellow last: low contrast on white).
BLUE, VERMILLION, GREEN, PURPLE, ORANGE, SKY, BLACK, YELLOW = (
    "#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000", "#F0E442",
)
LINE_COLOURS = (BLUE, VERMILLION, GREEN, PURPLE, ORANGE, SKY, BLACK)
# Leading designs keep one colour across figures; vermillion is reserved for the front.
DESIGN_COLOURS = (BLUE, GREEN, PURPLE, ORANGE, SKY, BLACK)
GREY = "#9a9a9a"
_DPI = 150
_FOOTER_HEIGHT_IN = 0.24

_STYLE = {
    "font.size": 9,
    "axes.titlesize": 10,
    "axes.labelsize": 9,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "axes.axisbelow": True,
    "axes.prop_cycle": matplotlib.cycler(color=LINE_COLOURS),
    "grid.color": "#dcdcdc",
    "grid.linewidth": 0.6,
    "legend.frameon": False,
    "legend.fontsize": 8,
    "figure.facecolor": "white",
    "savefig.facecolor": "white",
    "lines.linewidth": 1.4,
}

# Metric-name suffixes that carry units (DESIGN.md §3 catalogue), longest first.
_UNIT_SUFFIXES = (("_A_cm2", "A/cm²"), ("_W_cm2", "W/cm²"), ("_eV", "eV"), ("_nm", "nm"), ("_V", "V"), ("_s", "s"))
_METRIC_WORDS = {"pvcr": "peak-to-valley current ratio"}
_CONTACT_PREFIXES = ("emitter", "collector", "contact")


# ----------------------------------------------------------------------------- plumbing


def _styled(function: Callable) -> Callable:
    """Run a plotting function under the package style without touching global rcParams."""

    @functools.wraps(function)
    def wrapper(*args, **kwargs):
        with matplotlib.rc_context(_STYLE):
            return function(*args, **kwargs)

    return wrapper


def _new_figure(width_in: float, height_in: float) -> Figure:
    """A figure with constrained layout and the model caution as a footer.

    ``Figure`` is used directly (not pyplot) so no global figure registry holds on to
    images between calls; the layout rectangle leaves room for the footer.
    """
    figure = Figure(figsize=(width_in, height_in), dpi=_DPI, layout="constrained")
    footer_fraction = _FOOTER_HEIGHT_IN / height_in
    figure.get_layout_engine().set(rect=(0.0, footer_fraction, 1.0, 1.0 - footer_fraction))
    figure.text(0.008, 0.25 * footer_fraction, FOOTER, ha="left", va="bottom",
                fontsize=7, color="#666666", style="italic")
    return figure


def _save(figure: Figure, out_dir: Path, file_name: str) -> Path:
    """Write ``figure`` to ``out_dir/file_name`` atomically and return the final path."""
    return save_figure(figure, out_dir / file_name, format="png", dpi=_DPI)


def _prepare_dir(out_dir) -> Path:
    path = Path(out_dir)
    path.mkdir(parents=True, exist_ok=True)
    return path


def _text(value) -> str:
    """A label from whatever netCDF gave back: str, bytes, numpy scalar, NaN/None."""
    if value is None:
        return ""
    if isinstance(value, bytes | np.bytes_):
        return value.decode("utf-8", "replace")
    if isinstance(value, float | np.floating) and math.isnan(value):
        return ""
    return str(value)


def _key(name: str) -> str:
    """Normalised name for tolerant matching of attribute and variable names."""
    return re.sub(r"[^0-9a-z]+", "_", str(name).lower()).strip("_")


def _finite_float(value) -> float | None:
    try:
        number = float(np.asarray(value, dtype=float).reshape(-1)[0]) if np.size(value) == 1 else None
    except (TypeError, ValueError):
        return None
    return number if number is not None and math.isfinite(number) else None


def _scalar(ds: xr.Dataset, name: str) -> float | None:
    """A finite 0-d variable (or global attribute) ``name``, else None."""
    if name in ds.variables and ds[name].size == 1:
        return _finite_float(ds[name].values)
    if name in ds.attrs:
        return _finite_float(ds.attrs[name])
    return None


def _attr(ds: xr.Dataset, name: str):
    """Global attribute by normalised name; None when absent."""
    wanted = _key(name)
    for attr_name, value in ds.attrs.items():
        if _key(attr_name) == wanted:
            return value
    return None


def _labels(ds: xr.Dataset, dim: str) -> list[str]:
    if dim not in ds.coords and dim not in ds.dims:
        return []
    return [_text(v) for v in ds[dim].values]


def _per_label(ds: xr.Dataset, base: str, label: str, dim: str):
    """Value of ``base`` for one label of coordinate ``dim``.

    Looked up, in order, as a variable ``base(dim)``, a global attribute
    ``<base>_<label>``, or an array attribute ``base`` aligned with ``dim`` (on the
    Dataset or on the coordinate). Returns None when absent.
    """
    labels = _labels(ds, dim)
    if base in ds.variables and ds[base].dims == (dim,) and label in labels:
        value = ds[base].values[labels.index(label)]
        return _text(value) if isinstance(value, str | bytes | np.str_ | np.bytes_) else value
    value = _attr(ds, f"{base}_{label}")
    if value is not None:
        return value
    for holder in (ds.attrs, ds[dim].attrs if dim in ds.coords else {}):
        value = holder.get(base)
        if value is None or label not in labels:
            continue
        if isinstance(value, str):
            value = [part for part in re.split(r"[,\s]+", value) if part]
        values = list(np.atleast_1d(value))
        if len(values) == len(labels):
            return values[labels.index(label)]
    return None


def _run_name(ds: xr.Dataset | None) -> str:
    """The stack or campaign name from the attributes or the stored input file."""
    if ds is None:
        return ""
    for name in ("name", "campaign_name", "stack_name"):
        if ds.attrs.get(name):
            return _text(ds.attrs[name])
    text = ds.attrs.get("campaign_toml")
    if isinstance(text, str):
        try:
            document = tomllib.loads(text)
        except tomllib.TOMLDecodeError:
            return ""
        campaign = document.get("campaign")
        if isinstance(campaign, dict) and isinstance(campaign.get("name"), str):
            return campaign["name"]
        if isinstance(document.get("name"), str):
            return document["name"]
    return ""


def _titled(title: str, name: str) -> str:
    return f"{title} — {name}" if name else title


def _metric_unit(label: str) -> str:
    name = label.partition("@")[0]
    for suffix, unit in _UNIT_SUFFIXES:
        if name.endswith(suffix):
            return unit
    return ""


def _metric_words(label: str) -> str:
    """``"leakage_A_cm2@0.05V"`` → ``"leakage at 0.05 V"``."""
    name, _, at = label.partition("@")
    for suffix, _unit in _UNIT_SUFFIXES:
        if name.endswith(suffix):
            name = name[: -len(suffix)]
            break
    words = _METRIC_WORDS.get(name, name.replace("_", " "))
    if at:
        words += " at " + re.sub(r"(?<=\d)V$", " V", at)
    return words


def _metric_axis_label(label: str, units: str = "") -> str:
    unit = _metric_unit(label) or units
    words = _metric_words(label)
    return f"{words} ({unit})" if unit else words


def _positive_span_decades(values: np.ndarray) -> float:
    finite = values[np.isfinite(values)]
    if finite.size == 0 or np.any(finite <= 0):
        return 0.0
    return float(np.log10(finite.max() / finite.min()))


def _format_width_eV(width_eV: float) -> str:
    for scale, unit in ((1.0, "eV"), (1e-3, "meV"), (1e-6, "µeV"), (1e-9, "neV")):
        if abs(width_eV) >= scale:
            return f"{width_eV / scale:.3g} {unit}"
    return f"{width_eV:.2g} eV"


def _current_scale(values_A_cm2: np.ndarray) -> tuple[float, str]:
    """A factor and unit that keep current densities in a readable 1–1000 range."""
    finite = np.abs(values_A_cm2[np.isfinite(values_A_cm2)])
    peak = finite.max() if finite.size else 0.0
    for factor, unit in ((1e6, "MA/cm²"), (1e3, "kA/cm²")):
        if peak >= factor:
            return factor, unit
    return 1.0, "A/cm²"


def _dim_like(da: xr.DataArray, *fragments: str) -> str | None:
    for dim in da.dims:
        if any(fragment in dim.lower() for fragment in fragments):
            return dim
    return None


def _coord_values(ds: xr.Dataset, da: xr.DataArray, dim: str) -> np.ndarray:
    if dim in da.coords:
        return np.asarray(da[dim].values, dtype=float)
    if dim in ds.coords:
        return np.asarray(ds[dim].values, dtype=float)
    # a dimension without a coordinate may carry its values in a unit-suffixed variable
    for name in (f"{dim}_nm", f"{dim}_V", f"{dim}_eV"):
        if name in ds.variables and ds[name].dims == (dim,):
            return np.asarray(ds[name].values, dtype=float)
    return np.arange(da.sizes[dim], dtype=float)


def _nearest_index(values: np.ndarray, target: float) -> int | None:
    """Index of the value nearest ``target`` if it lies within half a grid step."""
    values = np.asarray(values, dtype=float)
    if values.size == 0 or not math.isfinite(target):
        return None
    index = int(np.nanargmin(np.abs(values - target)))
    steps = np.abs(np.diff(np.sort(values)))
    steps = steps[steps > 0]
    tolerance = 0.5 * float(np.min(steps)) if steps.size else 1e-9
    return index if abs(values[index] - target) <= max(tolerance, 1e-9) else None


def _material_label(material: str, fraction) -> str:
    fraction = _finite_float(fraction)
    if fraction is None or any(char.isdigit() for char in material):
        return material
    return f"{material} x={fraction:.2f}"


def _tint(colour: str, amount: float = 0.55) -> tuple[float, float, float]:
    """Blend a colour with white: light fills that keep black text readable."""
    rgb = np.asarray(matplotlib.colors.to_rgb(colour))
    return tuple(rgb + (1.0 - rgb) * amount)


def _material_colours(materials: Iterable[str]) -> dict[str, tuple]:
    """A stable fill colour per material, in order of first appearance."""
    palette = [_tint(c) for c in (SKY, ORANGE, GREEN, PURPLE, BLUE, VERMILLION, YELLOW)]
    colours: dict[str, tuple] = {}
    for material in materials:
        if material and material not in colours:
            colours[material] = palette[len(colours) % len(palette)]
    return colours


def _is_contact(layer_name: str) -> bool:
    return _key(layer_name).startswith(_CONTACT_PREFIXES)


def _hide_unused(axes: np.ndarray, used: int) -> None:
    for ax in axes.flat[used:]:
        ax.set_visible(False)


def _grid_shape(count: int, max_columns: int = 3) -> tuple[int, int]:
    columns = min(count, max_columns)
    return math.ceil(count / columns), columns


# ----------------------------------------------------------------------------- solution


def _transmission(ds: xr.Dataset, name: str = "transmission") -> xr.DataArray | None:
    if name in ds.variables:
        return ds[name]
    log_name = f"log10_{name}"
    if log_name in ds.variables:
        return 10.0 ** ds[log_name]
    return None


def _bias_choices(ds: xr.Dataset, biases: np.ndarray) -> list[tuple[int, str]]:
    """Indices and captions of the characteristic biases: zero, peak, valley, highest."""
    chosen: list[tuple[int, str]] = []

    def add(index: int | None, caption: str) -> None:
        if index is not None and index not in [i for i, _ in chosen]:
            chosen.append((index, caption))

    if biases.size == 0:
        return chosen
    add(int(np.argmin(np.abs(biases))), "zero bias")
    for metric, caption in (("peak_voltage_V", "current peak"), ("valley_voltage_V", "current valley")):
        value = _scalar(ds, metric)
        if value is not None:
            add(_nearest_index(biases, value), caption)
    add(int(np.argmax(np.abs(biases))), "highest bias")
    return chosen


def _levels_at(ds: xr.Dataset, bias_V: float) -> tuple[np.ndarray, np.ndarray]:
    """Resonance energies and widths (eV) at the stored bias nearest ``bias_V``."""
    empty = np.array([])
    if "resonance_energy" not in ds.variables:
        return empty, empty
    energy = ds["resonance_energy"]
    width = ds["resonance_width"] if "resonance_width" in ds.variables else xr.full_like(energy, np.nan)
    bias_dim = _dim_like(energy, "bias")
    if bias_dim is not None:
        index = _nearest_index(_coord_values(ds, energy, bias_dim), bias_V)
        if index is None:
            return empty, empty
        energy, width = energy.isel({bias_dim: index}), width.isel({bias_dim: index}, missing_dims="ignore")
    elif abs(bias_V) > 1e-9:
        return empty, empty
    return np.atleast_1d(np.asarray(energy.values, float)), np.atleast_1d(np.asarray(width.values, float))


def _states_at(ds: xr.Dataset, bias_V: float) -> list[tuple[float, np.ndarray, np.ndarray]]:
    """(energy_eV, position_nm, |ψ|²) of the stored quasi-bound states at ``bias_V``."""
    if "state_energy" not in ds.variables or "state_probability" not in ds.variables:
        return []
    energy, probability = ds["state_energy"], ds["state_probability"]
    position_dim = _dim_like(probability, "position", "z_nm")
    if position_dim is None:
        return []
    bias_dim = _dim_like(probability, "bias")
    if bias_dim is not None:
        index = _nearest_index(_coord_values(ds, probability, bias_dim), bias_V)
        if index is None:
            return []
        probability = probability.isel({bias_dim: index})
        energy = energy.isel({_dim_like(energy, "bias") or bias_dim: index}, missing_dims="ignore")
    elif abs(bias_V) > 1e-9:
        return []
    position_nm = _coord_values(ds, probability, position_dim)
    state_dims = [d for d in probability.dims if d != position_dim]
    probability = probability.transpose(*state_dims, position_dim)
    energies = np.atleast_1d(np.asarray(energy.values, float))
    rows = np.asarray(probability.values, float).reshape(-1, position_nm.size)
    return [(float(e), position_nm, row) for e, row in zip(energies, rows, strict=False)
            if math.isfinite(e) and np.any(np.isfinite(row))]


def _layer_table(ds: xr.Dataset) -> list[tuple[str, str, float, float]]:
    """(name, material, start_nm, end_nm) of the stored layers."""
    if "layer_start" not in ds.variables or "layer_end" not in ds.variables:
        return []
    names = _labels(ds, "layer") or [str(i) for i in range(ds["layer_start"].size)]
    starts = np.asarray(ds["layer_start"].values, float).reshape(-1)
    ends = np.asarray(ds["layer_end"].values, float).reshape(-1)
    if "layer_material" in ds.variables:
        materials = [_text(v) for v in np.asarray(ds["layer_material"].values).reshape(-1)]
    else:
        materials = [""] * starts.size
    return [(n, m, s, e) for n, m, s, e in zip(names, materials, starts, ends, strict=False)
            if math.isfinite(s) and math.isfinite(e)]


def _shade_layers(ax, layers, colours: dict[str, tuple], points_per_nm: float) -> None:
    """Shade each layer in its material colour and name it at the top of the axes.

    A label is written across the layer when it fits, upright when only that fits, and
    left out for layers too thin for any text (a single monolayer, say).
    """
    font_pt = 6.5
    top = transforms.blended_transform_factory(ax.transData, ax.transAxes)
    for name, material, start, end in layers:
        ax.axvspan(start, end, color=colours.get(material, "#f0f0f0"), alpha=0.45, lw=0, zorder=0)
        ax.axvline(start, color="#bbbbbb", lw=0.5, zorder=0.5)
        width_pt = (end - start) * points_per_nm
        lines = [name, material] if material else [name]
        if width_pt >= 0.6 * font_pt * max(map(len, lines)) + 3:
            rotation = 0
        elif width_pt >= 1.25 * font_pt * len(lines):
            rotation = 90
        elif width_pt >= 1.25 * font_pt:
            rotation, lines = 90, [name]
        else:
            continue
        ax.text(0.5 * (start + end), 0.985, "\n".join(lines), transform=top, ha="center", va="top",
                fontsize=font_pt, linespacing=1.1, rotation=rotation, color="#333333", clip_on=True)


def _label_contacts(ax, position_nm: np.ndarray, inner_start: float, inner_end: float) -> None:
    """Name the contact regions drawn beyond the layer table."""
    top = transforms.blended_transform_factory(ax.transData, ax.transAxes)
    for name, low, high in (("emitter", position_nm.min(), inner_start), ("collector", inner_end, position_nm.max())):
        if high > low:
            ax.text(0.5 * (low + high), 0.985, name, transform=top, ha="center", va="top", fontsize=6.5,
                    color="#555555", style="italic")


def _band_diagram(ds: xr.Dataset, out_dir: Path, name: str) -> Path:
    edge = ds["band_edge"]
    position_dim = _dim_like(edge, "position", "z_nm") or edge.dims[-1]
    bias_dim = _dim_like(edge, "bias")
    position_nm = _coord_values(ds, edge, position_dim)
    if bias_dim is None:
        panels = [(0.0, "zero bias", np.real(np.asarray(edge.values, float)).reshape(-1))]
    else:
        biases = _coord_values(ds, edge, bias_dim)
        edge = edge.transpose(bias_dim, position_dim)
        choices = [c for c in _bias_choices(ds, biases) if c[1] != "current valley"]
        panels = [(float(biases[i]), caption, np.real(np.asarray(edge.values[i], float)))
                  for i, caption in choices]

    layers = _layer_table(ds)
    colours = _material_colours(m for _, m, _, _ in layers)
    inner = [(s, e) for n, _, s, e in layers if not _is_contact(n)] or [(position_nm.min(), position_nm.max())]
    inner_start, inner_end = min(s for s, _ in inner), max(e for _, e in inner)

    panel_data = []
    low, high = np.inf, -np.inf
    for bias_V, caption, profile in panels:
        levels, _widths = _levels_at(ds, bias_V)
        states = _states_at(ds, bias_V)
        energies = np.concatenate([profile, levels, [s[0] for s in states]])
        energies = energies[np.isfinite(energies)]
        low, high = min(low, energies.min()), max(high, energies.max())
        panel_data.append((bias_V, caption, profile, levels, states))
    span = max(high - low, 0.05)
    psi_height = 0.1 * span

    panel_width_in = 4.0
    figure = _new_figure(panel_width_in * len(panels) + 0.8, 4.8)
    # the axes take roughly 85 % of a panel once tick labels are placed
    points_per_nm = 72.0 * 0.85 * panel_width_in / max(np.ptp(position_nm), 1e-9)
    axes = np.atleast_1d(figure.subplots(1, len(panels), sharey=True, squeeze=False)[0])
    for ax, (bias_V, caption, profile, levels, states) in zip(axes, panel_data, strict=True):
        _shade_layers(ax, layers, colours, points_per_nm)
        if not any(_is_contact(n) for n, *_ in layers):
            _label_contacts(ax, position_nm, inner_start, inner_end)
        ax.plot(position_nm, profile, drawstyle="steps-post", color=BLACK, lw=1.6, zorder=3,
                label="conduction-band edge")
        for number, energy in enumerate(levels):
            if math.isfinite(energy):
                colour = LINE_COLOURS[number % len(LINE_COLOURS)]
                ax.hlines(energy, inner_start, inner_end, colors=colour, linestyles="--", lw=1.1, zorder=4)
                ax.annotate(f"E{number + 1} {energy:.3f} eV", (inner_end, energy), xytext=(2, 1),
                            textcoords="offset points", fontsize=7, color=colour, va="bottom", ha="left")
        for number, (energy, z_nm, probability) in enumerate(states):
            peak = np.nanmax(probability)
            if not peak > 0:
                continue
            colour = LINE_COLOURS[number % len(LINE_COLOURS)]
            # drawn only where the state lives, so the baselines do not cross the whole box
            present = np.flatnonzero(probability > 1e-3 * peak)
            where = slice(present[0], present[-1] + 1)
            curve = energy + psi_height * probability[where] / peak
            ax.fill_between(z_nm[where], energy, curve, color=colour, alpha=0.25, lw=0, zorder=5)
            ax.plot(z_nm[where], curve, color=colour, lw=0.9, zorder=5)
        ax.set_title(caption if bias_V == 0.0 else f"{caption}, {bias_V:.3g} V")
        ax.set_xlabel("position from emitter (nm)")
        ax.set_xlim(position_nm.min(), position_nm.max())
        ax.grid(False)
    axes[0].set_ylabel("energy above emitter edge at 0 V (eV)")
    axes[0].set_ylim(low - 0.08 * span, high + 0.45 * span)
    handles = [Line2D([], [], color=BLACK, lw=1.6, label="band edge"),
               Line2D([], [], color=BLUE, ls="--", lw=1.1, label="resonance level")]
    if any(p[4] for p in panel_data):
        handles.append(Patch(color=BLUE, alpha=0.25, label="|ψ|² (scaled, offset to level)"))
    axes[-1].legend(handles=handles, loc="lower left", fontsize=7)
    figure.suptitle(_titled("Conduction-band profile and quasi-bound levels", name))
    return _save(figure, out_dir, "band_diagram.png")


def _solution_transmission(ds: xr.Dataset, transmission: xr.DataArray, out_dir: Path, name: str) -> Path:
    energy_dim = _dim_like(transmission, "energy") or transmission.dims[-1]
    energy_eV = _coord_values(ds, transmission, energy_dim)
    bias_dim = _dim_like(transmission, "bias")
    if bias_dim is None:
        curves = [(0.0, "zero bias", np.asarray(transmission.values, float).reshape(-1))]
    else:
        biases = _coord_values(ds, transmission, bias_dim)
        transmission = transmission.transpose(bias_dim, energy_dim)
        choices = _bias_choices(ds, biases)
        curves = [(float(biases[i]), caption, np.asarray(transmission.values[i], float)) for i, caption in choices]

    figure = _new_figure(9.5, 4.8)
    ax = figure.subplots()
    positive = []
    for number, (bias_V, caption, values) in enumerate(curves):
        colour = LINE_COLOURS[number % len(LINE_COLOURS)]
        shown = np.where(values > 0, values, np.nan)
        positive.append(shown[np.isfinite(shown)])
        label = f"{bias_V:.3g} V" + ("" if caption == "zero bias" and bias_V == 0 else f" ({caption})")
        ax.plot(energy_eV, shown, color=colour, lw=1.5 if number == 0 else 1.0, label=label)
        if number > 0:
            levels, _ = _levels_at(ds, bias_V)
            levels = levels[np.isfinite(levels) & (levels >= energy_eV.min()) & (levels <= energy_eV.max())]
            ax.plot(levels, np.full(levels.shape, 1.6), "v", color=colour, ms=5, clip_on=False)
    ax.set_yscale("log")
    values = np.concatenate(positive) if positive else np.array([])
    lowest = float(values.min()) if values.size else 1e-12
    # one spare decade below the lowest curve holds the resonance notes
    ax.set_ylim(10.0 ** (math.floor(math.log10(max(lowest, 1e-60))) - 1), 2.0)
    ax.set_xlim(energy_eV.min(), energy_eV.max())

    levels, widths = _levels_at(ds, 0.0)
    text_y = (0.03, 0.16)  # bottom of a log plot: below the off-resonance floor
    for number, (energy, width) in enumerate(zip(levels, widths, strict=True)):
        if not (math.isfinite(energy) and energy_eV.min() <= energy <= energy_eV.max()):
            continue
        ax.axvline(energy, color=GREY, ls=":", lw=1.0, zorder=1)
        note = f"E{number + 1} = {energy:.4g} eV"
        if math.isfinite(width):
            note += f"\nΓ = {_format_width_eV(width)}"
        ax.annotate(note, (energy, text_y[number % 2]), xycoords=("data", "axes fraction"),
                    xytext=(3, 0), textcoords="offset points", fontsize=7, color="#333333", va="bottom",
                    bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none", alpha=0.8))
    ax.set_xlabel("electron energy above emitter edge at 0 V (eV)")
    ax.set_ylabel("transmission probability")
    handles, _ = ax.get_legend_handles_labels()
    if len(curves) > 1:
        handles.append(Line2D([], [], marker="v", ls="none", color=GREY, label="resonance at that bias"))
    handles.append(Line2D([], [], ls=":", color=GREY, label="resonance at 0 V (width Γ = FWHM)"))
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1.0), title="bias", alignment="left")
    figure.suptitle(_titled("Transmission through the stack", name))
    return _save(figure, out_dir, "transmission.png")


def _solution_current(ds: xr.Dataset, out_dir: Path, name: str) -> Path:
    current = ds["current_density"]
    bias_dim = _dim_like(current, "bias") or current.dims[0]
    bias_V = _coord_values(ds, current, bias_dim)
    values = np.asarray(current.values, float).reshape(-1)
    factor, unit = _current_scale(values)

    figure = _new_figure(10.0, 4.4)
    linear, logarithmic = figure.subplots(1, 2, width_ratios=(3, 2))
    linear.plot(bias_V, values / factor, color=BLUE, marker=".", ms=3)
    logarithmic.plot(bias_V, np.where(np.abs(values) > 0, np.abs(values), np.nan), color=BLUE, marker=".", ms=3)
    logarithmic.set_yscale("log")

    notes = []
    for kind, marker, colour in (("peak", "^", VERMILLION), ("valley", "v", GREEN)):
        voltage, density = _scalar(ds, f"{kind}_voltage_V"), _scalar(ds, f"{kind}_current_A_cm2")
        if voltage is None or density is None:
            continue
        for ax, scale in ((linear, factor), (logarithmic, 1.0)):
            ax.plot([voltage], [density / scale], marker, color=colour, ms=8, mec=BLACK, mew=0.6, zorder=5,
                    label=kind)
        notes.append(f"{kind}: {voltage:.3g} V, {density / factor:.3g} {unit}")
    pvcr = _scalar(ds, "pvcr")
    if pvcr is not None:
        notes.insert(0, f"peak-to-valley ratio = {pvcr:.3g}")
    if notes:
        linear.text(0.98, 0.97, "\n".join(notes), transform=linear.transAxes, ha="right", va="top", fontsize=8,
                    multialignment="left",
                    bbox=dict(boxstyle="round,pad=0.35", fc="white", ec="#bbbbbb"))
    linear.set_ylabel(f"current density ({unit})")
    logarithmic.set_ylabel("|current density| (A/cm²)")
    for ax in (linear, logarithmic):
        ax.set_xlabel("bias (V)")
    linear.set_title("linear scale")
    logarithmic.set_title("log scale")
    figure.suptitle(_titled("Current–voltage characteristic (Tsu–Esaki)", name))
    return _save(figure, out_dir, "current_voltage.png")


@_styled
def plot_solution(solution_ds: xr.Dataset, out_dir) -> list[Path]:
    """Figures of one solved stack from a ``solution.nc`` Dataset.

    Parameters
    ----------
    solution_ds : xarray.Dataset
        Read, when present: ``band_edge(bias, position)`` (eV; piecewise constant,
        sampled at slice boundaries, drawn as steps; positions in nm from a ``position``
        coordinate or a ``position_nm(position)`` variable), ``layer_start(layer)``,
        ``layer_end(layer)`` (nm), ``layer_material(layer)``; ``transmission(bias,
        energy)`` (or ``log10_transmission``); ``resonance_energy(bias, level)``,
        ``resonance_width(bias, level)`` (eV); ``state_energy(<bias>, state)`` and
        ``state_probability(<bias>, state, <position>)`` (|ψ|², any dimension names
        containing "bias" and "position"); ``current_density(bias)`` (A/cm²); 0-d
        ``pvcr``, ``peak_voltage_V``, ``peak_current_A_cm2``, ``valley_voltage_V``,
        ``valley_current_A_cm2``. Energies are relative to the emitter edge at 0 V.
    out_dir : path-like
        Created if missing.

    Returns
    -------
    list of Path
        ``band_diagram.png``, ``transmission.png``, ``current_voltage.png`` — each only
        when its data are present.
    """
    out = _prepare_dir(out_dir)
    name = _run_name(solution_ds)
    paths = []
    if "band_edge" in solution_ds.variables:
        paths.append(_band_diagram(solution_ds, out, name))
    transmission = _transmission(solution_ds)
    if transmission is not None:
        paths.append(_solution_transmission(solution_ds, transmission, out, name))
    if "current_density" in solution_ds.variables:
        paths.append(_solution_current(solution_ds, out, name))
    return paths


# ----------------------------------------------------------------------------- campaign


def _objective_specs(ds: xr.Dataset) -> dict[str, dict]:
    """Goal, target and log flag of each objective from the stored campaign file.

    Labels follow the metric-request convention: the metric name, or
    ``f"{metric}@{at_bias_V:g}V"`` for a metric taken at a bias.
    """
    text = ds.attrs.get("campaign_toml")
    if not isinstance(text, str):
        return {}
    try:
        entries = tomllib.loads(text).get("objective", [])
    except tomllib.TOMLDecodeError:
        return {}
    specs = {}
    for entry in entries if isinstance(entries, list) else []:
        if not isinstance(entry, dict) or not isinstance(entry.get("metric"), str):
            continue
        label = entry["metric"]
        if isinstance(entry.get("at_bias_V"), int | float):
            label += f"@{float(entry['at_bias_V']):g}V"
        specs[label] = entry
    return specs


def _metric_variable(ds: xr.Dataset | None, label: str, dim: str) -> xr.DataArray | None:
    """The ``(dim)`` variable holding metric ``label``, under any of its stored spellings.

    Accepted: the label itself (``leakage_A_cm2@0.05V``), its netCDF-3-safe form
    (``leakage_A_cm2_at_0p05V``), or any variable whose ``metric`` or ``metric_label``
    attribute is the label.
    """
    if ds is None:
        return None
    safe = netcdf_name(label)
    wanted = {_key(label), _key(safe)}
    for name, variable in ds.data_vars.items():
        if variable.dims != (dim,) or variable.dtype.kind not in "fiu":
            continue
        if (str(name) in (label, safe) or _key(name) in wanted
                or label in (variable.attrs.get("metric"), variable.attrs.get("metric_label"))):
            return variable
    return None


class _Objectives:
    """Objective labels with their goal, target, log flag and where their values live.

    The plots show each objective as its metric value (the ``(design)``/``(trial)``
    variable of that metric) whenever both Datasets hold it, so targets can be drawn
    in the metric's own units. Otherwise they fall back to ``objective_value``, read
    with the campaign's convention: ``log10 v`` for ``log = true`` and ``|v - t|``
    for a target ``t`` (``|log10 v - log10 t|`` with both).
    """

    def __init__(self, front_ds: xr.Dataset, trials_ds: xr.Dataset | None):
        datasets = [ds for ds in (front_ds, trials_ds) if ds is not None]
        source = next((ds for ds in datasets if _labels(ds, "objective")), None)
        self.labels: list[str] = _labels(source, "objective") if source is not None else []
        specs = {}
        for ds in reversed(datasets):
            specs.update(_objective_specs(ds))
        self.goals, self.targets, self.logs, self.as_metric, self.metric_labels = [], [], [], [], []
        for label in self.labels:
            # The metric behind an objective label such as "|resonance_energy_eV − 0.15|".
            metric = _per_label(source, "objective_metric", label, "objective")
            metric = _text(metric) if metric is not None and _text(metric) else label
            self.metric_labels.append(metric)
            entry = specs.get(metric, specs.get(label, {}))
            goal = _text(entry.get("goal", ""))
            for base in ("objective_goal", "objective_direction", "directions"):
                value = _per_label(source, base, label, "objective")
                if value is not None and _text(value):
                    goal = _text(value)
                    break
            target = _per_label(source, "objective_target", label, "objective")
            target = _finite_float(target) if target is not None else _finite_float(entry.get("target"))
            log_flag = _per_label(source, "objective_log", label, "objective")
            log_flag = bool(log_flag) if log_flag is not None and np.size(log_flag) == 1 else bool(entry.get("log"))
            self.goals.append(goal.lower())
            self.targets.append(target)
            self.logs.append(log_flag)
            self.as_metric.append(_metric_variable(front_ds, metric, "design") is not None and (
                trials_ds is None or "trial" not in trials_ds.dims
                or _metric_variable(trials_ds, metric, "trial") is not None))

    def values(self, ds: xr.Dataset, dim: str) -> np.ndarray:
        """(rows, objectives) values as plotted; empty when the Dataset lacks them."""
        columns = []
        stored = _labels(ds, "objective")
        for index, label in enumerate(self.labels):
            if self.as_metric[index]:
                columns.append(np.asarray(_metric_variable(ds, self.metric_labels[index], dim).values, float))
            elif "objective_value" in ds.variables and dim in ds["objective_value"].dims and label in stored:
                table = ds["objective_value"].transpose(dim, "objective")
                columns.append(np.asarray(table.values, float)[:, stored.index(label)])
            else:
                return np.empty((0, len(self.labels)))
        return np.column_stack(columns) if columns else np.empty((0, 0))

    def axis_label(self, index: int) -> str:
        label, target, goal = self.labels[index], self.targets[index], self.goals[index]
        if not self.as_metric[index]:
            words, unit = _metric_words(label), _metric_unit(label)
            if target is not None and self.logs[index]:
                return f"|log10 {words} − log10 target| (decades)\ntarget {target:.3g} {unit}".rstrip()
            if target is not None:
                return f"|{words} − target| ({unit or '1'})\ntarget {target:.3g} {unit}".rstrip()
            if self.logs[index]:
                label = f"log10 {words}" + (f" ({unit})" if unit else "")
            else:
                label = _metric_axis_label(label)
        else:
            label = _metric_axis_label(self.metric_labels[index])
        if target is not None:
            return f"{label}\ntarget {target:.3g}"
        if goal.startswith("max"):
            return f"{label}\nhigher is better"
        if goal.startswith("min"):
            return f"{label}\nlower is better"
        return label

    def target_line(self, index: int) -> float | None:
        """Where to draw the target: only on an axis that shows the metric itself."""
        return self.targets[index] if self.as_metric[index] else None

    def prefer_log(self, index: int) -> bool | None:
        """True: log axis; False: linear (a target reads best in linear units); None: by span."""
        if self.logs[index] and self.as_metric[index]:
            return True
        return False if self.targets[index] is not None else None

    def ranking_key(self, index: int, values: np.ndarray) -> np.ndarray:
        """Smaller is better: distance to a target, negated for maximised objectives."""
        values = np.asarray(values, float)
        target = self.targets[index]
        with np.errstate(divide="ignore", invalid="ignore"):
            if target is not None and self.as_metric[index]:
                key = (np.abs(np.log10(values) - np.log10(target)) if self.logs[index]
                       else np.abs(values - target))
            elif target is None and self.goals[index].startswith("max"):
                key = -values
            else:
                key = values.copy()
        return np.where(np.isfinite(key), key, np.inf)


_CONSTRAINT_VARIABLES = ("constraint_violation", "constraint_value", "constraints")


def _trial_masks(trials_ds: xr.Dataset, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(complete with finite objectives, feasible) masks over trials."""
    complete = np.all(np.isfinite(values), axis=1)
    if "state" in trials_ds.variables:
        states = np.array([_text(s).upper() for s in np.asarray(trials_ds["state"].values).reshape(-1)])
        complete &= np.char.endswith(states.astype(str), "COMPLETE")
    feasible = np.ones(values.shape[0], bool)
    if "feasible" in trials_ds.variables:
        feasible = np.asarray(trials_ds["feasible"].values).astype(bool).reshape(-1)
    elif (name := next((n for n in _CONSTRAINT_VARIABLES if n in trials_ds.variables), None)) is not None:
        violation = trials_ds[name]  # Optuna's convention: <= 0 is feasible
        extra = [d for d in violation.dims if d != "trial"]
        worst = violation.max(dim=extra) if extra else violation
        feasible = ~(np.asarray(worst.values, float) > 0)
    return complete, feasible


def _scale_axis(ax, axis: str, values: np.ndarray, prefer_log: bool | None) -> None:
    """Log scale when asked (True), never when refused (False), else when values span > 3 decades."""
    finite = values[np.isfinite(values)]
    if prefer_log is False:
        return
    if finite.size and np.all(finite > 0) and (prefer_log or _positive_span_decades(finite) > 3):
        (ax.set_xscale if axis == "x" else ax.set_yscale)("log")


def _pareto_figure(objectives: _Objectives, front_values, trial_values, trial_numbers, feasible,
                   best_rows, design_labels, out_dir: Path, name: str) -> Path:
    count = len(objectives.labels)
    if count == 1:
        figure = _new_figure(7.0, 4.4)
        ax = figure.subplots()
        column = trial_values[:, 0]
        ax.plot(trial_numbers[feasible], column[feasible], ".", color=GREY, ms=3, label="finished trials")
        ax.plot(trial_numbers[~feasible], column[~feasible], "x", color="#cccccc", ms=3, label="infeasible")
        for rank, row in enumerate(best_rows):
            ax.axhline(front_values[row, 0], color=DESIGN_COLOURS[rank % len(DESIGN_COLOURS)], lw=1.0,
                       label=design_labels[row])
        if objectives.target_line(0) is not None:
            ax.axhline(objectives.target_line(0), color=BLACK, ls="--", lw=1.0, label="target")
        if feasible.any() and (objectives.goals[0] or objectives.targets[0] is not None):
            order = np.argsort(trial_numbers[feasible], kind="stable")
            numbers, values = trial_numbers[feasible][order], column[feasible][order]
            key = objectives.ranking_key(0, values)
            is_record = key <= np.minimum.accumulate(key)
            best_so_far = values[np.maximum.accumulate(np.where(is_record, np.arange(key.size), 0))]
            ax.plot(numbers, best_so_far, drawstyle="steps-post", color=VERMILLION, lw=1.2, label="best so far")
        _scale_axis(ax, "y", column, objectives.prefer_log(0))
        ax.set_xlabel("trial number")
        ax.set_ylabel(objectives.axis_label(0))
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0))
        figure.suptitle(_titled("Objective over the search", name))
        return _save(figure, out_dir, "pareto_front.png")

    size = count - 1
    figure = _new_figure(7.0, 4.8) if size == 1 else _new_figure(3.3 * size + 0.6, 3.1 * size + 0.6)
    axes = figure.subplots(size, size, squeeze=False, sharex="col", sharey="row")
    for row in range(size):
        for column in range(size):
            ax = axes[row, column]
            if column > row:
                ax.set_visible(False)
                continue
            x_index, y_index = column, row + 1
            x_all, y_all = trial_values[:, x_index], trial_values[:, y_index]
            ax.scatter(x_all[feasible], y_all[feasible], s=6, color=GREY, alpha=0.5, lw=0, zorder=1)
            ax.scatter(x_all[~feasible], y_all[~feasible], s=8, marker="x", color="#cccccc", lw=0.6, zorder=1)
            x_front, y_front = front_values[:, x_index], front_values[:, y_index]
            # a joining line only reads as a trade-off curve when both axes are plain goals
            if count == 2 and x_front.size and objectives.target_line(0) is None and objectives.target_line(1) is None:
                order = np.argsort(x_front)
                ax.plot(x_front[order], y_front[order], color=VERMILLION, lw=0.8, alpha=0.6, zorder=2)
            ax.scatter(x_front, y_front, s=22, color=VERMILLION, edgecolor=BLACK, lw=0.4, zorder=3)
            for rank, index in enumerate(best_rows):
                ax.scatter(x_front[index], y_front[index], s=70, facecolor="none", lw=1.6, zorder=4,
                           edgecolor=DESIGN_COLOURS[rank % len(DESIGN_COLOURS)])
            if objectives.target_line(x_index) is not None:
                ax.axvline(objectives.target_line(x_index), color=BLACK, ls="--", lw=0.9, zorder=2)
            if objectives.target_line(y_index) is not None:
                ax.axhline(objectives.target_line(y_index), color=BLACK, ls="--", lw=0.9, zorder=2)
            _scale_axis(ax, "x", np.concatenate([x_all, x_front]), objectives.prefer_log(x_index))
            _scale_axis(ax, "y", np.concatenate([y_all, y_front]), objectives.prefer_log(y_index))
            if row == size - 1:
                ax.set_xlabel(objectives.axis_label(x_index))
            if column == 0:
                ax.set_ylabel(objectives.axis_label(y_index))
    handles = [
        Line2D([], [], marker="o", ls="none", color=GREY, ms=4, label="feasible trials"),
        Line2D([], [], marker="x", ls="none", color="#bbbbbb", ms=4, label="infeasible trials"),
        Line2D([], [], marker="o", ls="none", color=VERMILLION, mec=BLACK, mew=0.4, ms=6, label="Pareto front"),
    ]
    handles += [Line2D([], [], marker="o", ls="none", mfc="none", mew=1.6, ms=8,
                       mec=DESIGN_COLOURS[rank % len(DESIGN_COLOURS)], label=design_labels[row])
                for rank, row in enumerate(best_rows)]
    if any(objectives.target_line(i) is not None for i in range(count)):
        handles.append(Line2D([], [], color=BLACK, ls="--", lw=0.9, label="target"))
    if size == 1:
        axes[0, 0].legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    else:
        axes[0, size - 1].set_visible(True)
        axes[0, size - 1].axis("off")
        axes[0, size - 1].legend(handles=handles, loc="upper right")
    figure.suptitle(_titled("Trade-offs between objectives", name))
    return _save(figure, out_dir, "pareto_front.png")


def _hypervolume_history(trials_ds: xr.Dataset | None) -> tuple[np.ndarray, np.ndarray] | None:
    """(finished trials, hypervolume) from the trial table, whichever layout it uses."""
    if trials_ds is None:
        return None
    if "history_finished" in trials_ds.variables and "history_hypervolume" in trials_ds.variables:
        finished = np.asarray(trials_ds["history_finished"].values, float).reshape(-1)
        volume = np.asarray(trials_ds["history_hypervolume"].values, float).reshape(-1)
    elif "hypervolume" in trials_ds.variables and trials_ds["hypervolume"].ndim == 1:
        volume = np.asarray(trials_ds["hypervolume"].values, float)
        complete = np.ones(volume.size, bool)
        if "state" in trials_ds.variables:
            states = [_text(s).upper() for s in np.asarray(trials_ds["state"].values).reshape(-1)]
            complete = np.array([s.endswith("COMPLETE") for s in states])
        finished = np.cumsum(complete).astype(float)
    else:
        return None
    keep = np.isfinite(finished) & np.isfinite(volume)
    if not keep.any():
        return None
    order = np.argsort(finished[keep], kind="stable")
    return finished[keep][order], volume[keep][order]


def _hypervolume_figure(history, front_ds: xr.Dataset, out_dir: Path, name: str) -> Path:
    finished, volume = history
    figure = _new_figure(7.0, 4.0)
    ax = figure.subplots()
    ax.plot(finished, volume, drawstyle="steps-post", color=BLUE)
    final = _scalar(front_ds, "hypervolume")
    if final is not None:
        ax.axhline(final, color=GREY, ls="--", lw=0.9)
        ax.annotate(f"current front: {final:.4g}", (0.01, final), xycoords=("axes fraction", "data"),
                    xytext=(0, 3), textcoords="offset points", fontsize=7, color="#555555")
    ax.set_xlabel("finished trials")
    ax.set_ylabel("dominated hypervolume")
    notes = []
    sampler = _text(front_ds.attrs.get("sampler", ""))
    if sampler:
        notes.append(f"sampler: {sampler}")
    reference = _finite_float(front_ds.attrs.get("hypervolume_reference_point"))
    if reference is not None:
        notes.append(f"objectives scaled 0 (best) to 1 (worst), reference point {reference:g}")
    ax.set_title("; ".join(notes), fontsize=8.5)
    figure.suptitle(_titled("Search progress", name))
    return _save(figure, out_dir, "hypervolume.png")


def _design_table(front_ds: xr.Dataset, row: int) -> list[tuple[str, str, float, float | None]]:
    """(layer, material label, thickness_nm, monolayers) for one design row."""
    layers = _labels(front_ds, "layer")
    def row_of(name):
        if name not in front_ds.variables:
            return [None] * len(layers)
        return list(np.asarray(front_ds[name].transpose("design", "layer").values)[row])

    thickness, material, fraction, monolayers = (row_of(n) for n in ("thickness_nm", "material", "fraction",
                                                                      "monolayers"))
    table = []
    for layer, t, m, f, ml in zip(layers, thickness, material, fraction, monolayers, strict=True):
        t = _finite_float(t)
        if t is None or t <= 0:
            continue
        table.append((layer, _material_label(_text(m), f), t, _finite_float(ml) if ml is not None else None))
    return table


def _draw_stacks(ax, front_ds: xr.Dataset, best_rows, design_labels) -> None:
    tables = [_design_table(front_ds, row) for row in best_rows]
    colours = _material_colours(m for table in tables for _, m, _, _ in table)
    longest = max((sum(t for _, _, t, _ in table) for table in tables), default=1.0)
    for rank, table in enumerate(tables):
        y = len(tables) - 1 - rank
        start = 0.0
        for layer, material, thickness, monolayers in table:
            ax.barh(y, thickness, left=start, height=0.72, color=colours.get(material, "#eeeeee"),
                    edgecolor="#555555", lw=0.6)
            size = f"{thickness:.3g} nm" + (f"\n{monolayers:.0f} ML" if monolayers is not None else "")
            narrow = thickness < 0.07 * longest
            ax.text(start + thickness / 2, y, f"{layer}\n{size}", ha="center", va="center",
                    fontsize=6.5 if not narrow else 6, rotation=90 if narrow else 0, linespacing=1.05)
            start += thickness
    ax.set_yticks(range(len(tables)), [design_labels[row] for row in best_rows][::-1])
    for tick, rank in zip(ax.get_yticklabels(), reversed(range(len(tables))), strict=True):
        tick.set_color(DESIGN_COLOURS[rank % len(DESIGN_COLOURS)])
        tick.set_fontweight("bold")
    ax.set_xlim(0, longest * 1.01)
    ax.set_ylim(-0.5, len(tables) - 0.5)
    ax.set_xlabel("position from emitter side (nm)")
    ax.grid(axis="y", visible=False)
    ax.legend(handles=[Patch(facecolor=c, edgecolor="#555555", label=m) for m, c in colours.items()],
              loc="upper center", bbox_to_anchor=(0.5, -0.28), ncols=min(len(colours), 6), fontsize=7)
    ax.set_title("layer stacks (emitter → collector)")


def _draw_best_curves(ax, front_ds, variable, dim_fragment, best_rows, design_labels, log: bool) -> None:
    data = front_ds[variable]
    axis_dim = _dim_like(data, dim_fragment) or [d for d in data.dims if d != "design"][0]
    x = _coord_values(front_ds, data, axis_dim)
    values = np.asarray(data.transpose("design", axis_dim).values, float)
    factor, unit = (1.0, "") if log else _current_scale(values[best_rows])
    for rank, row in enumerate(best_rows):
        colour = DESIGN_COLOURS[rank % len(DESIGN_COLOURS)]
        curve = values[row]
        if log:
            curve = np.where(curve > 0, curve, np.nan)
        ax.plot(x, curve / factor, color=colour, label=design_labels[row])
        if variable == "current_density":
            for kind, marker in (("peak", "^"), ("valley", "v")):
                voltage = _per_design(front_ds, f"{kind}_voltage_V", row)
                density = _per_design(front_ds, f"{kind}_current_A_cm2", row)
                if voltage is not None and density is not None:
                    ax.plot([voltage], [density / factor], marker, color=colour, mec=BLACK, mew=0.5, ms=6)
    if log:
        ax.set_yscale("log")
        ax.set_xlabel("electron energy above emitter edge at 0 V (eV)")
        ax.set_ylabel("transmission at zero bias")
        ax.set_title("transmission")
    else:
        ax.set_xlabel("bias (V)")
        ax.set_ylabel(f"current density ({unit})")
        ax.set_title("current–voltage (▲ peak, ▼ valley)")
    ax.legend(loc="best", fontsize=7)


def _per_design(ds: xr.Dataset, name: str, row: int) -> float | None:
    if name in ds.variables and ds[name].dims == ("design",):
        return _finite_float(ds[name].values[row])
    return None


def _best_designs_figure(front_ds, best_rows, design_labels, ranked_by: str, out_dir: Path,
                         name: str) -> Path | None:
    has_stack = "thickness_nm" in front_ds.variables and "layer" in front_ds.dims
    curves = [(v, f, log) for v, f, log in (("transmission", "energy", True), ("current_density", "bias", False))
              if v in front_ds.variables and "design" in front_ds[v].dims]
    if not (has_stack or curves):
        return None
    height = (2.2 + 0.5 * len(best_rows) if has_stack else 0.0) + (3.4 if curves else 0.0)
    figure = _new_figure(10.0, height)
    rows = [1.0 + 0.2 * len(best_rows)] if has_stack else []
    rows += [2.0] if curves else []
    grid = figure.add_gridspec(len(rows), max(len(curves), 1), height_ratios=rows)
    if has_stack:
        _draw_stacks(figure.add_subplot(grid[0, :]), front_ds, best_rows, design_labels)
    for column, (variable, fragment, log) in enumerate(curves):
        ax = figure.add_subplot(grid[len(rows) - 1, column])
        _draw_best_curves(ax, front_ds, variable, fragment, best_rows, design_labels, log)
    plural = "s" if len(best_rows) > 1 else ""
    figure.suptitle(_titled(f"Leading design{plural} of the front, ranked by {ranked_by}", name))
    return _save(figure, out_dir, "best_designs.png")


@_styled
def plot_campaign(front_ds: xr.Dataset, trials_ds: xr.Dataset | None, out_dir, best: int = 3) -> list[Path]:
    """Figures of a campaign from its ``front.nc`` and ``trials.nc`` Datasets.

    Parameters
    ----------
    front_ds : xarray.Dataset
        Read: coord ``objective`` (labels), ``objective_value(design, objective)``,
        the metric variable of each objective label (``(design)``, named by the label or
        its ``_at_``/``p`` spelling); goal, target and log flag of each objective from
        the ``[[objective]]`` tables of attribute ``campaign_toml``, overridden by
        ``objective_target``, ``objective_goal`` (or ``objective_direction``,
        ``directions``) and ``objective_log`` given as a variable ``(objective)``, an
        array attribute, or an attribute ``<name>_<objective label>``;
        ``thickness_nm``, ``material``, ``fraction``, ``monolayers`` ``(design,
        layer)``; ``transmission(design, energy)``; ``current_density(design, bias)``;
        per-design ``peak_voltage_V``, ``peak_current_A_cm2``, ``valley_voltage_V``,
        ``valley_current_A_cm2``; attributes ``hypervolume``, ``sampler``.
    trials_ds : xarray.Dataset or None
        Read: ``objective_value(trial, objective)`` and the ``(trial)`` metric
        variables, ``state(trial)`` (only "COMPLETE" trials are drawn), ``feasible(trial)`` or
        ``constraint_violation``/``constraint_value``/``constraints`` ``(trial, ...)``
        (any value > 0 is infeasible), and the hypervolume
        history as ``history_finished``/``history_hypervolume`` or ``hypervolume(trial)``.
    out_dir : path-like
        Created if missing.
    best : int
        Number of leading designs drawn in detail, ranked by the first objective
        (distance to its target, else its goal; ascending when no goal is stored).

    Returns
    -------
    list of Path
        ``pareto_front.png``, ``hypervolume.png``, ``best_designs.png`` — each only when
        its data are present.
    """
    out = _prepare_dir(out_dir)
    name = _run_name(front_ds) or _run_name(trials_ds)
    objectives = _Objectives(front_ds, trials_ds)
    front_values = objectives.values(front_ds, "design")
    designs = _labels(front_ds, "design") or [str(i) for i in range(front_values.shape[0])]
    design_labels = [f"design {d}" for d in designs]
    best_rows: list[int] = []
    if front_values.shape[0] and objectives.labels:
        order = np.argsort(objectives.ranking_key(0, front_values[:, 0]), kind="stable")
        best_rows = [int(i) for i in order[: max(int(best), 0)]]

    paths = []
    if objectives.labels:
        if trials_ds is not None and "trial" in trials_ds.dims:
            trial_values = objectives.values(trials_ds, "trial")
            trial_numbers = _coord_values(trials_ds, trials_ds, "trial")
        else:
            trial_values, trial_numbers = np.empty((0, len(objectives.labels))), np.empty(0)
        if trial_values.shape[0]:
            complete, feasible = _trial_masks(trials_ds, trial_values)
            trial_values, trial_numbers, feasible = trial_values[complete], trial_numbers[complete], feasible[complete]
        else:
            feasible = np.ones(0, bool)
        if trial_values.shape[0] or front_values.shape[0]:
            paths.append(_pareto_figure(objectives, front_values, trial_values, trial_numbers, feasible,
                                        best_rows, design_labels, out, name))
    history = _hypervolume_history(trials_ds)
    if history is not None:
        paths.append(_hypervolume_figure(history, front_ds, out, name))
    if best_rows:
        path = _best_designs_figure(front_ds, best_rows, design_labels, _metric_words(objectives.labels[0]), out,
                                    name)
        if path is not None:
            paths.append(path)
    return paths


# ----------------------------------------------------------------------------- tolerance


def _sample_variable(ds: xr.Dataset, metric: str) -> xr.DataArray | None:
    """The per-sample variable of ``metric``, matched exactly or by normalised name."""
    if metric in ds.variables and ds[metric].dims == ("sample",):
        return ds[metric]
    wanted = _key(metric)
    for name, variable in ds.data_vars.items():
        if variable.dims == ("sample",) and _key(name) == wanted:
            return variable
    return None


#: Per-sample variables of tolerance.nc that describe the growth error, not a metric.
_GROWTH_ERROR_PREFIXES = ("growth_rate", "fraction_shift", "thickness_step")


def _sample_units(ds: xr.Dataset, metric: str) -> str:
    """Units of a metric from its per-sample variable; "" when dimensionless or unknown."""
    variable = _sample_variable(ds, metric)
    units = _text(variable.attrs.get("units", "")) if variable is not None else ""
    return "" if units in ("1", "-", "") else units


def _tolerance_metrics(ds: xr.Dataset) -> list[str]:
    """Metrics to histogram: those with a window or yield, else every metric sampled.

    The metrics are the ``metric`` coordinate's labels; without that coordinate, every
    numeric ``(sample)`` variable that is not a growth-error draw.
    """
    candidates = _labels(ds, "metric") or [
        str(n) for n, v in ds.data_vars.items()
        if v.dims == ("sample",) and v.dtype.kind in "fiu" and not _key(n).startswith(_GROWTH_ERROR_PREFIXES)]
    candidates = [m for m in candidates if _sample_variable(ds, m) is not None]
    specified = [m for m in candidates
                 if any(_metric_value(ds, base, m) is not None for base in ("window_min", "window_max", "yield"))]
    return specified or candidates


def _metric_value(ds: xr.Dataset, base: str, metric: str) -> float | None:
    value = _per_label(ds, base, metric, "metric") if "metric" in ds.dims else _attr(ds, f"{base}_{metric}")
    return _finite_float(value) if value is not None else None


def _histogram_panel(ax, ds: xr.Dataset, metric: str) -> None:
    values = np.asarray(_sample_variable(ds, metric).values, float)
    finite = values[np.isfinite(values)]
    low, high = _metric_value(ds, "window_min", metric), _metric_value(ds, "window_max", metric)
    nominal = _metric_value(ds, "nominal", metric)
    ax.set_title(_metric_words(metric))
    ax.set_xlabel(_metric_axis_label(metric, _sample_units(ds, metric)))
    ax.set_ylabel("samples")
    if finite.size == 0:
        ax.text(0.5, 0.5, "no sample defines this metric", transform=ax.transAxes, ha="center", va="center")
        return
    logarithmic = _positive_span_decades(finite) > 2
    edges_of = [v for v in (low, high, nominal) if v is not None and (v > 0 or not logarithmic)]
    lo, hi = min([finite.min(), *edges_of]), max([finite.max(), *edges_of])
    if logarithmic:
        bins = np.geomspace(finite.min(), finite.max(), 41)
        ax.set_xscale("log")
    else:
        bins = np.linspace(finite.min(), finite.max(), 41) if finite.max() > finite.min() else 10
    ax.hist(finite, bins=bins, color=BLUE, alpha=0.8, edgecolor="white", lw=0.3)
    pad = (hi / lo) ** 0.04 if logarithmic else 0.04 * (hi - lo or abs(hi) or 1.0)
    x_min, x_max = (lo / pad, hi * pad) if logarithmic else (lo - pad, hi + pad)
    ax.set_xlim(x_min, x_max)
    if low is not None or high is not None:
        ax.axvspan(low if low is not None else x_min, high if high is not None else x_max,
                   color=GREEN, alpha=0.15, lw=0, zorder=0)
        for edge in (low, high):
            if edge is not None:
                ax.axvline(edge, color=GREEN, ls="--", lw=1.0)
    if nominal is not None:
        ax.axvline(nominal, color=BLACK, lw=1.2)
    lines = []
    fraction = _metric_value(ds, "yield", metric)
    if fraction is not None:
        lines.append(f"yield {100 * fraction:.1f} %")
        ci_low, ci_high = _metric_value(ds, "yield_ci_low", metric), _metric_value(ds, "yield_ci_high", metric)
        if ci_low is not None and ci_high is not None:
            level = _finite_float(ds.attrs.get("confidence_level"))
            caption = f"{100 * level:.0f} % interval" if level is not None else "interval"
            lines.append(f"{caption} {100 * ci_low:.1f}–{100 * ci_high:.1f} %")
    undefined = values.size - finite.size
    lines.append(f"{finite.size} samples" + (f", {undefined} undefined" if undefined else ""))
    ax.text(0.02, 0.97, "\n".join(lines), transform=ax.transAxes, ha="left", va="top", fontsize=7.5,
            bbox=dict(boxstyle="round,pad=0.3", fc="white", ec="#bbbbbb", alpha=0.9))


def _yield_figure(ds: xr.Dataset, metrics: list[str], out_dir: Path, name: str) -> Path:
    rows, columns = _grid_shape(len(metrics))
    figure = _new_figure(3.7 * columns + 1.6, 3.0 * rows + 0.6)
    axes = figure.subplots(rows, columns, squeeze=False)
    for ax, metric in zip(axes.flat, metrics, strict=False):
        _histogram_panel(ax, ds, metric)
    _hide_unused(axes, len(metrics))
    handles = [Patch(color=BLUE, alpha=0.8, label="grown samples"),
               Patch(color=GREEN, alpha=0.25, label="specification window"),
               Line2D([], [], color=BLACK, lw=1.2, label="nominal design")]
    figure.legend(handles=handles, loc="outside right upper")
    title = "Spread under growth errors"
    overall = _finite_float(_attr(ds, "yield_all")) if _attr(ds, "yield_all") is not None else None
    if overall is not None:
        title += f": all specifications met in {100 * overall:.1f} % of samples"
    figure.suptitle(_titled(title, name))
    return _save(figure, out_dir, "tolerance_yield.png")


def _tornado_figure(ds: xr.Dataset, out_dir: Path, name: str) -> Path | None:
    sensitivity = ds["sensitivity"]
    metric_dim = "metric" if "metric" in sensitivity.dims else sensitivity.dims[0]
    layer_dim = [d for d in sensitivity.dims if d != metric_dim][0]
    metrics = _labels(ds, metric_dim) or [str(i) for i in range(sensitivity.sizes[metric_dim])]
    layers = _labels(ds, layer_dim) or [str(i) for i in range(sensitivity.sizes[layer_dim])]
    table = np.asarray(sensitivity.transpose(metric_dim, layer_dim).values, float)
    shown = [i for i in range(len(metrics)) if np.any(np.isfinite(table[i]))]
    if not shown:
        return None
    rows, columns = _grid_shape(len(shown))
    figure = _new_figure(4.2 * columns + 1.6, (0.6 + 0.28 * len(layers)) * rows + 1.0)
    axes = figure.subplots(rows, columns, squeeze=False)
    for ax, index in zip(axes.flat, shown, strict=False):
        values = table[index]
        keep = np.flatnonzero(np.isfinite(values))
        order = keep[np.argsort(np.abs(values[keep]))]
        colours = [BLUE if values[i] >= 0 else VERMILLION for i in order]
        ax.barh(range(order.size), values[order], color=colours, height=0.65)
        ax.set_yticks(range(order.size), [layers[i] for i in order])
        ax.axvline(0.0, color=BLACK, lw=0.8)
        ax.grid(axis="y", visible=False)
        for position, i in enumerate(order):
            side = 1 if values[i] >= 0 else -1
            ax.annotate(f"{values[i]:+.2g}" if values[i] else "0", (values[i], position), xytext=(3 * side, 0),
                        textcoords="offset points", ha="left" if side > 0 else "right", va="center", fontsize=6.5)
        limit = np.max(np.abs(values[keep])) if keep.size else 1.0
        ax.set_xlim(-1.6 * limit or -1, 1.6 * limit or 1)
        ax.xaxis.set_major_locator(MaxNLocator(nbins=4, symmetric=True))
        unit = _metric_unit(metrics[index]) or _sample_units(ds, metrics[index])
        ax.set_xlabel(f"change per added monolayer ({unit}/ML)" if unit else "change per added monolayer")
        ax.set_title(_metric_words(metrics[index]))
    _hide_unused(axes, len(shown))
    figure.legend(handles=[Patch(color=BLUE, label="increases with thickness"),
                           Patch(color=VERMILLION, label="decreases with thickness")],
                  loc="outside right upper")
    figure.suptitle(_titled("Sensitivity to one extra monolayer per layer", name))
    return _save(figure, out_dir, "tolerance_sensitivity.png")


@_styled
def plot_tolerance(tolerance_ds: xr.Dataset, out_dir) -> list[Path]:
    """Figures of a growth-error Monte Carlo from a ``tolerance.nc`` Dataset.

    Parameters
    ----------
    tolerance_ds : xarray.Dataset
        Read: one ``(sample)`` variable per metric (named by its metric label);
        ``sensitivity(metric, layer)`` (metric units per monolayer); per metric, each
        either as an attribute ``<base>_<metric label>`` or a variable ``<base>(metric)``:
        ``nominal``, ``window_min``, ``window_max``, ``yield``, ``yield_ci_low``,
        ``yield_ci_high`` (yields as fractions 0–1); attribute ``yield_all``.
        Histograms are drawn for the metrics with a window or yield, or for every
        per-sample metric when none has one.
    out_dir : path-like
        Created if missing.

    Returns
    -------
    list of Path
        ``tolerance_yield.png``, ``tolerance_sensitivity.png`` — each only when its data
        are present.
    """
    out = _prepare_dir(out_dir)
    name = _run_name(tolerance_ds)
    paths = []
    metrics = _tolerance_metrics(tolerance_ds)
    if metrics:
        paths.append(_yield_figure(tolerance_ds, metrics, out, name))
    if "sensitivity" in tolerance_ds.variables and tolerance_ds["sensitivity"].ndim == 2:
        path = _tornado_figure(tolerance_ds, out, name)
        if path is not None:
            paths.append(path)
    return paths
