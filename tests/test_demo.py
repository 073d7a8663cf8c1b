"""Tests of the invented demo scenario generator (reduced resolution, fast)."""

from __future__ import annotations

import hashlib
import json
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy import ndimage, stats

from timeslice import demo
from timeslice.errors import ConfigError, DataError, TimesliceError

MODELS = ("alder", "birch", "cedar")
SLICES = ("baseline", "21ka", "6ka", "low-forcing_2041-2060", "low-forcing_2081-2100",
          "high-forcing_2041-2060", "high-forcing_2081-2100")
DWC = ["occurrenceID", "scientificName", "decimalLatitude", "decimalLongitude",
       "coordinateUncertaintyInMeters", "occurrenceStatus", "basisOfRecord", "eventDate", "year",
       "individualCount"]


@pytest.fixture(scope="module")
def demo_dir(tmp_path_factory) -> tuple[Path, dict]:
    out = tmp_path_factory.mktemp("demo_025")
    return out, demo.generate(out, resolution=0.25)


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _tavg_annual(base: xr.Dataset) -> xr.DataArray:
    return (0.5 * (base["tasmin"] + base["tasmax"])).mean("time")


# --- files, names, units -----------------------------------------------------------------


def test_pinned_files_are_written(demo_dir):
    out, paths = demo_dir
    expected = {"baseline", "dem", "ice_21ka", "occurrences", "dated_records", "truth",
                "host_plant", "populations", "reserves"}
    expected |= {f"{m}/{s}" for m in MODELS for s in SLICES}
    assert set(paths) == expected
    for key in ("baseline.nc", "dem.nc", "ice_21ka.nc", "occurrences.csv", "dated_records.csv",
                "truth.json"):
        assert (out / key).is_file()
    for m in MODELS:
        for s in SLICES:
            assert (out / "models" / m / f"{s}.nc").is_file()
    assert not list(out.rglob("*.part")), "temporary files left behind"


def test_fine_baseline_conventions(demo_dir):
    out, _ = demo_dir
    with xr.open_dataset(out / "baseline.nc", decode_times=False) as b:
        assert b.sizes["time"] == 12
        assert b["tasmin"].attrs["units"] == "degC"
        assert b["tasmax"].attrs["units"] == "degC"
        assert b["pr"].attrs["units"] == "mm/month"
        assert b["time"].attrs["calendar"] == "standard"
        assert b["time"].attrs["climatology"] == "climatology_bnds"
        assert "climatology_bnds" in b
        for v in ("tasmin", "tasmax", "pr"):
            assert b[v].dtype == np.float32
            assert b[v].encoding.get("zlib") is True
            assert "cell_methods" in b[v].attrs
        # fine grid covers exactly lon -40..-20, lat 40..55 (0.25 degree here: 80 x 60)
        assert b.sizes["lon"] == 80 and b.sizes["lat"] == 60
        assert float(b.lon[0]) == pytest.approx(-39.875)
        assert float(b.lat[-1]) == pytest.approx(54.875)
        # a history line without a timestamp, so that the bytes are reproducible
        assert "timeslice.demo.generate" in b.attrs["history"]
        assert not re.search(r"\d{4}-\d{2}-\d{2}|\d{2}:\d{2}", b.attrs["history"])
        with xr.open_dataset(out / "dem.nc") as d:
            land = d["elevation"].values > 0
        # NaN at sea on purpose (exposed shelf has to be filled downstream), values on land
        assert np.isnan(b["tasmin"].values[:, ~land]).all()
        assert np.isfinite(b["tasmin"].values[:, land]).all()
        assert (b["tasmin"].values[:, land] <= b["tasmax"].values[:, land]).all()
        assert (b["pr"].values[:, land] >= 0).all()


