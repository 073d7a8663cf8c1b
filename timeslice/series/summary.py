"""One call that summarises a stacked series: change maps, stability, refugia, movement and the
per-slice table; plus the movement table per chain.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Literal

import numpy as np
import pandas as pd
import xarray as xr

from timeslice import layers
from timeslice.errors import DataError
from timeslice.grid import cell_area
from timeslice.series._checks import (
    check_label,
    check_labels,
    check_stack,
    drop_nondim,
    is_suitable,
    slice_labels,
    suitable_mask,
)
from timeslice.series.change import change_map, novel_mask
from timeslice.series.dispersal import ASSUMPTIONS, reachable
from timeslice.series.stability import (
    dynamic_stability,
    geometric_mean,
    minimum_suitability,
    refugium,
    select_window,
    stability,
    static_stability,
)
from timeslice.series.stacking import chains as find_chains
from timeslice.series.table import change_table

__all__ = ["DERIVED_VARIABLES", "movement_table", "summarise"]

#: Variables (and coords) that :func:`summarise` adds; dropped from the input first, so a
#: finished series can be summarised again with other options.
DERIVED_VARIABLES = (
    "change", "stability_all_slices", "refugium_all_slices", "refugium_all_slices_analog",
    "static_stability",
    "geometric_mean_suitability", "minimum_suitability", "refugium_window",
    "refugium_window_analog", "stability_window", "stability_chain", "refugium_chain", "refugium_analog_chain",
    "static_stability_chain", "dynamic_stability_chain", "reachable_none",
    "reachable_limited", "reachable_unlimited", "chain_slices", "chain",
)

ChainSpec = Mapping[str, Sequence[str]] | Literal["auto"] | None


def _resolve_chains(stack: xr.Dataset, chains: ChainSpec, reference: str) -> dict[str, list[str]]:
    if chains is None:
        return {}
    if isinstance(chains, str):
        if chains != "auto":
            raise DataError(f"`chains` must be 'auto' or a mapping of name to slice labels, "
                            f"got {chains!r}")
        return find_chains(stack, reference=reference)
    return {str(k): check_labels(stack, v, what=f"chains[{k!r}]") for k, v in chains.items()}


def _start_cells(stack: xr.Dataset, labels: list[str], reference: str) -> xr.DataArray:
    """Start of a chain: the reference's suitable cells inside the calibration area for a
    forward (future) chain; every suitable cell of the oldest slice for a paleo chain."""
    first = stack["suitable"].sel(slice=labels[0])
    start = is_suitable(first)
    if labels[0] == reference and "calibration_area" in stack.data_vars:
        start = start & stack["calibration_area"].astype(bool)
    return drop_nondim(start)


def _chain_movement(stack, labels, reference, *, rate, distance_km, through, neighbours):
    sub = stack["suitable"].sel(slice=labels)
    start = _start_cells(stack, labels, reference)
    out = {}
    for a in ASSUMPTIONS:
        if a == "limited" and rate is None and distance_km is None:
            continue
        out[a] = reachable(sub, start, assumption=a,
                           rate=rate if a == "limited" else None,
                           distance_km=distance_km if a == "limited" else None,
                           through=through, neighbours=neighbours)
    return out


def movement_table(
    stack: xr.Dataset,
    *,
    reference: str = "baseline",
    chains: ChainSpec = "auto",
    rate: str | None = None,
    distance_km: float | None = None,
    through: Literal["land", "suitable", "any"] = "land",
    neighbours: Literal[8, 16] = 8,
) -> pd.DataFrame:
    """Suitable and reachable area under each movement assumption, per chain and slice.

    Parameters
    ----------
    stack : xarray.Dataset
        Stacked series with ``suitable`` (and ``calibration_area`` for the start cells).
    reference : str, default "baseline"
        Label of the reference slice.
    chains : "auto" or mapping of str to list of str
        Time-ordered chains of slices (see :func:`summarise`).
    rate : str, optional
        Spread rate with units for limited movement.
    distance_km : float, optional
        Step distance instead of `rate`.
    through : {"land", "suitable", "any"}, default "land"
        Cells a path may enter (see :func:`timeslice.series.dispersal.reachable`).
    neighbours : {8, 16}, default 8
        Neighbours of a cell in the movement graph.

    Returns
    -------
    pandas.DataFrame
        Columns ``chain, slice, year, model, scenario``, then for each assumption ``a`` in
        none, limited (when a rate or distance is given), unlimited: ``a_area_km2``,
        ``a_gain_km2``, ``a_loss_km2`` (against the chain's first slice under the same
        assumption), and ``suitable_area_km2``.

    Notes
    -----
    See :func:`timeslice.series.dispersal.reachable`. Future chains start from the reference
    slice's suitable cells inside ``calibration_area``; paleo chains from every suitable cell of
    the oldest slice. Reached area is a hypothesis about movement, not occupancy.
    """
    check_stack(stack)
    check_label(stack, reference)
    chain_map = _resolve_chains(stack, chains, reference)
    if not chain_map:
        raise DataError("no chains to follow: the stack has only the reference slice")
    area = cell_area(stack).values
    rows = []
    for name, labels in chain_map.items():
        mv = _chain_movement(stack, labels, reference, rate=rate, distance_km=distance_km,
                             through=through, neighbours=neighbours)
        suit = stack["suitable"].sel(slice=labels).transpose("slice", "lat", "lon").values
        for t, lab in enumerate(labels):
            sl = stack.sel(slice=lab)
            row = {"chain": name, "slice": lab,
                   "year": float(sl["year"]) if "year" in sl.coords else np.nan,
                   "model": str(sl["model"].values) if "model" in sl.coords else "",
                   "scenario": str(sl["scenario"].values) if "scenario" in sl.coords else "",
                   "suitable_area_km2": float(area[suitable_mask(suit[t])].sum())}
            for a, layer in mv.items():
                occ = layer.values == 1
                row[f"{a}_area_km2"] = float(area[occ[t]].sum())
                row[f"{a}_gain_km2"] = float(area[occ[t] & ~occ[0]].sum())
                row[f"{a}_loss_km2"] = float(area[~occ[t] & occ[0]].sum())
            rows.append(row)
    return pd.DataFrame(rows)


def summarise(
    stack: xr.Dataset,
    *,
    reference: str = "baseline",
    chains: ChainSpec = None,
    detail: bool = False,
    window=None,
    rate: str | None = None,
    distance_km: float | None = None,
    through: Literal["land", "suitable", "any"] = "land",
    neighbours: Literal[8, 16] = 8,
) -> tuple[xr.Dataset, pd.DataFrame]:
    """Add change, stability, refugium (and movement) layers to a stacked series; build its table.

    Parameters
    ----------
    stack : xarray.Dataset
        Stacked series (``suitable(slice, lat, lon)``; optionally ``suitability``, ``mess``,
        ``nt1``, ``nt2``, ``elevation``, ``calibration_area``).
    reference : str, default "baseline"
        Label of the reference slice for gain/loss/stable.
    chains : "auto", mapping of str to list of str, or None
        Time-ordered chains of slices; ``"auto"`` builds one per (model, scenario) with
        :func:`timeslice.series.stacking.chains`. Each chain adds a layer along a ``chain``
        dim: ``stability_chain``, ``refugium_chain`` (and ``refugium_analog_chain``,
        ``static_stability_chain``, ``dynamic_stability_chain`` where the inputs allow).
    detail : bool, default False
        Add :data:`timeslice.series.table.DETAIL_COLUMNS` to the table.
    window : None, list of slice labels, or (year_min, year_max)
        Adds ``refugium_window`` (and ``refugium_window_analog``) over these slices.
    rate, distance_km : optional
        Spread rate with units (``"500 km/kyr"``) or a distance per step; adds limited
        movement and dynamic stability. Movement layers (none, unlimited always once chains
        are given) are ``reachable_<assumption>(slice, lat, lon)``; at the reference slice they
        hold the start of the forward chains.
    through, neighbours
        Passed to :func:`timeslice.series.dispersal.reachable`.

    Returns
    -------
    (xarray.Dataset, pandas.DataFrame)
        The stack with the added layers (lazy where the input is, except movement, which is
        computed), and the per-slice table of :func:`~timeslice.series.table.change_table`,
        plus ``chain`` and per assumption ``<a>_area_km2``, ``<a>_gain_km2``,
        ``<a>_loss_km2`` (against the chain's start) when movement is computed.

    Raises
    ------
    timeslice.errors.DataError
        Unknown `reference` label (the message lists the labels), unknown labels in `chains`
        or `window`.
    """
    check_stack(stack)
    stack = stack.drop_vars([v for v in DERIVED_VARIABLES if v in stack.variables])
    iref = check_label(stack, reference)
    suitable = stack["suitable"]
    ref = suitable.isel(slice=iref)
    out = stack.copy()
    out["change"] = change_map(suitable, ref)
    out["change"].attrs["reference_slice"] = str(reference)
    # layers are named by their window: every slice of the series (past and future together),
    # or the chosen refugium window (by default the past slices and the reference)
    out["stability_all_slices"] = _named(stability(suitable), "stability_all_slices")
    out["refugium_all_slices"] = _named(refugium(suitable), "refugium_all_slices")
    has_novelty = any(v in stack.data_vars for v in ("mess", "nt1", "nt2"))
    analog = ~novel_mask(stack) if has_novelty else None
    if analog is not None:
        out["refugium_all_slices_analog"] = _named(refugium(suitable, analog=analog),
                                                   "refugium_all_slices_analog")
    if "suitability" in stack.data_vars:
        s = stack["suitability"]
        out["static_stability"] = drop_nondim(static_stability(s))
        out["geometric_mean_suitability"] = drop_nondim(geometric_mean(s))
        out["minimum_suitability"] = drop_nondim(minimum_suitability(s))
    if window is not None:
        _add_window_layers(out, suitable, window, analog)

    moving = rate is not None or distance_km is not None
    chain_map = _resolve_chains(stack, "auto" if (moving and chains is None) else chains,
                                reference)
    if chain_map:
        _add_chain_layers(out, stack, chain_map, analog, rate=rate, distance_km=distance_km)
    table = change_table(stack, reference=reference, detail=detail)
    if chain_map and moving:
        _add_movement(out, table, stack, chain_map, reference, rate=rate,
                      distance_km=distance_km, through=through, neighbours=neighbours)
    history = out.attrs.get("history", "")
    line = f"timeslice.series.summarise: change against '{reference}', stability, refugia"
    if moving:
        line += f", movement ({rate or f'{distance_km} km per step'})"
    out.attrs["history"] = f"{history}\n{line}".strip()
    return out, table


def _add_window_layers(out: xr.Dataset, suitable: xr.DataArray, window, analog) -> None:
    """``refugium_window``, ``stability_window`` (and ``refugium_window_analog``), their
    long_names naming the window's slices."""
    window_ref = refugium(suitable, window=window)
    names = window_ref.attrs.get("slices", "")
    out["refugium_window"] = layers.stamp(
        drop_nondim(window_ref), "refugium_window", long_name=(
            "climatic refugium over the refugium window (suitable in every one of its "
            f"slices: {names})"))
    window_stab = drop_nondim(stability(select_window(suitable, window)))
    window_stab.attrs["slices"] = names
    out["stability_window"] = layers.stamp(
        window_stab, "stability_window",
        long_name=f"fraction of the refugium window's slices suitable ({names})")
    if analog is not None:
        out["refugium_window_analog"] = layers.stamp(
            drop_nondim(refugium(suitable, window=window, analog=analog)),
            "refugium_window_analog",
            long_name=f"climatic refugium over the refugium window, in analog climate ({names})")


def _named(da: xr.DataArray, name: str) -> xr.DataArray:
    """A series-wide layer under its window name, with the table's words for that window."""
    out = drop_nondim(da)
    out.name = name
    return layers.stamp(out, description=layers.spec(name).description or None)


def _add_chain_layers(out, stack, chain_map, analog, *, rate, distance_km) -> None:
    names = list(chain_map)
    layers: dict[str, list] = {}
    for name in names:
        labels = chain_map[name]
        sub = stack["suitable"].sel(slice=labels)
        layers.setdefault("stability_chain", []).append(drop_nondim(stability(sub)))
        layers.setdefault("refugium_chain", []).append(drop_nondim(refugium(sub)))
        if analog is not None:
            layers.setdefault("refugium_analog_chain", []).append(
                drop_nondim(refugium(sub, analog=analog.sel(slice=labels))))
        if "suitability" in stack.data_vars:
            s = stack["suitability"].sel(slice=labels)
            layers.setdefault("static_stability_chain", []).append(
                drop_nondim(static_stability(s)))
            if rate is not None or distance_km is not None:
                layers.setdefault("dynamic_stability_chain", []).append(
                    drop_nondim(dynamic_stability(s, rate=rate, distance_km=distance_km)))
    chain_coord = xr.DataArray(names, dims="chain", name="chain")
    for var, items in layers.items():
        attrs = dict(items[0].attrs)
        attrs.pop("slices", None)
        attrs.pop("step_distance_km", None)  # differs between chains
        da = xr.concat(items, dim=chain_coord)
        da.attrs = attrs
        da.attrs["description"] = (attrs.get("description", "") +
                                   "; per chain of slices (see the chain_slices coordinate)")
        out[var] = da
    out.coords["chain_slices"] = ("chain", [" ".join(chain_map[n]) for n in names])


def _add_movement(out, table, stack, chain_map, reference, *, rate, distance_km, through,
                  neighbours) -> None:
    labels = slice_labels(stack)
    ns, ny, nx = stack["suitable"].transpose("slice", "lat", "lon").shape
    area = cell_area(stack).values
    layer_arrays: dict[str, np.ndarray] = {}
    chain_of = {lab: "" for lab in labels}
    stats: dict[str, dict[str, float]] = {lab: {} for lab in labels}
    attrs = {}
    for name, chain in chain_map.items():
        mv = _chain_movement(stack, chain, reference, rate=rate, distance_km=distance_km,
                             through=through, neighbours=neighbours)
        forward = chain[0] == reference
        for a, layer in mv.items():
            arr = layer_arrays.setdefault(a, np.full((ns, ny, nx), -1, dtype=np.int8))
            attrs[a] = layer.attrs
            vals = layer.transpose("slice", "lat", "lon").values
            occ = vals == 1
            for t, lab in enumerate(chain):
                if lab == reference and not forward:
                    continue  # the reference row shows the forward start
                i = labels.index(lab)
                arr[i] = vals[t]
                chain_of[lab] = name if lab != reference else "start"
                stats[lab][f"{a}_area_km2"] = float(area[occ[t]].sum())
                stats[lab][f"{a}_gain_km2"] = float(area[occ[t] & ~occ[0]].sum())
                stats[lab][f"{a}_loss_km2"] = float(area[~occ[t] & occ[0]].sum())
    dims = ("slice", "lat", "lon")
    for a, arr in layer_arrays.items():
        da = xr.DataArray(arr, dims=dims, coords={d: stack[d] for d in dims})
        a_attrs = dict(attrs[a])
        a_attrs.pop("step_distance_km", None)
        a_attrs["description"] += ("; each slice from its own chain (future chains start at the "
                                   "reference's suitable cells in the calibration area, paleo "
                                   "chains at every suitable cell of the oldest slice)")
        da.attrs = a_attrs
        out[f"reachable_{a}"] = da.transpose(*stack["suitable"].dims)
    table["chain"] = [chain_of[lab] for lab in table["slice"]]
    for a in layer_arrays:
        for k in ("area", "gain", "loss"):
            col = f"{a}_{k}_km2"
            table[col] = [stats[lab].get(col, np.nan) for lab in table["slice"]]
