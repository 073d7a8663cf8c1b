"""Transfer a slice from a NetCDF file to a NetCDF file by row blocks.

:func:`project_file` reads whole rows of every predictor with netCDF4 (no dask graph, no task per
variable), runs the fused block pass of :mod:`timeslice.transfer.blocks` on a few threads and
writes each finished block into the output file. Memory follows the block, not the grid; the
values and attributes are those of :func:`timeslice.transfer.project.project_slice` (tested).
"""

from __future__ import annotations

import os
import threading
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from timeslice.errors import DataError, InputFileError
from timeslice.io import atomic_path
from timeslice.transfer.blocks import (
    DEFAULT_CHUNK_BUDGET_MB,
    BlockPlan,
    row_threads,
    rows_per_block,
    run_row_blocks,
    stack_rows,
)
from timeslice.transfer.metrics import NoveltyMetric
from timeslice.transfer.project import (
    build_plan,
    check_threshold,
    layer_attributes,
    slice_attributes,
)
from timeslice.transfer.reference import ReferenceSet, reference_table

__all__ = ["project_file"]


class _Source:
    """Row blocks of the predictors (and land mask) of one NetCDF slice, decoded as xarray
    decodes them: raw netCDF4 reads for unpacked floats, xarray's own decoding otherwise."""

    def __init__(self, nc: Any, path: Path, variables: Sequence[str]) -> None:
        self.nc, self.path, self.variables = nc, path, list(variables)
        missing = [v for v in self.variables if v not in nc.variables]
        if missing:
            raise DataError(
                f"{path}: no predictor {missing[0]!r} (has {sorted(nc.variables)}); prepare the "
                "slice with the model's variables"
            )
        self.dims = nc.variables[self.variables[0]].dimensions
        for v in self.variables:
            var = nc.variables[v]
            if var.dimensions != self.dims or len(self.dims) != 2:
                raise DataError(
                    f"{path}: predictor {v!r} has dims {var.dimensions}; every predictor must be "
                    f"2-D on the dims of {self.variables[0]!r} {self.dims} (use project_slice "
                    "for other layouts)"
                )
        self.shape = nc.variables[self.variables[0]].shape
        self._xr: xr.Dataset | None = None
        self.land = "land" in nc.variables

    def _decoded(self, name: str, r0: int, r1: int) -> np.ndarray:
        var = self.nc.variables[name]
        attrs = set(var.ncattrs())
        if var.dtype.kind == "f" and not attrs & {"scale_factor", "add_offset"}:
            var.set_auto_maskandscale(False)
            raw = np.asarray(var[r0:r1])
            for key in ("_FillValue", "missing_value"):
                fill = var.getncattr(key) if key in attrs else None
                if fill is not None and not np.all(np.isnan(fill)):
                    raw = np.where(np.isin(raw, np.asarray(fill, dtype=raw.dtype)), np.nan, raw)
                    raw = raw.astype(var.dtype, copy=False)
            return raw
        if self._xr is None:  # packed or integer values: exactly xarray's CF decoding
            self._xr = xr.open_dataset(self.path, engine="netcdf4", cache=False)
        return np.asarray(self._xr[name].isel({self.dims[0]: slice(r0, r1)}).values)

    def read(self, r0: int, r1: int) -> tuple[np.ndarray, np.ndarray | None]:
        """Predictors (k, rows, cols) and the land mask of rows r0..r1."""
        x = stack_rows([self._decoded(v, r0, r1) for v in self.variables])
        land = None
        if self.land:
            var = self.nc.variables["land"]
            var.set_auto_maskandscale(False)
            land = np.asarray(var[r0:r1]) != 0
        return x, land

    def close(self) -> None:
        """Close the xarray handle of packed variables, if one was opened."""
        if self._xr is not None:
            self._xr.close()


