"""The whole path on a reduced invented demo: harmonise -> fit -> transfer -> summarise -> report."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from typer.testing import CliRunner

from timeslice.cli import app
from timeslice.demo import generate
from timeslice.demo_config import render_demo_config
from timeslice.grid import cell_area
from timeslice.report import open_series

SUMMARY_COLUMNS = [
    "slice", "year", "model", "scenario", "suitable_area_km2", "gain_km2", "loss_km2",
    "stable_km2", "novel_area_km2", "centroid_lat", "centroid_lon", "centroid_shift_km",
]


def _one_model_config(text: str) -> str:
    # keep one invented model so the end-to-end run stays fast
    return "\n".join(l for l in text.splitlines() if not l.startswith(("birch =", "cedar =")))


def _with_cache(out, target):
    """A fresh output folder that starts from the module run's stage cache (no refitting)."""
    import shutil

    shutil.copytree(out / ".cache", target / ".cache")
    return target


def _without_extras(text: str) -> str:
    """The demo config without its invented partner, populations, hypotheses and reserves (for
    tests that bring their own)."""
    import re

    text = re.sub(r"\n\[biotic\]\n(?:[^\n\[]*\n)*", "\n", text)
    return "\n".join(l for l in text.splitlines()
                     if not l.startswith(("diversity = ", "zones = ", "hypotheses = ")))


def _variant(data, name: str, *replacements: tuple[str, str]):
    """The module's one-model demo config (no maps, without the demo's own biotic, genetic,
    hypothesis and zone inputs) with text replaced, written as NAME.toml."""
    text = _without_extras(_one_model_config(render_demo_config(".")).replace(
        "maps = true", "maps = false"))
    for old, new in replacements:
        assert old in text, old
        text = text.replace(old, new)
    path = data / f"{name}.toml"
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("e2e")
    data = root / "demo_data"
    generate(data, resolution=0.5)
    cfg = data / "demo.toml"
    cfg.write_text(_one_model_config(render_demo_config(".")).replace("maps = true", "maps = false"))
    out = root / "out"
    result = CliRunner().invoke(app, ["run", str(cfg), "--out", str(out)])
    assert result.exit_code == 0, result.output
    return out, data, result


def test_outputs_exist(demo_run):
    out, _, result = demo_run
    for name in ("series.nc", "summary.csv", "report.html", "manifest.json"):
        assert (out / name).is_file(), name
    assert str(out.resolve()) in result.stdout


def test_series_names_and_ranges(demo_run):
    out, _, _ = demo_run
    with xr.open_dataset(out / "series.nc") as ds:
        for name in ("suitability", "suitable", "mess", "nt1", "nt2", "stability_all_slices",
                     "refugium_all_slices", "refugium_window", "stability_window"):
            assert name in ds, name
        # each refugium/stability layer says which window it covers
        assert "all slices" in ds["refugium_all_slices"].attrs["long_name"]
        assert "refugium window" in ds["refugium_window"].attrs["long_name"]
        assert ds["suitability"].dims == ("slice", "lat", "lon")
        s = ds["suitability"].values
        assert np.nanmin(s) >= 0 and np.nanmax(s) <= 1
        st = ds["stability_all_slices"].values
        assert np.nanmin(st) >= 0 and np.nanmax(st) <= 1
        suitable = ds["suitable"].values == 1
        refugium = ds["refugium_all_slices"].values.astype(bool)
        # a refugium is suitable in every slice
        assert np.all(suitable[:, refugium])
        assert ds.attrs["Conventions"].startswith("CF-")


def test_summary_identities(demo_run):
    out, _, _ = demo_run
    df = pd.read_csv(out / "summary.csv")
    assert list(df.columns[: len(SUMMARY_COLUMNS)]) == SUMMARY_COLUMNS or set(SUMMARY_COLUMNS) <= set(df.columns)
    base = df.loc[df["slice"] == "baseline", "suitable_area_km2"].iloc[0]
    # area(t) - area(ref) = gain - loss and stable + loss = area(ref) (METHODS.md identities)
    np.testing.assert_allclose(df["suitable_area_km2"] - base, df["gain_km2"] - df["loss_km2"],
                               rtol=1e-9, atol=1e-6)
    np.testing.assert_allclose(df["stable_km2"] + df["loss_km2"], base, rtol=1e-9)
    assert base > 0
    assert len(df) == 1 + 6  # baseline + 6 slices of one model


