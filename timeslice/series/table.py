"""The per-slice change table (``summary.csv``): suitable area, gain/loss/stable, novel area,
range centroid and its shift, with optional detail columns; every area sum in one fused pass.

All areas are sums of spherical cell areas (:func:`timeslice.grid.cell_area`), never cell
counts.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import cell_area, haversine_km
from timeslice.series._checks import (
    check_dataarray,
    check_label,
    check_stack,
    drop_nondim,
    is_suitable,
    slice_labels,
    suitable_mask,
)
from timeslice.series.change import NOVELTY_RULES, bearing_deg, change_codes

__all__ = ["DETAIL_COLUMNS", "SUMMARY_COLUMNS", "change_table"]

#: Columns of the per-slice summary table (``summary.csv``), in order.
SUMMARY_COLUMNS = [
    "slice",
    "year",
    "model",
    "scenario",
    "suitable_area_km2",
    "gain_km2",
    "loss_km2",
    "stable_km2",
    "novel_area_km2",
    "centroid_lat",
    "centroid_lon",
    "centroid_shift_km",
]


#: Extra columns of ``change_table(..., detail=True)``, in order, after SUMMARY_COLUMNS.
DETAIL_COLUMNS = [
    "gain_pct",
    "loss_pct",
    "stable_pct",
    "centroid_bearing_deg",
    "lat_mean",
    "lat_q10",
    "lat_q50",
    "lat_q90",
    "elevation_mean_m",
    "elevation_q10_m",
    "elevation_q50_m",
    "elevation_q90_m",
    "analog_area_km2",
    "novel_mess_km2",
    "novel_nt1_km2",
    "novel_nt2_km2",
    "novel_any_km2",
    "gain_novel_km2",
    "gain_novel_share",
    "loss_novel_km2",
    "loss_novel_share",
    "land_km2",
    "novel_land_km2",
    "novel_land_share",
]


def _slice_meta(meta: xr.Dataset, name: str, n: int, fill) -> list:
    if name in meta:
        vals = np.asarray(meta[name].values)
        if vals.ndim == 1 and vals.size == n:
            return vals.tolist()
        if vals.ndim == 0:
            return [vals.item()] * n
    return [fill] * n



def _weighted_quantiles(values: np.ndarray, weights: np.ndarray, qs) -> np.ndarray:
    """Inverse of the weighted empirical CDF: the smallest v with F_w(v) >= q, per row.

    `values`, `weights` have shape (n_rows, n); weight 0 or NaN value means "not included".
    """
    out = np.full((values.shape[0], len(qs)), np.nan)
    for r in range(values.shape[0]):
        v, w = values[r], weights[r]
        keep = np.isfinite(v) & (w > 0)
        if not keep.any():
            continue
        order = np.argsort(v[keep], kind="stable")
        vs, ws = v[keep][order], w[keep][order]
        cum = np.cumsum(ws) / ws.sum()
        for k, q in enumerate(qs):
            idx = int(np.searchsorted(cum, q - 1e-12, side="left"))
            out[r, k] = vs[min(idx, vs.size - 1)]
    return out


def _detail_columns(stack: xr.Dataset, computed: xr.Dataset, iref: int,
                    table: pd.DataFrame) -> pd.DataFrame:
    ref_area = table["suitable_area_km2"].iloc[iref]
    for k in ("gain", "loss", "stable"):
        table[f"{k}_pct"] = (100.0 * table[f"{k}_km2"] / ref_area) if ref_area > 0 else np.nan
    table["centroid_bearing_deg"] = bearing_deg(
        table["centroid_lon"].iloc[iref], table["centroid_lat"].iloc[iref],
        table["centroid_lon"].to_numpy(), table["centroid_lat"].to_numpy(),
    )
    total = table["suitable_area_km2"].to_numpy()
    qs = (0.1, 0.5, 0.9)
    rows = np.asarray(computed["d_lat_rows"].transpose("slice", "lat").values, dtype=float)
    lat = np.broadcast_to(np.asarray(stack["lat"].values, dtype=float), rows.shape)
    with np.errstate(invalid="ignore", divide="ignore"):
        table["lat_mean"] = (rows * lat).sum(axis=1) / np.where(total > 0, total, np.nan)
    table[["lat_q10", "lat_q50", "lat_q90"]] = _weighted_quantiles(lat, rows, qs)
    if "d_suit" in computed:
        we = computed["d_elev_w"].values.astype(float)
        with np.errstate(invalid="ignore", divide="ignore"):
            table["elevation_mean_m"] = computed["d_elev_sum"].values / np.where(we > 0, we,
                                                                                   np.nan)
        suit = np.asarray(computed["d_suit"].transpose("slice", "lat", "lon").values)
        ns = suit.shape[0]
        area = cell_area(stack).values
        if set(computed["d_elev"].dims) != {"lat", "lon"}:
            elev = np.broadcast_to(computed["d_elev"].values, suit.shape).reshape(ns, -1)
            w = np.where(suit, area, 0.0).reshape(ns, -1)
            eq = _weighted_quantiles(elev.astype(float), w, qs)
        else:
            # static elevation: sort once, then one cumulative sum per slice
            elev = np.asarray(computed["d_elev"].transpose("lat", "lon").values,
                              dtype=float).ravel()
            order = np.argsort(elev, kind="stable")
            order = order[np.isfinite(elev[order])]
            ev, av = elev[order], area.ravel()[order]
            eq = np.full((ns, len(qs)), np.nan)
            for t in range(ns):
                cum = np.cumsum(np.where(suit[t].ravel()[order], av, 0.0))
                if cum.size and cum[-1] > 0:
                    idx = np.searchsorted(cum / cum[-1], np.asarray(qs) - 1e-12, side="left")
                    eq[t] = ev[np.minimum(idx, ev.size - 1)]
        table[["elevation_q10_m", "elevation_q50_m", "elevation_q90_m"]] = eq
    else:
        for c in ("elevation_mean_m", "elevation_q10_m", "elevation_q50_m", "elevation_q90_m"):
            table[c] = np.nan
    for var in NOVELTY_RULES:
        key = f"d_novel_{var}"
        table[f"novel_{var}_km2"] = computed[key].values.astype(float) if key in computed \
            else np.nan
    if "d_novel_any" in computed:
        table["novel_any_km2"] = computed["d_novel_any"].values.astype(float)
        table["analog_area_km2"] = total - table["novel_any_km2"].to_numpy()
        table["gain_novel_km2"] = computed["d_gain_novel"].values.astype(float)
        table["loss_novel_km2"] = computed["d_loss_novel"].values.astype(float)
        with np.errstate(invalid="ignore", divide="ignore"):
            table["gain_novel_share"] = table["gain_novel_km2"] / table["gain_km2"].where(
                table["gain_km2"] > 0)
            table["loss_novel_share"] = table["loss_novel_km2"] / table["loss_km2"].where(
                table["loss_km2"] > 0)
    else:
        for c in ("novel_any_km2", "analog_area_km2", "gain_novel_km2", "gain_novel_share",
                  "loss_novel_km2", "loss_novel_share"):
            table[c] = np.nan
    table["land_km2"] = computed["d_land"].values.astype(float)
    table["novel_land_km2"] = computed["d_novel_land"].values.astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        table["novel_land_share"] = table["novel_land_km2"] / table["land_km2"].where(
            table["land_km2"] > 0)
    return table


_SUM_NAMES = (
    "suitable_area_km2", "gain_km2", "loss_km2", "stable_km2", "lat_sum", "sin_sum", "cos_sum",
    "d_novel_mess", "d_novel_nt1", "d_novel_nt2", "d_novel_any", "d_gain_novel", "d_elev_w",
    "d_elev_sum", "d_land", "d_novel_land", "d_loss_novel",
)


def _sums_kernel(cur, ref, band, latc, dlon, sinl, cosl, *opt, novelty, elev, land=False):
    """Per-slice area sums of one block: shape (slices, 1, 1, len(_SUM_NAMES)).

    Cell areas come from 1-D factors (``band`` = R²(sin φ₂ − sin φ₁) per row, ``dlon`` in
    radians per column), so no full-grid weight array is ever held. `opt` holds the novelty
    blocks named in `novelty`, then the elevation block if `elev`, then the land block if
    `land`.
    """
    code = change_codes(cur, ref, False)
    suit = suitable_mask(cur)
    a = band[0] * dlon[0]  # (rows, 1) * (1, cols)
    out = np.full((cur.shape[0], len(_SUM_NAMES)), np.nan)

    def asum(mask, w=a):
        return np.einsum("syx,yx->s", mask, np.broadcast_to(w, mask.shape[1:]),
                         dtype=np.float64)

    out[:, 0] = asum(suit)
    out[:, 1] = asum(code == 1)
    out[:, 2] = asum(code == 2)
    out[:, 3] = asum(code == 3)
    out[:, 4] = asum(suit, a * latc[0])
    out[:, 5] = asum(suit, a * sinl[0])
    out[:, 6] = asum(suit, a * cosl[0])
    blocks = dict(zip(novelty, opt[: len(novelty)]))
    any_novel = None
    with np.errstate(invalid="ignore"):
        for k, name in enumerate(("mess", "nt1", "nt2")):
            if name in blocks:
                m = NOVELTY_RULES[name][0](blocks[name])
                out[:, 7 + k] = asum(suit & m)
                any_novel = m if any_novel is None else (any_novel | m)
    if any_novel is not None:
        out[:, 10] = asum(suit & any_novel)
        out[:, 11] = asum((code == 1) & any_novel)
        # loss is judged in the slice's own climate: lost cells whose climate there is novel
        out[:, 16] = asum((code == 2) & any_novel)
    if elev:
        e = opt[len(novelty)][0]
        ok = np.isfinite(e)
        out[:, 12] = asum(suit, np.where(ok, a, 0.0))
        out[:, 13] = asum(suit, np.where(ok, a * e, 0.0))
    if land:
        lnd = np.asarray(opt[len(novelty) + int(elev)], dtype=bool)
        out[:, 14] = asum(lnd)
        if any_novel is not None:
            out[:, 15] = asum(lnd & any_novel)
    return out[:, None, None, :]


def _rows_kernel(cur, band, dlon):
    """Suitable area per latitude row of one block: shape (slices, rows, 1)."""
    a = band[0] * dlon[0]
    return np.einsum("syx,yx->sy", suitable_mask(cur), np.broadcast_to(a, cur.shape[1:]),
                     dtype=np.float64)[:, :, None]


def _area_sums(stack: xr.Dataset, suitable: xr.DataArray, iref: int):
    """All per-slice area sums of the table in one fused pass (numpy, or one dask task per
    block: memory stays at a few blocks plus one reference slice, whatever the stack size)."""
    import dask.array as dsa

    from timeslice.grid import AUTHALIC_RADIUS_KM, grid_edges

    suitable = suitable.transpose("slice", "lat", "lon")
    lat = np.asarray(suitable["lat"].values, dtype=np.float64)
    lon = np.asarray(suitable["lon"].values, dtype=np.float64)
    lat_b, lon_b = (np.deg2rad(b) for b in grid_edges(suitable))
    band = AUTHALIC_RADIUS_KM**2 * np.abs(np.sin(lat_b[:, 1]) - np.sin(lat_b[:, 0]))
    dlon = np.abs(lon_b[:, 1] - lon_b[:, 0])
    lam = np.deg2rad(lon)
    rows = [band, lat]  # shape (1, ny, 1)
    cols = [dlon, np.sin(lam), np.cos(lam)]  # shape (1, 1, nx)
    novelty = tuple(v for v in ("mess", "nt1", "nt2") if v in stack.data_vars)
    layers = [stack[v].transpose("slice", "lat", "lon").data for v in novelty]
    elev = "elevation" in stack.data_vars
    if elev:
        e = stack["elevation"]
        if set(e.dims) != {"lat", "lon"}:
            raise DataError(f"`elevation` must be one (lat, lon) map, got dims {list(e.dims)}")
        layers.append(e.transpose("lat", "lon").data[None])
    land = "land" in stack.data_vars and set(stack["land"].dims) <= {"slice", "lat", "lon"}
    if land:
        lnd = stack["land"].fillna(False).astype(bool)
        if "slice" not in lnd.dims:  # one land mask for every slice
            lnd = lnd.expand_dims(slice=stack.sizes["slice"])
        layers.append(lnd.transpose("slice", "lat", "lon").data)
    kw = {"novelty": novelty, "elev": elev, "land": land}
    cur = suitable.data
    if not isinstance(cur, dsa.Array):
        c = np.asarray(cur)
        res = _sums_kernel(c, c[iref:iref + 1],
                           *[r[None, :, None] for r in rows], *[c_[None, None, :] for c_ in cols],
                           *[np.asarray(x) for x in layers], **kw)[:, 0, 0, :]
        lat_rows = _rows_kernel(c, band[None, :, None], dlon[None, None, :])[:, :, 0]
        return res, lat_rows, novelty
    chunks = cur.chunks
    ych, xch = chunks[1], chunks[2]
    r_arr = [dsa.from_array(r[None, :, None], chunks=((1,), ych, (1,))) for r in rows]
    c_arr = [dsa.from_array(c[None, None, :], chunks=((1,), (1,), xch)) for c in cols]
    lay = [dsa.asarray(x).rechunk(chunks) for x in layers[: len(novelty)]]
    if elev:
        lay.append(dsa.asarray(layers[len(novelty)]).rechunk(((1,), ych, xch)))
    if land:
        lay.append(dsa.asarray(layers[-1]).rechunk(chunks))
    out = dsa.map_blocks(
        _sums_kernel, cur, cur[iref:iref + 1].rechunk(((1,), ych, xch)), *r_arr, *c_arr, *lay,
        chunks=(chunks[0], (1,) * len(ych), (1,) * len(xch), (len(_SUM_NAMES),)),
        new_axis=3, dtype=np.float64, meta=np.array((), dtype=np.float64), **kw,
    )
    rows_out = dsa.map_blocks(
        _rows_kernel, cur, r_arr[0], c_arr[0],
        chunks=(chunks[0], ych, (1,) * len(xch)), dtype=np.float64,
        meta=np.array((), dtype=np.float64),
    )
    return out.sum(axis=(1, 2)), rows_out.sum(axis=2), novelty


def change_table(
    stack: xr.Dataset, *, reference: str = "baseline", detail: bool = False
) -> pd.DataFrame:
    """Per-slice summary: suitable area, gain/loss/stable, novel area, centroid and its shift.

    Parameters
    ----------
    stack : xarray.Dataset
        Stacked series with ``suitable(slice, lat, lon)`` (a bare ``suitable`` DataArray is
        accepted too); ``mess(slice, lat, lon)`` is used
        for the novel area when present (NaN column otherwise); slice coords ``year``,
        ``model``, ``scenario``.
    reference : str, default "baseline"
        Label of the reference slice.
    detail : bool, default False
        Add gain/loss/stable in % of the reference area, the centroid bearing (degrees clockwise
        from north, from the reference centroid), the area-weighted mean and 10/50/90 %
        quantiles of latitude and of ``elevation`` over suitable cells, and the suitable area
        split into analog and novel climate by each criterion (MESS < 0, NT1 < 0, NT2 > 1, any
        of them), plus the gain area in novel climate (any criterion) and its share of the gain.

    Returns
    -------
    pandas.DataFrame
        One row per slice with exactly the columns of :data:`SUMMARY_COLUMNS` (areas in km²,
        centroid in degrees, shift in km), followed by :data:`DETAIL_COLUMNS` when `detail`.

    Notes
    -----
    Gain, loss and stable areas come from :func:`change_map` with ``invalid="both"``, so
    ``suitable_area_km2 - A_ref == gain_km2 - loss_km2`` and
    ``stable_km2 + loss_km2 == A_ref`` hold to float rounding. ``novel_area_km2`` is the area of
    suitable cells with MESS < 0 (Elith, Kearney & Phillips 2010, Methods Ecol. Evol. 1:330).
    Because a slice whose climate is wholly novel may have no suitable cell at all, the detail
    columns also give novel climate over all land (``novel_land_km2``, ``novel_land_share`` of
    ``land_km2``, any criterion) and the lost area whose climate in the slice is novel
    (``loss_novel_km2``, ``loss_novel_share``).
    ``centroid_shift_km`` is the great-circle distance on the authalic sphere from the reference
    centroid (Sinnott 1984, Sky and Telescope 68:159).
    """
    if isinstance(stack, xr.DataArray):
        stack = stack.to_dataset(name="suitable")
    check_stack(stack)
    suitable = stack["suitable"]
    check_dataarray(suitable, name="suitable", dims=("slice", "lat", "lon"))
    iref = check_label(stack, reference)
    computed, meta = _computed(stack, suitable, iref, detail=detail)
    table = _frame(computed, meta, slice_labels(stack), iref)
    if detail:
        table = _detail_columns(stack, computed, iref, table)
        return table[SUMMARY_COLUMNS + DETAIL_COLUMNS]
    return table[SUMMARY_COLUMNS]


def _computed(stack: xr.Dataset, suitable: xr.DataArray, iref: int, *,
              detail: bool) -> tuple[xr.Dataset, xr.Dataset]:
    """Every number of the table in one pass: the area sums, the centroid, the detail inputs
    (suitable area per latitude row, suitable cells and elevation), and the slice metadata."""
    import dask

    res, lat_rows, novelty = _area_sums(stack, suitable, iref)
    meta = {
        k: stack[k].variable
        for k in ("year", "model", "scenario")
        if k in stack.coords or k in stack.data_vars
    }
    cells = {}
    if detail and "elevation" in stack.data_vars:
        # exact weighted elevation quantiles need the suitable cells (one byte per cell)
        cells["d_suit"] = drop_nondim(is_suitable(suitable))
        cells["d_elev"] = drop_nondim(stack["elevation"])
    # one pass over the stack; no graph optimisation: the two collections share keys, and
    # optimising them separately can fuse away a key the other one needs
    computed, res, lat_rows = dask.compute(
        xr.Dataset({**{f"meta_{k}": v for k, v in meta.items()}, **cells}), res,
        lat_rows if detail else None, optimize_graph=False,
    )
    res = np.asarray(res, dtype=np.float64)
    if detail:
        computed["d_lat_rows"] = (("slice", "lat"), np.asarray(lat_rows, dtype=np.float64))
    for k, name in enumerate(_SUM_NAMES):
        computed[name] = ("slice", res[:, k])
    with np.errstate(invalid="ignore", divide="ignore"):
        tot = np.where(res[:, 0] > 0, res[:, 0], np.nan)
        computed["centroid_lat"] = ("slice", res[:, 4] / tot)
        lon_c = np.rad2deg(np.arctan2(res[:, 5], res[:, 6]))
        computed["centroid_lon"] = ("slice", np.where(np.isfinite(tot),
                                                      ((lon_c + 180.0) % 360.0) - 180.0, np.nan))
    if "mess" in novelty:
        computed["novel_area_km2"] = computed["d_novel_mess"]
    return computed, xr.Dataset({k: computed[f"meta_{k}"] for k in meta})


def _frame(computed: xr.Dataset, meta: xr.Dataset, labels: list[str], iref: int) -> pd.DataFrame:
    """The summary columns of the table from the computed sums."""
    n = len(labels)
    table = pd.DataFrame(
        {
            "slice": labels,
            "year": np.asarray(_slice_meta(meta, "year", n, np.nan), dtype=float),
            "model": [str(v) for v in _slice_meta(meta, "model", n, "")],
            "scenario": [str(v) for v in _slice_meta(meta, "scenario", n, "")],
        }
    )
    for k in ("suitable_area_km2", "gain_km2", "loss_km2", "stable_km2"):
        table[k] = computed[k].values.astype(float)
    table["novel_area_km2"] = (
        computed["novel_area_km2"].values.astype(float)
        if "novel_area_km2" in computed
        else np.nan
    )
    table["centroid_lat"] = computed["centroid_lat"].values.astype(float)
    table["centroid_lon"] = computed["centroid_lon"].values.astype(float)
    table["centroid_shift_km"] = haversine_km(
        table["centroid_lon"].iloc[iref],
        table["centroid_lat"].iloc[iref],
        table["centroid_lon"].to_numpy(),
        table["centroid_lat"].to_numpy(),
    )
    return table
