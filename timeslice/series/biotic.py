"""Biotic limits as data: a required partner and a competitor, per slice.

The abiotically suitable area over-predicts where biotic interactions bite. Given rasters of a
required partner (host plant, pollinator, mutualist: the species is possible only where the
partner is present) and of a competitor or excluder (suitability removed, or reduced, where it
is present), this module derives the biotically constrained layers and their area, change and
refugia. The abiotic layers are never modified: the constrained ones sit beside them, so a
reader sees how much of the range the biotic limits remove.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from timeslice.errors import DataError
from timeslice.layers import stamp

__all__ = ["biotic_layers", "biotic_table"]


def _present(layer: xr.DataArray | None, threshold: float, like: xr.DataArray) -> xr.DataArray | None:
    if layer is None:
        return None
    if set(layer.dims) - {"slice", "lat", "lon"}:
        raise DataError(f"biotic layer {layer.name!r} has dims {layer.dims}; expected (slice,) "
                        "lat, lon")
    present = (layer >= threshold).where(layer.notnull(), False)
    return present.broadcast_like(like).astype(bool)


def biotic_layers(
    stack: xr.Dataset,
    *,
    partner: xr.DataArray | None = None,
    competitor: xr.DataArray | None = None,
    partner_threshold: float = 0.5,
    competitor_threshold: float = 0.5,
    competitor_effect: str | float = "exclude",
    threshold: float | None = None,
) -> xr.Dataset:
    """Biotically constrained suitability layers beside the abiotic ones.

    Parameters
    ----------
    stack : xarray.Dataset
        Stacked series with ``suitable(slice, lat, lon)`` (-1 not land, 0, 1) and, for a
        reducing competitor, ``suitability``.
    partner, competitor : xarray.DataArray, optional
        Presence (0/1) or suitability (0..1) of the partner and the competitor on the grid,
        ``(slice, lat, lon)`` or one ``(lat, lon)`` map for every slice.
    partner_threshold, competitor_threshold : float
        Value at and above which the partner / competitor counts as present.
    competitor_effect : "exclude" or float in [0, 1)
        ``"exclude"``: not suitable where the competitor is present. A number: suitability
        multiplied by it there, then thresholded again with `threshold` (the model's).
    threshold : float, optional
        The model's suitability threshold; needed for a numeric `competitor_effect`.

    Returns
    -------
    xarray.Dataset
        ``suitable_biotic`` (same coding as ``suitable``), ``partner_present`` and
        ``competitor_present`` where given, and ``suitability_biotic`` for a numeric effect.
    """
    if partner is None and competitor is None:
        raise DataError("biotic: give a partner or a competitor layer")
    suitable = stack["suitable"]
    land = suitable >= 0
    keep = suitable == 1
    out = xr.Dataset()
    p = _present(partner, partner_threshold, suitable)
    if p is not None:
        keep = keep & p
        out["partner_present"] = p.where(land, False)
        out["partner_present"].attrs = {"threshold": float(partner_threshold)}
        stamp(out, "partner_present")
    c = _present(competitor, competitor_threshold, suitable)
    if c is not None:
        out["competitor_present"] = c.where(land, False)
        out["competitor_present"].attrs = {"threshold": float(competitor_threshold)}
        stamp(out, "competitor_present")
        if competitor_effect == "exclude":
            keep = keep & ~c
        else:
            f = float(competitor_effect)
            if not 0.0 <= f < 1.0:
                raise DataError(f"biotic.competitor_effect must be 'exclude' or a factor in "
                                f"[0, 1), got {competitor_effect!r}")
            if threshold is None or "suitability" not in stack:
                raise DataError("biotic: a reducing competitor needs the suitability layer and "
                                "the model's threshold")
            s = stack["suitability"].where(~c, stack["suitability"] * f)
            if p is not None:
                s = s.where(p, 0.0)
            out["suitability_biotic"] = s.where(land)
            out["suitability_biotic"].attrs = {}
            stamp(out, "suitability_biotic",
                  description=f"suitability x {f:g} where the competitor is present"
                  + ("; 0 where the partner is absent" if p is not None else ""))
            keep = (s >= float(threshold)) & land
    code = xr.where(land, keep.astype("int8"), np.int8(-1)).astype("int8")
    out["suitable_biotic"] = code
    out["suitable_biotic"].attrs = {}
    return stamp(out, "suitable_biotic", description="climatically suitable"
                 + (", where the required partner is present" if p is not None else "")
                 + (", not where the competitor is present"
                    if c is not None and competitor_effect == "exclude"
                    else ", competitor reducing suitability" if c is not None else "")
                 + "; the abiotic `suitable` layer is unchanged")


def biotic_table(stack: xr.Dataset, layers: xr.Dataset, *, reference: str,
                 window=None) -> tuple[pd.DataFrame, xr.DataArray | None]:
    """Per slice: abiotic and biotic suitable area, the share biotic limits remove, and the
    change against the reference under biotic limits; plus the biotic refugium over `window`.

    Parameters
    ----------
    stack : xarray.Dataset
        Stacked series with ``suitable``.
    layers : xarray.Dataset
        Output of :func:`biotic_layers` (``suitable_biotic``).
    reference : str
        Label of the reference slice.
    window : list of slice labels or (year_min, year_max), optional
        Refugium window for the biotic refugium.

    Returns
    -------
    (pandas.DataFrame, xarray.DataArray or None)
        The per-slice table (areas in km2) and ``refugium_window_biotic`` (None without
        `window`).
    """
    from timeslice.series.table import change_table
    from timeslice.series.stability import refugium

    abiotic = change_table(stack, reference=reference)
    biotic_stack = stack.assign(suitable=layers["suitable_biotic"])
    biotic = change_table(biotic_stack, reference=reference)
    t = pd.DataFrame({
        "slice": abiotic["slice"], "year": abiotic["year"], "model": abiotic["model"],
        "scenario": abiotic["scenario"],
        "suitable_area_km2": abiotic["suitable_area_km2"],
        "suitable_biotic_km2": biotic["suitable_area_km2"].to_numpy(),
    })
    with np.errstate(invalid="ignore", divide="ignore"):
        t["removed_by_biotic_share"] = 1.0 - t["suitable_biotic_km2"] / t[
            "suitable_area_km2"].where(t["suitable_area_km2"] > 0)
    for col in ("gain_km2", "loss_km2"):
        t[col.replace("_km2", "_biotic_km2")] = biotic[col].to_numpy()
    ref = None
    if window is not None:
        ref = refugium(layers["suitable_biotic"], window=window)
        ref.name = "refugium_window_biotic"
        stamp(ref, long_name="climatic refugium over the refugium window under biotic limits")
    return t, ref
