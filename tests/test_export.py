"""From a front to the grower: ``solve RUN_DIR --design N`` and ``export``, end to end."""

from __future__ import annotations

import csv
import tomllib

import pytest
import xarray as xr
from conftest import small_campaign, tunnelsmith, write_campaign


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    directory = tmp_path_factory.mktemp("export")
    campaign = write_campaign(directory, small_campaign("exported", trials=64, batch=32))
    result = tunnelsmith("optimize", campaign, "--out", "run", "--quiet", cwd=directory)
    assert result.returncode == 0, result.stderr
    with xr.open_dataset(directory / "run" / "front.nc") as front:
        designs = [int(d) for d in front["design"].values]
        energy = {int(d): float(v) for d, v in zip(front["design"].values, front["resonance_energy_eV"].values)}
        monolayers = {int(d): front["monolayers"].sel(design=d).values.copy() for d in designs}
    return directory, designs, energy, monolayers


def test_solve_of_a_front_design_reproduces_its_metrics_exactly(run):
    directory, designs, energy, _ = run
    design = designs[0]
    result = tunnelsmith("solve", "run", "--design", design, "--out", "solved", cwd=directory)
    assert result.returncode == 0, result.stderr
    with xr.open_dataset(directory / "solved" / "solution.nc") as solution:
        assert float(solution["resonance_energy_eV"]) == pytest.approx(energy[design], rel=1e-12, abs=1e-15)
    stack = tomllib.loads((directory / "solved" / "stack.toml").read_text(encoding="utf-8"))
    assert "campaign" not in stack and "objective" not in stack
    assert all(not isinstance(v, dict) for layer in stack["layer"] for v in layer.values())  # no ranges


