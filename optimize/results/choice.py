"""Choosing among the front: a balanced design, the best of each objective, mirror twins,
and ``--pick`` expressions that filter and rank the front.

All functions read a front Dataset (``front.nc``) only.

Pick expressions
----------------
Clauses separated by commas; filters first, then at most one ranking::

    resonance_energy_eV within 0.005 of 0.15, resonance_width_eV < 0.01, then max transmission_contrast

* ``METRIC within TOL of VALUE`` — ``|METRIC - VALUE| <= TOL``
* ``METRIC < X``, ``METRIC <= X``, ``METRIC > X``, ``METRIC >= X``
* ``METRIC between A and B`` — ``A <= METRIC <= B``
* ``then max METRIC``, ``then min METRIC``, ``then closest METRIC to VALUE``

``METRIC`` is any metric stored in the front (the metric names of campaign files, e.g.
``leakage_A_cm2@0.05V``). Without a ranking clause the balanced order is used.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import xarray as xr

from tunnelsmith.optimize.errors import InputError
from tunnelsmith.optimize.io import netcdf_name

_NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
_FILTERS = {
    "within": re.compile(rf"^(?P<metric>\S+)\s+within\s+(?P<tol>{_NUMBER})\s+of\s+(?P<value>{_NUMBER})$"),
    "between": re.compile(rf"^(?P<metric>\S+)\s+between\s+(?P<lo>{_NUMBER})\s+and\s+(?P<hi>{_NUMBER})$"),
    "compare": re.compile(rf"^(?P<metric>\S+)\s*(?P<op><=|>=|<|>)\s*(?P<value>{_NUMBER})$"),
}
_RANKINGS = {
    "extreme": re.compile(r"^then\s+(?P<goal>max|min)\s+(?P<metric>\S+)$"),
    "closest": re.compile(rf"^then\s+closest\s+(?P<metric>\S+)\s+to\s+(?P<value>{_NUMBER})$"),
}
SYNTAX_HELP = ('e.g. --pick "resonance_energy_eV within 0.005 of 0.15, then max transmission_contrast"; clauses: '
               '"M within T of V", "M < X" (<=, >, >=), "M between A and B", "then max M", "then min M", '
               '"then closest M to V"')


def minimised_objectives(front: xr.Dataset) -> np.ndarray:
    """Objective values in minimisation form, shape (designs, objectives)."""
    values = np.asarray(front["objective_value"].values, dtype=float)
    signs = np.where(np.asarray(front["objective_direction"].values).astype(str) == "maximize", -1.0, 1.0)
    return values * signs


def balanced_order(front: xr.Dataset) -> np.ndarray:
    """Design indices from the most balanced outward: distance to the ideal point.

    Compromise programming (M. Zeleny, "Compromise programming", in Multiple Criteria
    Decision Making, Univ. of South Carolina Press, 1973): each objective is scaled to
    [0, 1] over the front (0 = the best value on the front) and designs are ranked by
    their Euclidean distance to the ideal point, the origin. The first is the knee-like
    balanced choice.
    """
    points = minimised_objectives(front)
    if len(points) == 0:
        return np.zeros(0, int)
    low, high = points.min(axis=0), points.max(axis=0)
    scaled = (points - low) / np.where(high > low, high - low, 1.0)
    return np.argsort(np.linalg.norm(scaled, axis=1), kind="stable")


def best_of_each_objective(front: xr.Dataset) -> list[int]:
    """Index of the best design for every objective (ties: the lower index)."""
    points = minimised_objectives(front)
    return [int(np.argmin(points[:, k])) for k in range(points.shape[1])] if len(points) else []


def mirror_of(front: xr.Dataset) -> np.ndarray:
    """For each design, the index of an earlier design that is its mirror image, else -1.

    A mirror image is the same stack read from the collector side: the same materials,
    fractions and thicknesses in reverse layer order (a zero-bias metric between equal
    contacts cannot tell the two apart). A symmetric stack is not its own twin.
    """
    material = np.asarray(front["material"].values).astype(str)
    thickness = np.round(np.asarray(front["thickness_nm"].values, dtype=float), 9)
    fraction = np.round(np.nan_to_num(np.asarray(front["fraction"].values, dtype=float), nan=-1.0), 9)
    seen: dict[tuple, int] = {}
    twin = np.full(len(material), -1)
    for d in range(len(material)):
        key = (tuple(material[d]), tuple(thickness[d]), tuple(fraction[d]))
        mirrored = (tuple(material[d][::-1]), tuple(thickness[d][::-1]), tuple(fraction[d][::-1]))
        if mirrored != key and mirrored in seen:
            twin[d] = seen[mirrored]
        seen.setdefault(key, d)
    return twin


@dataclass(frozen=True)
class Pick:
    """A parsed ``--pick`` expression: filters (metric, test) and an optional ranking."""

    text: str
    filters: tuple[tuple[str, str, tuple[float, ...]], ...]
    ranking: tuple[str, str, float | None] | None


def parse_pick(text: str) -> Pick:
    """Parse a pick expression (syntax in the module docstring); InputError when malformed."""
    clauses = [c.strip() for c in text.split(",") if c.strip()]
    if not clauses:
        raise InputError("command line", "--pick", "the expression is empty", SYNTAX_HELP)
    filters, ranking = [], None
    for position, clause in enumerate(clauses):
        if clause.startswith("then "):
            if position != len(clauses) - 1:
                raise InputError("command line", "--pick", f'"{clause}" must come last (one ranking, after the '
                                 "filters)", SYNTAX_HELP)
            for kind, pattern in _RANKINGS.items():
                match = pattern.match(clause)
                if match:
                    value = float(match["value"]) if kind == "closest" else None
                    ranking = (match["metric"], match["goal"] if kind == "extreme" else "closest", value)
                    break
            else:
                raise InputError("command line", "--pick", f'cannot read the ranking "{clause}"', SYNTAX_HELP)
            continue
        for kind, pattern in _FILTERS.items():
            match = pattern.match(clause)
            if match:
                if kind == "within":
                    filters.append((match["metric"], "within", (float(match["tol"]), float(match["value"]))))
                elif kind == "between":
                    filters.append((match["metric"], "between", (float(match["lo"]), float(match["hi"]))))
                else:
                    filters.append((match["metric"], match["op"], (float(match["value"]),)))
                break
        else:
            raise InputError("command line", "--pick", f'cannot read the clause "{clause}"', SYNTAX_HELP)
    return Pick(text, tuple(filters), ranking)


def _metric(front: xr.Dataset, metric: str) -> np.ndarray:
    name = netcdf_name(metric)
    if name not in front.data_vars or "design" not in front[name].dims or front[name].ndim != 1:
        stored = sorted(v for v in front.data_vars if front[v].dims == ("design",))
        raise InputError("command line", "--pick", f'the front stores no metric "{metric}"',
                         f"use one of {', '.join(stored)}")
    return np.asarray(front[name].values, dtype=float)


def apply_pick(front: xr.Dataset, pick: Pick) -> np.ndarray:
    """Indices of the designs that pass every filter, ranked (NaN metrics never pass)."""
    passing = np.ones(front.sizes.get("design", 0), dtype=bool)
    for metric, test, numbers in pick.filters:
        values = _metric(front, metric)
        with np.errstate(invalid="ignore"):
            if test == "within":
                passing &= np.abs(values - numbers[1]) <= numbers[0]
            elif test == "between":
                passing &= (values >= numbers[0]) & (values <= numbers[1])
            else:
                passing &= {"<": values < numbers[0], "<=": values <= numbers[0], ">": values > numbers[0],
                            ">=": values >= numbers[0]}[test]
    if pick.ranking is None:
        order = balanced_order(front)
    else:
        metric, goal, value = pick.ranking
        values = _metric(front, metric)
        key = {"max": -values, "min": values}.get(goal, np.abs(values - (value if value is not None else 0.0)))
        order = np.argsort(np.where(np.isfinite(key), key, np.inf), kind="stable")
        passing &= np.isfinite(values)
    return order[passing[order]]