def test_lgm_land_mask_exposes_shelf(demo_run):
    out, _, _ = demo_run
    with open_series(out / "series.nc") as ds:
        land = ds["land"].astype(bool)
        area = cell_area(ds)
        base = float(area.where(land.sel(slice="baseline")).sum())
        lgm = float(area.where(land.sel(slice="alder_21ka")).sum())
        assert lgm > base * 1.05
        # novelty: somewhere the 21 ka climate leaves the calibration range
        assert float(ds["mess"].sel(slice="alder_21ka").min()) < 0


def test_report_and_manifest(demo_run):
    out, _, _ = demo_run
    html = (out / "report.html").read_text()
    assert "hypothes" in html and "novel" in html
    assert "http://" not in html and "https://" not in html.replace("https://doi", "")
    man = json.loads((out / "manifest.json").read_text())
    for key in ("config", "inputs", "seed", "timings", "command"):
        assert key in man


def test_rerun_uses_cache(demo_run):
    out, data, _ = demo_run
    result = CliRunner().invoke(app, ["run", str(data / "demo.toml"), "--out", str(out)])
    assert result.exit_code == 0, result.output
    man = json.loads((out / "manifest.json").read_text())
    assert man["cache"]["computed"] == 0
    # a run from the cache writes the same layers, with the same types, as a fresh one
    with open_series(out / "series.nc") as ds:
        assert ds["suitable"].dtype == np.int8 and ds["most_dissimilar"].dtype == np.int16


def test_occurrences_without_coordinates(demo_run, tmp_path):
    _, data, _ = demo_run
    bad = tmp_path / "occ.csv"
    bad.write_text("species,easting,northing\nfoo,1,2\n")
    text = render_demo_config(str(data)).replace(f'occurrences = "{data}/occurrences.csv"', f'occurrences = "{bad}"')
    cfg = tmp_path / "run.toml"
    cfg.write_text(_one_model_config(text))
    result = CliRunner().invoke(app, ["run", str(cfg), "--out", str(tmp_path / "o")])
    assert result.exit_code == 2
    assert "occ.csv" in result.stderr and "decimalLatitude" in result.stderr


def test_slice_missing_variable(demo_run, tmp_path):
    _, data, _ = demo_run
    with xr.open_dataset(data / "models" / "alder" / "6ka.nc") as ds:
        ds.drop_vars("pr").to_netcdf(tmp_path / "6ka.nc")
    text = _one_model_config(render_demo_config(str(data))).replace(
        f'file = "{data}/models/{{model}}/6ka.nc"', f'file = "{tmp_path}/6ka.nc"')
    cfg = tmp_path / "run.toml"
    cfg.write_text(text)
    result = CliRunner().invoke(app, ["run", str(cfg), "--out", str(tmp_path / "o")])
    assert result.exit_code == 2, result.output
    assert "6ka.nc" in result.stderr and "pr" in result.stderr


def test_intermediate_slice_by_interpolation(demo_run, tmp_path):
    _, data, _ = demo_run
    text = _one_model_config(render_demo_config(str(data)))
    text += '\n[[slices]]\nname = "14ka"\nbetween = ["21ka", "6ka"]\nscenario = "past"\nage_bp = 14000\nsea_level = -80.0\n'
    cfg = tmp_path / "run.toml"
    cfg.write_text(text)
    out = tmp_path / "h"
    result = CliRunner().invoke(app, ["harmonise", str(cfg), "--out", str(out)])
    assert result.exit_code == 0, result.output
    inputs = pd.read_csv(out / "tables" / "inputs.csv")
    inputs = pd.read_csv(out / "tables" / "slice_land.csv")
    shelf = dict(zip(inputs["slice"], inputs["exposed_shelf_km2"]))
    # sea level -80 m lies between -120 m and -2 m, so the exposed shelf lies between theirs
    # (land itself is not monotonic: the 21 ka ice sheet removes land the 14 ka slice keeps)
    assert shelf["alder_6ka"] < shelf["alder_14ka"] < shelf["alder_21ka"]
    with xr.open_dataset(out / "harmonised" / "alder_14ka.nc") as mid, \
            xr.open_dataset(out / "harmonised" / "alder_6ka.nc") as b:
        t_mid = float(mid["bio1"].where(b["bio1"].notnull()).mean())
        t_b = float(b["bio1"].mean())
        assert t_mid < t_b  # closer to the glacial state, so colder


