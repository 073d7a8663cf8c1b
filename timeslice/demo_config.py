"""The run configuration of the invented demo scenario (also shipped as configs/demo.toml)."""

from __future__ import annotations

import os
from pathlib import Path

from timeslice.io import atomic_path

__all__ = ["render_demo_config", "write_config"]

_TEMPLATE = """\
# Invented demo scenario: the cold-adapted plant "Nivalia demonstrata" (invented) on an invented
# mountainous island, three invented climate models, two invented forcing scenarios.
# Regenerate the data with `timeslice demo`; paths are relative to this file.

[run]
name = "Nivalia demonstrata (invented demo)"
seed = 20261201

[climate]
baseline = "{data}/baseline.nc"
elevation = "{data}/dem.nc"
baseline_label = "baseline"
baseline_period = "1981-2010"
baseline_year = 1995.5

[climate.models]
alder = "{data}/models/alder/baseline.nc"
birch = "{data}/models/birch/baseline.nc"
cedar = "{data}/models/cedar/baseline.nc"

[[slices]]
name = "21ka"
file = "{data}/models/{{model}}/21ka.nc"
scenario = "past"
age_bp = 21000
sea_level = -120.0
ice = "{data}/ice_21ka.nc"

[[slices]]
name = "6ka"
file = "{data}/models/{{model}}/6ka.nc"
scenario = "past"
age_bp = 6000
sea_level = -2.0

[[slices]]
name = "2041-2060"
file = "{data}/models/{{model}}/low-forcing_2041-2060.nc"
scenario = "low-forcing"
period = "2041-2060"
year = 2050.5
sea_level = 0.2

[[slices]]
name = "2081-2100"
file = "{data}/models/{{model}}/low-forcing_2081-2100.nc"
scenario = "low-forcing"
period = "2081-2100"
year = 2090.5
sea_level = 0.5

[[slices]]
name = "2041-2060"
file = "{data}/models/{{model}}/high-forcing_2041-2060.nc"
scenario = "high-forcing"
period = "2041-2060"
year = 2050.5
sea_level = 0.3

[[slices]]
name = "2081-2100"
file = "{data}/models/{{model}}/high-forcing_2081-2100.nc"
scenario = "high-forcing"
period = "2081-2100"
year = 2090.5
sea_level = 0.8

[species]
name = "Nivalia demonstrata"
occurrences = "{data}/occurrences.csv"
dated_records = "{data}/dated_records.csv"
# invented sampled populations: is diversity higher where the refugia are?
diversity = "{data}/populations.csv"

[niche]
# defaults chosen by the truth benchmark (docs/truth.md): with the maximum sensitivity +
# specificity threshold "suitable" means what the true niche means (a perfect model then gets
# the change right); the percentile envelope came closest to the truth under that rule
algorithm = "envelope"
# candidate predictors for a cold-adapted plant: summer warmth, winter cold, annual and
# dry-season moisture (screening keeps the least correlated, in this order); a precipitation-
# seasonality candidate (bio15) turned the 21 ka loss into a gain (docs/truth.md)
variables = ["bio10", "bio6", "bio12", "bio17"]
priority = ["bio10", "bio6", "bio12", "bio17"]
# a 200 km calibration buffer: with 250 km or more the max_sss threshold of a world whose
# records cover only part of the island jumped (docs/truth.md); the demo's own fit is the same
buffer_km = 200.0
n_background = 5000
thin = "cell"
uncertainty_max_m = 10000.0
cv_block_km = 100.0
cv_folds = 5
threshold = "max_sss"

[transfer]
clamp = false
chunks = "auto"
chunk_budget_mb = 64.0

[series]
reference = "baseline"
# refugia: suitable at 21 ka, 6 ka and today in every model
refugium_window = ["21 ka BP", "6 ka BP", "1981-2010"]
dispersal_rate = "500 km/kyr"
# refugium hypotheses compared side by side against the dated records and the populations
hypotheses = {{ glacial_only = ["21 ka BP"], glacial_to_present = ["21 ka BP", "6 ka BP", "1981-2010"] }}
# invented reserves: suitable area, change and refugia inside each
zones = "{data}/reserves.geojson"

[biotic]
# the invented host plant the species needs (the climatic layers stay unchanged)
partner = "{data}/host_plant.nc"

[output]
maps = true
geotiff = false
"""


def render_demo_config(data: str = ".") -> str:
    """Return the demo config text with data paths below `data` (relative to the config file).

    Parameters
    ----------
    data : str
        Folder of the demo data, as written in the config (relative to the config file).
    """
    return _TEMPLATE.format(data=data)


def write_config(path: str | os.PathLike, *, data: str = ".") -> Path:
    """Write the demo config to `path` (atomically) and return the path.

    Parameters
    ----------
    path : str or os.PathLike
        The config file to write.
    data : str
        Folder of the demo data, relative to the config file.
    """
    path = Path(path)
    with atomic_path(path) as tmp:
        tmp.write_text(render_demo_config(data), encoding="utf-8")
    return path
