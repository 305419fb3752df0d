"""The design report as documents: one self-contained HTML page and the same as PDF.

Content, in order: title and provenance, the cautions, the stack (the same rows as the
growth sheet), contacts and model switches, the figures of merit (with the campaign's
objectives and constraints when the design came from a campaign), the figures, and the
growth-tolerance study when one was run. The HTML embeds every figure as base64 PNG;
the PDF is written by matplotlib alone (text pages, then one page per figure).
"""

from __future__ import annotations

import base64
import html
import math
import textwrap
from datetime import datetime, timezone
from pathlib import Path

from tunnelsmith.optimize.io import MODEL_CAUTION, atomic_path
from tunnelsmith.optimize.version import software_version


def _fmt(value) -> str:
    if isinstance(value, float):
        if math.isnan(value):
            return ""
        return f"{value:.4g}"
    return str(value)


def report_sections(*, title: str, spec, rows: list[dict], solution, campaign=None,
                    tolerance_text: str | None = None) -> list[tuple[str, list[list[str]] | str]]:
    """The report as (heading, table rows or paragraph) pairs, shared by HTML and PDF."""
    sections: list[tuple[str, list[list[str]] | str]] = []
    created = datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    sections.append(("Provenance", f"{title}. tunnelsmith {software_version()}, {created}. "
                                   f"Temperature {spec.temperature_K:g} K."))
    sections.append(("Cautions", MODEL_CAUTION + " The figures below come from the model, not from a grown wafer."))
    columns = ["order", "layer", "material", "monolayers", "thickness_nm", "doping_cm3"]
    sections.append(("Stack (growth order)", [columns] + [[_fmt(r[c]) for c in columns] for r in rows]))
    model = spec.model
    switches = [["setting", "value"], ["nonparabolic", str(model.nonparabolic)],
                ["slice_nm", _fmt(model.slice_nm) or "default"], ["max_levels", str(model.max_levels)],
                ["series_resistance_ohm_cm2", _fmt(float(model.series_resistance_ohm_cm2))],
                ["energy grid", f"{spec.energy.from_eV:g} to {spec.energy.to_eV:g} eV, {spec.energy.points} points"],
                ["bias sweep", f"{spec.bias.from_V:g} to {spec.bias.to_V:g} V, {spec.bias.steps} steps"]]
    sections.append(("Model switches", switches))
    metrics = [["metric", "value", "units", "note"]]
    for name, variable in solution.data_vars.items():
        if variable.ndim == 0:
            metrics.append([name, _fmt(float(variable.values)), variable.attrs.get("units", ""),
                            variable.attrs.get("undefined_because", "")])
    sections.append(("Figures of merit", metrics))
    if campaign is not None and (campaign.objectives or campaign.constraints):
        goals = [["campaign aim", "metric", "goal or bound"]]
        for objective in campaign.objectives:
            aim = f"target {objective.target:g}" if objective.target is not None else objective.goal
            goals.append(["objective", objective.request.label, aim])
        for constraint in campaign.constraints:
            bound = " and ".join(p for p in (f">= {constraint.min:g}" if constraint.min is not None else "",
                                             f"<= {constraint.max:g}" if constraint.max is not None else "") if p)
            goals.append(["constraint", constraint.request.label, bound])
        sections.append(("Objectives and constraints of the campaign", goals))
    if tolerance_text:
        sections.append(("Growth tolerance", tolerance_text))
    return sections


def report_html(sections, figures: list[Path], *, title: str) -> str:
    """One self-contained HTML page (figures embedded as base64 PNG)."""
    parts = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
             f"<title>{html.escape(title)}</title>",
             "<style>body{font-family:sans-serif;max-width:60em;margin:2em auto;line-height:1.4}"
             "table{border-collapse:collapse;margin:0.5em 0}td,th{border:1px solid #999;padding:0.2em 0.6em;"
             "text-align:left}pre{background:#f4f4f4;padding:0.6em;overflow-x:auto}img{max-width:100%}</style>",
             "</head><body>", f"<h1>{html.escape(title)}</h1>"]
    for heading, content in sections:
        parts.append(f"<h2>{html.escape(heading)}</h2>")
        if isinstance(content, str):
            tag = "pre" if "\n" in content else "p"
            parts.append(f"<{tag}>{html.escape(content)}</{tag}>")
        else:
            head, *body = content
            parts.append("<table><tr>" + "".join(f"<th>{html.escape(c)}</th>" for c in head) + "</tr>")
            parts += ["<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in row) + "</tr>" for row in body]
            parts.append("</table>")
    parts.append("<h2>Figures</h2>")
    for figure in figures:
        data = base64.b64encode(Path(figure).read_bytes()).decode("ascii")
        parts.append(f'<figure><img alt="{html.escape(Path(figure).stem)}" src="data:image/png;base64,{data}">'
                     f"<figcaption>{html.escape(Path(figure).stem.replace('_', ' '))}</figcaption></figure>")
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"


def write_report_pdf(path, sections, figures: list[Path], *, title: str) -> Path:
    """The same report as a PDF: text pages (A4) then one page per figure."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.backends.backend_pdf import PdfPages

    lines = [title, ""]
    for heading, content in sections:
        lines += [heading.upper()]
        if isinstance(content, str):
            lines += textwrap.wrap(content, 95) if "\n" not in content else content.splitlines()
        else:
            # A4 holds about 130 monospace characters at 7 pt: long notes are cut (the HTML
            # page keeps them whole).
            content = [[cell if len(cell) <= 40 else cell[:39] + "…" for cell in row] for row in content]
            widths = [max(len(row[k]) for row in content) for k in range(len(content[0]))]
            lines += ["  ".join(cell.ljust(w) for cell, w in zip(row, widths)) for row in content]
        lines.append("")
    per_page = 62
    with atomic_path(path) as temporary:
        with PdfPages(temporary) as pdf:
            for start in range(0, len(lines), per_page):
                figure = plt.figure(figsize=(8.27, 11.69))
                figure.text(0.06, 0.97, "\n".join(lines[start:start + per_page]), va="top", ha="left",
                            family="monospace", fontsize=7)
                pdf.savefig(figure)
                plt.close(figure)
            for image_path in figures:
                image = plt.imread(str(image_path))
                height, width = image.shape[:2]
                figure = plt.figure(figsize=(8.27, 8.27 * height / width + 0.6))
                axes = figure.add_axes((0.02, 0.02, 0.96, 0.96 * (1 - 0.6 / (8.27 * height / width + 0.6))))
                axes.imshow(image)
                axes.set_axis_off()
                figure.suptitle(Path(image_path).stem.replace("_", " "), fontsize=10)
                pdf.savefig(figure)
                plt.close(figure)
    return Path(path)