def _create_outputs(dst: Any, src: Any, source: _Source, plan: BlockPlan,
                    attrs: dict[str, dict], global_attrs: dict[str, Any]) -> list[Any]:
    """Dimensions, coordinates, the empty output layers and the attributes of the target."""
    for d, n in zip(source.dims, source.shape):
        dst.createDimension(d, n)
        if d in src.variables:
            cv = src.variables[d]
            cv.set_auto_maskandscale(False)
            # as xarray writes coordinates: float ones get a NaN _FillValue
            fill = cv.dtype.type(np.nan) if cv.dtype.kind == "f" else None
            out = dst.createVariable(d, cv.dtype, (d,), fill_value=fill)
            out[:] = cv[:]
            out.setncatts({a: cv.getncattr(a) for a in cv.ncattrs() if a != "_FillValue"})
    outs = []
    for spec in plan.layers():
        dtype = np.dtype(spec.dtype)
        var = dst.createVariable(spec.name, dtype, source.dims, fill_value=dtype.type(spec.fill))
        var.set_auto_maskandscale(False)
        var.setncatts({k: (int(v) if isinstance(v, bool) else v)
                       for k, v in attrs[spec.name].items()})
        outs.append(var)
    dst.setncatts({k: (int(v) if isinstance(v, bool) else v) for k, v in global_attrs.items()})
    return outs


def project_file(
    model: Any,
    source: str | os.PathLike,
    target: str | os.PathLike,
    *,
    variables: Sequence[str],
    reference: pd.DataFrame | xr.Dataset | ReferenceSet,
    threshold: float,
    clamp: bool = False,
    metrics: Sequence[type[NoveltyMetric] | NoveltyMetric] | None = None,
    budget_mb: float = DEFAULT_CHUNK_BUDGET_MB,
    threads: int | None = None,
) -> Path:
    """Transfer the slice in NetCDF file `source` into NetCDF file `target`, row block by block.

    Parameters
    ----------
    model : estimator
        Fitted classifier with ``predict_proba`` (see :func:`~timeslice.transfer.project`).
    source : path
        Prepared slice: 2-D predictors on one (lat, lon) grid, optionally ``land`` (0/1).
    target : path
        Output NetCDF file, written atomically (a killed run leaves no partial file).
    variables : sequence of str
        Predictors, as fitted.
    reference : pandas.DataFrame or xarray.Dataset
        Background sample within the calibration area (reference of the metrics and clamping).
    threshold : float
        Suitability in [0, 1] at or above which a cell counts as suitable.
    clamp : bool
        Clamp predictors to the calibration range; adds ``clamp_effect``.
    metrics : sequence, optional
        Novelty metrics (default: every registered one).
    budget_mb : float
        Working-memory budget per row block, MB.
    threads : int, optional
        Blocks computed at once (default :func:`~timeslice.transfer.blocks.row_threads`).

    Returns
    -------
    pathlib.Path
        `target`, holding the layers of :func:`~timeslice.transfer.project_slice` with the same
        values and attributes.
    """
    import netCDF4

    source, target = Path(source), Path(target)
    threshold = check_threshold(threshold)
    variables = [str(v) for v in variables]
    ref = reference_table(reference, variables=variables)
    plan = build_plan(model, ref, variables, threshold=threshold, clamp=clamp, metrics=metrics)
    lock = threading.Lock()
    try:
        src = netCDF4.Dataset(source)
    except OSError as err:
        raise InputFileError(f"{source}: cannot be opened as NetCDF ({err}); give a prepared "
                             "slice file") from err
    with src, atomic_path(target) as tmp:
        reader = _Source(src, source, variables)
        with netCDF4.Dataset(tmp, "w") as dst:
            dst.set_fill_off()  # every cell is written: no pre-fill pass (30 % of the writes)
            outs = _create_outputs(
                dst, src, reader, plan, layer_attributes(plan, ref, clamp=clamp),
                slice_attributes({a: src.getncattr(a) for a in src.ncattrs()}, ref, model,
                                 variables=variables, threshold=threshold, clamp=clamp),
            )

            def write(r0: int, r1: int, layers: list[np.ndarray]) -> None:
                for var, layer in zip(outs, layers):
                    var[r0:r1] = layer

            ny, nx = reader.shape
            run_row_blocks(ny, rows_per_block(nx, len(variables), budget_mb), reader.read,
                           write, plan, threads=threads or row_threads(), io_lock=lock)
        reader.close()
    return target