def test_model_files_use_raw_conventions(demo_dir):
    out, _ = demo_dir
    cals = {"alder": "noleap", "birch": "noleap", "cedar": "360_day"}
    for m in MODELS:
        for s in SLICES:
            with xr.open_dataset(out / "models" / m / f"{s}.nc", decode_times=False) as ds:
                assert ds["tasmin"].attrs["units"] == "K"
                assert ds["tasmax"].attrs["units"] == "K"
                assert ds["pr"].attrs["units"] == "kg m-2 s-1"
                assert ds["pr"].attrs["standard_name"] == "precipitation_flux"
                assert ds["tasmax"].attrs["standard_name"] == "air_temperature"
                assert ds["time"].attrs["calendar"] == cals[m]
                assert ds["time"].attrs["climatology"] == "climatology_bnds"
                assert ds.sizes == {"time": 12, "lat": 25, "lon": 30, "bnds": 2}
                assert float(ds.lon.min()) == pytest.approx(315.5)
                assert float(ds.lon.max()) == pytest.approx(344.5)
                dlat = np.diff(ds.lat.values)
                assert (dlat < 0).all() if m == "cedar" else (dlat > 0).all()
                assert 200 < float(ds["tasmin"].min()) and float(ds["tasmax"].max()) < 320
                assert (ds["tasmin"] <= ds["tasmax"]).all()
                assert ds.attrs["model"] == m
    # decoded time axes are mid-month, months 1..12, in the model calendar
    coder = xr.coders.CFDatetimeCoder(use_cftime=True)
    with xr.open_dataset(out / "models" / "cedar" / "21ka.nc", decode_times=coder) as ds:
        assert [t.month for t in ds.time.values] == list(range(1, 13))
        assert ds.time.values[0].calendar == "360_day"
        assert ds.time.values[0].day == 16  # 30-day months: midpoint at day 16 00:00


def test_precipitation_flux_conversion_round_trips(demo_dir):
    """kg m-2 s-1 back to mm/month with the calendar's month lengths.

    Reference: pint 0.25 unit algebra through cf_xarray's CF unit parser (1 kg m-2 of liquid
    water = 1 mm at 1000 kg m-3, common practice); month lengths of the CF calendars
    (CF Conventions 1.8, section 4.4.1).
    """
    from cf_xarray.units import units as ureg
    factor_noleap_jan = (1 * ureg("kg m^-2 s^-1") / (1000 * ureg("kg m^-3"))
                         * (31 * ureg.day)).to("mm").magnitude
    assert factor_noleap_jan == pytest.approx(31 * 86400)
    out, _ = demo_dir
    days = {"noleap": np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31]),
            "360_day": np.full(12, 30)}
    annual = {}
    for m in MODELS:
        with xr.open_dataset(out / "models" / m / "baseline.nc", decode_times=False) as ds:
            fac = (1 * ureg(ds["pr"].attrs["units"]) / (1000 * ureg("kg m^-3")) * ureg.day
                   ).to("mm").magnitude
            d = days[ds["time"].attrs["calendar"]]
            mm = ds["pr"].values * fac * d[:, None, None]
            annual[m] = float(mm.sum(axis=0).mean())
    # each model is the same truth with its own multiplicative bias (1.10, 0.85, ~1.0):
    # the ratios of domain-mean annual totals must follow within a few percent
    assert annual["alder"] / annual["birch"] == pytest.approx(1.10 / 0.85, rel=0.03)


def test_model_biases_and_slice_changes(demo_dir):
    out, _ = demo_dir

    def tas(m, s):
        with xr.open_dataset(out / "models" / m / f"{s}.nc", decode_times=False) as ds:
            ds = ds.sortby("lat")
            return (0.5 * (ds["tasmin"] + ds["tasmax"]) - 273.15).values

    base = {m: tas(m, "baseline") for m in MODELS}
    # invented biases (see MODELS in timeslice/demo/scenario.py): alder warm, birch cold
    assert base["alder"].mean() - base["birch"].mean() == pytest.approx(2.0, abs=0.3)
    ranges = {"21ka": (-9.5, -5.0), "6ka": (-0.5, 1.0),
              "low-forcing_2041-2060": (1.2, 1.8), "low-forcing_2081-2100": (1.8, 2.5),
              "high-forcing_2041-2060": (1.8, 2.4), "high-forcing_2081-2100": (3.5, 5.0)}
    spread = []
    for s, (lo, hi) in ranges.items():
        changes = [float((tas(m, s) - base[m]).mean()) for m in MODELS]
        for c in changes:
            assert lo <= c <= hi, (s, changes)
        spread.append(np.ptp(changes))
    assert min(spread) > 0.1  # the models disagree, as ensembles do


