"""Climate inputs as archives ship them: one file per variable and period, one GeoTIFF per
variable and month, integer-coded temperatures with their own scale.

The reduced invented demo is rewritten into those layouts (same values), so the truth is known:
harmonising the split files must give the slices harmonising the original files gives, and a
whole run on them must write a manifest listing every file and rerun to the same numbers.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from typer.testing import CliRunner

from timeslice.cli import app
from timeslice.config import load_config
from timeslice.demo import generate
from timeslice.demo_config import render_demo_config
from timeslice.errors import ConfigError, DataError, InputFileError
from timeslice.pipeline import harmonise_stage
from timeslice.cache import StageCache

TOKENS = {"tasmin": "tmin", "tasmax": "tmax", "pr": "prec"}


def _one_model(text: str) -> str:
    return "\n".join(l for l in text.splitlines() if not l.startswith(("birch =", "cedar =")))


def _write_tifs(ds: xr.Dataset, folder: Path) -> None:
    """Baseline as one GeoTIFF per variable and month: temperatures int16 degC x 10 (nodata
    -32768), precipitation float32 mm."""
    import rasterio
    from affine import Affine

    folder.mkdir(parents=True, exist_ok=True)
    lat, lon = ds["lat"].values, ds["lon"].values
    res = float(lat[1] - lat[0])
    transform = Affine(res, 0.0, lon.min() - res / 2, 0.0, -res, lat.max() + res / 2)
    for canon, token in TOKENS.items():
        for m in range(12):
            a = ds[canon].isel(time=m).values[::-1]  # north row first
            if canon == "pr":
                data, dtype, nodata = np.where(np.isnan(a), -9999.0, a).astype("f4"), "float32", -9999.0
            else:
                data = np.where(np.isnan(a), -32768, np.round(a * 10)).astype("i2")
                dtype, nodata = "int16", -32768
            with rasterio.open(folder / f"clim_{token}_{m + 1:02d}.tif", "w", driver="GTiff",
                               height=a.shape[0], width=a.shape[1], count=1, dtype=dtype,
                               crs="EPSG:4326", transform=transform, nodata=nodata) as dst:
                dst.write(data, 1)


def _write_series(ds: xr.Dataset, folder: Path, stem: str, years: tuple[int, int],
                  split: int) -> None:
    """A 12-month climatology as a monthly series over `years`, one file per variable and per
    `split` years (every year repeats the climatology, so its climatology is the original)."""
    import cftime

    folder.mkdir(parents=True, exist_ok=True)
    cal = "noleap"
    for canon in ("tasmin", "tasmax", "pr"):
        for y0 in range(years[0], years[1] + 1, split):
            y1 = min(y0 + split - 1, years[1])
            n = (y1 - y0 + 1) * 12
            times = [cftime.DatetimeNoLeap(y, m, 15) for y in range(y0, y1 + 1) for m in range(1, 13)]
            values = np.tile(ds[canon].values, ((y1 - y0 + 1), 1, 1))
            out = xr.Dataset(
                {canon: (("time", "lat", "lon"), values.astype("f4"),
                         {"units": ds[canon].attrs["units"]})},
                coords={"time": times, "lat": ds["lat"], "lon": ds["lon"]},
            )
            out["time"].encoding.update(units="days since 1850-01-01", calendar=cal)
            assert out.sizes["time"] == n
            out.to_netcdf(folder / f"{canon}_Amon_{stem}_{y0}01-{y1}12.nc")


def _write_per_variable(ds: xr.Dataset, folder: Path, stem: str) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    for canon in ("tasmin", "tasmax", "pr"):
        ds[[canon]].to_netcdf(folder / f"{canon}_{stem}.nc")


@pytest.fixture(scope="module")
def shipped(tmp_path_factory):
    root = tmp_path_factory.mktemp("shipped")
    data = root / "demo_data"
    generate(data, resolution=0.5)
    (data / "demo.toml").write_text(_one_model(render_demo_config(".")).replace(
        "maps = true", "maps = false"))
    ship = root / "shipped"
    dec = xr.coders.CFDatetimeCoder(use_cftime=True)
    with xr.open_dataset(data / "baseline.nc", decode_times=dec) as b:
        b = b.load()
    _write_tifs(b, ship / "obs")
    # the reference run reads the same values in one NetCDF (temperatures on the 0.1 degC steps
    # of the integer coding), so both runs see identical numbers
    for v in ("tasmin", "tasmax"):
        b[v] = (np.round(b[v] * 10) / 10).astype("f4").assign_attrs(b[v].attrs)
    b.to_netcdf(data / "baseline_q.nc")
    (data / "demo.toml").write_text((data / "demo.toml").read_text().replace(
        'baseline = "./baseline.nc"', 'baseline = "./baseline_q.nc"'))
    with xr.open_dataset(data / "dem.nc") as dem:
        dem.load().to_netcdf(ship / "dem.nc")
    model = data / "models" / "alder"
    with xr.open_dataset(model / "baseline.nc", decode_times=dec) as mb:
        _write_series(mb.load(), ship / "alder", "alder_historical", (1981, 2010), 10)
    for name in ("21ka", "6ka"):
        with xr.open_dataset(model / f"{name}.nc", decode_times=dec) as s:
            _write_per_variable(s.load(), ship / "alder" / name, f"alder_{name}")
    for scen in ("low-forcing", "high-forcing"):
        for period, years in (("2041-2060", (2041, 2060)), ("2081-2100", (2081, 2100))):
            with xr.open_dataset(model / f"{scen}_{period}.nc", decode_times=dec) as s:
                _write_series(s.load(), ship / "alder", f"alder_{scen}", years, 10)
    text = (data / "demo.toml").read_text()
    text = text.replace('baseline = "./baseline_q.nc"', "")
    text = text.replace('elevation = "./dem.nc"', 'elevation = "../shipped/dem.nc"')
    text = text.replace('alder = "./models/alder/baseline.nc"',
                        'alder = "../shipped/{model}/{variable}_Amon_{model}_historical_*.nc"')
    for name in ("21ka", "6ka"):
        text = text.replace(f'file = "./models/{{model}}/{name}.nc"',
                            f'file = "../shipped/{{model}}/{name}/{{variable}}_{{model}}_{name}.nc"')
    for scen in ("low-forcing", "high-forcing"):
        for period in ("2041-2060", "2081-2100"):
            text = text.replace(f'file = "./models/{{model}}/{scen}_{period}.nc"',
                                f'file = "../shipped/{{model}}/{{variable}}_Amon_{{model}}_{scen}_*.nc"')
    text += ('\n[climate.baseline]\nfiles = "../shipped/obs/clim_{variable}_{month:02d}.tif"\n'
             'variables = { tasmin = "tmin", tasmax = "tmax", pr = "prec" }\n'
             'scale = { tasmin = 0.1, tasmax = 0.1 }\n'
             'units = { tasmin = "degC", tasmax = "degC", pr = "mm month-1" }\n')
    cfg_path = data / "shipped.toml"
    cfg_path.write_text(text)
    return root, data, cfg_path


def test_config_of_patterns_loads_and_expands(shipped):
    _, _, cfg_path = shipped
    cfg = load_config(cfg_path)
    files = cfg.check_files()
    assert len(files["climate.baseline"]) == 36  # 3 variables x 12 months
    months = sorted({(f.variable, f.month) for f in files["climate.baseline"]})
    assert months[0] == ("pr", 1) and months[-1] == ("tasmin", 12)
    assert len(files["climate.models.alder"]) == 9  # 3 variables x 3 decades
    future = [k for k in files if "high-forcing_2081-2100" in k][0]
    # the glob of one scenario matches both of its periods: 3 variables x 4 decades
    assert len(files[future]) == 12


def test_split_files_harmonise_like_the_originals(shipped, tmp_path):
    _, data, cfg_path = shipped
    orig = load_config(data / "demo.toml")
    ship = load_config(cfg_path)
    b0, s0, _ = harmonise_stage(orig, StageCache(None))
    b1, s1, t1 = harmonise_stage(ship, StageCache(None))
    assert [s.attrs["slice_label"] for s in s1] == [s.attrs["slice_label"] for s in s0]
    bios = [f"bio{i}" for i in range(1, 20)]
    for a, b in zip([b0, *s0], [b1, *s1]):
        for v in bios:
            # float32 storage of the same numbers: a few ulp
            np.testing.assert_allclose(b[v].values, a[v].values, rtol=2e-5, atol=2e-4,
                                       equal_nan=True, err_msg=f"{a.attrs['slice_label']} {v}")
        np.testing.assert_array_equal(b["land"].values, a["land"].values)
    inputs = t1["inputs"]
    base_rows = inputs[(inputs["slice"] == "baseline") & (inputs["role"] == "fine_baseline")]
    assert "x 0.1" in base_rows["converted"].iloc[0]


def test_run_on_patterns_writes_every_file_in_the_manifest_and_reruns(shipped, tmp_path):
    _, _, cfg_path = shipped
    out = tmp_path / "run"
    res = CliRunner().invoke(app, ["run", str(cfg_path), "--out", str(out)])
    assert res.exit_code == 0, res.output
    manifest = json.loads((out / "manifest.json").read_text())
    cfg = load_config(cfg_path)
    every = {str(f.path.resolve()) for fs in cfg.input_files().values() for f in fs}
    assert every <= set(manifest["inputs"]), sorted(every - set(manifest["inputs"]))[:3]
    assert len([k for k in manifest["inputs"] if k.endswith(".tif")]) == 36
    assert all(len(v["sha256"]) == 64 for v in manifest["inputs"].values())
    again = tmp_path / "again"
    res = CliRunner().invoke(app, ["rerun", str(out / "manifest.json"), "--out", str(again)])
    assert res.exit_code == 0, res.output
    pd.testing.assert_frame_equal(pd.read_csv(out / "summary.csv"),
                                  pd.read_csv(again / "summary.csv"))


def _cfg(shipped, tmp_path, extra: str = "", replace: tuple[str, str] | None = None) -> Path:
    _, data, cfg_path = shipped
    text = cfg_path.read_text()
    if replace:
        assert replace[0] in text
        text = text.replace(*replace)
    p = data / f"variant_{tmp_path.name}.toml"
    p.write_text(text + extra)
    return p


def test_global_scale_is_refused_at_load(shipped, tmp_path):
    p = _cfg(shipped, tmp_path, replace=("[climate]\n", "[climate]\nscale = { tasmin = 0.1 }\n"))
    with pytest.raises(ConfigError, match=r"climate.scale.*every input.*\[climate.baseline\]"):
        load_config(p)


def test_scale_meant_for_the_baseline_on_a_model_stops_the_run(shipped, tmp_path):
    # the case: a 0.1 scale for the integer-coded baseline also applied to the
    # model's Kelvin temperatures (-246 degC); per input it can only be a deliberate mistake
    p = _cfg(shipped, tmp_path, replace=(
        'alder = "../shipped/{model}/{variable}_Amon_{model}_historical_*.nc"',
        'alder = { files = "../shipped/{model}/{variable}_Amon_{model}_historical_*.nc", '
        'scale = { tasmin = 0.1 } }'))
    out = tmp_path / "out"
    res = CliRunner().invoke(app, ["harmonise", str(p), "--out", str(out)])
    assert res.exit_code == 2
    line = res.stderr.strip()
    assert "\n" not in line and "tasmin" in line and "declared scale 0.1" in line, line
    assert "historical" in line  # names the file


def test_unknown_placeholder_and_stray_brace(shipped, tmp_path):
    p = _cfg(shipped, tmp_path, replace=("{variable}_{model}_21ka.nc", "{varible}_{model}_21ka.nc"))
    with pytest.raises(ConfigError, match=r"slices\[0\].file.*unknown placeholder \{varible\}"):
        load_config(p)
    p = _cfg(shipped, tmp_path, replace=("{variable}_{model}_21ka.nc", "{variable_{model}_21ka.nc"))
    with pytest.raises(ConfigError, match=r"slices\[0\].file.*literal brace"):
        load_config(p)


def test_pattern_matching_nothing_is_refused_before_work(shipped, tmp_path):
    p = _cfg(shipped, tmp_path, replace=("clim_{variable}_{month:02d}.tif", "clim_{variable}_{month}.tif"))
    cfg = load_config(p)
    with pytest.raises(InputFileError, match=r"climate.baseline.*clim_\{variable\}_\{month\}\.tif.*clim_tmin_1\.tif.*file not found"):
        cfg.check_files()
    out = tmp_path / "never"
    res = CliRunner().invoke(app, ["run", str(p), "--out", str(out)])
    assert res.exit_code == 2 and not out.exists()


def test_impossible_declared_units_refused_at_load(shipped, tmp_path):
    p = _cfg(shipped, tmp_path, replace=('pr = "mm month-1" }', 'pr = "furlongs" }'))
    with pytest.raises(ConfigError, match=r"climate.baseline.units.pr = 'furlongs'.*not a precipitation rate"):
        load_config(p)


def test_reversed_period_refused_at_load(shipped, tmp_path):
    p = _cfg(shipped, tmp_path, replace=('period = "2041-2060"', 'period = "2060-2041"'))
    with pytest.raises(ConfigError, match=r"period.*'2060-2041' ends before it starts"):
        load_config(p)


def test_kelvin_slice_labelled_celsius_stops(shipped, tmp_path):
    # one model slice declared degC while its values are K: +270 K and 0 km2 suitable before
    p = _cfg(shipped, tmp_path, replace=(
        'age_bp = 6000\n', 'age_bp = 6000\nunits = { tasmin = "degC", tasmax = "degC" }\n'))
    res = CliRunner().invoke(app, ["harmonise", str(p), "--out", str(tmp_path / "o")])
    assert res.exit_code == 2
    assert "6ka" in res.stderr and "look like Kelvin" in res.stderr, res.stderr


def test_lists_of_files_and_globs(shipped, tmp_path):
    # a list of globs, one per variable, is the same file set as the {variable} pattern
    p = _cfg(shipped, tmp_path, replace=(
        'alder = "../shipped/{model}/{variable}_Amon_{model}_historical_*.nc"',
        'alder = ["../shipped/alder/tasmin_Amon_alder_historical_*.nc", '
        '"../shipped/alder/tasmax_Amon_alder_historical_*.nc", '
        '"../shipped/alder/pr_Amon_alder_historical_*.nc"]'))
    listed = load_config(p).check_files()["climate.models.alder"]
    patterned = load_config(shipped[2]).check_files()["climate.models.alder"]
    assert [f.path for f in listed] == [f.path for f in patterned] and len(listed) == 9
    assert {f.variable for f in listed} == {None}  # identified from the files themselves