def test_between_unknown_name(demo_run, tmp_path):
    _, data, _ = demo_run
    text = _one_model_config(render_demo_config(str(data)))
    text += '\n[[slices]]\nname = "14ka"\nbetween = ["21k", "6ka"]\nage_bp = 14000\n'
    cfg = tmp_path / "run.toml"
    cfg.write_text(text)
    result = CliRunner().invoke(app, ["harmonise", str(cfg), "--out", str(tmp_path / "h")])
    assert result.exit_code == 2
    assert "'21k'" in result.stderr and "did you mean '21ka'" in result.stderr


def test_warning_is_one_line(demo_run, tmp_path):
    # more background points than land cells: the tool warns (one line) and uses all cells
    _, data, _ = demo_run
    text = _one_model_config(render_demo_config(str(data))).replace("n_background = 5000", "n_background = 100000")
    cfg = tmp_path / "run.toml"
    cfg.write_text(text.replace("maps = true", "maps = false"))
    result = CliRunner().invoke(app, ["run", str(cfg), "--out", str(tmp_path / "o")])
    assert result.exit_code == 0, result.output
    lines = [l for l in result.stderr.splitlines() if "background" in l]
    assert lines and all(l.startswith("timeslice: warning: ") for l in lines)


def test_export_and_rerun(demo_run, tmp_path):
    out, _, _ = demo_run
    result = CliRunner().invoke(app, ["export", str(out), "--format", "geotiff"])
    assert result.exit_code == 0, result.output
    rasterio = pytest.importorskip("rasterio")
    tif = sorted((out / "geotiff").glob("suitability_*.tif"))
    assert tif
    # every layer a user may need is exported, window refugia and masks included
    names = {p.name for p in (out / "geotiff").glob("*.tif")}
    for layer in ("refugium_window", "stability_window", "refugium_all_slices", "land_", "ice_"):
        assert any(n.startswith(layer) for n in names), layer
    with rasterio.open(tif[0]) as src, open_series(out / "series.nc") as ds:
        # bounds of the raster = outer cell edges of the grid
        assert src.bounds.left == pytest.approx(float(ds["lon"].min()) - 0.25)
        assert src.bounds.top == pytest.approx(float(ds["lat"].max()) + 0.25)
        assert src.crs.to_epsg() == 4326
    result = CliRunner().invoke(app, ["rerun", str(out / "manifest.json"), "--out", str(tmp_path / "again")])
    assert result.exit_code == 0, result.output
    a = pd.read_csv(out / "summary.csv")
    b = pd.read_csv(tmp_path / "again" / "summary.csv")
    pd.testing.assert_frame_equal(a, b)


def test_summarise_from_finished_run(demo_run, tmp_path):
    import shutil

    out, data, _ = demo_run
    work = tmp_path / "copy"
    shutil.copytree(out, work)
    result = CliRunner().invoke(app, ["summarise", str(work), "--reference", "alder_21ka"])
    assert result.exit_code == 0, result.output
    df = pd.read_csv(work / "summary.csv")
    assert df.loc[df["slice"] == "alder_21ka", "gain_km2"].iloc[0] == 0
    assert "period" in df.columns  # summary.csv keeps all its columns
    # the report is regenerated with the new reference, not left stale
    assert "alder_21ka" in (work / "report.html").read_text(encoding="utf-8")
    manifest = json.loads((work / "manifest.json").read_text())
    assert manifest["config"]["series"]["reference"] == "alder_21ka"
    bad = CliRunner().invoke(app, ["summarise", str(work), "--reference", "nope"])
    assert bad.exit_code == 2 and "nope" in bad.stderr
    # the same options given to `run` give the same tables and layers
    cfg = data / "ref21.toml"
    cfg.write_text(_one_model_config(render_demo_config(".")).replace(
        "maps = true", "maps = false").replace('reference = "baseline"', 'reference = "alder_21ka"'))
    fresh = _with_cache(out, tmp_path / "fresh")
    assert CliRunner().invoke(app, ["run", str(cfg), "--out", str(fresh)]).exit_code == 0
    for name in ["summary.csv", *sorted(p.relative_to(work).as_posix()
                                        for p in (work / "tables").glob("*.csv"))]:
        a, b = pd.read_csv(work / name), pd.read_csv(fresh / name)
        pd.testing.assert_frame_equal(a, b, obj=name)
    with open_series(work / "series.nc") as a, open_series(fresh / "series.nc") as b:
        assert sorted(a.data_vars) == sorted(b.data_vars)
        for v in a.data_vars:
            np.testing.assert_array_equal(a[v].values, b[v].values, err_msg=v)