# --- reproducibility and size ------------------------------------------------------------


def test_bit_for_bit_reproducible(tmp_path, demo_dir):
    """Same seed and resolution, same bytes (SHA-256 of every file)."""
    _, first = demo_dir
    second = demo.generate(tmp_path / "again", resolution=0.25)
    assert {k: _sha(p) for k, p in first.items()} == {k: _sha(p) for k, p in second.items()}
    third = demo.generate(tmp_path / "other_seed", resolution=0.25, seed=7)
    assert _sha(third["occurrences"]) != _sha(first["occurrences"])
    assert _sha(third["dem"]) != _sha(first["dem"])


@pytest.fixture(scope="module")
def full_demo(tmp_path_factory) -> dict:
    return demo.generate(tmp_path_factory.mktemp("demo_full"))


def test_full_size_demo_is_small(full_demo):
    total = sum(p.stat().st_size for p in full_demo.values())
    assert total <= 15 * 2**20
    with xr.open_dataset(full_demo["baseline"], decode_times=False) as b:
        assert (b.sizes["lat"], b.sizes["lon"]) == (150, 200)


def test_committed_demo_matches_generator(full_demo):
    committed = Path(demo.__file__).resolve().parents[2] / "demo_data"
    if not (committed / "dem.nc").is_file():
        pytest.skip("demo_data/ not generated in this checkout")
    root = full_demo["truth"].parent
    for key, path in full_demo.items():
        old = committed / path.relative_to(root)
        assert old.is_file(), f"demo_data/{key} missing: run python -m timeslice.demo"
        if path.suffix == ".nc":
            # compare contents, not bytes: the netCDF/HDF5 library versions are written
            # into each file
            with xr.open_dataset(old, decode_times=False) as a, \
                    xr.open_dataset(path, decode_times=False) as b:
                xr.testing.assert_identical(a, b)
        else:
            assert old.read_bytes() == path.read_bytes(), \
                f"demo_data/{key} is stale: run python -m timeslice.demo"


@pytest.fixture
def no_network(monkeypatch):
    """Fail loudly if anything tries to open a network connection."""
    import socket

    def refuse(*args, **kwargs):
        raise RuntimeError("network access attempted during a test")

    monkeypatch.setattr(socket.socket, "connect", refuse)
    monkeypatch.setattr(socket, "create_connection", refuse)


@pytest.mark.filterwarnings("ignore::DeprecationWarning")
def test_files_pass_cf_checker(demo_dir, tmp_path, no_network):
    """Reference: IOOS compliance-checker, CF 1.8 suite, run offline; no high-priority
    (error) failures and no climatology (section 7.4) findings."""
    pytest.importorskip("compliance_checker")
    from compliance_checker.runner import CheckSuite, ComplianceChecker

    CheckSuite().load_all_available_checkers()
    out, _ = demo_dir
    for rel in ("baseline.nc", "dem.nc", "ice_21ka.nc", "models/cedar/21ka.nc",
                "models/alder/baseline.nc"):
        report = tmp_path / "cc.json"
        passed, errors = ComplianceChecker.run_checker(
            ds_loc=str(out / rel), checker_names=["cf:1.8"], verbose=0, criteria="normal",
            output_filename=str(report), output_format="json")
        res = json.loads(report.read_text())["cf:1.8"]
        failed = [(p["name"], p["msgs"]) for lvl in ("high_priorities", "medium_priorities",
                                                     "low_priorities")
                  for p in res[lvl] if p["value"][0] < p["value"][1]]
        assert passed and not errors, (rel, failed)
        assert not failed, (rel, failed)


def test_failed_generation_leaves_no_partial_files(tmp_path, monkeypatch):
    """A crash part-way leaves complete files and no temporary ones."""
    calls = {"n": 0}
    from timeslice.demo import files

    real = files.write_model_file

    def flaky(*args, **kwargs):
        calls["n"] += 1
        if calls["n"] == 3:
            raise RuntimeError("disk full (simulated)")
        return real(*args, **kwargs)

    monkeypatch.setattr(files, "write_model_file", flaky)
    with pytest.raises(RuntimeError, match="simulated"):
        demo.generate(tmp_path, resolution=0.5)
    assert not list(tmp_path.rglob("*.part"))
    assert not (tmp_path / "models" / "alder" / "6ka.nc").exists()
    with xr.open_dataset(tmp_path / "models" / "alder" / "21ka.nc", decode_times=False) as ds:
        assert ds.sizes["time"] == 12


