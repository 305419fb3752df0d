"""``tunnelsmith materials``: the material table with the source of every value."""

from __future__ import annotations

from tunnelsmith.optimize.errors import EXIT_OK, InputError
from tunnelsmith.physics import materials


def materials_table(temperature_K: float = 300.0) -> str:
    """The material table at ``temperature_K`` with the source of every value."""
    records = materials.catalogue(temperature_K)
    header = (f"{'material':<18}{'E_c (eV)':>10}{'mass (m0)':>11}{'gap (eV)':>10}"
              f"{'a (nm)':>9}{'ML (nm)':>9}")
    lines = [
        f"Gamma-valley parameters at {temperature_K:g} K. E_c is the conduction-band edge on one absolute scale",
        "(valence-band offset + Gamma gap), so any two rows line up: the band offset is the difference.",
        "",
        header,
        "-" * len(header),
    ]
    sources: dict[str, int] = {}
    for record in records:
        marks = []
        for field in ("conduction_band_eV", "mass", "gap_eV", "lattice_nm"):
            text = record.sources.get(field, "not stated")
            marks.append(sources.setdefault(text, len(sources) + 1))
        lines.append(
            f"{record.name:<18}{record.conduction_band_eV:>10.4f}{record.mass:>11.4f}{record.gap_eV:>10.4f}"
            f"{record.lattice_nm:>9.5f}{record.monolayer_nm:>9.5f}   [sources {', '.join(map(str, marks))}]"
        )
    lines += ["", "Sources (per row: E_c, mass, gap, lattice):"]
    lines += [f"  [{number}] {text}" for text, number in sources.items()]
    return "\n".join(lines)


def run_materials(temperature_K: float) -> int:
    """Print the material table at ``temperature_K``; returns exit status 0."""
    if not temperature_K > 0:
        raise InputError("command line", "--temperature", "the temperature must be positive",
                         "give a temperature in kelvin, e.g. --temperature 77")
    print(materials_table(temperature_K))
    return EXIT_OK
