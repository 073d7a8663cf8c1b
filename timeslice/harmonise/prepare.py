"""One prepared slice: downscaled climate, land/ice masks, exposed-shelf fill, bio1..bio19."""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Literal

import numpy as np
import xarray as xr

from timeslice.layers import spec as layer_spec
from timeslice.errors import DataError
from timeslice.harmonise.bioclim import BIO_ATTRS, BIO_NAMES
from timeslice.harmonise.landmask import STANDARD_LAPSE_RATE
from timeslice.harmonise.regrid import regrid

__all__ = ["block_rows", "prepare_slice", "write_prepared", "write_slice"]

_VARS = ("tasmin", "tasmax", "pr")


def _load(obj, what: str, require=None) -> xr.Dataset:
    if isinstance(obj, (str, os.PathLike)):
        from timeslice.readers import open_climate

        return open_climate(obj, require=require)
    if isinstance(obj, xr.DataArray):
        return obj.to_dataset(name=str(obj.name or what))
    if isinstance(obj, xr.Dataset):
        return obj
    raise DataError(f"`{what}` must be a path or an xarray Dataset, got {type(obj).__name__}")


def _log_of(ds: xr.Dataset) -> list[str]:
    raw = ds.attrs.get("harmonise_log")
    if raw is None:
        return []
    if isinstance(raw, (list, tuple)):
        return [str(x) for x in raw]
    try:
        val = json.loads(raw)
        return [str(x) for x in val] if isinstance(val, list) else [str(raw)]
    except (TypeError, ValueError):
        return [str(raw)]


def _same_grid(a, b) -> bool:
    return (
        a.sizes["lat"] == b.sizes["lat"] and a.sizes["lon"] == b.sizes["lon"]
        and np.allclose(a["lat"].values, b["lat"].values, atol=1e-6)
        and np.allclose(a["lon"].values, b["lon"].values, atol=1e-6)
    )