# --- landscape ---------------------------------------------------------------------------


def test_dem_has_shelf_that_becomes_land_at_21ka(demo_dir):
    out, _ = demo_dir
    with xr.open_dataset(out / "dem.nc") as d:
        z = d["elevation"].values
    assert ((z > -120) & (z <= 0)).sum() > 50
    assert ((z > -150) & (z <= -120)).sum() > 0
    assert z.min() < -1000  # deep ocean beyond the shelf
    assert 2500 <= z.max() <= 3000  # northern massif peaks
    # present: main island and an offshore island; at -120 m the land bridge joins them
    n_now = ndimage.label(z > 0)[1]
    n_glacial = ndimage.label(z > -120)[1]
    assert n_now >= 2
    assert n_glacial < n_now
    assert (z > -120).sum() > 1.3 * (z > 0).sum()


def test_ice_sheet_on_northern_massif(demo_dir):
    out, _ = demo_dir
    with xr.open_dataset(out / "ice_21ka.nc") as ice, xr.open_dataset(out / "dem.nc") as d:
        assert ice["sftgif"].attrs["units"] == "%"
        assert ice["sftgif"].attrs["standard_name"] == "land_ice_area_fraction"
        assert ice.sizes == {"lat": 30, "lon": 40, "bnds": 2}
        assert set(np.unique(ice["sftgif"].values)) == {0.0, 100.0}
        peak = d["elevation"].where(d["elevation"] == d["elevation"].max(), drop=True)
        at_peak = ice["sftgif"].sel(lat=float(peak.lat[0]), lon=float(peak.lon[0]),
                                    method="nearest")
        assert float(at_peak) == 100.0
        iced_lat = ice["lat"].where(ice["sftgif"] > 0).values
        assert np.nanmin(iced_lat) > 47.5  # only the north is glaciated


# --- climate -----------------------------------------------------------------------------


def test_temperature_follows_standard_lapse_rate(demo_dir):
    """Annual mean temperature against elevation along one latitude row.

    Reference: 6.5 K/km, ICAO Standard Atmosphere (Doc 7488/3, 1993; ISO 2533:1975),
    troposphere below 11 km. Tolerance 0.3 K/km allows the invented smooth noise.
    """
    out, _ = demo_dir
    with xr.open_dataset(out / "baseline.nc") as b, xr.open_dataset(out / "dem.nc") as d:
        t = _tavg_annual(b)
        z = d["elevation"]
        row = int(np.nanargmax(z.max("lon").values))  # the row through the highest peak
        zr, tr = z.isel(lat=row).values, t.isel(lat=row).values
        ok = (zr > 0) & np.isfinite(tr)
        assert ok.sum() >= 10 and np.ptp(zr[ok]) > 1500
        fit = stats.linregress(zr[ok] / 1000.0, tr[ok])
        assert fit.slope == pytest.approx(-6.5, abs=0.3)


def test_seasonal_cycle_is_stronger_inland(demo_dir):
    out, _ = demo_dir
    with xr.open_dataset(out / "baseline.nc") as b, xr.open_dataset(out / "dem.nc") as d:
        land = d["elevation"].values > 0
        tavg = 0.5 * (b["tasmin"] + b["tasmax"]).values
        amp = tavg.max(axis=0) - tavg.min(axis=0)
        dist = ndimage.distance_transform_edt(land)
        coast, inland = land & (dist <= 1), land & (dist >= 4)
        assert np.nanmean(amp[inland]) > np.nanmean(amp[coast]) + 1.0
        # warmest month in summer, coldest in winter (northern hemisphere)
        monthly = np.nanmean(tavg[:, land], axis=1)
        assert int(np.argmax(monthly)) + 1 in (7, 8) and int(np.argmin(monthly)) + 1 in (1, 2)


