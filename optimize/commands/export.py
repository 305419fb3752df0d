"""``tunnelsmith export``: a design of a run as a stack file and a growth sheet (CSV, Markdown)."""

from __future__ import annotations

import sys
from pathlib import Path

from tunnelsmith.optimize.commands.front_design import design_stack_spec
from tunnelsmith.optimize.errors import EXIT_OK, InputError
from tunnelsmith.optimize.io import write_text
from tunnelsmith.optimize.model.stack import nominal_batch
from tunnelsmith.optimize.results.growth_sheet import growth_rows, growth_sheet_csv, growth_sheet_markdown


def run_export(run_dir, *, design: int | None, out_dir=None, storage: str | None = None,
               growth_rate_ml_s: dict[str, float] | float | None = None, substrate_side: str = "emitter") -> int:
    """Write ``stack.toml``, ``growth_sheet.csv`` and ``growth_sheet.md`` of one front design.

    Parameters
    ----------
    run_dir : path-like
        A campaign run directory.
    design : int
        Trial number of a design on its front.
    out_dir : path-like, optional
        Default ``RUN_DIR/design-N/``.
    growth_rate_ml_s : float or dict, optional
        Monolayers per second, one for all layers or one per material; adds ``time_s``.
    substrate_side : {"emitter", "collector"}
        The contact grown first, on the substrate.
    """
    run_dir = Path(run_dir)
    if not run_dir.is_dir():
        raise InputError(str(run_dir), None, "export takes a campaign run directory",
                         "give the directory `tunnelsmith optimize` wrote, with --design N (a trial on its front)")
    out = Path(out_dir) if out_dir is not None else run_dir / f"design-{design}"
    spec, stack_path, _ = design_stack_spec(run_dir, design, storage, out)
    try:
        rows = growth_rows(spec, nominal_batch(spec), substrate_side=substrate_side,
                           growth_rate_ml_s=growth_rate_ml_s)
    except KeyError as error:
        raise InputError("command line", "--growth-rate", f"no growth rate for {error.args[0]}",
                         f"add --growth-rate {error.args[0]}=RATE (monolayers per second), or give one rate "
                         "for every layer, e.g. --growth-rate 0.8") from None
    title = f"design {design} of {run_dir}"
    csv_path = write_text(out / "growth_sheet.csv", growth_sheet_csv(rows))
    md_path = write_text(out / "growth_sheet.md", growth_sheet_markdown(rows, title=title,
                                                                        substrate_side=substrate_side))
    for path in (stack_path, csv_path, md_path):
        print(f"wrote {path}")
    print(f"growth order: the {substrate_side} contact first, on the substrate "
          f"(--substrate-side {'collector' if substrate_side == 'emitter' else 'emitter'} reverses it)",
          file=sys.stderr)
    return EXIT_OK
