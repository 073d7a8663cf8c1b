"""Zarr store output: the same layers, attributes and flag encoding as the CF NetCDF, written
chunk by chunk in parallel by dask (local threads or ``dask.distributed`` workers).

A NetCDF-4 file is one file that one process writes at a time (HDF5 serialises the writes), so
a cluster run that writes ``series.nc`` funnels every layer through one writer. A Zarr store is
a folder of chunk files: each chunk is an object of its own, and dask writes every chunk as a
task of its own, on whichever worker computed it. The dask chunks are aligned with the store's
chunks (one slice by a block of whole rows), so no two tasks ever write the same chunk file and
no lock is needed (xarray's ``safe_chunks`` check refuses anything else).

The metadata are those of :func:`timeslice.report.netcdf.prepare_cf` (CF-1.8 attributes,
``crs``, bounds, cell areas, boolean masks as int8 flags, ``-1`` as the named ``not_land``
flag), and the fill values follow the NetCDF writer: NaN for floating layers, none for integer
and flag layers and for coordinates. :func:`open_store` reads a store (or a NetCDF file) back
with the ``slice`` index and the boolean masks restored, so a reader cannot tell the two apart.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import uuid
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any, Literal

import numpy as np
import xarray as xr

from timeslice.errors import DataError, InputFileError

__all__ = ["STORE_TARGET_CELLS", "ZARR_FORMAT", "open_store", "series_writer",
           "store_chunks", "write_store"]

#: Cells per chunk the writer aims at (a chunk is one slice by whole rows): about 4 MB of
#: float32, our choice — large enough that per-chunk overhead stays small, small enough that
#: a 30" global layer (43200 x 21600 cells) gives ~900 chunks per slice to spread over workers.
STORE_TARGET_CELLS = 2**20

#: Zarr format version written (version 3, the current specification).
ZARR_FORMAT = 3

Format = Literal["netcdf", "zarr"]


def store_chunks(ds: xr.Dataset, *, target_cells: int = STORE_TARGET_CELLS) -> dict[str, int]:
    """Chunk sizes of the store: 1 along every dimension but the grid, whole rows along lon.

    Parameters
    ----------
    ds : xarray.Dataset
        Dataset with ``lat`` and ``lon`` dimensions.
    target_cells : int
        Cells per chunk to aim at; the rows per chunk are ``target_cells // n_lon`` (at least 1).

    Returns
    -------
    dict of str to int
        Chunk size per dimension of `ds`.
    """
    if isinstance(target_cells, bool) or not isinstance(target_cells, int) or target_cells < 1:
        raise DataError(f"write_store: `target_cells` must be a positive integer, got "
                        f"{target_cells!r}")
    nlon = int(ds.sizes.get("lon", 1))
    rows = max(1, min(int(ds.sizes.get("lat", 1)), target_cells // max(nlon, 1)))
    out: dict[str, int] = {}
    for dim, size in ds.sizes.items():
        if dim == "lat":
            out[str(dim)] = rows
        elif dim in ("lon", "bnds"):
            out[str(dim)] = int(size)
        else:
            out[str(dim)] = 1
    return out


def _encoding(ds: xr.Dataset, chunks: Mapping[str, int]) -> dict[str, dict[str, Any]]:
    """Per-variable encoding: the NetCDF writer's fill-value rules with the store's chunks."""
    enc: dict[str, dict[str, Any]] = {}
    for name in list(ds.data_vars) + list(ds.coords):
        da = ds[name]
        e: dict[str, Any] = {}
        is_coord = name in ds.coords or name in ("lat_bnds", "lon_bnds")
        if set(da.dims) >= {"lat", "lon"}:
            e["chunks"] = tuple(chunks[d] for d in da.dims)
        if da.dtype.kind == "f" and not is_coord:
            e["_FillValue"] = np.array(np.nan, dtype=da.dtype)
        elif da.dtype.kind in "iub" or is_coord:
            e["_FillValue"] = None
        enc[str(name)] = e
    return enc


def _chunked(ds: xr.Dataset, chunks: Mapping[str, int]) -> xr.Dataset:
    """Dask-back every gridded data variable with chunks equal to the store's chunks (each
    task then writes exactly one chunk file); coordinates and small variables stay in memory."""
    out = ds.copy()
    for name in ds.data_vars:
        da = ds[name]
        if set(da.dims) >= {"lat", "lon"}:
            out[name] = da.chunk({d: chunks[d] for d in da.dims})
    return out


def _variable_strings(ds: xr.Dataset) -> xr.Dataset:
    """Fixed-width text arrays as variable-length strings: Zarr v3 specifies the latter only
    (zarr-python warns that fixed-width UTF-32 may be unreadable elsewhere)."""
    for name in list(ds.variables):
        if ds[name].dtype.kind == "U":
            attrs, enc = dict(ds[name].attrs), {}
            text = np.asarray(ds[name].values).astype(object)
            if name in ds.coords:
                ds = ds.assign_coords({name: (ds[name].dims, text, attrs)})
            else:
                ds[name] = (ds[name].dims, text, attrs)
            ds[name].encoding = enc
    return ds


@contextlib.contextmanager
def _store_path(target: Path):
    """A temporary folder beside `target`, renamed onto it when the block succeeds; an earlier
    store at `target` stays whole until the new one is complete."""
    target.parent.mkdir(parents=True, exist_ok=True)
    for stale in target.parent.glob(f".{target.name}.*.part"):  # left by a killed run
        shutil.rmtree(stale, ignore_errors=True)
    tmp = target.parent / f".{target.name}.{uuid.uuid4().hex[:8]}.part"
    try:
        yield tmp
        old = None
        if target.exists():
            old = target.parent / f".{target.name}.{uuid.uuid4().hex[:8]}.old.part"
            os.replace(target, old)
        os.replace(tmp, target)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def write_store(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    history: str | None = None,
    source: str | None = None,
    title: str | None = None,
    target_cells: int = STORE_TARGET_CELLS,
) -> Path:
    """Write a stacked series (or any gridded output) as a CF-attributed Zarr store, in parallel.

    Parameters
    ----------
    ds : xarray.Dataset
        Layers on ``(lat, lon)`` or ``(slice, lat, lon)`` (any leading dimensions work),
        in memory or dask-backed.
    path : path-like
        Target folder (``series.zarr``); written beside it under a temporary name and renamed
        when complete, so a failed write leaves any earlier store as it was.
    history, source, title : str, optional
        Global attributes, as for :func:`timeslice.report.netcdf.write_series`.
    target_cells : int
        Cells per chunk to aim at (:func:`store_chunks`).

    Returns
    -------
    pathlib.Path
        The written store.

    Notes
    -----
    The chunks are written by ``dask.compute`` on the scheduler in force: local threads by
    default, the workers of a ``distributed.Client`` when one is current (``[run] workers`` or
    ``scheduler``). The store's path must then be reachable by every worker (a shared
    filesystem). Each dask chunk is exactly one store chunk, so the writes never overlap.
    """
    import dask

    from timeslice.report.netcdf import prepare_cf

    target = Path(path)
    if target.exists() and not target.is_dir():
        raise InputFileError(f"{target}: is a file; give a folder name ending in .zarr for the "
                             "Zarr store")
    out = _variable_strings(prepare_cf(ds, history=history, source=source, title=title))
    chunks = store_chunks(out, target_cells=target_cells)
    enc = _encoding(out, chunks)
    out = _chunked(out, chunks)
    try:
        with _store_path(target) as tmp:
            delayed = out.to_zarr(tmp, mode="w", encoding=enc, compute=False,
                                  zarr_format=ZARR_FORMAT, consolidated=False)
            dask.compute(delayed)
    except OSError as err:
        from timeslice.errors import write_failure

        failure = write_failure(target, err)
        if failure is None:
            raise
        raise failure from err
    return target


def open_store(path: str | os.PathLike, **kwargs: Any) -> xr.Dataset:
    """Open a written series, NetCDF file or Zarr store alike, as :func:`open_series` does.

    Parameters
    ----------
    path : path-like
        ``series.nc`` / ``ensemble.nc`` (:func:`timeslice.report.netcdf.write_series`) or
        ``series.zarr`` / ``ensemble.zarr`` (:func:`write_store`), or a run folder holding one.
    **kwargs
        Passed to :func:`xarray.open_dataset` or :func:`xarray.open_zarr` (e.g. ``chunks``).

    Returns
    -------
    xarray.Dataset
        ``slice`` labels as the index, flag layers integers, masks boolean.
    """
    from timeslice.report.netcdf import open_series, restore_series

    target = Path(path)
    if target.is_dir() and target.suffix != ".zarr":
        found = [target / n for n in ("series.zarr", "series.nc") if (target / n).exists()]
        if not found:
            raise InputFileError(f"{target}: holds neither series.nc nor series.zarr; give the "
                                 "path of a run folder or of a series file")
        target = found[0]
    if target.suffix != ".zarr":
        return open_series(target, **kwargs)
    if not (target / "zarr.json").is_file() and not (target / ".zgroup").is_file():
        raise InputFileError(f"{target}: not a Zarr store (no zarr.json in it); give the path "
                             "of a series.zarr written by timeslice")
    kwargs.setdefault("chunks", None)
    try:
        ds = xr.open_zarr(target, consolidated=False, **kwargs)
    except (OSError, ValueError, KeyError) as err:
        raise InputFileError(f"{target}: not a readable Zarr store ({err})") from err
    return restore_series(ds)


def series_writer(data_format: Format = "netcdf") -> tuple[Callable[..., Path], str]:
    """The writer of the run's data files and their suffix, for ``[output] format``.

    Parameters
    ----------
    data_format : {"netcdf", "zarr"}
        The configured format.

    Returns
    -------
    tuple of (callable, str)
        ``write(ds, path, *, history, title)`` and ``".nc"`` or ``".zarr"``.
    """
    if data_format == "zarr":
        return write_store, ".zarr"
    if data_format == "netcdf":
        from timeslice.report.netcdf import write_series

        return write_series, ".nc"
    raise DataError(f"output.format must be 'netcdf' or 'zarr', got {data_format!r}")


def export_store(path: str | os.PathLike, folder: str | os.PathLike, *,
                 variables: list[str] | None = None) -> list[Path]:
    """Export the layers of a written series (NetCDF file or Zarr store) as GeoTIFFs.

    Parameters
    ----------
    path : path-like
        ``series.nc`` or ``series.zarr`` (or the ensemble file of either format).
    folder : path-like
        Target folder.
    variables : list of str, optional
        Layers to export (default every known layer present).

    Returns
    -------
    list of pathlib.Path
        The GeoTIFFs written.
    """
    from timeslice.report.geotiff import export

    ds = open_store(path, chunks={})
    try:
        return export(ds, Path(folder), variables=variables)
    finally:
        ds.close()


def find_series(out: str | os.PathLike, name: str = "series") -> Path | None:
    """The data file of a run folder: ``NAME.nc`` or ``NAME.zarr``, whichever exists.

    Parameters
    ----------
    out : path-like
        Run folder.
    name : str
        ``"series"`` or ``"ensemble"``.

    Returns
    -------
    pathlib.Path or None
        The file or store, None when the run holds neither.
    """
    for suffix in (".nc", ".zarr"):
        path = Path(out) / f"{name}{suffix}"
        if path.exists():
            return path
    return None