def test_rain_shadow_east_of_ridges(demo_dir):
    """Westerly flow: the windward (west) slopes get more precipitation than the lee (east)."""
    out, _ = demo_dir
    with xr.open_dataset(out / "baseline.nc") as b, xr.open_dataset(out / "dem.nc") as d:
        p_annual = b["pr"].sum("time").values
        z = d["elevation"].values
    west, east = [], []
    for i in range(z.shape[0]):
        row = z[i]
        if row.max() < 1500:
            continue
        crest = int(np.argmax(row))
        for j in range(row.size):
            if 200 < row[j] < 1000 and abs(j - crest) <= 8:
                (west if j < crest else east).append(p_annual[i, j])
    assert len(west) > 5 and len(east) > 5
    assert np.mean(west) > 1.3 * np.mean(east)


# --- records -----------------------------------------------------------------------------


def _nearest_elevation(dem: xr.Dataset, lon, lat) -> np.ndarray:
    return dem["elevation"].sel(lon=xr.DataArray(lon), lat=xr.DataArray(lat),
                                method="nearest").values


def test_occurrences_darwin_core_and_bad_share(demo_dir):
    out, _ = demo_dir
    occ = pd.read_csv(out / "occurrences.csv")
    assert list(occ.columns) == DWC
    assert (occ["scientificName"] == demo.SPECIES).all()
    assert 300 <= len(occ) <= 700
    # independent detection of every bad kind
    inside = occ["decimalLongitude"].between(-40, -20) & occ["decimalLatitude"].between(40, 55)
    swapped = occ["decimalLatitude"].between(-40, -20) & occ["decimalLongitude"].between(40, 55)
    zero = (occ["decimalLatitude"] == 0) & (occ["decimalLongitude"] == 0)
    with xr.open_dataset(out / "dem.nc") as dem:
        z = np.full(len(occ), np.nan)
        z[inside.values] = _nearest_elevation(dem, occ.loc[inside, "decimalLongitude"].values,
                                              occ.loc[inside, "decimalLatitude"].values)
    at_sea = inside & (z < -300)
    dup = occ.duplicated(keep="first")
    absent = occ["occurrenceStatus"] == "absent"
    huge = occ["coordinateUncertaintyInMeters"] >= 50000
    for flag in (swapped, zero, at_sea, dup, absent, huge):
        assert flag.sum() >= 2
    bad = swapped | zero | at_sea | dup | absent | huge
    assert 0.03 <= bad.mean() <= 0.07
    clean = occ[~bad]
    assert set(clean["occurrenceStatus"]) == {"present"}
    assert set(occ["basisOfRecord"]) <= {"HumanObservation", "PreservedSpecimen",
                                         "MachineObservation"}
    dates = pd.to_datetime(occ["eventDate"], format="%Y-%m-%d")
    assert dates.dt.year.between(1950, 2020).all()
    assert (dates.dt.year == occ["year"]).all()
    truth = json.loads((out / "truth.json").read_text())
    assert truth["records"]["total"] == len(occ)


