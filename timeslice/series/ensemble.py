"""Ensembles across climate models (and algorithms): agreement, consensus, spread, and the
partitioning of suitability variance among sources by factorial ANOVA.
"""

from __future__ import annotations

import itertools
from collections.abc import Sequence

import numpy as np
import pandas as pd
import xarray as xr

from timeslice import layers
from timeslice.errors import DataError
from timeslice.grid import cell_area
from timeslice.series._checks import check_dataarray, check_stack, suitable_mask, valid_mask

__all__ = [
    "agreement",
    "agreement_table",
    "factorial",
    "partition",
    "partition_table",
]


def _groups(stack: xr.Dataset, by: Sequence[str], exclude_models: Sequence[str]):
    for key in by:
        if key not in stack.coords:
            raise DataError(
                f"the stack has no slice coordinate {key!r} to group models by; "
                f"add it or choose `by` among {sorted(map(str, stack.coords))}"
            )
    model = (np.asarray(stack["model"].values).astype(str) if "model" in stack.coords
             else np.array([""] * stack.sizes["slice"]))
    keys = list(zip(*[np.asarray(stack[k].values).astype(str) for k in by]))
    groups: dict[tuple, list[int]] = {}
    for i, k in enumerate(keys):
        if model[i] in exclude_models:
            continue
        groups.setdefault(k, []).append(i)
    return groups, model


def agreement(
    stack: xr.Dataset,
    *,
    by: Sequence[str] = ("scenario", "period"),
    exclude_models: Sequence[str] = ("observed",),
) -> xr.Dataset:
    """Per scenario and period, how far the climate models agree.

    Parameters
    ----------
    stack : xarray.Dataset
        Stacked series with ``suitable`` (and ``suitability`` for mean/SD) and slice coords
        ``model`` plus those in `by`.
    by : sequence of str, default ("scenario", "period")
        Slice coordinates that define a group; the slices of a group are its models.
    exclude_models : sequence of str, default ("observed",)
        Models left out (the observed baseline is not a climate model).

    Returns
    -------
    xarray.Dataset
        Dims ``(group, lat, lon)``, coords ``group`` (label "scenario period"), the `by`
        coords, ``n_models``, ``models``, ``year`` (mean of the group):

        * ``agreement`` [1]: fraction of models (among those where the cell is land) in which
          the cell is suitable; NaN where land in none;
        * ``consensus`` int8: 1 where more than half of those models say suitable (a tie is
          not a majority), 0 otherwise, -1 not land in any;
        * ``suitability_mean``, ``suitability_sd`` [1]: across models, SD with divisor n
          (the spread of the members; common practice for ensemble spread).
    """
    check_stack(stack)
    groups, model = _groups(stack, by, exclude_models)
    if not groups:
        raise DataError("no slices left to form model groups (all excluded); check `by`, "
                        "`exclude_models` and the stack's `model` coordinate")
    suit = stack["suitable"].transpose("slice", "lat", "lon")
    s_np = np.asarray(suit.values)
    has_cont = "suitability" in stack.data_vars
    c_np = (np.asarray(stack["suitability"].transpose("slice", "lat", "lon").values, dtype=float)
            if has_cont else None)
    ag, cons, mean, sd = [], [], [], []
    for idx in groups.values():
        s = s_np[idx]
        n_land = valid_mask(s).sum(axis=0)
        n_suit = suitable_mask(s).sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = np.where(n_land > 0, n_suit / np.maximum(n_land, 1), np.nan)
        ag.append(frac.astype(np.float32))
        cons.append(np.where(n_land > 0, (2 * n_suit > n_land).astype(np.int8), np.int8(-1)))
        if has_cont:
            c = c_np[idx]
            fin = np.isfinite(c)
            cnt = fin.sum(axis=0)
            c0 = np.where(fin, c, 0.0)
            with np.errstate(invalid="ignore", divide="ignore"):
                m = np.where(cnt > 0, c0.sum(axis=0) / cnt, np.nan)
                var = np.where(fin, (c0 - m) ** 2, 0.0).sum(axis=0) / cnt
                v = np.where(cnt > 0, np.sqrt(var), np.nan)
            mean.append(m.astype(np.float32))
            sd.append(v.astype(np.float32))
    keys = list(groups)
    labels = [" ".join(k) for k in keys]
    coords = {
        "group": ("group", labels),
        **{b: ("group", [k[j] for k in keys]) for j, b in enumerate(by)},
        "n_models": ("group", np.array([len(v) for v in groups.values()], dtype=np.int32)),
        "models": ("group", [" ".join(model[v]) for v in groups.values()]),
        "lat": stack["lat"],
        "lon": stack["lon"],
    }
    if "year" in stack.coords:
        years = np.asarray(stack["year"].values, dtype=float)
        coords["year"] = ("group", [float(np.mean(years[v])) for v in groups.values()])
    dims = ("group", "lat", "lon")
    out = xr.Dataset(coords=coords)
    out["agreement"] = (dims, np.stack(ag))
    layers.stamp(out, "agreement",
                 description="among models where the cell is land; NaN where land in none")
    out["consensus"] = (dims, np.stack(cons))
    layers.stamp(out, "consensus", description="1 where more than half of the models (with "
                 "land) say suitable; a tie is not a majority")
    if has_cont:
        out["suitability_mean"] = (dims, np.stack(mean))
        layers.stamp(out, "suitability_mean",
                     description="arithmetic mean over the models of the group with a value")
        out["suitability_sd"] = (dims, np.stack(sd))
        layers.stamp(out, "suitability_sd",
                     description="divisor n (spread of the ensemble members)")
    out.attrs["history"] = f"timeslice.series.ensemble.agreement over {list(by)}"
    return out


