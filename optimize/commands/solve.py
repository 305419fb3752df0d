"""``tunnelsmith solve``: everything about one stack, stored as ``solution.nc`` with plots.
"""

from __future__ import annotations

import sys
from pathlib import Path
from tunnelsmith.optimize.commands.front_design import design_stack_spec
from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.inputs import reader
from tunnelsmith.optimize.io import MODEL_CAUTION, write_netcdf
from tunnelsmith.optimize.results.solution import metrics_table, solve_dataset


def run_solve(stack_path: Path, *, out_dir: Path | None = None, design: int | None = None,
              storage: str | None = None, plots: bool = True) -> int:
    """Entry point of ``tunnelsmith solve``; returns the exit status.

    ``stack_path`` is a stack file, or a campaign run directory with ``design`` (a trial
    number of its front): the design is written as ``OUT/stack.toml`` and solved.
    """
    stack_path = Path(stack_path)
    if stack_path.is_dir():
        out_dir = Path(out_dir) if out_dir is not None else Path("runs") / f"{stack_path.name}-design-{design}"
        spec, written, _ = design_stack_spec(stack_path, design, storage, out_dir)
        print(f"design {design} of {stack_path} as a stack file: {written}", file=sys.stderr)
    else:
        if design is not None:
            raise InputError("command line", "--design", f"--design picks a design of a campaign run, but "
                             f"{stack_path} is a file", f"give the run directory instead (tunnelsmith solve "
                             f"RUN_DIR --design {design}), or drop --design to solve the stack file")
        spec = reader.load(stack_path)
    for warning in spec.located_warnings:
        print(f"warning: {warning}", file=sys.stderr)
    out_dir = Path(out_dir) if out_dir is not None else Path("runs") / Path(stack_path).stem
    dataset = solve_dataset(spec)
    path = write_netcdf(dataset, out_dir / "solution.nc")
    from tunnelsmith.optimize.plots import plot_solution

    figures = plot_solution(dataset, out_dir) if plots else []
    print(f"tunnelsmith solve: {spec.path}")
    print(metrics_table(dataset))
    print(f"\nsolution: {path}")
    for figure in figures:
        print(f"plot:     {figure}")
    print(f"\nnote: {MODEL_CAUTION}")
    return 0