def test_occurrences_follow_the_known_niche(demo_dir):
    """Clean presences sit in the niche: warmest-quarter mean temperature near the optimum."""
    out, _ = demo_dir
    occ = pd.read_csv(out / "occurrences.csv").drop_duplicates()
    occ = occ[(occ["occurrenceStatus"] == "present") & occ["decimalLongitude"].between(-40, -20)
              & occ["decimalLatitude"].between(40, 55)]
    with xr.open_dataset(out / "baseline.nc") as b:
        tavg = 0.5 * (b["tasmin"] + b["tasmax"])
        # warmest rolling quarter, wrapping Dec-Jan (O'Donnell & Ignizio 2012, USGS DS 691)
        q = xr.concat([tavg.roll(time=-k, roll_coords=False) for k in range(3)], "k").mean("k")
        bio10 = q.max("time")
        pts = bio10.sel(lon=xr.DataArray(occ["decimalLongitude"].values),
                        lat=xr.DataArray(occ["decimalLatitude"].values), method="nearest")
        vals = pts.values[np.isfinite(pts.values)]
        p_annual = b["pr"].sum("time")
        n = json.loads((out / "truth.json").read_text())["niche"]
        prob = np.exp(-0.5 * ((bio10 - n["bio10_optimum_degC"]) / n["bio10_sd_degC"]) ** 2) / (
            1 + np.exp(-(p_annual - n["bio12_midpoint_mm"]) / n["bio12_scale_mm"]))
        prob = prob.where(np.isfinite(bio10))
        p_pts = prob.sel(lon=xr.DataArray(occ["decimalLongitude"].values),
                         lat=xr.DataArray(occ["decimalLatitude"].values), method="nearest")
    land_bio10 = bio10.values[np.isfinite(bio10.values)]
    # presences sit around the optimum (pulled a little to the warm side by the sampling
    # effort in the lowlands and the south) ...
    assert abs(np.median(vals) - demo.NICHE["bio10_optimum_degC"]) < 3.0
    assert np.std(vals) < np.std(land_bio10)
    # ... and the known presence probability tells presence cells from land cells
    # (AUC reference: sklearn.metrics.roc_auc_score; sampling bias keeps it well below 1)
    from sklearn.metrics import roc_auc_score

    land_p = prob.values[np.isfinite(prob.values)]
    pres_p = p_pts.values[np.isfinite(p_pts.values)]
    y = np.r_[np.ones(pres_p.size), np.zeros(land_p.size)]
    assert roc_auc_score(y, np.r_[pres_p, land_p]) > 0.6


def test_dated_records(demo_dir):
    out, _ = demo_dir
    rec = pd.read_csv(out / "dated_records.csv")
    assert list(rec.columns) == ["record_id", "lon", "lat", "age_bp", "age_sd", "material"]
    assert 8 <= len(rec) <= 20
    assert rec["record_id"].is_unique
    assert rec["age_bp"].between(4000, 22000).all()
    assert (rec["age_sd"] > 0).all()
    with xr.open_dataset(out / "dem.nc") as dem:
        z = _nearest_elevation(dem, rec["lon"].values, rec["lat"].values)
    glacial = rec["age_bp"] >= 15000
    assert ((z > -120) & (z <= 0) & glacial.values).sum() >= 1  # on the exposed shelf
    assert (z > -120).all()  # all on land at the time (at worst on the exposed shelf)


def test_truth_json(demo_dir):
    """The true niche area is a sum of spherical cell areas.

    Reference: land area recomputed with pyproj.Geod(ellps="WGS84") polygon areas; sphere
    vs ellipsoid differ by well under 1 % at these latitudes.
    """
    from pyproj import Geod

    out, _ = demo_dir
    truth = json.loads((out / "truth.json").read_text())
    assert truth["species"] == demo.SPECIES
    assert truth["niche"]["bio10_optimum_degC"] == demo.NICHE["bio10_optimum_degC"]
    assert 0 < truth["true_niche_area_km2"] < truth["land_area_km2"]
    geod = Geod(ellps="WGS84")
    with xr.open_dataset(out / "dem.nc") as d:
        land = d["elevation"].values > 0
        h = 0.125
        total = 0.0
        for i, j in zip(*np.nonzero(land)):
            lo, la = float(d.lon[j]), float(d.lat[i])
            a, _ = geod.polygon_area_perimeter([lo - h, lo + h, lo + h, lo - h],
                                               [la - h, la - h, la + h, la + h])
            total += abs(a) / 1e6
    assert truth["land_area_km2"] == pytest.approx(total, rel=0.01)
    # the scenario tells a refugia story: at 21 ka the niche reaches the exposed shelf and
    # overlaps the present niche somewhere
    t21 = truth["true_21ka"]
    assert t21["niche_area_on_exposed_shelf_km2"] > 0
    assert 0 < t21["stable_with_baseline_km2"] < truth["true_niche_area_km2"]
    assert truth["land_area_21ka_km2"] > truth["land_area_km2"]
    # the masks a pipeline builds from the files give the areas in truth.json
    from timeslice.grid import cell_area

    with xr.open_dataset(out / "dem.nc") as d, xr.open_dataset(out / "ice_21ka.nc") as ice:
        z = d["elevation"]
        # each fine cell lies in exactly one 0.5 degree ice cell (the grids nest)
        iced = ice["sftgif"].reindex(lat=z.lat, lon=z.lon, method="nearest") >= 50
        area = cell_area(z)
        assert float(area.where(z > 0).sum()) == pytest.approx(truth["land_area_km2"], abs=0.1)
        land21 = (z > truth["sea_level_21ka_m"]) & ~iced
        assert float(area.where(land21).sum()) == pytest.approx(truth["land_area_21ka_km2"],
                                                                abs=0.1)


