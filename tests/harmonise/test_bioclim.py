"""Bioclimatic variables against a month-by-month worked example and against xclim."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError
from timeslice.harmonise.bioclim import BIO_NAMES, bioclim_kernel, from_monthly

# Worked example, computed by hand from the definitions in O'Donnell & Ignizio (2012),
# USGS Data Series 691, with the project's conventions (docs/methods.md): quarters wrap
# December -> January, n - 1 standard deviations, BIO15 with 1 + mean.
TMIN = np.array([-10, -8, -4, 0, 4, 8, 10, 9, 5, 1, -4, -8], dtype=float)
TMAX = np.array([0, 2, 6, 10, 14, 18, 22, 21, 15, 11, 4, 2], dtype=float)
PR = np.array([80, 60, 50, 40, 30, 20, 10, 15, 40, 70, 90, 100], dtype=float)
# Tavg = (Tmax + Tmin)/2 = [-5, -3, 1, 5, 9, 13, 16, 15, 10, 6, 0, -3], sum 64
# Tmax - Tmin = [10, 10, 10, 10, 10, 10, 12, 12, 10, 10, 8, 10], sum 122
# Quarter P (window starting Jan..Dec): JFM 190, FMA 150, MAM 120, AMJ 90, MJJ 60, JJA 45,
#   JAS 65, ASO 125, SON 200, OND 260, NDJ 270, DJF 240
# Quarter Tavg: JFM -7/3, FMA 1, MAM 5, AMJ 9, MJJ 38/3, JJA 44/3, JAS 41/3, ASO 31/3,
#   SON 16/3, OND 1, NDJ -8/3, DJF -11/3
# Sum of squared Tavg deviations from 16/3: 594.6667 -> s = sqrt(594.6667/11) = 7.352592
# Mean P 605/12 = 50.416667; sum of squared deviations 9822.9167 -> s = 29.882979
EXPECTED = {
    "bio1": 64 / 12,
    "bio2": 122 / 12,
    "bio3": 100 * (122 / 12) / 32,
    "bio4": 735.2592,
    "bio5": 22.0,
    "bio6": -10.0,
    "bio7": 32.0,
    "bio8": -8 / 3,   # wettest quarter NDJ (wraps; a non-wrapping rule would pick OND)
    "bio9": 44 / 3,   # driest quarter JJA
    "bio10": 44 / 3,  # warmest quarter JJA
    "bio11": -11 / 3,  # coldest quarter DJF (wraps; non-wrapping would give JFM)
    "bio12": 605.0,
    "bio13": 100.0,
    "bio14": 10.0,
    "bio15": 100 * 29.882979 / (1 + 605 / 12),
    "bio16": 270.0,
    "bio17": 45.0,
    "bio18": 45.0,   # P of JJA
    "bio19": 240.0,  # P of DJF
}


def _ds(tmin, tmax, pr):
    tmin, tmax, pr = (np.asarray(a, dtype=float).reshape(12, 1, 1) for a in (tmin, tmax, pr))
    coords = {"month": np.arange(1, 13), "lat": [45.0], "lon": [-30.0]}
    dims = ("month", "lat", "lon")
    return xr.Dataset(
        {"tasmin": (dims, tmin, {"units": "degC"}), "tasmax": (dims, tmax, {"units": "degC"}),
         "pr": (dims, pr, {"units": "mm month-1"})},
        coords=coords,
    )


def test_worked_example():
    out = from_monthly(_ds(TMIN, TMAX, PR), dtype=np.float64)
    for name, value in EXPECTED.items():
        got = float(out[name].squeeze())
        assert got == pytest.approx(value, abs=1e-4), name


def test_attrs_and_units():
    out = from_monthly(_ds(TMIN, TMAX, PR))
    assert list(out.data_vars) == list(BIO_NAMES)
    for name in BIO_NAMES:
        assert out[name].dtype == np.float32
        for key in ("units", "long_name", "description"):
            assert out[name].attrs[key] != "" or key == "units"
    assert out["bio4"].attrs["units"] == "0.01 K"
    assert out["bio12"].attrs["units"] == "mm"


def test_ties_go_to_first_window_from_january():
    # all quarters equally wet: BIO8 is the Tavg of JFM, the first window from January
    tmin = TMIN.copy()
    out = bioclim_kernel(tmin, TMAX, np.full(12, 50.0))
    assert out[7] == pytest.approx(-7 / 3)
    assert out[8] == pytest.approx(-7 / 3)


def test_nan_month_gives_nan_and_dask_matches():
    tmin = TMIN.copy()
    tmin[3] = np.nan
    assert np.isnan(bioclim_kernel(tmin, TMAX, PR)).all()
    ds = _ds(TMIN, TMAX, PR)
    ds = xr.concat([ds] * 4, dim="lat").assign_coords(lat=[40.0, 41, 42, 43])
    lazy = from_monthly(ds.chunk({"lat": 2}))
    assert lazy["bio1"].chunks is not None
    eager = from_monthly(ds)
    xr.testing.assert_allclose(lazy.compute(), eager)


def test_missing_variable_is_a_data_error():
    ds = _ds(TMIN, TMAX, PR).drop_vars("pr")
    with pytest.raises(DataError, match="pr"):
        from_monthly(ds)


@pytest.mark.filterwarnings("ignore:The 'name' property is deprecated")
def test_against_xclim_with_conventions_converted():
    """Reference: xclim (installed version) ANUCLIM indices on a 12-month climatology.

    Conventions reconciled explicitly (docs/methods.md):
    * xclim quarters do not wrap: the data put every extreme quarter inside Jan..Dec
      (no NDJ or DJF extreme), so wrapping makes no difference here;
    * xclim BIO4 is a coefficient of variation of Tavg in kelvin with the n divisor:
      ours = 100 * sqrt(12/11) * CV/100 * mean(Tavg in K);
    * xclim BIO15 is a coefficient of variation with the n divisor and no +1:
      ours = sqrt(12/11) * CV * mean(P) / (1 + mean(P));
    * xclim takes precipitation as a rate: we give mm/day on a 360_day calendar so each
      month is 30 days and rate * 30 = our monthly total exactly.
    """
    xclim_indices = pytest.importorskip("xclim.indices")
    import cftime

    tavg = np.array([4, 2, 1, 3, 7, 11, 15, 17, 14, 10, 7, 5], dtype=float)  # coldest FMA
    dtr = np.array([6, 6, 7, 8, 9, 10, 11, 12, 10, 9, 7, 6], dtype=float)
    pr = np.array([40, 45, 50, 70, 95, 120, 100, 60, 35, 20, 25, 30], dtype=float)  # wet MJJ
    tmin, tmax = tavg - dtr / 2, tavg + dtr / 2
    ours = bioclim_kernel(tmin, tmax, pr)

    time = xr.DataArray(
        [cftime.Datetime360Day(2001, m, 1) for m in range(1, 13)], dims="time", name="time"
    )
    def da(v, units):
        return xr.DataArray(v, dims="time", coords={"time": time}, attrs={"units": units})
    tn, tx = da(tmin, "degC"), da(tmax, "degC")
    tg = da(tavg, "degC")
    p = da(pr / 30.0, "mm/d")
    xi = xclim_indices
    ref = {
        1: xi.tg_mean(tg), 2: xi.daily_temperature_range(tn, tx),
        3: xi.isothermality(tn, tx), 5: xi.tx_max(tx), 6: xi.tn_min(tn),
        7: xi.extreme_temperature_range(tn, tx),
        8: xi.tg_mean_wetdry_quarter(tg, p, op="wettest"),
        9: xi.tg_mean_wetdry_quarter(tg, p, op="driest"),
        10: xi.tg_mean_warmcold_quarter(tg, op="warmest"),
        11: xi.tg_mean_warmcold_quarter(tg, op="coldest"),
        12: xi.prcptot(p), 16: xi.prcptot_wetdry_quarter(p, op="wettest"),
        17: xi.prcptot_wetdry_quarter(p, op="driest"),
        18: xi.prcptot_warmcold_quarter(p, tg, op="warmest"),
        19: xi.prcptot_warmcold_quarter(p, tg, op="coldest"),
    }
    for k, v in ref.items():
        val = float(v.squeeze())
        if k in (1, 5, 6, 8, 9, 10, 11) and v.attrs.get("units") == "K":
            val -= 273.15
        assert ours[k - 1] == pytest.approx(val, rel=1e-6, abs=1e-6), f"bio{k}"
    # BIO13/14: xclim gives the wettest/driest month's rate; x 30 days
    for k, op in ((13, "wettest"), (14, "driest")):
        r = xi.prcptot_wetdry_period(p, op=op)
        days = 30 if r.attrs["units"] in ("mm/d", "mm d-1") else 1
        assert ours[k - 1] == pytest.approx(float(r.squeeze()) * days, rel=1e-6), f"bio{k}"
    cv_t = float(xi.temperature_seasonality(tg).squeeze())
    mean_k = tavg.mean() + 273.15
    assert ours[3] == pytest.approx(100 * np.sqrt(12 / 11) * cv_t / 100 * mean_k, rel=1e-6)
    cv_p = float(xi.precip_seasonality(p).squeeze())
    assert ours[14] == pytest.approx(
        np.sqrt(12 / 11) * cv_p * pr.mean() / (1 + pr.mean()), rel=1e-6
    )


def test_tas_as_monthly_mean():
    # with tavg="tas" the monthly mean comes from tas, not (Tmax + Tmin)/2
    ds = _ds(TMIN, TMAX, PR)
    ds["tas"] = ds["tasmin"] + 1.0  # deliberately not the midpoint
    out = from_monthly(ds, tavg="tas", dtype=np.float64)
    assert float(out["bio1"].squeeze()) == pytest.approx(TMIN.mean() + 1.0)
    assert float(out["bio2"].squeeze()) == pytest.approx(EXPECTED["bio2"])  # Tmax - Tmin
    with pytest.raises(DataError, match="tas"):
        from_monthly(_ds(TMIN, TMAX, PR), tavg="tas")


def test_blocked_path_equals_apply_ufunc(monthly_factory):
    ds = monthly_factory(resolution=0.5)
    ds["tasmin"][:, 0, 0] = np.nan
    xr.testing.assert_allclose(from_monthly(ds, block_rows=3), from_monthly(ds))
