"""What was done to every input: the harmonise input table."""

from __future__ import annotations

import json
from collections.abc import Iterable, Mapping

import pandas as pd
import xarray as xr

__all__ = ["INPUT_TABLE_COLUMNS", "input_table"]

INPUT_TABLE_COLUMNS = (
    "slice", "role", "files", "variables", "grid", "resolution", "lon_range", "lat_range",
    "units", "calendar", "time_axis", "period", "converted", "regridded", "downscaled",
    "masked",
)


def _json(value, default):
    if value is None:
        return default
    if isinstance(value, (list, dict)):
        return value
    try:
        return json.loads(value)
    except (TypeError, ValueError):
        return default


def _fmt_range(r) -> str:
    return f"{r[0]:g}..{r[1]:g}" if isinstance(r, (list, tuple)) and len(r) == 2 else ""


def input_table(
    inputs: Iterable[Mapping],
    *,
    prepared: Mapping[str, xr.Dataset] | None = None,
) -> pd.DataFrame:
    """One row per input: its source grid, units, calendar, period and what was done to it.

    Parameters
    ----------
    inputs : iterable of mappings
        Each with ``slice`` (label), ``role`` (e.g. ``fine_baseline``, ``model_baseline``,
        ``model_slice``, ``elevation``, ``ice``) and ``data`` (a Dataset returned by
        :func:`timeslice.readers.open_climate`).
    prepared : mapping, optional
        Slice label -> prepared slice (:func:`timeslice.harmonise.prepare_slice`); its
        ``harmonise_log`` fills the regridded / downscaled / masked columns.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`INPUT_TABLE_COLUMNS`.
    """
    rows = []
    for item in inputs:
        ds = item["data"]
        info = _json(ds.attrs.get("source_info"), {})
        log = _json(ds.attrs.get("harmonise_log"), [])
        label = str(item.get("slice", ""))
        role = str(item.get("role", ""))
        plog = []
        if prepared and label in prepared:
            plog = _json(prepared[label].attrs.get("harmonise_log"), [])
        own = [x for x in plog if not x.startswith(("model slice:", "model baseline:"))]
        regridded = [x for x in own if "regrid" in x or "bilinear" in x]
        if role in ("model_slice", "model_baseline"):
            down = [x for x in own if x.startswith(("delta", "tasmin > tasmax"))]
        elif role == "fine_baseline":
            down = ["target grid (no downscaling)"] + [
                x for x in own if x.startswith("observed baseline")]
        else:
            down = []
        masked = [x for x in own if x.startswith("land =") or "filled" in x] if role in (
            "fine_baseline", "elevation", "ice") else []
        if prepared and label in prepared and role in ("elevation", "ice"):
            a = prepared[label].attrs
            masked.append(
                "land {:.0f} km2, ice {:.0f} km2, exposed shelf {:.0f} km2".format(
                    a.get("land_km2", float("nan")), a.get("ice_km2", float("nan")),
                    a.get("exposed_shelf_km2", float("nan")))
            )
        units = info.get("units", {})
        rows.append({
            "slice": label,
            "role": role,
            "files": "; ".join(info.get("files", _json(ds.attrs.get("source_files"), []))),
            "variables": ", ".join(f"{k}<-{v}" for k, v in info.get("variables", {}).items()),
            "grid": info.get("grid", ""),
            "resolution": info.get("resolution", ""),
            "lon_range": _fmt_range(info.get("lon_range")),
            "lat_range": _fmt_range(info.get("lat_range")),
            "units": ", ".join(f"{k}: {v}" for k, v in units.items()),
            "calendar": ", ".join(info.get("calendar") or []) or "none",
            "time_axis": ", ".join(info["time"]) if isinstance(info.get("time"), list)
            else str(info.get("time", "")),
            "period": info.get("period") or "",
            "converted": "; ".join(log) or "nothing (already canonical)",
            "regridded": "; ".join(regridded) or "no",
            "downscaled": "; ".join(down) or "no",
            "masked": "; ".join(masked) or "no",
        })
    return pd.DataFrame(rows, columns=list(INPUT_TABLE_COLUMNS))