def test_input_table_names_every_file(demo_run):
    out, _, _ = demo_run
    t = pd.read_csv(out / "tables" / "inputs.csv")
    # the raw model files of the demo are in K and kg m-2 s-1 on 0-360 longitudes
    row = t[(t["slice"] == "alder_21ka") & (t["role"] == "model_slice")].iloc[0]
    assert "K" in row["units"] and "kg m-2 s-1" in row["units"]
    assert row["calendar"] == "noleap"
    assert "degC" in row["converted"]
    roles = set(t["role"])
    assert {"fine_baseline", "elevation", "model_slice", "model_baseline", "ice"} <= roles


def test_series_passes_cf_checker(demo_run, tmp_path):
    # Reference: compliance-checker's offline "cf:1.8" suite; no errors at any priority
    cc = pytest.importorskip("compliance_checker.runner")
    out, _, _ = demo_run
    cc.CheckSuite.load_all_available_checkers()
    report = tmp_path / "cf.json"
    passed, had_errors = cc.ComplianceChecker.run_checker(
        str(out / "series.nc"), ["cf:1.8"], 0, "normal", output_filename=str(report),
        output_format="json")
    result = json.loads(report.read_text())["cf:1.8"]
    assert not had_errors
    assert [(i["name"], i["msgs"]) for i in result["high_priorities"] if i["msgs"]] == []
    assert passed


@pytest.mark.slow
def test_local_cluster_matches_threads(demo_run, tmp_path):
    # the same graph on a 2-worker dask.distributed LocalCluster gives identical layers
    out, data, _ = demo_run
    result = CliRunner().invoke(app, ["run", str(data / "demo.toml"), "--out", str(tmp_path / "w"),
                                      "--workers", "2"])
    assert result.exit_code == 0, result.output
    with open_series(out / "series.nc") as a, open_series(tmp_path / "w" / "series.nc") as b:
        for name in ("suitability", "suitable", "mess", "most_dissimilar", "nt1", "nt2",
                     "stability_all_slices"):
            assert a[name].values.tobytes() == b[name].values.tobytes(), name


def test_headline_numbers_trace_to_key_results(demo_run):
    # every card of the report and every headline line of the CLI is a key_results row
    out, _, result = demo_run
    k = pd.read_csv(out / "tables" / "key_results.csv")
    html = (out / "report.html").read_text(encoding="utf-8")
    ref = k[k["topic"] == "reference"].iloc[0]
    assert f"{ref['value']:,.0f} km²" in html
    med = k[k["quantity"] == "change in suitable area, median over models"]
    assert len(med) == 6  # 2 past slices + 2 scenarios x 2 periods, one model
    for _, r in med.iterrows():
        scen, _, per = r["scope"].partition(" ")
        card = f"{scen}, {per}: change in suitable area"
        assert card in html
        assert f"{r['value']:+.0f} %" in html
        assert f"{r['scope']}: suitable area {r['value']:+.0f} %" in result.output
    land = k[k["quantity"] == "share of land in novel climate"]
    assert len(land) == 6 and all(f"{100 * v:.0f} % of land" in html for v in land["value"])
    win = k[(k["topic"] == "refugia") & k["scope"].str.startswith("window")
            & (k["quantity"] == "refugium area")]
    assert f"{win['value'].iloc[0]:,.0f} km²" in html


def test_output_folder_holds_one_run(demo_run, tmp_path):
    import shutil

    out, data, _ = demo_run
    work = tmp_path / "copy"
    shutil.copytree(out, work)
    # outputs of an earlier run that the new one does not write: another model's map, an
    # ensemble file, a table; and a temporary file a killed writer left behind
    (work / "maps").mkdir(exist_ok=True)
    (work / "maps" / "cedar_21ka.png").write_bytes(b"old")
    (work / "ensemble.nc").write_bytes(b"old")
    (work / "tables" / "series_agreement.csv").write_text("old\n")
    (work / "tables" / ".summary.csv.abc.part").write_text("half")
    cfg = data / "demo.toml"
    res = CliRunner().invoke(app, ["run", str(cfg), "--out", str(work)])
    assert res.exit_code == 0, res.output
    assert not (work / "maps").exists() and not (work / "ensemble.nc").exists()
    assert not (work / "tables" / "series_agreement.csv").exists()
    assert not list(work.rglob("*.part"))
    manifest = json.loads((work / "manifest.json").read_text())
    assert manifest["status"] == "complete"
    assert {"maps/cedar_21ka.png", "ensemble.nc"} <= set(manifest["removed_stale"])
    on_disk = {p.relative_to(work).as_posix() for p in work.rglob("*")
               if p.is_file() and ".cache" not in p.parts and p.name != "manifest.json"}
    assert on_disk == set(manifest["files"])