def agreement_table(agree: xr.Dataset) -> pd.DataFrame:
    """Area summary of :func:`agreement`: per group, the area where all / a majority / none of
    the models say suitable, in km², and the number of models.

    Parameters
    ----------
    agree : xarray.Dataset
        Output of :func:`agreement`.

    Returns
    -------
    pandas.DataFrame
        One row per group: the areas (km2) where all, a majority and none of the models say
        suitable, and the number of models.
    """
    if not isinstance(agree, xr.Dataset) or "agreement" not in agree:
        raise DataError("`agree` must be the Dataset returned by ensemble.agreement")
    area = cell_area(agree).values
    rows = []
    for g in range(agree.sizes["group"]):
        a = np.asarray(agree["agreement"].isel(group=g).values, dtype=float)
        c = np.asarray(agree["consensus"].isel(group=g).values)
        row = {k: agree[k].values[g].item() for k in agree["group"].coords
               if agree[k].dims == ("group",)}
        row.update(
            all_models_km2=float(area[a == 1].sum()),
            majority_km2=float(area[c == 1].sum()),
            any_model_km2=float(area[a > 0].sum()),
            no_model_km2=float(area[a == 0].sum()),
        )
        rows.append(row)
    return pd.DataFrame(rows)


def factorial(
    stack: xr.Dataset,
    *,
    factors: Sequence[str] = ("model", "scenario"),
    variable: str = "suitability",
    select: dict | None = None,
) -> xr.DataArray:
    """Rearrange slices into a balanced factorial array with one dim per factor.

    Parameters
    ----------
    stack : xarray.Dataset
        Stacked series; factors that are slice coordinates (``model``, ``scenario``) become
        dims; a factor that already is a dim (e.g. ``algorithm``) is kept.
    factors : sequence of str
    variable : str, default "suitability"
    select : dict, optional
        Slice-coordinate values to keep first, e.g. ``{"period": "2081-2100"}``.

    Returns
    -------
    xarray.DataArray
        ``variable`` with dims ``(*factors, lat, lon)``.

    Raises
    ------
    DataError
        A factor combination is missing or repeated (the design must be balanced), or an
        unknown factor.
    """
    check_stack(stack, required=(variable,))
    da = stack[variable]
    if select:
        keep = np.ones(stack.sizes["slice"], dtype=bool)
        for k, v in select.items():
            if k not in stack.coords:
                raise DataError(f"`select` key {k!r} is not a slice coordinate")
            keep &= np.asarray(stack[k].values).astype(str) == str(v)
        if not keep.any():
            raise DataError(f"`select` {select} matches no slice")
        da = da.isel(slice=np.flatnonzero(keep))
    slice_factors = [f for f in factors if f not in da.dims]
    for f in slice_factors:
        if f not in da.coords or da[f].dims != ("slice",):
            raise DataError(
                f"ensemble factor {f!r} is neither a dim nor a slice coordinate of "
                f"{variable!r}; use dims/coords among {sorted(map(str, da.coords))}"
            )
    if not slice_factors:
        return da.transpose(*factors, ...)
    keys = list(zip(*[np.asarray(da[f].values).astype(str) for f in slice_factors]))
    levels = [list(dict.fromkeys(k[j] for k in keys)) for j in range(len(slice_factors))]
    seen = {}
    for i, k in enumerate(keys):
        if k in seen:
            raise DataError(f"factor combination {dict(zip(slice_factors, k))} appears twice; "
                            "select one period (`select`) so each combination is one slice")
        seen[k] = i
    missing = [c for c in itertools.product(*levels) if c not in seen]
    if missing:
        raise DataError(
            f"unbalanced design: missing {len(missing)} factor combination(s), e.g. "
            f"{dict(zip(slice_factors, missing[0]))}; every combination needs one slice"
        )
    shape = [len(lv) for lv in levels]
    order = [seen[c] for c in itertools.product(*levels)]
    sub = da.isel(slice=order)
    sub = sub.drop_vars([c for c in sub.coords if "slice" in sub[c].dims])
    other = [d for d in sub.dims if d != "slice"]
    arr = sub.transpose("slice", *other).values.reshape(*shape, *[sub.sizes[d] for d in other])
    coords = {f: lv for f, lv in zip(slice_factors, levels)}
    coords.update({d: sub[d] for d in other if d in sub.coords})
    out = xr.DataArray(arr, dims=(*slice_factors, *other), coords=coords, name=variable,
                       attrs=dict(da.attrs))
    return out.transpose(*factors, ...)


