"""Regridding on the whole globe: polar rows of a refined global grid and regions across the
180° meridian, against independent computations (analytic fields on the sphere, exact overlap
areas computed cell by cell, and the cell bounds a climate model ships in its own file)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import cell_area, continuous_lon, make_grid
from timeslice.harmonise.regrid import conservative_weights, regrid

DATA = Path(__file__).resolve().parents[1] / "data"
CANESM2 = DATA / "tas_Amon_CanESM2_rcp85_r1i1p1_200701-200712.nc"  # provenance beside it


def _xyz(lat, lon):
    """Unit-sphere Cartesian components at (lat, lon): smooth everywhere, poles included."""
    la, lo = np.meshgrid(np.deg2rad(lat), np.deg2rad(lon), indexing="ij")
    return np.cos(la) * np.cos(lo), np.cos(la) * np.sin(lo), np.sin(la)


def _field(lat, lon, values, name="f"):
    return xr.DataArray(values, dims=("lat", "lon"), coords={"lat": lat, "lon": lon}, name=name)


def _canesm2_axes():
    with xr.open_dataset(CANESM2) as ds:
        return (ds["lat"].values.astype(float), ds["lon"].values.astype(float),
                ds["lat_bnds"].values.astype(float))


def test_real_gaussian_grid_refined_has_no_nan_at_the_poles():
    # the file's own grid: T63 Gaussian latitudes (first row at -87.86, not a half step from
    # the pole), longitudes 0..357.2; before the polar handling 2 x 720 cells per month were NaN
    with xr.open_dataset(CANESM2) as ds:
        tas = ds["tas"].load()
    target = make_grid(lon_min=-180, lon_max=180, lat_min=-90, lat_max=90, resolution=0.5)
    for method in ("bilinear", "conservative"):
        out = regrid(tas.rename(time="month"), target, method=method)
        assert out.shape == (12, 360, 720)
        assert int(np.isnan(out.values).sum()) == 0, method
        assert np.isfinite(out.isel(lat=[0, -1]).values).all()
    # the area-weighted global mean is kept by the conservative remap (Jones 1999): the
    # source's own areas from the file's lat_bnds (R^2 dlon (sin phi2 - sin phi1))
    lat, lon, lat_bnds = _canesm2_axes()
    src_w = np.sin(np.deg2rad(lat_bnds[:, 1])) - np.sin(np.deg2rad(lat_bnds[:, 0]))
    src_mean = float((tas.isel(time=0).values * src_w[:, None]).sum() / (src_w.sum() * lon.size))
    out = regrid(tas.isel(time=0), target, method="conservative")
    a = cell_area(target).values
    dst_mean = float((out.values * a).sum() / a.sum())
    # inferred edges (midpoints) differ from the file's Gaussian bounds by < 0.02 degrees
    assert dst_mean == pytest.approx(src_mean, abs=0.02)


def test_polar_rows_against_analytic_field_on_a_gaussian_grid():
    # f = x, y, z of the unit sphere: smooth across the pole, with the known value at every
    # target centre. Bilinear interpolation of a smooth field on a 2.8-degree grid errs by
    # ~ (d^2 / 8) |f''| ~ 3e-4 inside; the polar rows must be as good (repeating the
    # outermost row instead would be off by ~0.03 there: cos(87.86 deg) - cos(89.75 deg)).
    lat, lon, _ = _canesm2_axes()
    target = make_grid(lon_min=-180, lon_max=180, lat_min=-90, lat_max=90, resolution=0.5)
    truth = _xyz(target.lat.values, target.lon.values)
    for src_vals, want in zip(_xyz(lat, lon), truth):
        out = regrid(_field(lat, lon, src_vals), target, method="bilinear").values
        err = np.abs(out - want)
        polar = target.lat.values > lat[-1]
        polar |= target.lat.values < lat[0]
        assert polar.sum() == 2 * 4  # 4 target rows beyond the outermost centre at each pole
        assert err[polar].max() < 1e-3
        assert err.max() < 1e-3


def test_conservative_polar_rows_take_the_polar_cell_mean():
    # source values = exact cell means of z = sin(lat) over the file's own cells:
    # int z dA / int dA = (sin phi1 + sin phi2) / 2 (integrate sin cos); a target row inside
    # the polar cell gets that mean exactly.
    lat, lon, lat_bnds = _canesm2_axes()
    s1, s2 = np.sin(np.deg2rad(lat_bnds[:, 0])), np.sin(np.deg2rad(lat_bnds[:, 1]))
    means = np.repeat(((s1 + s2) / 2)[:, None], lon.size, axis=1)
    target = make_grid(lon_min=-180, lon_max=180, lat_min=-90, lat_max=90, resolution=0.5)
    out = regrid(_field(lat, lon, means), target, method="conservative").values
    inside_south = target.lat.values + 0.25 <= lat_bnds[0, 1]
    inside_north = target.lat.values - 0.25 >= lat_bnds[-1, 0]
    np.testing.assert_allclose(out[inside_south], means[0, 0], rtol=1e-12)
    np.testing.assert_allclose(out[inside_north], means[-1, 0], rtol=1e-12)


def _wrapped(lat, lon, values):
    """A regional field as a reader returns it: longitudes wrapped to [-180, 180), sorted."""
    w = ((lon + 180.0) % 360.0) - 180.0
    order = np.argsort(w)
    return _field(lat, w[order], values[:, order])


def test_region_across_180_from_a_reader_regrids_onto_the_continuous_axis():
    # an invented 1-degree field over 160E..160W as a reader gives it (split at 180)
    lat = np.arange(50.5, 70, 1.0)
    lon = np.arange(160.5, 200, 1.0)
    x, y, z = _xyz(lat, lon)
    src = _wrapped(lat, lon, x + 2 * y + 3 * z)
    assert src.lon.values[0] < 0 < src.lon.values[-1]
    for lon_max in (200.0, -160.0):
        target = make_grid(lon_min=160, lon_max=lon_max, lat_min=50, lat_max=70, resolution=0.25)
        assert target.lon.values[0] == 160.125 and target.lon.values[-1] == 199.875
        tx, ty, tz = _xyz(target.lat.values, target.lon.values)
        out = regrid(src, target, method="bilinear")
        assert np.isfinite(out.values).all()
        np.testing.assert_array_equal(out.lon.values, target.lon.values)
        # inside the source centres the interpolation error of this smooth field is < 1e-4
        inside = (target.lon.values >= 160.5) & (target.lon.values <= 199.5)
        rows = (target.lat.values >= 50.5) & (target.lat.values <= 69.5)
        err = np.abs(out.values - (tx + 2 * ty + 3 * tz))[np.ix_(rows, inside)]
        assert err.max() < 1e-4


def test_conservative_across_180_against_cell_by_cell_overlaps():
    # independent computation: for every target cell, the overlap area with every source cell
    # from R^2 dlon (sin phi2 - sin phi1) on explicit intervals in 0..360 longitudes
    rng = np.random.default_rng(3)
    lat = np.arange(60.5, 66, 1.0)
    lon = np.arange(170.5, 191, 1.0)  # 170E..169W
    vals = rng.normal(size=(lat.size, lon.size))
    src = _wrapped(lat, lon, vals)
    target = make_grid(lon_min=171, lon_max=-171.5, lat_min=60.5, lat_max=65.5, resolution=2.5)
    out = regrid(src, target, method="conservative", min_valid_fraction=0.0).values
    ref = np.zeros(out.shape)
    for i, tla in enumerate(target.lat.values):
        for j, tlo in enumerate(target.lon.values):
            num = den = 0.0
            for a, sla in enumerate(lat):
                dphi = np.sin(np.deg2rad(min(tla + 1.25, sla + 0.5))) - np.sin(
                    np.deg2rad(max(tla - 1.25, sla - 0.5)))
                for b, slo in enumerate(lon):
                    dl = min(tlo + 1.25, slo + 0.5) - max(tlo - 1.25, slo - 0.5)
                    if dphi > 0 and dl > 0:
                        num += dphi * dl * vals[a, b]
                        den += dphi * dl
            ref[i, j] = num / den
    np.testing.assert_allclose(out, ref, rtol=1e-12)


def test_global_model_onto_a_region_across_180():
    # a global model (0..360 like most model files) onto a grid over the dateline
    lat = np.arange(-88.75, 90, 2.5)
    lon = np.arange(0, 360, 2.5)
    x, y, _ = _xyz(lat, lon)
    target = make_grid(lon_min=165, lon_max=-165, lat_min=55, lat_max=75, resolution=0.5)
    tx, ty, _ = _xyz(target.lat.values, target.lon.values)
    out = regrid(_field(lat, lon, x + y), target, method="bilinear").values
    assert np.abs(out - (tx + ty)).max() < 1e-3
    # conservative coarsening of a constant is the constant, on both sides of 180
    coarse = make_grid(lon_min=165, lon_max=-165, lat_min=55, lat_max=75, resolution=5.0)
    out = regrid(_field(lat, lon, np.full((lat.size, lon.size), 7.0)), coarse,
                 method="conservative").values
    np.testing.assert_allclose(out, 7.0, rtol=1e-12)


def test_continuous_lon_rolls_a_split_region():
    lat = np.array([60.5, 61.5])
    lon = np.arange(175.5, 186, 1.0)
    vals = np.arange(lat.size * lon.size, dtype=float).reshape(lat.size, lon.size)
    src = _wrapped(lat, lon, vals)
    out = continuous_lon(src)
    np.testing.assert_array_equal(out.lon.values, lon)
    np.testing.assert_array_equal(out.values, vals)
    assert continuous_lon(out) is out


def test_target_with_a_jump_is_refused():
    lat = np.array([60.5, 61.5])
    lon = np.arange(175.5, 186, 1.0)
    split = _wrapped(lat, lon, np.zeros((2, lon.size)))
    with pytest.raises(DataError, match="continuous_lon"):
        regrid(split, split, source="beringia.nc")


def test_conservative_weights_sum_to_overlap_on_a_global_target():
    # every target cell of a global target is covered once by a global source, whichever
    # longitude convention each uses (0..360 source, -180..180 target)
    lat = np.arange(-87.5, 90, 5.0)
    w_lat, w_lon, area = conservative_weights(lat, np.arange(2.5, 360, 5.0),
                                              lat, np.arange(-177.5, 180, 5.0))
    np.testing.assert_allclose(np.asarray(w_lon.sum(axis=1)).ravel(), 5.0, rtol=1e-12)


@pytest.mark.parametrize("chunks", [None, 40])
def test_downscaled_global_slice_has_no_nan_at_the_poles(chunks):
    # the delta method interpolates the model's change onto the fine grid (whole grid, or in
    # blocks of fine rows): a Gaussian-grid model onto a global 1-degree baseline leaves the
    # polar rows filled, and a uniform +2 K change comes back as +2 K there too
    from timeslice.harmonise.downscale import delta

    lat, lon, _ = _canesm2_axes()
    month = np.arange(1, 13)

    def monthly(lat_, lon_, t, p):
        shape = (12, lat_.size, lon_.size)
        coords = {"month": month, "lat": lat_, "lon": lon_}
        dims = ("month", "lat", "lon")
        return xr.Dataset({
            "tasmin": (dims, np.full(shape, t - 4.0), {"units": "degC"}),
            "tasmax": (dims, np.full(shape, t + 4.0), {"units": "degC"}),
            "pr": (dims, np.full(shape, p), {"units": "mm month-1"}),
        }, coords=coords)

    fine = make_grid(lon_min=-180, lon_max=180, lat_min=-90, lat_max=90, resolution=1.0)
    out = delta(monthly(lat, lon, -8.0, 40.0), monthly(lat, lon, -10.0, 50.0),
                monthly(fine.lat.values, fine.lon.values, 0.0, 30.0), chunks=chunks)
    for v in ("tasmin", "tasmax", "pr"):
        assert np.isfinite(out[v].values).all(), v
    np.testing.assert_allclose(out["tasmin"].isel(lat=[0, -1]).values, -4.0 + 2.0, atol=1e-5)
    np.testing.assert_allclose(out["pr"].isel(lat=[0, -1]).values, 30.0 * 40.0 / 50.0, rtol=1e-5)