def test_incomplete_run_is_refused_by_commands_that_read_it(demo_run, tmp_path):
    import shutil

    out, _, _ = demo_run
    work = tmp_path / "copy"
    shutil.copytree(out, work)
    m = json.loads((work / "manifest.json").read_text())
    m["status"] = "incomplete"
    (work / "manifest.json").write_text(json.dumps(m))
    for args in (["export", str(work)], ["summarise", str(work)],
                 ["rerun", str(work / "manifest.json")]):
        res = CliRunner().invoke(app, args)
        assert res.exit_code == 2 and "did not finish" in res.stderr, (args, res.output)


def test_refugium_hypothesis_against_invented_genetic_diversity(demo_run, tmp_path):
    import shutil

    out, data, _ = demo_run
    rng = np.random.default_rng(7)
    with open_series(out / "series.nc") as ds:
        stab = ds["stability_window"].load()
    la, lo = np.meshgrid(stab["lat"].values, stab["lon"].values, indexing="ij")
    land = np.isfinite(stab.values) & (stab.values > 0)
    pick = rng.choice(np.flatnonzero(land), 25, replace=False)
    s = stab.values.ravel()[pick]
    # invented populations whose diversity rises with stability
    pd.DataFrame({"site": [f"pop{i}" for i in range(25)], "lon": lo.ravel()[pick],
                  "lat": la.ravel()[pick], "hd": 0.1 + 0.6 * s + rng.normal(0, 0.03, 25)}
                 ).to_csv(data / "test_populations.csv", index=False)
    cfg = _variant(data, "genetics", ('dated_records = "./dated_records.csv"',
                                      'dated_records = "./dated_records.csv"\n'
                                      'diversity = "./test_populations.csv"'))
    fresh = _with_cache(out, tmp_path / "g")
    res = CliRunner().invoke(app, ["run", str(cfg), "--out", str(fresh)])
    assert res.exit_code == 0, res.output
    t = pd.read_csv(fresh / "tables" / "series_diversity.csv").set_index("predictor")
    assert t.loc["stability", "r"] > 0.8 and t.loc["stability", "n"] == 25
    assert 2 < t.loc["stability", "n_effective"] <= 25
    assert "genetic diversity" in (fresh / "report.html").read_text(encoding="utf-8")


def test_zonal_summary_of_invented_protected_areas(demo_run, tmp_path):
    import shutil

    shapely = pytest.importorskip("shapely")
    out, data, _ = demo_run
    with open_series(out / "series.nc") as ds:
        lat, lon = ds["lat"].values, ds["lon"].values
        suitable = ds["suitable"].sel(slice="baseline").load()
    # an invented reserve over the middle of the island and one at sea
    mid = shapely.box(float(lon.mean()) - 2, float(lat.mean()) - 2,
                      float(lon.mean()) + 2, float(lat.mean()) + 2)
    sea = shapely.box(float(lon.min()), float(lat.min()), float(lon.min()) + 0.5,
                      float(lat.min()) + 0.5)
    feats = [{"type": "Feature", "properties": {"name": n},
              "geometry": shapely.geometry.mapping(g)} for n, g in (("core", mid), ("bay", sea))]
    (data / "test_reserves.geojson").write_text(json.dumps({"type": "FeatureCollection",
                                                       "features": feats}))
    cfg = _variant(data, "zones", ('dispersal_rate = "500 km/kyr"',
                                   'dispersal_rate = "500 km/kyr"\nzones = "./test_reserves.geojson"'))
    fresh = _with_cache(out, tmp_path / "z")
    res = CliRunner().invoke(app, ["run", str(cfg), "--out", str(fresh)])
    assert res.exit_code == 0, res.output
    t = pd.read_csv(fresh / "tables" / "series_zones.csv").set_index(["zone", "slice"])
    # the reserve's cells lie wholly inside it (its edges fall on cell edges at 0.5 degree):
    # the suitable area equals the sum of the suitable cells' areas inside the box
    area = cell_area(suitable)
    inside = ((suitable["lat"] > mid.bounds[1]) & (suitable["lat"] < mid.bounds[3])
              & (suitable["lon"] > mid.bounds[0]) & (suitable["lon"] < mid.bounds[2]))
    expected = float(area.where(inside & (suitable == 1)).sum())
    assert t.loc[("core", "baseline"), "suitable_km2"] == pytest.approx(expected, rel=1e-9)
    assert t.loc[("bay", "baseline"), "suitable_km2"] == 0