def _anova_kernel(y: np.ndarray, k: int) -> tuple[list[tuple[int, ...]], np.ndarray, np.ndarray]:
    """Sums of squares of every effect of a k-way factorial with one observation per cell.

    `y` has the k factor axes first, then one flattened axis of cells. Returns the effects
    (tuples of factor axes), their SS (n_effects, cells) and SS_total (cells).
    """
    axes = tuple(range(k))
    grand = y.mean(axis=axes, keepdims=True)
    total = ((y - grand) ** 2).sum(axis=axes)
    marg: dict[tuple[int, ...], np.ndarray] = {}
    for r in range(k + 1):
        for s in itertools.combinations(axes, r):
            other = tuple(a for a in axes if a not in s)
            marg[s] = y.mean(axis=other, keepdims=True) if other else y
    effects = [s for r in range(1, k + 1) for s in itertools.combinations(axes, r)]
    ss = np.empty((len(effects), y.shape[-1]))
    for n, s in enumerate(effects):
        # Moebius inversion of the marginal means: the effect of s free of its sub-effects
        eff = np.zeros_like(marg[s])
        for r in range(len(s) + 1):
            for t in itertools.combinations(s, r):
                eff = eff + (-1) ** (len(s) - r) * marg[t]
        ss[n] = (np.broadcast_to(eff, y.shape) ** 2).sum(axis=axes)
    return effects, ss, total