def block_rows(nlat: int, nlon: int, chunks: int | Literal["auto"] | None = "auto"
               ) -> tuple[int, int]:
    """Rows per block of the fine grid, and rows per call of the bioclimatic kernel.

    Parameters
    ----------
    nlat, nlon : int
        Size of the fine grid.
    chunks : int, "auto" or None
        As in :func:`prepare_slice`.

    Returns
    -------
    (int, int)
        Rows per block (a multiple of the second number; the whole grid for ``None`` and
        for "auto" on grids up to 2**20 cells), rows per bioclimatic call. A fine-grid input
        chunked by this many rows is read once.
    """
    if chunks is None:
        return nlat, nlat
    if chunks == "auto":
        if nlat * nlon <= 2**20:
            return nlat, nlat
        rows = max(8, 2**18 // nlon)
    elif not isinstance(chunks, int) or isinstance(chunks, bool) or chunks < 1:
        raise DataError(f"`chunks` must be a positive number of latitude rows, got {chunks!r}")
    else:
        rows = chunks
    # smaller calls for the bioclimatic kernel: it holds ~15 float64 copies of its block
    bio = max(1, rows // 4)
    return 4 * bio, bio


def _check_args(label, model_slice, model_baseline, bio, fine_baseline) -> None:
    if (model_slice is None) != (model_baseline is None):
        which = "model_baseline" if model_baseline is None else "model_slice"
        raise DataError(
            f"slice {label!r}: `{which}` is missing; a downscaled slice needs both the model's "
            "slice and the same model's baseline run"
        )
    if bio is not None and model_slice is not None:
        raise DataError(
            f"slice {label!r}: give either pre-computed `bio` layers or model files, not both"
        )
    if fine_baseline is None and bio is None:
        raise DataError(f"slice {label!r}: `fine_baseline` is required for monthly slices")


def _elevation_of(elevation) -> xr.DataArray:
    elev_ds = _load(elevation, "elevation")
    if "elevation" in elev_ds.data_vars:
        return elev_ds["elevation"]
    if len(elev_ds.data_vars) == 1:
        return next(iter(elev_ds.data_vars.values()))
    raise DataError(
        f"`elevation` input has no variable 'elevation' (found {sorted(elev_ds.data_vars)})"
    )


def _rows_reader(da: xr.DataArray, dtype=None):
    """``read(r0, r1)``: a fresh (writable) numpy copy of rows r0:r1 of `da` (lat, lon last)."""
    lead = [d for d in da.dims if d not in ("lat", "lon")]
    da = da.transpose(*lead, "lat", "lon")

    def read(r0: int, r1: int) -> np.ndarray:
        block = np.asarray(da.isel(lat=slice(r0, r1)).values)
        return block.astype(dtype or block.dtype, copy=True)

    return read


class _Job:
    """The inputs of one slice, checked and put on the target grid (lazily where large)."""

    def __init__(self, *, fine_baseline, elevation, model_slice, model_baseline, bio, ice,
                 label, chunks, regrid_method, pr_floor, ratio_quantile):
        self.label = label
        self.log: list[str] = []
        self.fb = None
        elev = _elevation_of(elevation)
        if fine_baseline is not None:
            self.fb = _load(fine_baseline, "fine_baseline", require=("tasmin", "tasmax", "pr"))
            self.log = list(_log_of(self.fb))
        self.target = self.fb if self.fb is not None else elev
        nlat, nlon = self.target.sizes["lat"], self.target.sizes["lon"]
        self.rows, self.bio_rows = block_rows(nlat, nlon, chunks)
        # one block: the whole-grid arithmetic of delta() (factor rounded to float32 first),
        # kept so that small grids give the numbers they always gave
        one_block = chunks is None or (chunks == "auto" and nlat * nlon <= 2**20)
        self.whole = one_block and (self.fb is None or self.fb["tasmin"].chunks is None)
        lazy = None if one_block else self.rows
        if not _same_grid(elev, self.target):
            elev = regrid(elev, self.target, method="auto", source="elevation", chunks=lazy)
            self.log.append(
                f"elevation regridded onto the fine grid ({elev.attrs.get('regrid_method')})")
        self.elev = elev
        self.ice = None
        if ice is not None:
            from timeslice.harmonise.landmask import ice_on_grid

            ice_ds = _load(ice, "ice")
            ice_da = (ice_ds["ice"] if "ice" in ice_ds.data_vars
                      else next(iter(ice_ds.data_vars.values())))
            self.ice = ice_on_grid(ice_da, elev, chunks=lazy)
        self.n_swapped = 0
        if bio is not None:
            self.kind, self.read = "bio", self._bio_reader(bio, regrid_method, lazy)
        elif model_slice is not None:
            self.kind = "monthly"
            self.read = self._delta_reader(model_slice, model_baseline, regrid_method,
                                           pr_floor, ratio_quantile)
        else:
            self.kind = "monthly"
            self.read = self._observed_reader()

    def _monthly_fb(self) -> xr.Dataset:
        from timeslice.harmonise.downscale import check_monthly

        check_monthly(self.fb, "fine_baseline_ds")
        fb = self.fb
        if "month" in fb.coords and np.any(np.diff(fb["month"].values) < 0):
            fb = fb.sortby("month")
        return fb

    def _observed_reader(self):
        fb = self._monthly_fb()
        self.log.append("observed baseline: no downscaling")
        readers = {v: _rows_reader(fb[v].transpose("month", "lat", "lon")) for v in _VARS}

        def read(r0, r1):
            return {v: readers[v](r0, r1) for v in _VARS}, {}

        return read

    def _delta_reader(self, model_slice, model_baseline, method, pr_floor, ratio_quantile):
        from timeslice.harmonise.downscale import ChangeFactors, anomalies, swap_to_midpoint

        label = self.label
        ms = _load(model_slice, "model_slice", require=_VARS)
        mb = _load(model_baseline, "model_baseline", require=_VARS)
        self.log += [f"model slice: {line}" for line in _log_of(ms)]
        self.log += [f"model baseline: {line}" for line in _log_of(mb)]
        if not _same_grid(ms, mb):
            ms = regrid(ms, mb, method=method, source=f"slice {label!r} model slice")
            self.log.append("model slice regridded onto its model baseline grid")
        fb = self._monthly_fb()
        anom = anomalies(ms, mb, pr_floor=pr_floor, ratio_quantile=ratio_quantile)
        factors = ChangeFactors(anom, fb["lat"].values, fb["lon"].values)
        self.delta_args = dict(slice_attrs=dict(ms.attrs), pr_floor=pr_floor,
                               ratio_quantile=ratio_quantile,
                               shape=(fb.sizes["lat"], fb.sizes["lon"]))
        self.ms_log = set(_log_of(ms))
        readers = {v: _rows_reader(fb[v].transpose("month", "lat", "lon")) for v in _VARS}
        whole = self.whole

        def read(r0, r1):
            base = {v: readers[v](r0, r1) for v in _VARS}
            out = factors.apply(base, r0, r1, cast_first=whole)
            n_fixed = swap_to_midpoint(out["tasmin"], out["tasmax"])
            uncovered = int((np.isfinite(base["tasmin"]) & np.isnan(out["tasmin"])).sum())
            return out, {"n_swapped": n_fixed, "n_uncovered": uncovered}

        return read

    def _bio_reader(self, bio, method, lazy):
        label = self.label
        bds = _load(bio, "bio")
        missing = [b for b in BIO_NAMES if b not in bds.data_vars]
        if missing:
            raise DataError(
                f"slice {label!r}: pre-computed `bio` layers lack {missing} (found "
                f"{sorted(map(str, bds.data_vars))}); give all of bio1..bio19"
            )
        self.log += [f"bio layers: {line}" for line in _log_of(bds)]
        clim = bds[list(BIO_NAMES)]
        if not _same_grid(clim, self.target):
            clim = regrid(clim, self.target, method=method, source=f"slice {label!r} bio",
                          chunks=lazy)
            methods = sorted({str(clim[b].attrs.get("regrid_method")) for b in BIO_NAMES})
            self.log.append(f"bio layers regridded onto the target grid ({', '.join(methods)})")
        self.bio_attrs = {}
        for name in BIO_NAMES:
            attrs = dict(clim[name].attrs)
            attrs.pop("regrid_method", None)
            if not attrs.get("long_name") and name in BIO_ATTRS:
                u, ln, desc = BIO_ATTRS[name]
                attrs.update(units=attrs.get("units") or u, long_name=ln, description=desc)
            self.bio_attrs[name] = attrs
        readers = {b: _rows_reader(clim[b]) for b in BIO_NAMES}

        def read(r0, r1):
            return {b: readers[b](r0, r1) for b in BIO_NAMES}, {}

        return read

    def plan(self, *, sea_level, ice_threshold, lapse_rate):
        from timeslice.harmonise.streaming import SlicePlan

        read_elev = _rows_reader(self.elev, np.float32)
        return SlicePlan(
            kind=self.kind, read_climate=self.read, read_elevation=read_elev,
            read_ice=_rows_reader(self.ice) if self.ice is not None else None,
            lat=self.target["lat"].values, lon=self.target["lon"].values,
            sea_level=float(sea_level), ice_threshold=float(ice_threshold),
            lapse_rate=float(lapse_rate), rows=self.rows, bio_rows=self.bio_rows,
            label=self.label, clip="maximum" if self.kind == "monthly" and
            hasattr(self, "delta_args") else "clip",
        )

    def layers(self, *, sea_level, ice_threshold, lapse_rate):
        from timeslice.harmonise.landmask import filled_attrs, mask_attrs
        from timeslice.harmonise.sinks import Layer

        if self.kind == "bio":
            out = [Layer(b, np.float32, self.bio_attrs[b]) for b in BIO_NAMES]
        else:
            out = [Layer(b, np.float32, dict(zip(("units", "long_name", "description"),
                                                 BIO_ATTRS[b]))) for b in BIO_NAMES]
        masks = mask_attrs(sea_level, ice_threshold)
        # terrain height: the layer table's name (CF `surface_altitude`), as series.nc has it
        table = layer_spec("elevation")
        elev_attrs = {**self.elev.attrs, "units": table.units,
                      "standard_name": table.standard_name, "long_name": table.long_name}
        out += [Layer("land", bool, masks["land"]), Layer("elevation", np.float32, elev_attrs),
                Layer("ice", bool, masks["ice"]),
                Layer("exposed_shelf", bool, masks["exposed_shelf"]),
                Layer("filled", bool, filled_attrs(lapse_rate))]
        return out

    def coords(self):
        lat = xr.DataArray(self.target["lat"].values, dims="lat", name="lat",
                           attrs=dict(self.target["lat"].attrs))
        lon = xr.DataArray(self.target["lon"].values, dims="lon", name="lon",
                           attrs=dict(self.target["lon"].attrs))
        return lat, lon

    def attrs(self, summary, meta: dict) -> dict:
        from timeslice.harmonise.downscale import delta_log

        log = list(self.log)
        n_swapped = 0
        if hasattr(self, "delta_args"):
            n_swapped = int(summary.counts.get("n_swapped", 0))
            lines = delta_log(n_fixed=n_swapped,
                              n_uncovered=int(summary.counts.get("n_uncovered", 0)),
                              **self.delta_args)
            log += [line for line in lines if line not in self.ms_log]
        sea_level, ice_threshold = meta["sea_level"], meta["ice_threshold"]
        log.append(
            f"land = elevation > {sea_level:g} m"
            + (f" and ice fraction < {ice_threshold:g}" if self.ice is not None else "")
            + f": land {summary.land_km2:.0f} km2, ice {summary.ice_km2:.0f} km2, "
            f"exposed shelf {summary.exposed_shelf_km2:.0f} km2"
        )
        if summary.n_filled:
            log.append(
                f"{summary.n_filled} land cells without baseline climate filled from the nearest "
                f"baseline cell ({meta['lapse_rate'] * 1000:g} K/km lapse-rate correction)"
            )
        if self.kind == "monthly" and summary.n_negative:
            log.append(f"{summary.n_negative} cell-months of negative precipitation set to 0")
        return {
            "slice_label": str(meta["label"]), "year": float(meta["year"]),
            "period": str(meta["period"]), "model": str(meta["model"]),
            "scenario": str(meta["scenario"]), "sea_level": float(sea_level),
            "n_swapped": n_swapped, "land_km2": summary.land_km2, "ice_km2": summary.ice_km2,
            "exposed_shelf_km2": summary.exposed_shelf_km2, "harmonise_log": json.dumps(log),
        }


def _prepare(sink_factory, *, fine_baseline, elevation, model_slice=None, model_baseline=None,
             sea_level=0.0, ice=None, ice_threshold=0.5, label, year, period, model, scenario,
             bio=None, regrid_method="auto", pr_floor=0.1, ratio_quantile=0.98,
             lapse_rate=STANDARD_LAPSE_RATE, chunks="auto"):
    """Check the inputs, run the blocks into the sink from `sink_factory(job, layers)`;
    returns (sink, global attributes)."""
    from timeslice.harmonise.landmask import check_lapse_rate, check_mask_options
    from timeslice.harmonise.streaming import run_slice

    _check_args(label, model_slice, model_baseline, bio, fine_baseline)
    job = _Job(fine_baseline=fine_baseline, elevation=elevation, model_slice=model_slice,
               model_baseline=model_baseline, bio=bio, ice=ice, label=label, chunks=chunks,
               regrid_method=regrid_method, pr_floor=pr_floor, ratio_quantile=ratio_quantile)
    check_mask_options(sea_level, ice_threshold)
    check_lapse_rate(lapse_rate)
    opts = dict(sea_level=sea_level, ice_threshold=ice_threshold, lapse_rate=lapse_rate)
    sink = sink_factory(job, job.layers(**opts))
    summary = run_slice(job.plan(**opts), sink)
    meta = dict(label=label, year=year, period=period, model=model, scenario=scenario, **opts)
    return sink, job.attrs(summary, meta)


def prepare_slice(
    *,
    fine_baseline,
    elevation,
    model_slice=None,
    model_baseline=None,
    sea_level: float = 0.0,
    ice=None,
    ice_threshold: float = 0.5,
    label: str,
    year: float,
    period: str,
    model: str,
    scenario: str,
    bio=None,
    regrid_method: str | dict[str, str] = "auto",
    pr_floor: float = 0.1,
    ratio_quantile: float = 0.98,
    lapse_rate: float = STANDARD_LAPSE_RATE,
    chunks: int | Literal["auto"] | None = "auto",
) -> xr.Dataset:
    """Prepare one slice in the pinned "prepared slice" format.

    Parameters
    ----------
    fine_baseline : xarray.Dataset or path
        Observed monthly ``tasmin``, ``tasmax``, ``pr`` on the fine (target) grid. May be None
        when `bio` is given (the target grid is then the elevation grid).
    elevation : xarray.DataArray, Dataset or path, [m]
        Present-day elevation relative to present sea level; regridded to the fine grid if
        it is on another grid.
    model_slice, model_baseline : xarray.Dataset or path, optional
        A model's slice and its own baseline (both or neither). Without them the observed
        baseline itself is prepared.
    sea_level : float, [m]
        Slice sea level relative to present.
    ice : xarray.DataArray, Dataset or path, optional
        Land-ice fraction (any grid).
    ice_threshold : float
        Ice fraction at and above which a cell is ice.
    label, year, period, model, scenario
        Slice metadata (year in CE; a slice `a` years BP has year = 1950 - a).
    bio : xarray.Dataset or path, optional
        Pre-computed ``bio1``..``bio19`` of this slice on any grid (regridded onto the target
        grid); replaces the monthly path (no downscaling, no bioclimatic computation).
    regrid_method : str or mapping
        Method for inputs that need regridding onto the target grid ("auto",
        "conservative", "bilinear"), or one per variable.
    pr_floor, ratio_quantile : float
        Delta-method safeguards (see :func:`timeslice.harmonise.downscale.delta`).
    lapse_rate : float, [K m-1]
        For filling land without baseline climate.
    chunks : int, "auto" or None
        Latitude rows per block for downscaling and the bioclimatic variables ("auto": blocks
        of about 2**18 cells on grids over 2**20 cells, else one block). Bounds peak memory.

    Returns
    -------
    xarray.Dataset
        ``bio1..bio19`` (float32, NaN off land), ``land``, ``elevation``, ``ice``,
        ``exposed_shelf``, ``filled``; attrs ``slice_label``, ``year``, ``period``, ``model``,
        ``scenario``, ``sea_level``, ``n_swapped``, ``land_km2``, ``ice_km2``,
        ``exposed_shelf_km2``, ``harmonise_log`` (JSON list of lines).
    """
    from timeslice.harmonise.sinks import MemorySink

    def factory(job, layers):
        return MemorySink(layers, *job.coords())

    sink, attrs = _prepare(
        factory, fine_baseline=fine_baseline, elevation=elevation, model_slice=model_slice,
        model_baseline=model_baseline, sea_level=sea_level, ice=ice,
        ice_threshold=ice_threshold, label=label, year=year, period=period, model=model,
        scenario=scenario, bio=bio, regrid_method=regrid_method, pr_floor=pr_floor,
        ratio_quantile=ratio_quantile, lapse_rate=lapse_rate, chunks=chunks)
    return sink.dataset(attrs)


def write_slice(path, **kwargs) -> Path:
    """Prepare one slice and write it as it is computed, a block of rows at a time.

    The file holds the same values and attributes as ``write_prepared(prepare_slice(...))``
    (chunked by blocks of rows instead of one chunk), and peak memory stays that of a few
    blocks whatever the grid size, when the fine baseline is lazy (opened with
    ``chunks={"lat": rows}``; see :func:`block_rows`).

    Parameters
    ----------
    path : path-like
        Output NetCDF file (written under a temporary name, then renamed).
    **kwargs
        The arguments of :func:`prepare_slice`.

    Returns
    -------
    pathlib.Path
        `path`.
    """
    from timeslice.harmonise.sinks import NetCDFSink
    from timeslice.io import atomic_path

    target = Path(path)
    with atomic_path(target) as tmp:
        sinks = []

        def factory(job, layers):
            sinks.append(NetCDFSink(tmp, layers, *job.coords(), rows=job.rows))
            return sinks[0]

        try:
            sink, attrs = _prepare(factory, **kwargs)
        except BaseException:
            if sinks:
                sinks[0].close()
            raise
        sink.close(_file_attrs(attrs))
    return target


def _file_attrs(attrs: dict) -> dict:
    """Global attributes as :func:`write_prepared` writes them."""
    out = dict(attrs)
    out.setdefault("Conventions", "CF-1.8")
    out.setdefault("title", f"timeslice prepared slice {out.get('slice_label', '')}".strip())
    out["history"] = (str(out.get("history", "")) + "\n").lstrip() + \
        "prepared by timeslice.harmonise.prepare_slice"
    return out


def write_prepared(ds: xr.Dataset, path) -> Path:
    """Write a prepared slice as compressed CF NetCDF, atomically (temporary name, rename).

    Boolean masks are stored as int8 0/1 with CF ``flag_values``/``flag_meanings`` (xarray
    reads them back as bool).

    Parameters
    ----------
    ds : xarray.Dataset
        A prepared slice (:func:`prepare_slice`).
    path : path-like
        Output file.

    Returns
    -------
    pathlib.Path
        `path`.
    """
    from timeslice.io import atomic_path

    out = ds.copy()
    encoding = {}
    for v in out.data_vars:
        if out[v].dtype == bool:
            # stored as int8 0/1 (xarray reads it back as bool) with CF flag attributes
            attrs = dict(out[v].attrs)
            attrs.pop("units", None)
            out[v].attrs = {**attrs, "flag_values": np.array([0, 1], dtype=np.int8),
                            "flag_meanings": f"not_{v} {v}"}
            encoding[v] = {"zlib": True, "complevel": 4}
        elif np.issubdtype(out[v].dtype, np.floating):
            encoding[v] = {"zlib": True, "complevel": 4, "_FillValue": np.float32(np.nan)}
    for c in ("lat", "lon"):
        if c in out.coords:
            encoding[c] = {"_FillValue": None}  # CF 2.5.1: coordinates carry no fill value
    out.attrs = _file_attrs(out.attrs)
    target = Path(path)
    with atomic_path(target) as tmp:
        out.to_netcdf(tmp, encoding=encoding, format="NETCDF4")
    return target
