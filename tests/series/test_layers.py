"""The one layer table (timeslice.layers): a throwaway layer reaches both writers, check refuses
a layer that disagrees with the table, and every layer the stages write is in the table."""

from __future__ import annotations

import warnings

import netCDF4
import numpy as np
import pytest
import xarray as xr

from timeslice import layers
from timeslice.errors import DataError, TimesliceWarning
from timeslice.layers import LayerSpec

#: Every grid layer of the demo run's series.nc and ensemble.nc (all three invented models,
#: maps off), listed from the files written by `timeslice run` on the demo config.
DEMO_LAYERS = (
    "calibration_area", "cell_area", "change", "dynamic_stability_chain", "elevation",
    "geometric_mean_suitability", "ice", "land", "mess", "minimum_suitability",
    "most_dissimilar", "nt1", "nt2", "partner_present", "reachable_limited", "reachable_none",
    "reachable_unlimited", "refugium_all_slices", "refugium_all_slices_analog",
    "refugium_analog_chain", "refugium_chain", "refugium_glacial_only",
    "refugium_glacial_to_present", "refugium_patch", "refugium_window", "refugium_window_analog",
    "refugium_window_biotic", "stability_all_slices", "stability_chain", "stability_glacial_only",
    "stability_glacial_to_present", "stability_window", "static_stability",
    "static_stability_chain", "suitability", "suitable", "suitable_biotic",
    # ensemble.nc
    "agreement", "consensus", "dominant", "ss_total", "suitability_mean", "suitability_sd",
    "variance_share",
)

#: Variables of a written file that are grid bookkeeping, not layers (CF grid mapping, bounds).
NOT_LAYERS = ("crs", "lat_bnds", "lon_bnds")


@pytest.fixture
def throwaway():
    """A registered throwaway layer, removed from the table afterwards."""
    entry = layers.register(LayerSpec(
        "frost_days_test", "d", "frost days in the slice", "days below 0 degC per year",
        flag_values=None, cmap="cividis", colorbar_label="frost days"))
    yield entry
    del layers.LAYERS[entry.name]


@pytest.fixture
def throwaway_flags():
    entry = layers.register(LayerSpec(
        "snow_class_test", "1", "snow cover class", "0 none, 1 seasonal, 2 permanent",
        flag_values=(0, 1, 2), flag_meanings="none seasonal permanent"))
    yield entry
    del layers.LAYERS[entry.name]


def test_throwaway_layer_reaches_netcdf_and_geotiff(stack_factory, throwaway, throwaway_flags,
                                                    tmp_path):
    pytest.importorskip("rasterio")
    import rasterio

    from timeslice.report.geotiff import export
    from timeslice.report.netcdf import write_series

    ds = stack_factory()
    shape = (ds.sizes["slice"], ds.sizes["lat"], ds.sizes["lon"])
    ds["frost_days_test"] = (("slice", "lat", "lon"), np.full(shape, 12.0, dtype="float32"))
    ds["snow_class_test"] = (("slice", "lat", "lon"), np.ones(shape, dtype="int8"))
    layers.stamp(ds, "frost_days_test")
    layers.stamp(ds, "snow_class_test")
    path = write_series(ds, tmp_path / "series.nc")
    with netCDF4.Dataset(path) as nc:
        v = nc.variables["frost_days_test"]
        assert (v.units, v.long_name, v.description) == (
            "d", "frost days in the slice", "days below 0 degC per year")
        c = nc.variables["snow_class_test"]
        assert list(c.flag_values) == [0, 1, 2]
        assert c.flag_values.dtype == np.int8  # CF 1.8 section 3.5: the variable's type
        assert c.flag_meanings == "none seasonal permanent"
    files = export(ds, tmp_path / "tif", variables=["frost_days_test", "snow_class_test"])
    first = files[0]
    with rasterio.open(first) as r:
        tags = r.tags()
        assert tags["units"] == "d" and tags["long_name"] == "frost days in the slice"
        assert tags["description"] == "days below 0 degC per year"
    snow = [f for f in files if f.name.startswith("snow_class_test")][0]
    with rasterio.open(snow) as r:
        assert r.tags()["flag_meanings"] == "none seasonal permanent"
    # the maps read its colour map from the table
    from timeslice.report._layers import COLOUR_MAPS

    assert COLOUR_MAPS["frost_days_test"] == ("cividis", "frost days")


