"""``tunnelsmith solve``: everything about one stack, stored as ``solution.nc`` with plots.
"""

from __future__ import annotations

import sys
from pathlib import Path
from tunnelsmith.optimize.inputs import reader
from tunnelsmith.optimize.io import MODEL_CAUTION, write_netcdf
from tunnelsmith.optimize.results.solution import metrics_table, solve_dataset


def run_solve(stack_path: Path, *, out_dir: Path | None = None) -> int:
    """Entry point of ``tunnelsmith solve``; returns the exit status."""
    spec = reader.load(stack_path)
    for warning in spec.located_warnings:
        print(f"warning: {warning}", file=sys.stderr)
    out_dir = Path(out_dir) if out_dir is not None else Path("runs") / Path(stack_path).stem
    dataset = solve_dataset(spec)
    path = write_netcdf(dataset, out_dir / "solution.nc")
    from tunnelsmith.optimize.plots import plot_solution

    figures = plot_solution(dataset, out_dir)
    print(f"tunnelsmith solve: {spec.path}")
    print(metrics_table(dataset))
    print(f"\nsolution: {path}")
    for figure in figures:
        print(f"plot:     {figure}")
    print(f"\nnote: {MODEL_CAUTION}")
    return 0
