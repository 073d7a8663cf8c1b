"""Zarr store output: the same values, attributes and flag encoding as the CF NetCDF, written
chunk by chunk by dask (threads or dask.distributed workers)."""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr

zarr = pytest.importorskip("zarr")

from timeslice.errors import InputFileError
from timeslice.report.netcdf import open_series, write_series
from timeslice.report.zarr_store import (
    export_store,
    find_series,
    open_store,
    series_writer,
    store_chunks,
    write_store,
)


def _same_bytes(a: xr.Dataset, b: xr.Dataset) -> list[str]:
    """Names of the variables whose dtype, shape or bytes differ (text compared as lists)."""
    bad = []
    assert sorted(a.variables) == sorted(b.variables)
    for name in a.variables:
        x, y = np.asarray(a[name].values), np.asarray(b[name].values)
        if x.dtype.kind in "OUT" or y.dtype.kind in "OUT":
            if [str(v) for v in x.ravel()] != [str(v) for v in y.ravel()]:
                bad.append(str(name))
        elif x.dtype != y.dtype or x.shape != y.shape or x.tobytes() != y.tobytes():
            bad.append(str(name))
    return bad


def _plain(attrs) -> dict:
    return {k: (v.tolist() if hasattr(v, "tolist") else v) for k, v in attrs.items()}


def test_values_and_attributes_byte_identical_to_netcdf(series_ds, tmp_path):
    nc = write_series(series_ds, tmp_path / "series.nc", history="h", title="t")
    store = write_store(series_ds, tmp_path / "series.zarr", history="h", title="t",
                        target_cells=40)  # several row blocks per slice
    a, b = open_series(nc), open_store(store)
    assert _same_bytes(a, b) == []
    for name in a.variables:
        assert a[name].dtype == b[name].dtype, name
        assert _plain(a[name].attrs) == _plain(b[name].attrs), name
    hist = {k: v for k, v in a.attrs.items() if k != "history"}
    assert hist == {k: v for k, v in b.attrs.items() if k != "history"}
    assert list(b["slice"].values) == list(series_ds["slice"].values)
    assert b["land"].dtype == bool and b["suitable"].dtype == np.int8


def test_cf_attributes_and_fill_values_on_disk(series_ds, tmp_path):
    # read the store with zarr itself (not xarray): what another tool sees
    store = write_store(series_ds, tmp_path / "series.zarr", history="made in a test")
    g = zarr.open_group(str(store), mode="r")
    assert g.attrs["Conventions"] == "CF-1.8"
    assert "made in a test" in g.attrs["history"]
    # WGS84 defining constants (NIMA TR8350.2, 2000, table 3.1)
    assert g["crs"].attrs["semi_major_axis"] == 6378137.0
    assert g["crs"].attrs["inverse_flattening"] == 298.257223563
    suit = g["suitable"]
    assert suit.dtype == np.int8
    assert suit.attrs["flag_meanings"].split()[0] == "not_land"
    assert list(suit.attrs["flag_values"]) == [-1, 0, 1]
    assert "_FillValue" not in suit.attrs  # -1 is a named flag, not a fill value
    assert suit.attrs["grid_mapping"] == "crs"
    assert suit.attrs["cell_measures"] == "area: cell_area"
    # floats: NaN is the fill value of the array itself, as _FillValue is in the NetCDF
    assert np.isnan(g["suitability"].fill_value) and "_FillValue" in g["suitability"].attrs
    assert g["suitability"].attrs["units"] == "1"
    assert g["lat"].attrs["standard_name"] == "latitude"
    assert g["lat"].attrs["bounds"] == "lat_bnds"
    assert g["land"].dtype == np.int8  # booleans as int8 flags, as in the NetCDF
    assert list(g["land"].attrs["flag_values"]) == [0, 1]


def test_chunks_are_whole_rows_and_one_task_per_chunk(series_ds, tmp_path):
    chunks = store_chunks(series_ds, target_cells=40)
    assert chunks["slice"] == 1 and chunks["lon"] == series_ds.sizes["lon"]
    assert chunks["lat"] == 40 // series_ds.sizes["lon"]
    store = write_store(series_ds, tmp_path / "series.zarr", target_cells=40)
    arr = zarr.open_group(str(store), mode="r")["suitability"]
    assert arr.chunks == (1, chunks["lat"], chunks["lon"])
    nlat = series_ds.sizes["lat"]
    files = [p for p in (store / "suitability").rglob("*") if p.is_file() and p.name != "zarr.json"]
    # one file per (slice, row block); zarr leaves out a chunk that is all fill value (NaN:
    # a block of sea), so the expected count is that of the blocks holding a value
    rows = chunks["lat"]
    values = series_ds["suitability"].values
    expected = sum(bool(np.isfinite(values[i, r:r + rows]).any())
                   for i in range(values.shape[0]) for r in range(0, nlat, rows))
    assert len(files) == expected
    assert len({p.relative_to(store).as_posix() for p in files}) == len(files)


