"""The growth sheet of one design: what the grower grows, in growth order, with units.

Rows run from the substrate side: the contact grown first, the layers, the contact grown
last. Thicknesses are the ones the model used; monolayers are whole where the stack gave
monolayers and shown to 0.1 ml where it gave nm (never rounded in one place and not in
another). With a growth rate in monolayers per second the time of each layer follows.
"""

from __future__ import annotations

import csv
import io
import math

import numpy as np

from tunnelsmith.optimize.model.stack import DesignBatch
from tunnelsmith.optimize.results.stack_file import design_monolayers

COLUMNS = ("order", "layer", "material", "monolayers", "thickness_nm", "doping_cm3", "time_s")


def growth_rows(spec, nominal: DesignBatch, *, substrate_side: str = "emitter",
                growth_rate_ml_s: dict[str, float] | float | None = None) -> list[dict]:
    """One dict per grown layer (contacts included), first grown first.

    Parameters
    ----------
    spec : StackSpec
        A stack (contacts, temperature).
    nominal : DesignBatch
        Its single design.
    substrate_side : {"emitter", "collector"}
        Which contact is grown first, on the substrate.
    growth_rate_ml_s : float or dict of material name to float, optional
        Growth rate in monolayers per second, one for all or one per material (display
        name such as ``"Al0.35Ga0.65As"`` or base name such as ``"AlGaAs"``).

    Raises
    ------
    KeyError
        When a per-material rate is missing for a grown material (the message names it).
    """
    monolayers = design_monolayers(spec, nominal)
    names = nominal.material_names()[0]
    rows = []
    for index, layer in enumerate(spec.layers):
        whole = layer.thickness_ml is not None
        ml = float(round(monolayers[index])) if whole else round(float(monolayers[index]), 1)
        rows.append({"layer": layer.name, "material": str(names[index]), "monolayers": ml,
                     "thickness_nm": float(nominal.thickness_nm[0, index]), "doping_cm3": 0.0,
                     "base": str(nominal.base[0, index])})
    contacts = []
    for side in ("emitter", "collector"):
        contact = getattr(spec, side)
        material = contact.material if contact.fraction is None else f"{contact.material} (x = {contact.fraction:g})"
        contacts.append({"layer": f"{side} contact", "material": material, "monolayers": math.nan,
                         "thickness_nm": math.nan, "doping_cm3": float(contact.doping_cm3), "base": contact.material})
    ordered = [contacts[0], *rows, contacts[1]]
    if substrate_side == "collector":
        ordered.reverse()
    elif substrate_side != "emitter":
        raise ValueError(f"substrate_side must be 'emitter' or 'collector', not {substrate_side!r}")
    for order, row in enumerate(ordered, start=1):
        row["order"] = order
        row["time_s"] = _time_s(row, growth_rate_ml_s)
        del row["base"]
    return ordered


def _time_s(row: dict, rate) -> float:
    if rate is None or math.isnan(row["monolayers"]):
        return math.nan
    if isinstance(rate, dict):
        for name in (row["material"], row.get("base")):
            if name in rate:
                return row["monolayers"] / rate[name]
        raise KeyError(row["material"])
    return row["monolayers"] / float(rate)


def _cell(value) -> str:
    if isinstance(value, float):
        if math.isnan(value):
            return ""
        return f"{value:.4g}" if abs(value) >= 1e5 else f"{value:.4f}".rstrip("0").rstrip(".")
    return str(value)


def total_thickness_nm(rows: list[dict]) -> float:
    return float(np.nansum([row["thickness_nm"] for row in rows]))


def growth_sheet_csv(rows: list[dict]) -> str:
    """The sheet as CSV, one header row with units in the column names."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(COLUMNS)
    for row in rows:
        writer.writerow([_cell(row[c]) for c in COLUMNS])
    times = [row["time_s"] for row in rows if not math.isnan(row["time_s"])]
    writer.writerow(["", "total (between the contacts)", "", "", _cell(total_thickness_nm(rows)), "",
                     _cell(float(sum(times)) if times else math.nan)])
    return buffer.getvalue()


def growth_sheet_markdown(rows: list[dict], *, title: str, substrate_side: str) -> str:
    """The sheet as a Markdown table with a title and the growth-order statement."""
    lines = [f"# Growth sheet: {title}", "",
             f"Growth order: first row first, the {substrate_side} contact on the substrate. Thicknesses "
             "are those the model computed; contacts are semi-infinite in the model (their thickness is "
             "the grower's choice).", "",
             "| " + " | ".join(COLUMNS) + " |", "|" + "---|" * len(COLUMNS)]
    for row in rows:
        lines.append("| " + " | ".join(_cell(row[c]) for c in COLUMNS) + " |")
    lines += ["", f"Total thickness between the contacts: {_cell(total_thickness_nm(rows))} nm.", "",
              "Results rank designs; they do not replace measurement of grown wafers."]
    return "\n".join(lines) + "\n"