def test_refugium_patches_threshold_tables_and_vectors(demo_run):
    """The practitioner's tables of a run: refugium patches, threshold sensitivity and the
    GeoJSON outlines, traced back to the raster layers."""
    import shapely
    from pyproj import Geod
    from shapely.geometry import shape

    out, _, _ = demo_run
    summary = pd.read_csv(out / "summary.csv")
    thr = pd.read_csv(out / "tables" / "threshold_sensitivity.csv")
    # the run's own rule gives the run's own suitable area in every slice
    own = thr[thr["rule_of_run"]].merge(summary, on="slice", suffixes=("", "_run"))
    assert len(own) == len(summary)
    np.testing.assert_allclose(own["suitable_area_km2"], own["suitable_area_km2_run"],
                               rtol=1e-9)
    assert {"p10", "mtp", "max_sss"} <= set(thr["rule"])
    assert (out / "tables" / "threshold_summary.csv").is_file()
    patches = pd.read_csv(out / "tables" / "refugium_patches.csv")
    # authalic sphere of WGS 84, R = 6371.0072 km (Snyder 1987, p. 16)
    geod = Geod(a=6371007.2, b=6371007.2)
    with open_series(out / "series.nc") as ds:
        area = cell_area(ds).values
        layer = "refugium_window" if "refugium_window" in ds else "refugium_all_slices"
        np.testing.assert_allclose(patches["area_km2"].sum(),
                                   area[ds[layer].values.astype(bool)].sum(), rtol=1e-9)
        # the patches as a layer: patch k's cells add up to row k's area
        lab = ds["refugium_patch"].values
        assert ds["refugium_patch"].attrs["units"] == "1"
        for r in patches.itertuples(index=False):
            np.testing.assert_allclose(area[lab == r.patch].sum(), r.area_km2, rtol=1e-9)
        doc = json.loads((out / "vector" / "suitable.geojson").read_text())
        for i, f in enumerate(doc["features"]):
            raster = area[ds["suitable"].values[i] == 1].sum()
            if f["geometry"] is None:
                assert raster == 0
                continue
            a, _ = geod.geometry_area_perimeter(shapely.segmentize(shape(f["geometry"]), 0.01))
            assert abs(a) / 1e6 == pytest.approx(raster, rel=1e-5)
    assert (out / "vector" / "refugium_patches.geojson").is_file()


def test_biotic_limits_from_invented_partner_layer(demo_run, tmp_path):
    import shutil

    out, data, _ = demo_run
    with open_series(out / "series.nc") as ds:
        grid = ds[["suitable"]].isel(slice=0).load()
    lat2 = np.broadcast_to(grid["lat"].values[:, None], (grid.sizes["lat"], grid.sizes["lon"]))
    # an invented host plant present only south of the island's middle latitude, every slice
    cut = float(np.median(grid["lat"].values))
    host = xr.Dataset({"host": (("lat", "lon"), (lat2 < cut).astype("f4"),
                                {"units": "1"})},
                      coords={"lat": ("lat", grid["lat"].values, {"units": "degrees_north"}),
                              "lon": ("lon", grid["lon"].values, {"units": "degrees_east"})})
    host.to_netcdf(data / "host.nc")
    cfg = _variant(data, "biotic", ("[output]", '[biotic]\npartner = "./host.nc"\n\n[output]'))
    fresh = _with_cache(out, tmp_path / "b")
    res = CliRunner().invoke(app, ["run", str(cfg), "--out", str(fresh)])
    assert res.exit_code == 0, res.output
    t = pd.read_csv(fresh / "tables" / "series_biotic.csv").set_index("slice")
    with open_series(fresh / "series.nc") as ds, open_series(out / "series.nc") as ref:
        # the abiotic layer is untouched; the constrained one is it south of the cut only
        np.testing.assert_array_equal(ds["suitable"].values, ref["suitable"].values)
        south = ds["lat"] < cut
        expect = xr.where(ds["suitable"] == 1, (south & (ds["suitable"] == 1)).astype("i1"),
                          ds["suitable"])
        np.testing.assert_array_equal(ds["suitable_biotic"].values, expect.values)
        area = cell_area(ds)
        b0 = float(area.where(ds["suitable_biotic"].sel(slice="baseline") == 1).sum())
    assert t.loc["baseline", "suitable_biotic_km2"] == pytest.approx(b0, rel=1e-9)
    assert str((data / "host.nc").resolve()) in json.loads(
        (fresh / "manifest.json").read_text())["inputs"]
    assert 0 < t.loc["baseline", "removed_by_biotic_share"] < 1


