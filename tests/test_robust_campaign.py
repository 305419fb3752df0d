"""A robust campaign end to end: objectives over growth samples, yield as an objective."""

import subprocess
import sys
from pathlib import Path

import numpy as np
import xarray as xr

ROOT = Path(__file__).resolve().parents[1]

ROBUST_CAMPAIGN = """
# Invented test scenario: a GaAs / Al0.35Ga0.65As filter whose level must stay inside
# 60-80 meV after growth errors; the campaign maximises the yield over 8 growth samples.
temperature_K = 77.0
[campaign]
name = "robust_filter"
[emitter]
material = "GaAs"
doping_cm3 = 1e18
[collector]
material = "GaAs"
doping_cm3 = 1e18
[[layer]]
name = "barrier_in"
material = "Al0.35Ga0.65As"
thickness_ml = { min = 8, max = 12 }
[[layer]]
name = "well"
material = "GaAs"
thickness_ml = { min = 12, max = 26 }
[[layer]]
name = "barrier_out"
like = "barrier_in"
[energy]
from_eV = 0.0
to_eV = 0.3
points = 301
[[objective]]
metric = "yield"
goal = "maximize"
[[objective]]
metric = "resonance_energy_eV"
target = 0.07
[search]
trials = 96
batch = 32
seed = 3
[tolerance]
thickness_sigma_ml = 0.5
growth_rate_sigma = 0.01
fraction_sigma = 0.005
seed = 5
robust = { samples = 8, quantile = 0.2 }
[[tolerance.spec]]
metric = "resonance_energy_eV"
min = 0.060
max = 0.080
"""


def test_robust_campaign_stores_robust_and_nominal_values(tmp_path):
    campaign = tmp_path / "robust.toml"
    campaign.write_text(ROBUST_CAMPAIGN)
    result = subprocess.run([sys.executable, "-m", "tunnelsmith", "optimize", str(campaign), "--out",
                             str(tmp_path / "run"), "--quiet"], cwd=ROOT, capture_output=True, text=True, timeout=600)
    assert result.returncode == 0, result.stderr
    with xr.open_dataset(tmp_path / "run" / "front.nc") as front:
        names = set(front.data_vars)
        assert "yield" in names or any("yield" == front[v].attrs.get("metric_label") for v in names)
        yield_var = next(v for v in names if front[v].attrs.get("metric_label") == "yield" or v == "yield")
        values = front[yield_var].values
        assert np.all((values >= 0) & (values <= 1))
        # Both the robust (pessimistic) and the nominal value of the resonance are kept.
        robust = front["resonance_energy_eV"].values
        nominal_name = next(v for v in names if v.startswith("nominal_resonance_energy"))
        nominal = front[nominal_name].values
        assert robust.shape == nominal.shape and np.all(np.isfinite(nominal))
        # The best yield on the front is a design whose nominal level sits inside the window.
        best = int(np.argmax(values))
        assert 0.060 <= nominal[best] <= 0.080
        assert values[best] >= 0.5
