"""Users' own suitability rasters through the series stage only ([suitability]): an invented
world whose suitable area is known, and every wrong input refused early with one line."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from typer.testing import CliRunner

rasterio = pytest.importorskip("rasterio")
pyproj = pytest.importorskip("pyproj")

from timeslice.cli import app
from timeslice.config import load_config
from timeslice.errors import ConfigError, InputFileError

RES = 0.5
WEST, NORTH, NX, NY = 10.0, 50.0, 24, 20  # 10..22 E, 40..50 N
#: the invented species' suitable block per slice: (west, east, south, north), degrees
BLOCKS = {"present": (12.0, 16.0, 44.0, 47.0), "lgm": (13.0, 18.0, 42.0, 45.5),
          "warm_2080": (14.0, 16.5, 46.0, 48.5)}


def _grid():
    lon = WEST + RES * (np.arange(NX) + 0.5)
    lat = NORTH - RES * (np.arange(NY) + 0.5)  # north-up, as GeoTIFFs are
    return np.meshgrid(lon, lat)


def _write_tif(path, values, *, nodata=np.nan, west=WEST):
    from rasterio.transform import from_origin

    with rasterio.open(path, "w", driver="GTiff", height=values.shape[0], width=values.shape[1],
                       count=1, dtype="float32", crs="EPSG:4326", nodata=nodata,
                       transform=from_origin(west, NORTH, RES, RES)) as dst:
        dst.write(values.astype("float32"), 1)


def _island():
    lon, lat = _grid()
    return (lon > 10.9) & (lon < 21.1) & (lat > 40.9) & (lat < 49.6)


def _map(block):
    lon, lat = _grid()
    w, e, s, n = block
    inside = (lon > w) & (lon < e) & (lat > s) & (lat < n)
    suit = np.where(inside, 0.9, 0.1)
    return np.where(_island(), suit, np.nan)


def _world(tmp_path, *, text_extra: str = "", threshold: str = "threshold = 0.5",
           maps: bool = False):
    folder = tmp_path / "maps"
    folder.mkdir(exist_ok=True)
    for label, block in BLOCKS.items():
        _write_tif(folder / f"{label}.tif", _map(block))
    cfg = tmp_path / "own.toml"
    cfg.write_text(f"""
[run]
name = "own maps"

[suitability]
files = "maps/{{slice}}.tif"
{threshold}

[[suitability.slices]]
label = "present"
year = 2000
period = "1981-2010"
scenario = "baseline"

[[suitability.slices]]
label = "lgm"
age_bp = 21000
model = "gcm_a"

[[suitability.slices]]
label = "warm_2080"
year = 2080
period = "2071-2100"
model = "gcm_a"
scenario = "high"