def test_fit_once_transfer_many(demo_run, tmp_path):
    import shutil

    out, data, _ = demo_run
    cfg = data / "demo.toml"
    fitted = _with_cache(out, tmp_path / "f")
    assert CliRunner().invoke(app, ["fit", str(cfg), "--out", str(fitted)]).exit_code == 0
    assert (fitted / "model.pkl").is_file()
    cfg2 = data / "from_model.toml"
    cfg2.write_text(cfg.read_text().replace("[niche]\n", f'[niche]\nmodel = "{fitted / "model.pkl"}"\n'))
    again = _with_cache(out, tmp_path / "t")
    res = CliRunner().invoke(app, ["run", str(cfg2), "--out", str(again)])
    assert res.exit_code == 0, res.output
    # the same fitted model transferred again gives the same series
    pd.testing.assert_frame_equal(pd.read_csv(out / "summary.csv"), pd.read_csv(again / "summary.csv"))
    # the model file is an input: hashed in the manifest, so a rerun checks it
    inputs = json.loads((again / "manifest.json").read_text())["inputs"]
    assert str((fitted / "model.pkl").resolve()) in inputs
    # a model whose predictors the baseline lacks is refused in one line
    bad = data / "bad_model.toml"
    bad.write_text(cfg2.read_text().replace(str(fitted / "model.pkl"), str(data / "nope.pkl")))
    res = CliRunner().invoke(app, ["run", str(bad), "--out", str(tmp_path / "x")])
    assert res.exit_code == 2 and "niche.model" in res.stderr


def test_refugium_hypotheses_side_by_side(demo_run, tmp_path):
    import shutil

    out, data, _ = demo_run
    cfg = _variant(data, "hyp", ('dispersal_rate = "500 km/kyr"',
                                 'dispersal_rate = "500 km/kyr"\nhypotheses = { lgm_only = ["21 ka BP"], '
                                 'glacial_to_present = ["21 ka BP", "6 ka BP", "1981-2010"] }'))
    fresh = _with_cache(out, tmp_path / "h")
    res = CliRunner().invoke(app, ["run", str(cfg), "--out", str(fresh)])
    assert res.exit_code == 0, res.output
    t = pd.read_csv(fresh / "tables" / "series_hypotheses.csv").set_index("hypothesis")
    # the narrower window (one slice) has the larger refugium
    assert t.loc["lgm_only", "refugium_km2"] >= t.loc["glacial_to_present", "refugium_km2"]
    assert t["n_records"].min() > 0 and (t["hits"] <= t["n_records"]).all()
    with open_series(fresh / "series.nc") as ds:
        assert "refugium_glacial_to_present" in ds and "stability_lgm_only" in ds
        # the glacial-to-present hypothesis is the run's own refugium window
        np.testing.assert_array_equal(ds["refugium_glacial_to_present"].values,
                                      ds["refugium_window"].values)
    bad = data / "hyp_bad.toml"
    bad.write_text(cfg.read_text().replace('lgm_only = ["21 ka BP"]', 'lgm_only = ["21 ka"]'))
    res = CliRunner().invoke(app, ["run", str(bad), "--out", str(tmp_path / "x")])
    assert res.exit_code == 2 and "series.hypotheses.lgm_only" in res.stderr


