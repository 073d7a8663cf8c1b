"""Build a stacked series from per-slice Datasets, refusing slices on different grids."""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import xarray as xr

from timeslice.errors import DataError
from timeslice.series._checks import SLICE_META

__all__ = ["check_same_grid", "chains", "stack_slices"]


def _label(ds: xr.Dataset, i: int) -> str:
    return str(ds.attrs.get("slice_label", f"#{i}"))


def check_same_grid(slices: Sequence[xr.Dataset | xr.DataArray], *, atol: float = 1e-6) -> None:
    """All `slices` must share one (lat, lon) grid; DataError naming the first mismatch.

    Parameters
    ----------
    slices : sequence of xarray.Dataset or xarray.DataArray
        The slices of a series.
    atol : float, default 1e-6
        Tolerance on the coordinates, degrees.

    Returns
    -------
    None
        Raises :class:`~timeslice.errors.DataError` on the first mismatch.
    """
    if not slices:
        raise DataError("no slices given; a series needs at least one slice")
    first = slices[0]
    for i, ds in enumerate(slices):
        for c in ("lat", "lon"):
            if c not in ds.coords:
                raise DataError(f"slice {_label(ds, i)!r} has no {c!r} coordinate; "
                                "harmonise it onto the common grid first")
        for c in ("lat", "lon"):
            a = np.asarray(first[c].values, float)
            b = np.asarray(ds[c].values, float)
            if a.shape != b.shape or not np.allclose(a, b, rtol=0, atol=atol):
                raise DataError(
                    f"slice {_label(ds, i)!r} is on a different grid from "
                    f"{_label(first, 0)!r} ({c}: {b.size} points {b[:1].tolist()}.. vs "
                    f"{a.size} points {a[:1].tolist()}..); regrid every slice of a chain onto "
                    "one grid"
                )


def stack_slices(
    slices: Sequence[xr.Dataset],
    *,
    variables: Sequence[str] | None = None,
    static: Mapping[str, xr.DataArray] | None = None,
) -> xr.Dataset:
    """Concatenate per-slice Datasets along a new ``slice`` dimension.

    Parameters
    ----------
    slices : sequence of xarray.Dataset
        One Dataset per slice on the same grid, with attrs ``slice_label``, ``year``,
        ``period``, ``model``, ``scenario``; the first is the reference (baseline).
    variables : sequence of str, optional
        Per-slice variables to stack (default: every data variable of the first slice with
        dims (lat, lon)).
    static : mapping, optional
        Layers without a slice dim to add (``land``, ``elevation``, ``calibration_area``).

    Returns
    -------
    xarray.Dataset
        The stacked series, coords ``slice`` and on it ``year``, ``period``, ``model``,
        ``scenario``.
    """
    slices = list(slices)
    check_same_grid(slices)
    if variables is None:
        variables = [v for v in slices[0].data_vars
                     if set(slices[0][v].dims) == {"lat", "lon"}]
    for i, ds in enumerate(slices):
        miss = [v for v in variables if v not in ds.data_vars]
        if miss:
            raise DataError(f"slice {_label(ds, i)!r} lacks variable(s) {miss}; every slice "
                            "of a series needs the same variables")
    labels = [_label(ds, i) for i, ds in enumerate(slices)]
    if len(set(labels)) != len(labels):
        raise DataError(f"slice labels are not unique: {labels}")
    grid = {"lat": slices[0]["lat"], "lon": slices[0]["lon"]}
    parts = [ds[list(variables)].assign_coords(grid) for ds in slices]
    out = xr.concat(parts, dim="slice", coords="minimal", compat="override",
                    combine_attrs="drop_conflicts", join="override")
    meta = {}
    for key in SLICE_META:
        vals = [ds.attrs.get(key) for ds in slices]
        if key == "year":
            meta[key] = ("slice", np.asarray([np.nan if v is None else float(v) for v in vals]))
        else:
            meta[key] = ("slice", ["" if v is None else str(v) for v in vals])
    out = out.assign_coords(slice=("slice", labels), **meta)
    for name, layer in (static or {}).items():
        out[name] = layer.assign_coords(grid) if "lat" in layer.dims else layer
    for k in ("slice_label", "year", "period", "model", "scenario", "harmonise_log"):
        out.attrs.pop(k, None)
    return out


def chains(stack: xr.Dataset, *, reference: str = "baseline") -> dict[str, list[str]]:
    """Time-ordered chains of slice labels, one per (model, scenario).

    A future chain is the reference followed by the model's slices of that scenario in time
    order (name ``"<model> <scenario>"``); a paleo chain (scenario ``"past"``) runs from the
    oldest slice forward and ends with the reference.

    Parameters
    ----------
    stack : xarray.Dataset
        Stacked series with ``year``, ``model`` and ``scenario`` slice coordinates.
    reference : str, default "baseline"
        Label of the reference slice.

    Returns
    -------
    dict of str to list of str
        Chain name to its slice labels, in time order.
    """
    from timeslice.series._checks import check_label, check_stack, slice_labels

    check_stack(stack)
    iref = check_label(stack, reference)
    labels = slice_labels(stack)
    n = len(labels)
    years = (np.asarray(stack["year"].values, float) if "year" in stack.coords
             else np.arange(n, dtype=float))
    model = (np.asarray(stack["model"].values).astype(str) if "model" in stack.coords
             else np.array([""] * n))
    scen = (np.asarray(stack["scenario"].values).astype(str) if "scenario" in stack.coords
            else np.array([""] * n))
    groups: dict[tuple[str, str], list[int]] = {}
    for i in range(n):
        if i != iref:
            groups.setdefault((model[i], scen[i]), []).append(i)
    out = {}
    for (m, s), idx in groups.items():
        idx = sorted(idx, key=lambda i: years[i])
        name = f"{m} {s}".strip()
        if s == "past":
            out[name] = [labels[i] for i in idx] + [labels[iref]]
        else:
            out[name] = [labels[iref]] + [labels[i] for i in idx]
    return out