# --- bad inputs --------------------------------------------------------------------------


@pytest.mark.parametrize("res", [0.3, 0.0, -0.1, 1.0, "fine"])
def test_bad_resolution_is_a_config_error(tmp_path, res):
    with pytest.raises(ConfigError, match="resolution"):
        demo.generate(tmp_path, resolution=res)


def test_unwritable_output_folder(tmp_path):
    import os

    if os.geteuid() == 0:
        pytest.skip("permissions are not enforced for root")
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o500)
    try:
        from timeslice.errors import InputFileError

        with pytest.raises(InputFileError, match="not writable"):
            demo.generate(ro, resolution=0.5)
    finally:
        ro.chmod(0o700)


def test_bad_seed_and_output_path(tmp_path):
    with pytest.raises(ConfigError, match="seed"):
        demo.generate(tmp_path, seed=1.5)
    f = tmp_path / "a_file"
    f.write_text("x")
    with pytest.raises(TimesliceError, match="a_file"):
        demo.generate(f)


# --- the known niche as a function, and the project's readers on the demo files ----------


def test_presence_probability_reproduces_truth(demo_dir):
    from timeslice.grid import cell_area

    out, _ = demo_dir
    truth = json.loads((out / "truth.json").read_text())
    with xr.open_dataset(out / "baseline.nc") as b:
        p = demo.presence_probability(b)
    assert p.attrs["units"] == "1"
    assert float(p.min()) >= 0 and float(p.max()) <= 1
    area = cell_area(p).where(p >= demo.NICHE["presence_threshold"]).sum()
    assert float(area) == pytest.approx(truth["true_niche_area_km2"], rel=1e-6, abs=0.1)


def test_warmest_quarter_against_xclim(demo_dir):
    """BIO10 used for the known niche equals xclim 0.62 ``tg_mean_warmcold_quarter``.

    Convention check: xclim's quarters do not wrap December-January, ours do; the warmest
    quarter of this climate is in summer everywhere (peak month 7.1..7.4), so both agree.
    """
    pytest.importorskip("xclim")
    import warnings

    from xclim.indices import tg_mean_warmcold_quarter

    out, _ = demo_dir
    with xr.open_dataset(out / "baseline.nc") as b:
        tas = (0.5 * (b["tasmin"] + b["tasmax"])).assign_attrs(units="degC")
        tas = tas.assign_coords(time=pd.date_range("2001-01-01", periods=12, freq="MS"))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # xclim's own notes on monthly input
            ref = tg_mean_warmcold_quarter(tas, op="warmest", freq="YS").isel(time=0).values
        mine, _ = demo.world.bio10_bio12(b["tasmin"].values, b["tasmax"].values, b["pr"].values)
    ok = np.isfinite(mine)
    assert ok.sum() > 100
    np.testing.assert_allclose(mine[ok], ref[ok], atol=1e-4)


def test_presence_probability_from_project_bioclim(demo_dir):
    """The same niche through the project's own readers and bioclimatic variables."""
    from timeslice.grid import cell_area

    out, _ = demo_dir
    try:
        from timeslice.harmonise.bioclim import from_monthly
        from timeslice.readers import open_climate

        bio = from_monthly(open_climate(out / "baseline.nc"))
    except NotImplementedError:
        pytest.skip("readers or bioclim not implemented yet")
    p = demo.presence_probability(bio[["bio10", "bio12"]])
    truth = json.loads((out / "truth.json").read_text())
    area = float(cell_area(p).where(p >= demo.NICHE["presence_threshold"]).sum())
    assert area == pytest.approx(truth["true_niche_area_km2"], rel=1e-3)


def test_presence_probability_stays_lazy(demo_dir):
    import dask

    out, _ = demo_dir
    with xr.open_dataset(out / "baseline.nc") as b0:
        b = b0.chunk({"lat": 20})
        with dask.config.set(scheduler="sync"):
            p = demo.presence_probability(b)
            assert isinstance(p.data, dask.array.Array)
            eager = demo.presence_probability(b.load())
            xr.testing.assert_allclose(p.compute(), eager)