def test_two_species_run_equals_two_one_species_runs(demo_run, tmp_path):
    import shutil

    out, data, _ = demo_run
    text = _one_model_config(render_demo_config(".")).replace("maps = true", "maps = false")
    head, sep, tail = text.partition("[species]")
    species_block, _, rest = tail.partition("\n[niche]")
    two = (head + "[[species]]" + species_block
           + '\n[[species]]' + species_block.replace('name = "Nivalia demonstrata"',
                                                     'name = "Nivalia altera"')
           + 'niche = { threshold = "mtp" }\n'
           + "\n[niche]" + rest)
    cfg = data / "two.toml"
    cfg.write_text(two)
    multi = _with_cache(out, tmp_path / "multi")
    res = CliRunner().invoke(app, ["run", str(cfg), "--out", str(multi)])
    assert res.exit_code == 0, res.output
    a = multi / "species" / "Nivalia_demonstrata"
    b = multi / "species" / "Nivalia_altera"
    # species A is the demo run as it is; species B the same with its own threshold rule
    pd.testing.assert_frame_equal(pd.read_csv(a / "summary.csv"), pd.read_csv(out / "summary.csv"))
    single_b = data / "single_b.toml"
    single_b.write_text(text.replace("[niche]\n", '[niche]\nthreshold = "mtp"\n', 1)
                        .replace('threshold = "equal_ss"\n', "").replace('threshold = "max_sss"\n', ""))
    ob = _with_cache(out, tmp_path / "b")
    assert CliRunner().invoke(app, ["run", str(single_b), "--out", str(ob)]).exit_code == 0
    pd.testing.assert_frame_equal(pd.read_csv(b / "summary.csv"), pd.read_csv(ob / "summary.csv"))
    # richness is the sum of the two species' suitable layers
    with open_series(multi / "assemblage.nc") as asm, open_series(a / "series.nc") as sa, \
            open_series(b / "series.nc") as sb:
        expect = (sa["suitable"] == 1).astype(int) + (sb["suitable"] == 1).astype(int)
        np.testing.assert_array_equal(asm["richness"].values, expect.values)
    t = pd.read_csv(multi / "tables" / "assemblage.csv")
    assert (t["max_richness"] <= 2).all() and (t["area_all_species_km2"] <= t["area_any_species_km2"]).all()
    assert json.loads((multi / "manifest.json").read_text())["status"] == "complete"


def test_rerun_of_a_manifest_without_config_is_one_line(demo_run, tmp_path):
    import shutil

    out, _, _ = demo_run
    work = tmp_path / "copy"
    shutil.copytree(out, work)
    m = json.loads((work / "manifest.json").read_text())
    del m["config"]
    (work / "manifest.json").write_text(json.dumps(m))
    res = CliRunner().invoke(app, ["rerun", str(work / "manifest.json")])
    assert res.exit_code == 2 and "no configuration table" in res.stderr


def test_demo_exercises_the_parts_beyond_the_climate_niche(demo_run):
    # the shipped demo config carries an invented host plant, invented populations, refugium
    # hypotheses and invented reserves: each gives its table
    out, data, _ = demo_run
    for name in ("environment", "series_biotic", "series_diversity", "series_hypotheses",
                 "series_zones"):
        assert (out / "tables" / f"{name}.csv").is_file(), name
    with xr.open_dataset(data / "host_plant.nc") as host, open_series(out / "series.nc") as ds:
        # the host file is on the baseline grid: the constraint is plain cell-by-cell
        present = (host["host_presence"].values >= 0.5)
        s = ds["suitable"].values
        expect = np.where(s == 1, (present[None] & (s == 1)).astype("i1"), s)
        np.testing.assert_array_equal(ds["suitable_biotic"].values, expect)
    zones = pd.read_csv(out / "tables" / "series_zones.csv")
    assert set(zones["zone"]) == {"Highland Reserve", "Southwest Coast Reserve"}
    env = pd.read_csv(out / "tables" / "environment.csv").set_index("slice")
    assert env.loc["baseline", "environmental_availability"] == 1.0  # the niche's own climate


def test_export_chosen_layers_to_another_folder(demo_run, tmp_path):
    out, _, _ = demo_run
    target = tmp_path / "tifs"
    res = CliRunner().invoke(app, ["export", str(out), "--layers", "refugium_window, suitability",
                                   "--out", str(target)])
    assert res.exit_code == 0, res.output
    names = sorted(p.name for p in target.glob("*.tif"))
    assert names and all(n.startswith(("refugium_window", "suitability_")) for n in names)
    bad = CliRunner().invoke(app, ["export", str(out), "--layers", "nope", "--out", str(target)])
    assert bad.exit_code == 2 and "nope" in bad.stderr


def test_summarise_into_another_folder_leaves_the_run(demo_run, tmp_path):
    out, _, _ = demo_run
    before = (out / "summary.csv").read_bytes()
    other = tmp_path / "ref21"
    res = CliRunner().invoke(app, ["summarise", str(out), "--reference", "alder_21ka",
                                   "--out", str(other)])
    assert res.exit_code == 0, res.output
    assert (out / "summary.csv").read_bytes() == before
    df = pd.read_csv(other / "summary.csv")
    assert df.loc[df["slice"] == "alder_21ka", "gain_km2"].iloc[0] == 0
