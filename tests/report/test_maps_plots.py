"""Maps and plots: files are valid PNGs, drawn offline, with the documented styling."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from PIL import Image

from timeslice.errors import DataError
from timeslice.report import maps, plots


def _png_ok(path):
    with Image.open(path) as im:
        im.verify()
    with Image.open(path) as im:
        assert im.format == "PNG"
        w, h = im.size
        assert w > 100 and h > 100
        arr = np.asarray(im.convert("L"))
        assert arr.std() > 5  # not a blank canvas


def test_slice_maps_one_per_slice(series_ds, tmp_path):
    files = maps.slice_maps(series_ds, tmp_path, dpi=60)
    assert [p.name for p in files] == [f"suitability_{s}.png" for s in series_ds.slice.values]
    for p in files:
        _png_ok(p)


@pytest.mark.parametrize("kind", ["series", "change", "nt2", "exdet", "stability"])
def test_panels(series_ds, tmp_path, kind):
    small = series_ds.isel(slice=[0, 1, 2])
    make = {
        "series": lambda: maps.series_panel(small, tmp_path / "panel.png", dpi=50),
        "change": lambda: maps.change_map(small, tmp_path / "change.png", dpi=50),
        "nt2": lambda: maps.novelty_map(small, tmp_path / "nt2.png", variable="nt2", dpi=50),
        "exdet": lambda: maps.novelty_map(small, tmp_path / "ex.png", variable="exdet", dpi=50),
        "stability": lambda: maps.stability_map(small, tmp_path / "stab.png", dpi=50),
    }[kind]
    _png_ok(make())


def test_ice_sheet_is_drawn_and_joins_the_coastline(series_ds, tmp_path):
    ds = series_ds.isel(slice=[1]).copy()
    land = ds["land"].values.copy()
    ice = np.zeros_like(land)
    ice[:, 7:10, 6:10] = True
    ds["land"] = (ds["land"].dims, land & ~ice)
    ds["ice"] = (ds["land"].dims, ice)
    ds["suitability"] = ds["suitability"].where(~ds["ice"])  # ice is not land: no value
    (path,) = maps.slice_maps(ds, tmp_path, dpi=60)
    _png_ok(path)
    with Image.open(path) as im:
        rgb = np.asarray(im.convert("RGB")).reshape(-1, 3)
    # the ice colour (#D6EAF8) is on the map
    assert (np.abs(rgb.astype(int) - [0xD6, 0xEA, 0xF8]).sum(axis=1) < 6).sum() > 50


def test_map_errors_name_the_layer(series_ds, tmp_path):
    with pytest.raises(DataError, match="'nope'"):
        maps.slice_maps(series_ds, tmp_path, variable="nope")
    with pytest.raises(DataError, match="'zzz'"):
        maps.slice_maps(series_ds, tmp_path, slices=["zzz"])
    with pytest.raises(DataError, match="variable"):
        maps.novelty_map(series_ds, tmp_path / "x.png", variable="suitability")


def test_exdet_classes_follow_the_definitions(series_ds):
    # Mesgaran, Cousens & Webber (2014): NT1 < 0 outside a univariate range; with NT1 = 0,
    # NT2 > 1 is a novel combination, NT2 <= 1 analog.
    ds = series_ds.isel(slice=[0]).copy()
    nt1 = np.zeros(ds["nt1"].shape, dtype="float32")
    nt2 = np.full(ds["nt2"].shape, 0.5, dtype="float32")
    nt1[0, 0, 0], nt2[0, 0, 1], nt2[0, 0, 2] = -0.2, 1.5, 1.0
    nt1[0, 0, 3] = np.nan
    ds["nt1"], ds["nt2"] = (ds["nt1"].dims, nt1), (ds["nt2"].dims, nt2)
    code = maps._layer(ds, "exdet", 0)
    assert code[0, 0] == 2 and code[0, 1] == 1 and code[0, 2] == 0 and np.isnan(code[0, 3])
    with pytest.raises(DataError, match="nt1"):
        maps.novelty_map(ds.drop_vars("nt1"), "x.png", variable="exdet")


def test_change_palette_is_distinct():
    # Okabe & Ito (2008) colours (from memory): four codes, four different colours,
    # and the gain/loss pair differs strongly in lightness, so it survives greyscale printing.
    from matplotlib.colors import to_rgb

    cols = {k: to_rgb(v[1]) for k, v in maps.CHANGE_COLOURS.items()}
    assert sorted(cols) == [0, 1, 2, 3] and len(set(cols.values())) == 4

    def lum(c):  # ITU-R BT.709 relative luminance weights on the sRGB values
        return 0.2126 * c[0] + 0.7152 * c[1] + 0.0722 * c[2]

    assert abs(lum(cols[1]) - lum(cols[2])) > 0.2


def test_scale_bar_length_matches_geodesic():
    # The bar spans `length` km along its parallel on the authalic sphere; compare with the
    # WGS84 geodesic along a short parallel segment (reference: pyproj.Geod.inv). A parallel is
    # not a geodesic, but over a few degrees the two differ far less than the 1 % allowed.
    pyproj = pytest.importorskip("pyproj")
    from timeslice.grid import AUTHALIC_RADIUS_KM

    lat = 47.0
    km_per_deg = math.pi / 180 * AUTHALIC_RADIUS_KM * math.cos(math.radians(lat))
    length = maps._nice_length(0.2 * 8.0 * km_per_deg)
    assert length in (100.0, 200.0, 500.0)
    dlon = length / km_per_deg
    _, _, dist_m = pyproj.Geod(ellps="WGS84").inv(-30.0, lat, -30.0 + dlon, lat)
    assert dist_m / 1000.0 == pytest.approx(length, rel=0.01)


@pytest.mark.parametrize("km,expected", [(123.0, 100.0), (260.0, 200.0), (999.0, 500.0),
                                         (7.0, 5.0), (1.0, 1.0)])
def test_nice_length(km, expected):
    assert maps._nice_length(km) == expected


def test_summary_plots(summary_df, tmp_path):
    _png_ok(plots.area_through_time(summary_df, tmp_path / "area.png", dpi=60))
    _png_ok(plots.gain_loss_bars(summary_df, tmp_path / "bars.png", dpi=60))
    _png_ok(plots.centroid_track(summary_df, tmp_path / "track.png", dpi=60))
    shifts = summary_df.assign(elevation_mean_m=np.linspace(800, 1200, len(summary_df)))
    _png_ok(plots.shift_plot(shifts, tmp_path / "shift.png", dpi=60))


def test_shift_plot_with_quantile_columns(summary_df, tmp_path):
    # the columns of change_table(detail=True)
    q = summary_df.assign(lat_q50=summary_df.centroid_lat, lat_q10=summary_df.centroid_lat - 1,
                          lat_q90=summary_df.centroid_lat + 1, elevation_q50_m=900.0,
                          elevation_q10_m=400.0, elevation_q90_m=1500.0)
    _png_ok(plots.shift_plot(q, tmp_path / "shift.png", dpi=60))
    with pytest.raises(DataError, match="lat_q50"):
        plots.shift_plot(summary_df.drop(columns=["centroid_lat"]), tmp_path / "x.png")


@pytest.mark.parametrize("keep", ["future", "past"])
def test_area_plot_one_kind_of_slice(summary_df, tmp_path, keep):
    past = summary_df.scenario == "past"
    base = summary_df.scenario == "baseline"
    sub = summary_df[base | (past if keep == "past" else ~past)]
    _png_ok(plots.area_through_time(sub, tmp_path / "area.png", dpi=60))


def test_past_axis_is_ka_bp():
    # BP counts back from 1950 CE (Stuiver & Polach 1977): 21 ka BP is year -19050 CE.
    df = pd.DataFrame({"year": [-19050.0, 1985.0], "scenario": ["past", "baseline"]})
    np.testing.assert_allclose(plots._x(df, "past"), [21.0, -0.035])


def test_centroid_track_with_coastline(summary_df, series_big, tmp_path):
    land = series_big["land"].isel(slice=0)
    _png_ok(plots.centroid_track(summary_df, tmp_path / "track.png", land=land, dpi=60))


def test_response_curves(tmp_path):
    x = np.linspace(-10, 20, 61)
    rows = []
    for var, mu in (("bio1", 5.0), ("bio12", 8.0)):
        s = np.exp(-0.5 * ((x - mu) / 4.0) ** 2)
        rows.append(pd.DataFrame({"variable": var, "value": x, "suitability": s,
                                  "inside_calibration": (x > -4) & (x < 14)}))
    _png_ok(plots.response_curves(pd.concat(rows), tmp_path / "resp.png", dpi=60))


def test_plot_errors_name_columns(summary_df, tmp_path):
    with pytest.raises(DataError, match="suitable_area_km2"):
        plots.area_through_time(summary_df.drop(columns="suitable_area_km2"), tmp_path / "a.png")
    with pytest.raises(DataError, match="no rows"):
        plots.gain_loss_bars(summary_df.iloc[:0], tmp_path / "b.png")
    with pytest.raises(DataError, match="inside_calibration"):
        plots.response_curves(pd.DataFrame({"variable": [], "value": [], "suitability": []}),
                              tmp_path / "c.png")


def test_stability_map_for_a_named_window(series_ds, tmp_path):
    ds = series_ds.assign(stability_past=series_ds.stability, refugium_past=series_ds.refugium)
    ds["stability_past"].attrs["slices"] = "baseline alder_21ka"
    _png_ok(maps.stability_map(ds, tmp_path / "s.png", variable="stability_past",
                               refugium="refugium_past", dpi=50))
    with pytest.raises(DataError, match="'refugium_x'"):
        maps.stability_map(ds, tmp_path / "s.png", refugium="refugium_x")


def test_reach_map_classes(series_ds, tmp_path):
    ds = series_ds.isel(slice=[0, 1]).copy()
    s = ds["suitable"].values
    reached = np.where(s < 0, -1, 0).astype("int8")
    reached[(s == 1)] = 1
    reached[1, :, : s.shape[2] // 2][s[1, :, : s.shape[2] // 2] == 1] = 0
    ds["reachable"] = (ds["suitable"].dims, reached, {"movement_assumption": "limited"})
    code = maps._layer(ds, "reach", 1)
    assert set(np.unique(code[np.isfinite(code)])) <= {0.0, 1.0, 2.0}
    assert np.all(code[s[1] == 0] == 0) and np.all(np.isnan(code[s[1] < 0]))
    assert np.all(code[(s[1] == 1) & (reached[1] == 0)] == 1)
    _png_ok(maps.reach_map(ds, tmp_path / "reach.png", dpi=50))
    with pytest.raises(DataError, match="reachable"):
        maps.reach_map(series_ds, tmp_path / "x.png")


def test_maps_of_a_file_opened_plainly(series_ds, tmp_path):
    # xarray.open_dataset (not open_series) leaves the labels in `slice_label`
    import xarray as xr

    from timeslice.report.netcdf import write_series

    path = write_series(series_ds.isel(slice=[0, 1]), tmp_path / "s.nc")
    with xr.open_dataset(path) as plain:
        files = maps.slice_maps(plain, tmp_path / "m", dpi=40)
    assert [p.name for p in files] == ["suitability_baseline.png", "suitability_alder_21ka.png"]


def test_cells_land_where_their_coordinates_are(series_ds):
    # Draw one layer and read the rendered pixels back at the display position of given
    # (lon, lat) cell centres: a flipped or shifted image would put the colours elsewhere.
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    ds = series_ds.isel(slice=[0]).copy()
    lat, lon = ds.lat.values, ds.lon.values
    v = np.zeros((lat.size, lon.size), dtype="float32")
    v[np.ix_(lat > lat.mean(), lon < lon.mean())] = 1.0  # north-west quadrant bright
    ds["suitability"] = (("slice", "lat", "lon"), v[None])
    fig = Figure(figsize=(5, 4), dpi=100)
    FigureCanvasAgg(fig)
    ax, fr = maps._axes(fig, 111, ds, 0)
    maps._draw(ax, fr, ds, "suitability", 0)
    fig.canvas.draw()
    img = np.asarray(fig.canvas.buffer_rgba())[:, :, :3].astype(float)
    height = img.shape[0]

    def pixel(lo, la):
        x, y = ax.transData.transform(fr.proj.transform_point(lo - fr.lon0, la, fr.data))
        return img[int(round(height - y)), int(round(x))]

    bright = pixel(lon[1], lat[-2])      # north-west cell centre
    dark = pixel(lon[-2], lat[1])        # south-east cell centre
    # viridis(1.0) is yellow (high red and green), viridis(0.0) dark purple
    assert bright[0] > 200 and bright[1] > 200
    assert dark[0] < 100 and dark[1] < 50


def test_novelty_colour_ranges_are_fixed_across_runs():
    # Side-by-side figures of different runs need the same colour for the same value.
    a = maps._norm("mess", np.array([-3.0, 5.0]))
    b = maps._norm("mess", np.array([-300.0, 90.0]))
    assert (a.vmin, a.vcenter, a.vmax) == (b.vmin, b.vcenter, b.vmax) == (-50.0, 0.0, 50.0)
    assert maps._norm("nt2", np.array([0.1])).vmax == maps._norm("nt2", np.array([9.0])).vmax


def test_diversity_plot_draws(tmp_path):
    import xarray as xr

    from timeslice.report.plots import diversity_plot

    stab = xr.DataArray(np.linspace(0, 1, 20).reshape(4, 5), dims=("lat", "lon"),
                        coords={"lat": np.arange(4.0), "lon": np.arange(5.0)})
    sites = pd.DataFrame({"lon": [0.0, 2.0, 4.0], "lat": [0.0, 1.0, 3.0],
                          "diversity": [0.2, 0.4, 0.7], "stability": [0.0, 0.3, 0.9]})
    table = pd.DataFrame({"predictor": ["stability"], "r": [0.99], "p_value": [0.05],
                          "n_effective": [3.0]})
    path = diversity_plot(sites, table, stab, tmp_path / "d.png", dpi=40)
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