def test_export_writes_a_stack_the_solver_accepts_and_a_growth_sheet(run):
    directory, designs, _, monolayers = run
    design = designs[-1]
    result = tunnelsmith("export", "run", "--design", design, "--growth-rate", "0.5", cwd=directory)
    assert result.returncode == 0, result.stderr
    out = directory / "run" / f"design-{design}"
    assert tunnelsmith("check", out / "stack.toml", cwd=directory).returncode == 0
    with open(out / "growth_sheet.csv", newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    assert list(rows[0]) == ["order", "layer", "material", "monolayers", "thickness_nm", "doping_cm3", "time_s"]
    layers = rows[1:-2]  # between the two contact rows, before the total
    assert [r["layer"] for r in layers] == ["spacer_in", "barrier_in", "well", "barrier_out", "spacer_out"]
    assert rows[0]["layer"] == "emitter contact" and rows[-2]["layer"] == "collector contact"
    assert float(rows[0]["doping_cm3"]) == 2e18
    # The monolayer layers show whole monolayers, equal to the front's, and time = ml / rate.
    for index in (1, 2, 3):
        assert float(layers[index]["monolayers"]) == pytest.approx(round(float(monolayers[design][index])))
        assert float(layers[index]["time_s"]) == pytest.approx(float(layers[index]["monolayers"]) / 0.5)
    total = sum(float(r["thickness_nm"]) for r in layers)
    assert float(rows[-1]["thickness_nm"]) == pytest.approx(total, rel=1e-3)
    markdown = (out / "growth_sheet.md").read_text(encoding="utf-8")
    assert "| order | layer | material | monolayers | thickness_nm | doping_cm3 | time_s |" in markdown
    assert "do not replace measurement" in markdown


def test_export_reverses_for_collector_side_growth_and_names_missing_rates(run):
    directory, designs, _, _ = run
    result = tunnelsmith("export", "run", "--design", designs[0], "--substrate-side", "collector", "--out", "rev",
                         cwd=directory)
    assert result.returncode == 0, result.stderr
    with open(directory / "rev" / "growth_sheet.csv", newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    assert rows[0]["layer"] == "collector contact" and rows[1]["layer"] == "spacer_out"
    missing = tunnelsmith("export", "run", "--design", designs[0], "--growth-rate", "AlAs=0.3", "--out", "m",
                          cwd=directory)
    assert missing.returncode == 2 and "Traceback" not in missing.stderr
    assert "In0.53Ga0.47As" in missing.stderr and "--growth-rate" in missing.stderr


def test_a_design_not_on_the_front_is_a_clear_error(run):
    directory, designs, _, _ = run
    absent = max(designs) + 1000
    for command in ("solve", "export"):
        result = tunnelsmith(command, "run", "--design", absent, "--out", f"x-{command}", cwd=directory)
        assert result.returncode == 2, result.stderr
        assert "not on the front" in result.stderr and "Traceback" not in result.stderr


def test_front_pick_lists_the_passing_designs_from_the_command_line(run):
    directory, designs, energy, _ = run
    target = energy[designs[0]]
    result = tunnelsmith("front", "run", "--pick", f"resonance_energy_eV within 1e-9 of {target!r}", cwd=directory)
    assert result.returncode == 0, result.stderr
    passing = [d for d in designs if abs(energy[d] - target) <= 1e-9]
    assert f"{len(passing)} of {len(designs)} front designs pass" in result.stdout
    assert f"trial {designs[0]}" in result.stdout
    bad = tunnelsmith("front", "run", "--pick", "resonance_energy_eV near 1", cwd=directory)
    assert bad.returncode == 2 and "--pick" in bad.stderr and "Traceback" not in bad.stderr
    with xr.open_dataset(directory / "run" / "front.nc") as front:
        assert "mirror_of" in front.data_vars


def _pdf_pages(path) -> int:
    import re

    return len(re.findall(rb"/Type\s*/Page[^s]", path.read_bytes()))


def test_report_of_a_front_design_is_one_html_page_and_a_pdf(run):
    directory, designs, energy, _ = run
    result = tunnelsmith("report", "run", "--design", designs[0], "--out", "rep", cwd=directory)
    assert result.returncode == 0, result.stderr
    page = (directory / "rep" / "report.html").read_text(encoding="utf-8")
    figures = sorted((directory / "rep").glob("*.png"))
    assert figures and page.count('src="data:image/png;base64,') == len(figures)
    for heading in ("Cautions", "Stack (growth order)", "Model switches", "Figures of merit",
                    "Objectives and constraints of the campaign"):
        assert f"<h2>{heading}</h2>" in page
    assert "do not replace measurements of grown wafers" in page
    assert f"{energy[designs[0]]:.4g}" in page  # the front's resonance energy, recomputed
    pdf = directory / "rep" / "report.pdf"
    assert pdf.read_bytes().startswith(b"%PDF") and _pdf_pages(pdf) >= 1 + len(figures)


def test_report_of_a_stack_with_windows_includes_its_tolerance_study(tmp_path):
    from conftest import CAMPAIGNS

    result = tunnelsmith("report", CAMPAIGNS / "filter_tolerance.toml", "--samples", "100", "--out", tmp_path / "r",
                         cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    page = (tmp_path / "r" / "report.html").read_text(encoding="utf-8")
    assert "<h2>Growth tolerance</h2>" in page and "100 growth samples" in page
    assert (tmp_path / "r" / "tolerance.nc").exists()
    campaign = tunnelsmith("report", CAMPAIGNS / "demo.toml", "--out", tmp_path / "c", cwd=tmp_path)
    assert campaign.returncode == 2 and "report RUN_DIR --design N" in campaign.stderr


def test_no_plots_writes_the_results_without_figures(run, tmp_path):
    from conftest import CAMPAIGNS

    directory, _, _, _ = run
    for png in (directory / "run").glob("*.png"):
        png.unlink()
    front = tunnelsmith("front", "run", "--no-plots", "--quiet", cwd=directory)
    assert front.returncode == 0, front.stderr
    assert (directory / "run" / "front.nc").exists() and not list((directory / "run").glob("*.png"))
    stack = CAMPAIGNS / "filter_tolerance.toml"
    solve = tunnelsmith("solve", stack, "--no-plots", "--out", tmp_path / "s", cwd=tmp_path)
    assert solve.returncode == 0 and (tmp_path / "s" / "solution.nc").exists()
    tolerance = tunnelsmith("tolerance", stack, "--no-plots", "--samples", "50", "--out", tmp_path / "t",
                            "--quiet", cwd=tmp_path)
    assert tolerance.returncode == 0 and (tmp_path / "t" / "tolerance.nc").exists()
    assert not list((tmp_path / "s").glob("*.png")) and not list((tmp_path / "t").glob("*.png"))
    campaign = write_campaign(tmp_path, small_campaign("noplots", trials=32, batch=32))
    optimize = tunnelsmith("optimize", campaign, "--out", tmp_path / "o", "--no-plots", "--quiet", cwd=tmp_path)
    assert optimize.returncode == 0, optimize.stderr
    assert (tmp_path / "o" / "front.nc").exists() and not list((tmp_path / "o").glob("*.png"))