# distributed looks for a routable address and warns when there is no network (none needed)
@pytest.mark.filterwarnings("ignore:Couldn't detect a suitable IP address:RuntimeWarning")
def test_local_cluster_write_gives_identical_values(series_ds, tmp_path):
    distributed = pytest.importorskip("distributed")
    from timeslice.transfer.scheduler import scheduler

    threads = write_store(series_ds, tmp_path / "threads.zarr", target_cells=40)
    with scheduler(workers=2, processes=False) as client:
        assert isinstance(client, distributed.Client)
        cluster = write_store(series_ds, tmp_path / "cluster.zarr", target_cells=40)
    assert _same_bytes(open_store(threads), open_store(cluster)) == []


@pytest.mark.slow
@pytest.mark.filterwarnings("ignore:Couldn't detect a suitable IP address:RuntimeWarning")
def test_multi_process_cluster_write_gives_identical_values(series_ds, tmp_path):
    from timeslice.transfer.scheduler import scheduler

    threads = write_store(series_ds, tmp_path / "threads.zarr", target_cells=40)
    with scheduler(workers=2, processes=True):
        procs = write_store(series_ds, tmp_path / "procs.zarr", target_cells=40)
    assert _same_bytes(open_store(threads), open_store(procs)) == []


def test_failed_write_keeps_the_earlier_store(series_ds, tmp_path, monkeypatch):
    store = write_store(series_ds, tmp_path / "series.zarr")
    before = open_store(store)["suitability"].values.copy()

    def boom(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr("dask.compute", boom)
    with pytest.raises((OSError, InputFileError)):
        write_store(series_ds.assign(suitability=series_ds["suitability"] * 0), store)
    np.testing.assert_array_equal(open_store(store)["suitability"].values, before)
    assert not list(tmp_path.glob(".series.zarr.*"))  # no temporary folder left


def test_refusals_name_the_path(series_ds, tmp_path):
    (tmp_path / "series.zarr").write_text("not a folder")
    with pytest.raises(InputFileError, match="series.zarr: is a file"):
        write_store(series_ds, tmp_path / "series.zarr")
    (tmp_path / "empty.zarr").mkdir()
    with pytest.raises(InputFileError, match="not a Zarr store"):
        open_store(tmp_path / "empty.zarr")
    (tmp_path / "run").mkdir()
    with pytest.raises(InputFileError, match="neither series.nc nor series.zarr"):
        open_store(tmp_path / "run")


def test_writer_choice_and_run_folder_lookup(series_ds, tmp_path):
    assert series_writer("zarr")[1] == ".zarr" and series_writer("netcdf")[1] == ".nc"
    assert find_series(tmp_path) is None
    write_store(series_ds, tmp_path / "series.zarr")
    assert find_series(tmp_path) == tmp_path / "series.zarr"
    assert list(open_store(tmp_path)["slice"].values) == list(series_ds["slice"].values)


def test_geotiff_export_from_a_store_equals_export_from_netcdf(series_ds, tmp_path):
    rasterio = pytest.importorskip("rasterio")
    nc = write_series(series_ds, tmp_path / "series.nc")
    store = write_store(series_ds, tmp_path / "series.zarr")
    a = export_store(nc, tmp_path / "a", variables=["suitability"])
    b = export_store(store, tmp_path / "b", variables=["suitability"])
    assert [p.name for p in a] == [p.name for p in b] and a
    for pa, pb in zip(a, b):
        with rasterio.open(pa) as ra, rasterio.open(pb) as rb:
            np.testing.assert_array_equal(ra.read(), rb.read())
            assert ra.transform == rb.transform


def test_run_with_zarr_format_matches_netcdf_run(tmp_path):
    """The demo (one model, no maps) run twice from one stage cache: NetCDF, then --format
    zarr; the stores hold the same bytes as the files, and export reads the store."""
    import shutil

    from typer.testing import CliRunner

    from timeslice.cli import app
    from timeslice.demo import generate
    from timeslice.demo_config import render_demo_config

    data = tmp_path / "demo_data"
    generate(data, resolution=0.5)
    text = render_demo_config(".").replace("maps = true", "maps = false")
    text = "\n".join(l for l in text.splitlines() if not l.startswith(("birch =", "cedar =")))
    cfg = data / "demo.toml"
    cfg.write_text(text)
    runner = CliRunner()
    res = runner.invoke(app, ["run", str(cfg), "--out", str(tmp_path / "nc")])
    assert res.exit_code == 0, res.output
    shutil.copytree(tmp_path / "nc" / ".cache", tmp_path / "zr" / ".cache")
    res = runner.invoke(app, ["run", str(cfg), "--out", str(tmp_path / "zr"), "--format", "zarr"])
    assert res.exit_code == 0, res.output
    zr = tmp_path / "zr"
    assert (zr / "series.zarr").is_dir() and not (zr / "series.nc").exists()
    a, b = open_series(tmp_path / "nc" / "series.nc"), open_store(zr / "series.zarr")
    assert _same_bytes(a.drop_attrs(), b.drop_attrs()) == []
    manifest = json.loads((zr / "manifest.json").read_text())
    assert any(f.startswith("series.zarr/") for f in manifest["files"])
    assert "series.zarr" in (zr / "report.html").read_text()
    res = runner.invoke(app, ["export", str(zr), "--layers", "suitability"])
    assert res.exit_code == 0, res.output
    assert list((zr / "geotiff").glob("*.tif"))
    res = runner.invoke(app, ["run", str(cfg), "--out", str(zr), "--format", "hdf"])
    assert res.exit_code == 2 and "--format must be 'netcdf' or 'zarr'" in res.output
