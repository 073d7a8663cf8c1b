"""Physical plausibility of climate fields after unit conversion.

A field that converts without error can still be wrong by a unit or a scale: Kelvin labelled
degC (+273), an integer-coded layer without its 0.1 scale (x10), a scale meant for another file
(Kelvin / 10 = -246 degC), precipitation in mm per month labelled as a flux (x 2.6 million).
Each of those gives a finished run with wrong numbers, so every harmonised input is checked here
and a failure stops the run with one line naming the file, the variable, the offending value and
the likely cause.

The limits are deliberately wide, far outside any observed climatology or climate-model
output, so that they catch unit and scale mistakes and never a real climate:

- monthly mean temperatures in [-90, 60] degC: the lowest measured air temperature is
  -89.2 degC (Vostok, 21 July 1983) and the highest monthly means are near 40 degC (WMO
  Weather and Climate Extremes Archive; values from memory);
- monthly precipitation in [0, 5000] mm: the wettest calendar month on record is 9,300 mm
  (Cherrapunji, July 1861), and climatological monthly means stay well below 4,000 mm (WMO
  archive; from memory);
- tasmin <= tasmax + 0.5 degC (rounding and interpolation; common practice);
- change factors: a temperature change of more than 50 K in any cell-month, or a domain-mean
  change of more than 30 K, exceeds any climate-model change (glacial cooling is about 4-7 K in
  the global mean and reaches about 25-30 K over the ice sheets; the strongest
  end-of-century warming is about 15-20 K in Arctic winters in high-emission scenarios; IPCC
  AR6 WG1 ch. 4 and 7, from memory); a domain-mean precipitation ratio outside 1/10..10 is a
  unit mismatch between a model slice and its baseline (for example mm per day against mm per
  month gives about 30).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import xarray as xr

from timeslice.errors import DataError

__all__ = [
    "MAX_CELL_TEMPERATURE_CHANGE",
    "MAX_MEAN_TEMPERATURE_CHANGE",
    "MAX_PR_RATIO",
    "PR_RANGE",
    "TASMIN_TASMAX_TOLERANCE",
    "TEMPERATURE_RANGE",
    "check_change",
    "check_fields",
]

#: Plausible monthly mean near-surface air temperature, degC (see module notes).
TEMPERATURE_RANGE = (-90.0, 60.0)
#: Plausible monthly precipitation total, mm month-1 (see module notes).
PR_RANGE = (0.0, 5000.0)
#: tasmin may exceed tasmax by this much (rounding, interpolation), degC.
TASMIN_TASMAX_TOLERANCE = 0.5
#: Largest plausible temperature change in one cell-month between a model slice and its
#: baseline, K.
MAX_CELL_TEMPERATURE_CHANGE = 50.0
#: Largest plausible change of the domain-mean temperature of one month, K.
MAX_MEAN_TEMPERATURE_CHANGE = 30.0
#: Largest plausible ratio (and 1/ratio) of domain-mean monthly precipitation.
MAX_PR_RATIO = 10.0
#: Elevation relative to sea level, m: deeper than the deepest trench or higher than the
#: highest summit is a unit error (Challenger Deep ~10,935 m, Everest 8,849 m; from memory).
ELEVATION_RANGE = (-11500.0, 9000.0)

_TEMPERATURE = ("tasmin", "tasmax", "tas")


def _part_rows(da: xr.DataArray) -> int | None:
    """Latitude rows per part: the dask chunk (read once), else ~2**18 cells; None: no split."""
    if "lat" not in da.dims:
        return None
    if da.chunks is not None:
        return int(da.chunksizes["lat"][0])
    nlon = da.sizes.get("lon", 1)
    return max(1, 2**18 // max(1, nlon))


def _parts(da: xr.DataArray):
    """`da` one step of its leading dimension and one block of rows at a time (a block of one
    month of a fine baseline, not the whole 12-month stack), so the check holds a bounded
    piece in memory, whatever the grid size."""
    rows = _part_rows(da)
    lead = [{}] if da.ndim < 3 else [{da.dims[0]: i} for i in range(da.sizes[da.dims[0]])]
    for sel in lead:
        if rows is None or rows >= da.sizes["lat"]:
            yield sel, da.isel(sel) if sel else da
            continue
        for r0 in range(0, da.sizes["lat"], rows):
            part_sel = {**sel, "lat": slice(r0, min(r0 + rows, da.sizes["lat"]))}
            yield part_sel, da.isel(part_sel)


def _extremes(da: xr.DataArray) -> tuple[float, float]:
    lo, hi = np.inf, -np.inf
    for _, part in _parts(da):
        lo, hi = _fold(lo, hi, np.asarray(part.values, dtype=float))
    if not np.isfinite(lo):
        return float("nan"), float("nan")
    return lo, hi


def _fold(lo: float, hi: float, values: np.ndarray) -> tuple[float, float]:
    if np.isfinite(values).any():
        return min(lo, float(np.nanmin(values))), max(hi, float(np.nanmax(values)))
    return lo, hi


def _where(da: xr.DataArray, value: float) -> str:
    """' at lat .., lon .. (month m)' of the first cell holding `value`."""
    pos = None
    for sel, part in _parts(da):
        hit = np.argwhere(np.asarray(part.values, dtype=float) == value)
        if hit.size:
            pos = {d: int(i) for d, i in sel.items() if not isinstance(i, slice)}
            for d, k in zip(part.dims, hit[0]):
                offset = sel[d].start if isinstance(sel.get(d), slice) else 0
                pos[d] = int(k) + offset
            break
    if pos is None:
        return ""
    parts = []
    if "lat" in pos:
        parts.append(f"lat {float(da['lat'][pos['lat']]):.2f}")
    if "lon" in pos:
        parts.append(f"lon {float(da['lon'][pos['lon']]):.2f}")
    if "month" in pos and "month" in da.coords:
        parts.append(f"month {int(da['month'][pos['month']])}")
    elif "month" in da.coords and da["month"].ndim == 0:  # one month of a stack
        parts.append(f"month {int(da['month'])}")
    return f" at {', '.join(parts)}" if parts else ""


def _scan_temperatures(ds: xr.Dataset):
    """Extremes of every temperature and the largest tasmin - tasmax excess, in one read of
    each variable: ({name: (lo, hi)}, (largest excess, cell-months over the tolerance))."""
    names = [n for n in _TEMPERATURE if n in ds]
    paired = ("tasmin" in ds and "tasmax" in ds and ds["tasmin"].shape == ds["tasmax"].shape
              and set(ds["tasmin"].dims) == set(ds["tasmax"].dims))
    ext = {n: (np.inf, -np.inf) for n in names}
    hi_diff, n_over = -np.inf, 0
    if paired:
        tmax = ds["tasmax"].transpose(*ds["tasmin"].dims)
        for sel, part in _parts(ds["tasmin"]):
            a = np.asarray(part.values)
            b = np.asarray(tmax.isel(sel).values)
            ext["tasmin"] = _fold(*ext["tasmin"], np.asarray(a, dtype=float))
            ext["tasmax"] = _fold(*ext["tasmax"], np.asarray(b, dtype=float))
            d = a - b  # in the stored precision, as the difference of the two DataArrays
            if np.isfinite(d).any():
                hi_diff = max(hi_diff, float(np.nanmax(d)))
            n_over += int((d > TASMIN_TASMAX_TOLERANCE).sum())
    for n in names:
        if not paired or n not in ("tasmin", "tasmax"):
            ext[n] = _extremes(ds[n])
    ext = {n: (lo, hi) if np.isfinite(lo) else (float("nan"), float("nan"))
           for n, (lo, hi) in ext.items()}
    return ext, (hi_diff, n_over) if paired else None


def _label(da: xr.DataArray, name: str, source: str) -> str:
    src = da.attrs.get("source_file") or source
    var = da.attrs.get("source_variable", name)
    shown = f"{name!r}" if var == name else f"{name!r} (file variable {var!r})"
    return f"{src}: {shown}"


def _units_text(da: xr.DataArray) -> str:
    units = da.attrs.get("source_units") or da.attrs.get("units") or "?"
    declared = " (declared in the config)" if da.attrs.get("units_declared") else ""
    return f"{units!r}{declared}"


def _temperature_cause(lo: float, hi: float, da: xr.DataArray) -> str:
    scale = float(da.attrs.get("scale_applied", 1.0))
    if lo <= -999.0 or hi >= 9999.0:
        return ("a missing-value code (e.g. -9999) that the file does not declare: set "
                "_FillValue/nodata in the file or mask it before reading")
    if scale != 1.0 and lo < -200.0:
        return (f"the declared scale {scale:g} was applied to values already in physical units "
                "(a scale meant for another file?): give `scale` only for the input it "
                "describes")
    if lo > 150.0 and hi < 350.0:
        return (f"the values look like Kelvin but the units say {_units_text(da)}: set "
                "units = \"K\" for this input")
    if 60.0 < hi < 140.0 and lo > -80.0:
        return (f"the values look like degrees Fahrenheit but the units say {_units_text(da)}: "
                "set units = \"degF\" for this input")
    if hi >= 140.0 and lo > -900.0:
        return ("the values look ten times too large (integer-coded degC x 10?): declare "
                "scale = 0.1 for this variable of this input")
    if hi < -200.0:
        return "the values were converted from Kelvin twice: the units say K but they are degC"
    if lo > -900.0 and hi < 60.0 and lo < -150.0:
        return ("the values look ten times too large (integer-coded degC x 10?): declare "
                "scale = 0.1 for this variable of this input")
    return "check the units and scale declared for this input"


def _pr_cause(lo: float, hi: float, da: xr.DataArray) -> str:
    units = str(da.attrs.get("source_units") or da.attrs.get("units") or "")
    per_second = any(t in units.replace(" ", "") for t in ("s-1", "/s", "s^-1"))
    if hi > PR_RANGE[1] and per_second:
        return (f"the units say {_units_text(da)} (a rate per second) but the values look like "
                "totals per month or day: set units = \"mm month-1\" (or \"mm day-1\") for this "
                "input")
    if hi > PR_RANGE[1] and "day" in units:
        return (f"the units say {_units_text(da)} but the values look like monthly totals: set "
                "units = \"mm month-1\"")
    if hi > PR_RANGE[1] * 1.5 and float(da.attrs.get("scale_applied", 1.0)) == 1.0:
        return ("the values look too large (integer-coded mm x 10, or the wrong units?): "
                "declare `scale` or `units` for this input")
    return "check the units and scale declared for this input"


def _check_pr(da: xr.DataArray, source: str) -> None:
    lo, hi = _extremes(da)
    if np.isfinite(hi) and hi > PR_RANGE[1]:
        raise DataError(
            f"{_label(da, 'pr', source)}: {hi:.4g} mm month-1 after conversion"
            f"{_where(da, hi)} is above the plausible {PR_RANGE[1]:g} mm for one month; "
            f"likely cause: {_pr_cause(lo, hi, da)}"
        )
    if np.isfinite(hi) and 0.0 < hi < 0.01 and da.size > 12:
        raise DataError(
            f"{_label(da, 'pr', source)}: the wettest cell-month has only {hi:.3g} mm after "
            f"conversion from {_units_text(da)}; likely cause: the values are a flux (kg "
            "m-2 s-1) labelled as a total: set units = \"kg m-2 s-1\" for this input"
        )


def check_fields(ds: xr.Dataset, *, source: str) -> None:
    """Stop with one line if a converted field is physically implausible.

    Parameters
    ----------
    ds : xarray.Dataset
        Canonical variables after unit conversion (degC, mm month-1, m).
    source : str
        File named in the message when a variable carries no ``source_file`` attribute.

    Returns
    -------
    None

    Raises
    ------
    DataError
        Naming the file, the variable, the offending value (and where it is) and the likely
        cause.
    """
    ext, paired = _scan_temperatures(ds)
    finite = [e for e in ext.values() if np.isfinite(e[0])]
    # the likely cause is judged on all temperatures of the input together (tasmin of an
    # integer-coded file may be all negative, tasmax all positive)
    all_lo = min((e[0] for e in finite), default=np.nan)
    all_hi = max((e[1] for e in finite), default=np.nan)
    for name, (lo, hi) in ext.items():
        if not np.isfinite(lo):
            continue
        da = ds[name]
        if lo < TEMPERATURE_RANGE[0] or hi > TEMPERATURE_RANGE[1]:
            bad = lo if lo < TEMPERATURE_RANGE[0] else hi
            raise DataError(
                f"{_label(da, name, source)}: {bad:.4g} degC after conversion{_where(da, bad)} "
                f"is outside the plausible {TEMPERATURE_RANGE[0]:g}..{TEMPERATURE_RANGE[1]:g} "
                f"degC for a monthly mean; likely cause: "
                f"{_temperature_cause(all_lo, all_hi, da)}"
            )
    if "pr" in ds:
        _check_pr(ds["pr"], source)
    if paired is not None:
        hi, n = paired
        if np.isfinite(hi) and hi > TASMIN_TASMAX_TOLERANCE:
            diff = ds["tasmin"] - ds["tasmax"]
            raise DataError(
                f"{_label(ds['tasmin'], 'tasmin', source)}: tasmin exceeds tasmax by up to "
                f"{hi:.3g} degC in {n} cell-months{_where(diff, hi)}; likely cause: the two "
                "variables are swapped (check `aliases`) or come from different files, units "
                "or scales"
            )
    if "elevation" in ds:
        da = ds["elevation"]
        lo, hi = _extremes(da)
        if np.isfinite(lo) and (lo < ELEVATION_RANGE[0] or hi > ELEVATION_RANGE[1]):
            bad = lo if lo < ELEVATION_RANGE[0] else hi
            raise DataError(
                f"{_label(da, 'elevation', source)}: {bad:.6g} m{_where(da, bad)} is outside "
                f"the plausible {ELEVATION_RANGE[0]:g}..{ELEVATION_RANGE[1]:g} m; likely cause: "
                "the units (feet or km?) or an undeclared missing-value code"
            )


def check_change(
    slice_ds: xr.Dataset,
    baseline_ds: xr.Dataset,
    *,
    slice_source: str,
    baseline_source: str,
) -> None:
    """Stop if a model slice differs from its own baseline by more than any model could.

    Both are on the model's grid, after unit conversion. Temperature changes are slice minus
    baseline; precipitation is compared as the ratio of domain means (per month).

    Parameters
    ----------
    slice_ds, baseline_ds : xarray.Dataset
        Canonical monthly fields of a model slice and of that model's baseline run.
    slice_source, baseline_source : str
        Their files, named in messages.

    Returns
    -------
    None

    Raises
    ------
    DataError
        When a change exceeds what any climate model gives (a unit or scale mismatch).
    """
    if not _same_grid(slice_ds, baseline_ds):
        return  # different grids are regridded later; the absolute checks still apply
    weights = np.cos(np.deg2rad(slice_ds["lat"]))
    for name in _TEMPERATURE:
        if name not in slice_ds or name not in baseline_ds:
            continue
        d = slice_ds[name] - baseline_ds[name]
        lo, hi = _extremes(d)
        if not np.isfinite(lo):
            continue
        worst = hi if abs(hi) >= abs(lo) else lo
        mean = d.weighted(weights).mean(("lat", "lon"))
        mlo, mhi = _extremes(mean)
        mworst = mhi if abs(mhi) >= abs(mlo) else mlo
        if abs(worst) > MAX_CELL_TEMPERATURE_CHANGE or abs(mworst) > MAX_MEAN_TEMPERATURE_CHANGE:
            raise DataError(
                f"{slice_source}: {name!r} differs from the model baseline "
                f"{baseline_source} by {worst:+.4g} K{_where(d, worst)} (domain mean up to "
                f"{mworst:+.3g} K), more than any climate-model change; likely cause: the slice "
                "and its baseline have different units or scales (declare `units`/`scale` for "
                "each input it applies to)"
            )
    if "pr" in slice_ds and "pr" in baseline_ds:
        a = slice_ds["pr"].weighted(weights).mean(("lat", "lon"))
        b = baseline_ds["pr"].weighted(weights).mean(("lat", "lon"))
        total_a, total_b = float(a.sum()), float(b.sum())
        if total_a > 0 and total_b > 0:
            ratio = total_a / total_b
            if ratio > MAX_PR_RATIO or ratio < 1.0 / MAX_PR_RATIO:
                raise DataError(
                    f"{slice_source}: annual domain-mean precipitation is {ratio:.3g} times that "
                    f"of the model baseline {baseline_source}, beyond any climate-model change; "
                    "likely cause: different precipitation units (e.g. mm day-1 against mm "
                    "month-1) in the slice and its baseline"
                )


def _same_grid(a: xr.Dataset, b: xr.Dataset) -> bool:
    return (
        a.sizes.get("lat") == b.sizes.get("lat") and a.sizes.get("lon") == b.sizes.get("lon")
        and np.allclose(a["lat"].values, b["lat"].values, atol=1e-4)
        and np.allclose(a["lon"].values, b["lon"].values, atol=1e-4)
    )


def describe_scale(scale: Mapping[str, float] | float | None) -> str:
    """Short text of a declared scale (for logs)."""
    if scale is None:
        return "none"
    if isinstance(scale, Mapping):
        return ", ".join(f"{k} x {v:g}" for k, v in scale.items()) or "none"
    return f"x {float(scale):g}"