def test_writers_refuse_a_layer_whose_units_or_flags_disagree(stack_factory, throwaway,
                                                               throwaway_flags, tmp_path):
    from timeslice.report.geotiff import export
    from timeslice.report.netcdf import write_series

    ds = stack_factory()
    shape = (ds.sizes["slice"], ds.sizes["lat"], ds.sizes["lon"])
    ds["frost_days_test"] = (("slice", "lat", "lon"), np.zeros(shape, dtype="float32"),
                             {"units": "K", "long_name": "frost days in the slice"})
    with pytest.raises(DataError, match=r"frost_days_test.*units 'K'.*'d'"):
        write_series(ds, tmp_path / "a.nc")
    with pytest.raises(DataError, match=r"geotiff.export.*frost_days_test"):
        export(ds, tmp_path / "tif", variables=["frost_days_test"])
    ds = ds.drop_vars("frost_days_test")
    ds["snow_class_test"] = (("slice", "lat", "lon"), np.zeros(shape, dtype="int8"),
                             {"flag_values": np.array([0, 1], dtype="int8"),
                              "flag_meanings": "seasonal none"})
    with pytest.raises(DataError, match=r"snow_class_test.*flags"):
        write_series(ds, tmp_path / "b.nc")


def test_check_refuses_attrs_that_disagree_with_the_table(throwaway):
    da = xr.DataArray(np.zeros((2, 2), "float32"), dims=("lat", "lon"), name="frost_days_test")
    layers.stamp(da)
    layers.check(da)  # stamped: agrees
    da.attrs["long_name"] = "days with frost"
    with pytest.raises(DataError, match=r"'frost_days_test'.*long_name 'days with frost'"):
        layers.check(da)
    # a qualifier after the table's words agrees; other words do not
    da.attrs["long_name"] = "frost days in the slice (baseline)"
    layers.check(da)
    da.attrs["long_name"] = "frost days in the slices"
    with pytest.raises(DataError):
        layers.check(da)


def test_register_refuses_a_second_different_entry(throwaway):
    assert layers.register(throwaway) is throwaway  # the same entry again: no-op
    with pytest.raises(ValueError, match="already in the table"):
        layers.register(LayerSpec("frost_days_test", "1", "something else"))
    with pytest.raises(ValueError, match="flag_values"):
        LayerSpec("bad_flags_test", "1", "bad", flag_values=(0, 1), flag_meanings="one")


def test_stamp_refuses_unknown_layers_and_foreign_long_names(throwaway):
    da = xr.DataArray(np.zeros(2), dims="x", name="not_a_layer_test")
    with pytest.raises(DataError, match="not in the layer table"):
        layers.stamp(da)
    with pytest.raises(DataError, match="must start with the table's"):
        layers.stamp(da, "frost_days_test", long_name="ice days")


def test_per_chain_names_use_their_base_entry():
    assert layers.spec("refugium_window_alder").name == "refugium_window"
    assert layers.spec("reachable_limited").name == "reachable"
    assert layers.spec("stability_glacial_only").name == "stability"
    assert layers.spec("suitable_x") is None  # `suitable` is not a per-chain entry
    assert layers.spec("bio1") is None


def test_change_flags_have_one_definition():
    from timeslice.series.change import CHANGE_FLAG_MEANINGS, CHANGE_FLAG_VALUES

    entry = layers.spec("change")
    assert CHANGE_FLAG_VALUES.tolist() == list(entry.flag_values)
    assert CHANGE_FLAG_MEANINGS == entry.flag_meanings


def test_demo_output_layers_are_all_in_the_table():
    missing = [n for n in DEMO_LAYERS if layers.spec(n) is None]
    assert missing == []


def test_series_stage_output_is_in_the_table_and_agrees(stack_factory, tmp_path):
    """Every layer the series stage writes (summaries, movement, chains, ensemble) is in the
    table and agrees with it on every checked key, as written and as read back."""
    from timeslice.report.netcdf import open_series, write_series
    from timeslice.series import analyse_series

    labels = ("baseline", "a_21ka", "b_21ka", "a_low", "b_low", "a_high", "b_high")
    ds = stack_factory(labels=labels, years=(1990, -19050, -19050, 2090, 2090, 2090, 2090),
                       models=("observed", "a", "b", "a", "b", "a", "b"),
                       scenarios=("baseline", "past", "past", "low", "low", "high", "high"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", TimesliceWarning)
        res = analyse_series(ds, rate="1 km/yr")
    for label, obj in (("series", res.series), ("ensemble", res.ensemble)):
        grid = [n for n in obj.data_vars if {"lat", "lon"} <= set(obj[n].dims)]
        assert [n for n in grid if layers.spec(n) is None] == [], label
        path = write_series(obj, tmp_path / f"{label}.nc")
        back = open_series(path)
        for n in back.data_vars:
            if n in NOT_LAYERS or n in ds.data_vars:
                continue  # the fixture's own transfer layers carry its words, not a stage's
            assert layers.spec(n) is not None, (label, n)
            assert layers.disagreements(n, back[n].attrs) == [], (label, n)