def test_presence_probability_bad_input(demo_dir):
    out, _ = demo_dir
    with xr.open_dataset(out / "baseline.nc") as b:
        with pytest.raises(DataError, match="pr"):
            demo.presence_probability(b.drop_vars("pr"))
        with pytest.raises(DataError, match="12"):
            demo.presence_probability(b.isel(time=slice(0, 6)))
        kelvin = b.copy()
        kelvin["tasmin"] = kelvin["tasmin"].assign_attrs(units="K")
        with pytest.raises(DataError, match="kelvin"):
            demo.presence_probability(kelvin)
    with pytest.raises(DataError, match="Dataset"):
        demo.presence_probability(np.zeros(3))


def test_project_readers_accept_demo_files(demo_dir):
    """Contract with the readers: every demo file opens to canonical names and units."""
    out, _ = demo_dir
    try:
        from timeslice.readers import open_climate, read_dated_records, read_occurrences

        open_climate(out / "dem.nc")
    except NotImplementedError:
        pytest.skip("readers not implemented yet")
    for m in MODELS:
        for s in ("baseline", "21ka"):
            path = out / "models" / m / f"{s}.nc"
            ds = open_climate(path)
            assert {"tasmin", "tasmax", "pr"} <= set(ds.data_vars)
            assert ds.sizes["month"] == 12
            assert (np.diff(ds.lat.values) > 0).all()
            assert float(ds.lon.min()) >= -180 and float(ds.lon.max()) < 180
            with xr.open_dataset(path, decode_times=False) as raw:
                raw = raw.sortby("lat")
                # K -> degC: 273.15 K = 0 degC (SI Brochure, 9th ed., 2019, section 2.3.1)
                np.testing.assert_allclose(ds["tasmax"].values,
                                           raw["tasmax"].values - 273.15, atol=1e-3)
    occ = read_occurrences(out / "occurrences.csv")
    assert len(occ) == json.loads((out / "truth.json").read_text())["records"]["total"]
    assert len(read_dated_records(out / "dated_records.csv")) == 12


def test_target_group_records_are_optional(tmp_path, demo_dir):
    out, paths = demo_dir
    assert "target_group" not in paths and not (out / "target_group.csv").exists()
    more = demo.generate(tmp_path, resolution=0.25, target_group=True)
    # the other files do not change when the option is on (truth.json lists the group)
    for key, path in paths.items():
        if key != "truth":
            assert _sha(path) == _sha(more[key]), key
    tg = pd.read_csv(more["target_group"])
    assert list(tg.columns) == DWC
    assert tg["occurrenceID"].is_unique
    assert set(tg["scientificName"]) == set(demo.TARGET_GROUP)
    assert len(tg) == sum(q["n"] for q in demo.TARGET_GROUP.values())
    assert demo.SPECIES not in set(tg["scientificName"])
    with xr.open_dataset(out / "dem.nc") as dem:
        z = _nearest_elevation(dem, tg["decimalLongitude"].values, tg["decimalLatitude"].values)
    assert (z > 0).all()
    assert "target_group" in json.loads(more["truth"].read_text())


@pytest.mark.parametrize("seed", [1, 7, 4242])
def test_scenario_invariants_hold_for_other_seeds(tmp_path, seed):
    """The landscape and record rules do not depend on the default seed."""
    paths = demo.generate(tmp_path, seed=seed, resolution=0.25)
    with xr.open_dataset(paths["dem"]) as d:
        z = d["elevation"].values
    assert 2500 <= z.max() < 3000
    assert ndimage.label(z > -120)[1] < ndimage.label(z > 0)[1]  # the land bridge
    truth = json.loads(paths["truth"].read_text())
    assert 0.04 <= truth["records"]["bad_fraction"] <= 0.06
    assert 0 < truth["true_21ka"]["stable_with_baseline_km2"] < truth["true_niche_area_km2"]
    occ = pd.read_csv(paths["occurrences"])
    assert len(occ) == truth["records"]["total"]