[output]
maps = {str(maps).lower()}
{text_extra}
""")
    return cfg


def _geod_area_km2(block) -> float:
    """Reference: geodesic area of the block's outline on the WGS84 ellipsoid
    (pyproj.Geod.polygon_area_perimeter; edges along meridians and parallels, densified)."""
    geod = pyproj.Geod(ellps="WGS84")
    w, e, s, n = block
    k = 200
    lons = np.concatenate([np.linspace(w, e, k), np.full(k, e), np.linspace(e, w, k), np.full(k, w)])
    lats = np.concatenate([np.full(k, s), np.linspace(s, n, k), np.full(k, n), np.linspace(n, s, k)])
    area, _ = geod.polygon_area_perimeter(lons, lats)
    return abs(area) / 1e6


@pytest.fixture(scope="module")
def own_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("own")
    cfg = _world(root, maps=True)  # the maps too: their captions must not claim novelty
    out = root / "out"
    res = CliRunner().invoke(app, ["run", str(cfg), "--out", str(out)])
    assert res.exit_code == 0, res.output
    return out, cfg


def test_suitable_areas_equal_geodesic_areas(own_run):
    out, _ = own_run
    summary = pd.read_csv(out / "summary.csv").set_index("slice")
    for label, block in BLOCKS.items():
        # the timeslice areas are on the authalic sphere, the reference on the ellipsoid: at
        # these latitudes they differ by under 0.3 % (our bound 0.5 %; the block's edges lie
        # on cell edges, so there is no grid error beyond that)
        np.testing.assert_allclose(summary.loc[label, "suitable_area_km2"],
                                   _geod_area_km2(block), rtol=5e-3)
    # change identities against the reference (gain - loss = area change)
    base = summary.loc["present", "suitable_area_km2"]
    np.testing.assert_allclose(summary["suitable_area_km2"] - base,
                               summary["gain_km2"] - summary["loss_km2"], rtol=1e-9, atol=1e-6)


def test_refugium_is_the_overlap_of_window_slices(own_run):
    from timeslice.report import open_series

    out, _ = own_run
    with open_series(out / "series.nc") as ds:
        # default window: the past slices and the reference -> present and lgm overlap
        ref = ds["refugium_window"].values.astype(bool)
        w1, e1, s1, n1 = BLOCKS["present"]
        w2, e2, s2, n2 = BLOCKS["lgm"]
        overlap = (max(w1, w2), min(e1, e2), max(s1, s2), min(n1, n2))
        area = float(ds["cell_area"].where(ref).sum())
    np.testing.assert_allclose(area, _geod_area_km2(overlap), rtol=5e-3)


def test_no_novelty_layers_and_the_report_says_so(own_run):
    from timeslice.report import open_series

    out, _ = own_run
    with open_series(out / "series.nc") as ds:
        for name in ("mess", "nt1", "nt2", "most_dissimilar"):
            assert name not in ds, name
        assert "suitability" in ds and "stability_all_slices" in ds
        assert float(ds["suitable"].attrs.get("threshold", 0.5)) == 0.5
    html = (out / "report.html").read_text()
    assert "Novelty could not be assessed" in html
    assert "no niche was fitted" in html
    assert "MESS &lt; 0" not in html and "MESS < 0" not in html  # no caption or caution claims it
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["status"] == "complete"
    assert any("Novelty could not be assessed" in n for n in manifest["series_notes"])
    assert any(p.endswith("present.tif") for p in manifest["inputs"])


def _refused(tmp_path, cfg, match):
    out = tmp_path / "out"
    res = CliRunner().invoke(app, ["run", str(cfg), "--out", str(out)])
    assert res.exit_code == 2, res.output
    lines = [l for l in res.output.splitlines() if l.strip()]
    assert len(lines) == 1 and "Traceback" not in res.output, res.output
    assert match in lines[0], lines[0]
    assert not out.exists()  # refused before the output folder is touched
    return lines[0]


def test_missing_file_refused_at_load(tmp_path):
    cfg = _world(tmp_path)
    (tmp_path / "maps" / "lgm.tif").unlink()
    with pytest.raises(InputFileError, match=r"suitability.files \(lgm\).*file not found"):
        load_config(cfg)
    _refused(tmp_path, cfg, "lgm.tif")


def test_values_outside_0_1_refused(tmp_path):
    cfg = _world(tmp_path)
    _write_tif(tmp_path / "maps" / "lgm.tif", _map(BLOCKS["lgm"]) * 100)  # a 0..100 map
    line = _refused(tmp_path, cfg, "not a suitability in 0..1")
    assert "lgm.tif" in line


def test_grids_that_differ_refused(tmp_path):
    cfg = _world(tmp_path)
    _write_tif(tmp_path / "maps" / "lgm.tif", _map(BLOCKS["lgm"]), west=WEST + RES)
    line = _refused(tmp_path, cfg, "differs from that of present.tif")
    assert "lgm.tif" in line


def test_no_threshold_refused_at_load(tmp_path):
    cfg = _world(tmp_path, threshold="")
    with pytest.raises(ConfigError, match="suitability.threshold is missing"):
        load_config(cfg)
    _refused(tmp_path, cfg, "suitability.threshold is missing")


@pytest.mark.parametrize("extra, match", [
    ("[climate]\nbaseline = \"x.nc\"\nelevation = \"y.nc\"", "[climate] is not used with [suitability]"),
    ("[niche]\nthreshold_value = 0.3", "[niche] threshold_value is not used"),
    ("[series]\nreference = \"nowhere\"", "series.reference = 'nowhere' is not a slice label"),
])
def test_config_mistakes_refused_at_load(tmp_path, extra, match):
    cfg = _world(tmp_path, text_extra=extra)
    with pytest.raises(ConfigError, match=match.replace("[", r"\[").replace("]", r"\]")):
        load_config(cfg)


def test_netcdf_rasters_and_land_raster(tmp_path):
    """The same world from NetCDF maps with a separate land raster: the same areas."""
    from timeslice.commands import run

    cfg_path = _world(tmp_path, text_extra="")
    lon, lat = _grid()
    for label, block in BLOCKS.items():
        values = np.nan_to_num(_map(block), nan=0.0)  # no NaN: land comes from the land file
        da = xr.DataArray(values[::-1].astype("float32"), dims=("lat", "lon"),
                          coords={"lat": lat[::-1, 0], "lon": lon[0]}, name="suitability")
        da["lat"].attrs = {"units": "degrees_north", "standard_name": "latitude"}
        da["lon"].attrs = {"units": "degrees_east", "standard_name": "longitude"}
        da.to_netcdf(tmp_path / "maps" / f"{label}.nc")
    _write_tif(tmp_path / "land.tif", _island().astype("float32"))
    text = cfg_path.read_text().replace('files = "maps/{slice}.tif"',
                                        'files = "maps/{slice}.nc"\nland = "land.tif"')
    cfg_path.write_text(text)
    result = run(load_config(cfg_path), tmp_path / "out")
    summary = result.summary.set_index("slice")
    for label, block in BLOCKS.items():
        np.testing.assert_allclose(summary.loc[label, "suitable_area_km2"],
                                   _geod_area_km2(block), rtol=5e-3)


def test_harmonise_refused_on_own_maps(tmp_path):
    cfg = _world(tmp_path)
    res = CliRunner().invoke(app, ["harmonise", str(cfg), "--out", str(tmp_path / "h")])
    assert res.exit_code == 2 and "brings its own suitability maps" in res.output


def test_every_suitability_key_is_documented():
    """docs/config.md lists every key of [suitability] and [[suitability.slices]], no more."""
    import re
    from pathlib import Path

    from timeslice.series_only import SuitabilityConfig, SuitabilitySlice

    text = (Path(__file__).resolve().parents[1] / "docs" / "config.md").read_text()
    found: dict[str, set[str]] = {}
    current = None
    for line in text.splitlines():
        if line.startswith("#"):
            current = ("slices" if "[[suitability.slices]]" in line
                       else "main" if "[suitability]" in line else None)
            continue
        if current and line.startswith("| `"):
            found.setdefault(current, set()).update(
                re.findall(r"`([A-Za-z_][A-Za-z0-9_]*)`", line.split("|")[1]))
    assert found.get("main") == set(SuitabilityConfig.model_fields)
    assert found.get("slices") == set(SuitabilitySlice.model_fields)