def partition(
    suitability: xr.DataArray,
    *,
    factors: Sequence[str] = ("algorithm", "model", "scenario"),
) -> xr.Dataset:
    """Share of suitability variance due to each factor and interaction, per cell.

    Parameters
    ----------
    suitability : xarray.DataArray
        Balanced factorial design: one dim per factor (see :func:`factorial`), plus the cell
        dims (``lat``, ``lon``); one value per combination (no replication).
    factors : sequence of str, default ("algorithm", "model", "scenario")
        At least two factors, each with at least two levels.

    Returns
    -------
    xarray.Dataset
        ``share(source, lat, lon)`` [1] with sources the main effects and interactions
        (``"model:scenario"``...), the highest-order interaction last (the residual);
        ``ss_total(lat, lon)``; ``dominant(lat, lon)`` int8 index of the largest share (CF
        flags); NaN where any combination is NaN or the total is 0.

    Notes
    -----
    Two-, three- or k-way ANOVA with one observation per combination. With marginal means
    :math:`\\bar y_T` over the factors not in :math:`T`, the effect of a set of factors
    :math:`S` is :math:`e_S = \\sum_{T \\subseteq S} (-1)^{|S|-|T|} \\bar y_T` and

    .. math:: SS_S = \\sum_{\\text{all combinations}} e_S^2, \\qquad
              SS_{total} = \\sum (y - \\bar y)^2 = \\sum_S SS_S,
              \\qquad \\text{share}_S = SS_S / SS_{total}.

    Without replication the highest-order interaction is the residual (Diniz-Filho et al.
    2009, Ecography 32:897-906, from memory; Montgomery, D. C. Design and Analysis of
    Experiments, section on one observation per cell, from memory).
    """
    check_dataarray(suitability, name="suitability", dims=())
    factors = list(factors)
    if len(factors) < 2:
        raise DataError(f"`factors` needs at least two factors, got {factors}")
    for f in factors:
        if f not in suitability.dims:
            raise DataError(
                f"ensemble factor {f!r} is not a dim of `suitability` (dims "
                f"{list(suitability.dims)}); build the design with ensemble.factorial"
            )
        if suitability.sizes[f] < 2:
            lv = suitability[f].values.tolist() if f in suitability.coords else []
            raise DataError(
                f"ensemble factor {f!r} has a single level {lv}; partitioning needs at least "
                f"2 levels of each factor: add {f}s or drop {f!r} from `factors`"
            )
    cells = [d for d in suitability.dims if d not in factors]
    da = suitability.transpose(*factors, *cells)
    shape_cells = [da.sizes[d] for d in cells]
    y = np.asarray(da.values, dtype=float).reshape(*[da.sizes[f] for f in factors], -1)
    bad = ~np.isfinite(y).all(axis=tuple(range(len(factors))))
    y = np.where(np.isfinite(y), y, 0.0)
    effects, ss, total = _anova_kernel(y, len(factors))
    with np.errstate(invalid="ignore", divide="ignore"):
        share = ss / total
    dead = bad | ~(total > 1e-15)
    share[:, dead] = np.nan
    total = np.where(bad, np.nan, total)
    names = [":".join(factors[a] for a in s) for s in effects]
    ok = ~dead
    dominant = np.full(share.shape[1], -1, dtype=np.int8)
    if ok.any():
        dominant[ok] = np.argmax(share[:, ok], axis=0).astype(np.int8)
    coords = {d: da[d] for d in cells if d in da.coords}
    out = xr.Dataset(coords={"source": ("source", names), **coords})
    # `share` is written as `variance_share` (timeslice.series.analysis): its table entry
    out["share"] = (("source", *cells), share.reshape(len(names), *shape_cells).astype(np.float32))
    out["share"] = layers.stamp(out["share"], "variance_share", description=(
        f"SS_source / SS_total of a factorial ANOVA without replication over "
        f"{' x '.join(factors)}; the last source is the highest-order interaction (the "
        "residual)"))
    out["ss_total"] = (tuple(cells), total.reshape(shape_cells).astype(np.float32))
    layers.stamp(out, "ss_total",
                 description="sum over all factor combinations of (y - mean)^2")
    out["dominant"] = (tuple(cells), dominant.reshape(shape_cells), {
        "flag_values": np.arange(-1, len(names), dtype=np.int8),
        "flag_meanings": " ".join(["undefined"] + [n.replace(":", "_x_") for n in names]),
    })
    layers.stamp(out, "dominant",
                 description="index into the source coordinate; -1 where shares are undefined")
    out.attrs["factors"] = " ".join(factors)
    out.attrs["residual_source"] = names[-1]
    out.attrs["levels"] = "; ".join(
        f"{f}: {', '.join(map(str, da[f].values))}" if f in da.coords else f"{f}: {da.sizes[f]}"
        for f in factors)
    out.attrs["history"] = "timeslice.series.ensemble.partition"
    return out


def partition_table(parts: xr.Dataset, *, mask: xr.DataArray | None = None) -> pd.DataFrame:
    """Area-weighted mean share of each source over the cells where it is defined.

    Parameters
    ----------
    parts : xarray.Dataset
        Output of :func:`partition` for one period.
    mask : xarray.DataArray of bool, optional
        Cells to include (default every cell with defined shares).

    Returns
    -------
    pandas.DataFrame
        Columns ``source, mean_share, median_share, dominant_area_km2``; ``mean_share`` sums
        to 1 over sources.
    """
    if not isinstance(parts, xr.Dataset) or "share" not in parts:
        raise DataError("`parts` must be the Dataset returned by ensemble.partition")
    share = parts["share"].transpose("source", "lat", "lon").values.astype(float)
    w = cell_area(parts).values
    ok = np.isfinite(share).all(axis=0)
    if mask is not None:
        ok &= np.asarray(mask.values).astype(bool)
    rows = []
    dom = parts["dominant"].values
    for i, name in enumerate(parts["source"].values):
        s = share[i][ok]
        ww = w[ok]
        rows.append({
            "source": str(name),
            "mean_share": float((s * ww).sum() / ww.sum()) if ww.sum() > 0 else np.nan,
            "median_share": float(np.median(s)) if s.size else np.nan,
            "dominant_area_km2": float(w[(dom == i) & ok].sum()),
        })
    return pd.DataFrame(rows)
