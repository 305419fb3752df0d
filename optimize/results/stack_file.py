"""One concrete design as a stack file: the campaign's contacts and settings, fixed layers.

The text is a stack file of the format the reader accepts (no ranges, no objectives), so
``tunnelsmith solve`` and ``tunnelsmith tolerance`` take it as it is. Layers the campaign
gave in monolayers are written as whole monolayers; layers given in nm keep their nm
value, so the file states exactly what the model computed.
"""

from __future__ import annotations

import math
import tomllib

import numpy as np

from tunnelsmith.optimize.model.stack import DesignBatch, monolayer_nm

#: Tables of the campaign that describe the computation, copied as they are.
_COPIED_TABLES = ("bias", "energy", "model")


def _value(value) -> str:
    """A TOML literal for a scalar, an array or an inline table of scalars."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, list):
        return "[" + ", ".join(_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {_value(v)}" for k, v in value.items()) + " }"
    raise TypeError(f"no TOML literal for {value!r}")


def _table(header: str, values: dict) -> list[str]:
    return [header, *(f"{key} = {_value(value)}" for key, value in values.items()), ""]


def design_monolayers(spec, nominal: DesignBatch) -> np.ndarray:
    """Monolayers of every layer of the one design of ``nominal`` (not rounded), shape (n,)."""
    return nominal.thickness_nm[0] / monolayer_nm(nominal, spec.temperature_K, spec.user_materials)[0]


def stack_toml(spec, nominal: DesignBatch, *, source: str) -> str:
    """The stack file of the single design of ``nominal`` under the campaign ``spec``.

    Parameters
    ----------
    spec : StackSpec
        The campaign (contacts, temperature, user materials, model settings, tolerance).
    nominal : DesignBatch
        One design (``n_designs == 1``) of the campaign's layers.
    source : str
        Where the design came from (run directory and trial), for the header comment.
    """
    raw = tomllib.loads(spec.text)
    monolayers = design_monolayers(spec, nominal)
    lines = [f"# Stack file of {source}, written by tunnelsmith.",
             "# A design of a campaign with every value fixed: solve it, study its tolerance, hand it",
             "# to the grower. Results rank designs; they do not replace measurement of grown wafers.",
             f"temperature_K = {_value(float(spec.temperature_K))}", ""]
    for name, values in spec.user_materials.items():
        lines += _table(f"[materials.{name}]", dict(values))
    for side in ("emitter", "collector"):
        contact = getattr(spec, side)
        values = {"material": contact.material}
        if contact.fraction is not None:
            values["fraction"] = float(contact.fraction)
        values["doping_cm3"] = float(contact.doping_cm3)
        lines += _table(f"[{side}]", values)
    for index, layer in enumerate(spec.layers):
        values = {"name": layer.name, "material": str(nominal.base[0, index])}
        fraction = float(nominal.fraction[0, index])
        if not math.isnan(fraction):
            values["fraction"] = fraction
        if layer.thickness_ml is not None:
            whole = int(round(float(monolayers[index])))
            if abs(monolayers[index] - whole) > 1e-6:
                raise ValueError(f"layer {layer.name} of {source} is {monolayers[index]} monolayers, not whole")
            values["thickness_ml"] = whole
        else:
            values["thickness_nm"] = float(nominal.thickness_nm[0, index])
        if layer.absorption_eV:
            values["absorption_eV"] = float(layer.absorption_eV)
        lines += _table("[[layer]]", values)
    for name in _COPIED_TABLES:
        if isinstance(raw.get(name), dict):
            lines += _table(f"[{name}]", raw[name])
    tolerance = raw.get("tolerance")
    if isinstance(tolerance, dict):
        # The growth-error settings and windows of the campaign; a robust search setting
        # belongs to campaigns only.
        settings = {k: v for k, v in tolerance.items() if k not in ("robust", "spec")}
        lines += _table("[tolerance]", settings)
        for window in tolerance.get("spec", []):
            lines += _table("[[tolerance.spec]]", window)
    return "\n".join(lines).rstrip() + "\n"
