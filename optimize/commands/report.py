"""``tunnelsmith report``: one design as an HTML page and a PDF an engineer can attach to
a wafer request (the stack, band diagram, transmission, J(V), metrics, tolerance, cautions)."""

from __future__ import annotations

import sys
from pathlib import Path

from tunnelsmith.optimize.commands.front_design import design_stack_spec
from tunnelsmith.optimize.commands.report_document import report_html, report_sections, write_report_pdf
from tunnelsmith.optimize.errors import EXIT_OK, InputError
from tunnelsmith.optimize.inputs import reader
from tunnelsmith.optimize.io import write_netcdf, write_text
from tunnelsmith.optimize.model.stack import nominal_batch
from tunnelsmith.optimize.plots import plot_solution, plot_tolerance
from tunnelsmith.optimize.results.growth_sheet import growth_rows
from tunnelsmith.optimize.results.solution import solve_dataset
from tunnelsmith.optimize.results.tolerance import run_study, summary_table, tolerance_dataset


def run_report(target, *, design: int | None = None, out_dir=None, storage: str | None = None,
               samples: int | None = None) -> int:
    """Write ``report.html`` and ``report.pdf`` (with ``solution.nc`` and the figures).

    Parameters
    ----------
    target : path-like
        A stack file, or a campaign run directory with ``design``.
    samples : int, optional
        Growth samples of the tolerance study; the study runs when the stack has
        ``[[tolerance.spec]]`` windows (a design of a campaign inherits the campaign's).
    """
    target = Path(target)
    campaign = None
    if target.is_dir():
        out = Path(out_dir) if out_dir is not None else target / f"design-{design}" / "report"
        spec, _, campaign = design_stack_spec(target, design, storage, out)
        title = f"Design report: design {design} of {target}"
    else:
        if design is not None:
            raise InputError("command line", "--design", f"--design picks a design of a campaign run, but {target} "
                             "is a file", f"give the run directory (tunnelsmith report RUN_DIR --design {design}), "
                             "or drop --design")
        spec = reader.load(target)
        out = Path(out_dir) if out_dir is not None else Path("runs") / target.stem / "report"
        title = f"Design report: {target.name}"
    if spec.is_campaign:
        raise InputError(spec.path, None, "a report describes one design, but this file has search ranges",
                         "report a design of the campaign's run: tunnelsmith report RUN_DIR --design N")
    for warning in spec.located_warnings:
        print(f"warning: {warning}", file=sys.stderr)
    nominal = nominal_batch(spec)
    solution = solve_dataset(spec)
    write_netcdf(solution, out / "solution.nc")
    figures = list(plot_solution(solution, out))
    tolerance_text = None
    if spec.tolerance is not None and spec.tolerance.windows:
        study = run_study(spec, nominal, samples=samples, source=title)
        dataset = tolerance_dataset(study)
        write_netcdf(dataset, out / "tolerance.nc")
        figures += list(plot_tolerance(dataset, out))
        tolerance_text = summary_table(study)
    sections = report_sections(title=title, spec=spec, rows=growth_rows(spec, nominal), solution=solution,
                               campaign=campaign, tolerance_text=tolerance_text)
    html_path = write_text(out / "report.html", report_html(sections, figures, title=title))
    pdf_path = write_report_pdf(out / "report.pdf", sections, figures, title=title)
    print(f"report: {html_path}\nreport: {pdf_path}")
    return EXIT_OK
