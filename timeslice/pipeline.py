"""Stage order of a run: harmonise -> fit -> transfer -> summarise -> report.

This is the only module that reads the :class:`~timeslice.config.Config`; every stage below it
takes explicit arguments. Each stage's output is cached under a content key
(:mod:`timeslice.cache`), so a rerun skips finished work and a killed run resumes.
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import re
import sys
import time
import warnings
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from timeslice import __version__
from timeslice.cache import StageCache, content_key, file_digest
from timeslice.config import Config, SliceSpec
from timeslice.errors import ConfigError, DataError, InputFileError, TimesliceError, TimesliceWarning

__all__ = ["RunResult", "fit_stage", "harmonise_stage", "run", "summarise_stage", "transfer_stage"]

Progress = Callable[[str, int, int], None]


def _quiet(_stage: str, _done: int, _total: int) -> None:
    return None


@dataclass
class RunResult:
    """What a run produced: output paths, the tables and the timings per stage."""

    out: Path
    paths: dict[str, Path] = field(default_factory=dict)
    summary: pd.DataFrame | None = None
    timings: dict[str, float] = field(default_factory=dict)
    cache_hits: list[str] = field(default_factory=list)
    cache_misses: list[str] = field(default_factory=list)
    #: the headline numbers (:func:`timeslice.series.key_results`), as in the report
    key_results: pd.DataFrame | None = None
    #: the fitted niche (:class:`timeslice.niche.workflow.NicheFit`)
    fit: Any = None
    #: the series results (:class:`timeslice.series.analysis.SeriesResult`)
    analysis: Any = None


@contextlib.contextmanager
def _timed(timings: dict[str, float], name: str) -> Iterator[None]:
    t0 = time.perf_counter()
    try:
        yield
    finally:
        timings[name] = round(time.perf_counter() - t0, 3)


# ----------------------------------------------------------------------------- harmonise


@contextlib.contextmanager
def _about(path: Path | str | None) -> Iterator[None]:
    """Prefix an error raised while working on `path` with the file name, if it lacks it."""
    try:
        yield
    except TimesliceError as err:
        name = str(path)
        if path is None or name in str(err) or Path(name).name in str(err):
            raise
        raise type(err)(f"{name}: {err}") from err


_YEARS = re.compile(r"\s*-?\d{1,5}\s*-\s*-?\d{1,5}\s*")


def _open(inp, c, *, files=None, period: str | None = None, require=None, role="monthly",
          model=None, key: str = "climate input"):
    """Open one climate input with its own aliases, units and scale factors.

    `inp` is a :class:`~timeslice.config.ClimateInput`; `files` its expanded file list (from
    :meth:`Config.input_files`, so the files read are those hashed). A period of the form
    'YYYY-YYYY' is passed on, so multi-year series are reduced to the climatology of those
    years (12-step climatologies ignore it).
    """
    from timeslice.readers import open_climate

    if files is None:
        files = inp.expand(key=key, role=role, model=model)
    kw: dict[str, Any] = inp.reader_options(c.aliases)
    if period is not None and _YEARS.fullmatch(period):
        kw["period"] = period
    return open_climate(files, require=require, **kw)


def _ice_field(ds: xr.Dataset) -> xr.DataArray:
    for name in ("ice", "sftgif", "ice_fraction"):
        if name in ds:
            return ds[name]
    names = list(ds.data_vars)
    if len(names) == 1:
        return ds[names[0]]
    raise DataError(f"ice file: no ice-fraction variable found among {names}; name it 'sftgif'")


def harmonise_stage(
    cfg: Config, cache: StageCache, *, progress: Progress = _quiet
) -> tuple[xr.Dataset, list[xr.Dataset], dict[str, pd.DataFrame]]:
    """Prepare the observed baseline and every configured slice on the common grid.

    Returns the prepared baseline, the prepared slices (config order) and two tables: `inputs`
    (one row per input file: grid, units, calendar, what was done) and `slice_land` (land,
    exposed shelf and ice areas per slice).
    """
    from timeslice.grid import continuous_lon, make_grid
    from timeslice.harmonise.interpolate import between
    from timeslice.harmonise.prepare import prepare_slice
    from timeslice.harmonise.regrid import regrid

    from timeslice.harmonise.plausibility import check_change
    from timeslice.readers.filesets import file_set_digest

    c = cfg.climate
    specs = cfg.slice_specs()
    monthly = c.baseline_kind == "monthly"
    files = cfg.input_files()
    fine = _open(c.baseline, c, files=files["climate.baseline"], period=c.baseline_period,
                 require=["tasmin", "tasmax", "pr"] if monthly else None)
    elev_ds = _open(c.elevation, c, files=files["climate.elevation"])
    elev = elev_ds["elevation"] if "elevation" in elev_ds else elev_ds[list(elev_ds.data_vars)[0]]
    if cfg.grid is not None:
        g = cfg.grid
        target = make_grid(
            lon_min=g.lon_min, lon_max=g.lon_max, lat_min=g.lat_min, lat_max=g.lat_max,
            resolution=g.resolution,
        )
        fine = regrid(fine, target)
        elev = regrid(elev, target)
    else:
        fine = continuous_lon(fine, source=str(c.baseline))  # a region across 180° as one axis
        elev = regrid(elev, fine) if elev.sizes != {k: fine.sizes[k] for k in ("lat", "lon")} else elev

    base_key = content_key(
        "baseline", file_set_digest(files["climate.baseline"]),
        file_set_digest(files["climate.elevation"]),
        cfg.grid.model_dump() if cfg.grid else None, c.model_dump(mode="json", exclude={"models"}),
    )
    common = dict(
        elevation=elev, ice_threshold=c.ice_threshold, regrid_method=c.regrid,
        pr_floor=c.pr_floor, ratio_quantile=c.ratio_quantile, lapse_rate=c.lapse_rate,
    )
    total = len(specs) + 1
    progress("harmonise", 0, total)
    baseline = cache.dataset(
        "harmonise",
        base_key,
        lambda: _with_inputs(prepare_slice(
            fine_baseline=fine if monthly else None, bio=None if monthly else fine,
            sea_level=c.present_sea_level, label=c.baseline_label, year=c.baseline_year,
            period=c.baseline_period, model="observed", scenario="baseline", **common,
        ), [("fine_baseline", fine), ("elevation", elev_ds)]),
    )
    progress("harmonise", 1, total)
    rows = [_input_row(c.baseline_label, "observed", "baseline",
                       _shown(files["climate.baseline"]), baseline)]
    model_baselines: dict[str, xr.Dataset] = {}
    slices: list[xr.Dataset] = []
    for i, spec in enumerate(specs):
        slice_files = spec.files()
        mb_files = files[f"climate.models.{spec.model}"]
        ice_files = (spec.ice.expand(key=f"slices[{spec.index}].ice", role="ice", model=spec.model)
                     if spec.ice else None)
        key = content_key(
            base_key, spec.model_dump(mode="json"), file_set_digest(slice_files),
            file_set_digest(mb_files), file_set_digest(ice_files) if ice_files else None,
        )

        def compute(spec: SliceSpec = spec, mb_files=mb_files, ice_files=ice_files) -> xr.Dataset:
            ice_ds = _open(spec.ice, c, files=ice_files) if spec.ice else None
            ice = _ice_field(ice_ds) if ice_ds is not None else None
            used = [("ice", ice_ds)] if ice_ds is not None else []
            meta = dict(label=spec.label, year=spec.year, period=spec.period, model=spec.model,
                        scenario=spec.scenario, sea_level=spec.sea_level, ice=ice)
            if spec.kind == "bioclim":
                with _about(spec.file):
                    bio = _open(spec.source, c, period=spec.period, role="bioclim",
                                key=f"slices[{spec.index}].file")
                    return _with_inputs(prepare_slice(fine_baseline=fine if monthly else None,
                                                      bio=bio, **meta, **common),
                                        [("bioclim_slice", bio), *used])
            if spec.model not in model_baselines:
                model_baselines[spec.model] = _open(
                    spec.model_baseline, c, files=mb_files, period=c.baseline_period,
                    require=["tasmin", "tasmax", "pr"])
            mb_name = _shown(mb_files)
            if spec.between:
                a, b = spec.between
                with _about(a.file):
                    raw_a = _open(a.source, c, period=a.period, key=f"slices[{a.index}].file")
                    raw_b = _open(b.source, c, period=b.period, key=f"slices[{b.index}].file")
                    check_change(raw_a, model_baselines[spec.model], slice_source=_shown(a.files()),
                                 baseline_source=mb_name)
                    check_change(raw_b, model_baselines[spec.model], slice_source=_shown(b.files()),
                                 baseline_source=mb_name)
                    raw = between(raw_a, raw_b, spec.year, year_a=a.year, year_b=b.year,
                                  sea_level_a=a.sea_level, sea_level_b=b.sea_level)
                src = f"{a.file.name} + {b.file.name}"
            else:
                with _about(spec.file):
                    raw = _open(spec.source, c, files=spec.files(), period=spec.period,
                                require=["tasmin", "tasmax", "pr"], key=f"slices[{spec.index}].file")
                    check_change(raw, model_baselines[spec.model], slice_source=_shown(spec.files()),
                                 baseline_source=mb_name)
                src = spec.file
            with _about(src):
                return _with_inputs(
                    prepare_slice(fine_baseline=fine, model_slice=raw,
                                  model_baseline=model_baselines[spec.model], **meta, **common),
                    [("model_slice", raw), ("model_baseline", model_baselines[spec.model]), *used])

        ds = cache.dataset("harmonise", key, compute)
        slices.append(ds)
        src = _shown(slice_files)
        rows.append(_input_row(spec.label, spec.model, spec.scenario, src, ds))
        progress("harmonise", i + 2, total)
    inputs = pd.concat([pd.read_json(io.StringIO(ds.attrs.get("input_rows", "[]")), orient="records")
                        for ds in [baseline, *slices]], ignore_index=True)
    return baseline, slices, {"inputs": inputs, "slice_land": pd.DataFrame(rows)}


def _shown(files) -> str:
    """A file list as shown in tables and messages: the one name, or the first and a count."""
    names = [Path(getattr(f, "path", f)).name for f in files]
    if not names:
        return ""
    return names[0] if len(names) == 1 else f"{names[0]} (+{len(names) - 1} files)"


def _with_inputs(ds: xr.Dataset, used: list[tuple[str, xr.Dataset]]) -> xr.Dataset:
    """Record the table of the inputs a prepared slice was built from (kept in the cache)."""
    from timeslice.harmonise.report import input_table

    label = str(ds.attrs["slice_label"])
    table = input_table([{"slice": label, "role": role, "data": data} for role, data in used],
                        prepared={label: ds})
    ds.attrs["input_rows"] = table.to_json(orient="records")
    return ds


def _input_row(label, model, scenario, path, ds: xr.Dataset) -> dict[str, Any]:
    from timeslice.grid import cell_area

    log = ds.attrs.get("harmonise_log", "[]")
    try:
        steps = "; ".join(json.loads(log)) if isinstance(log, str) else str(log)
    except json.JSONDecodeError:
        steps = str(log)
    # prepare_slice already measured land, ice and shelf (land_mask attrs); only the filled
    # cells are counted here
    return {
        "slice": label,
        "model": model,
        "scenario": scenario,
        "file": Path(path).name if not str(path).endswith("files)") else str(path),
        "sea_level_m": float(ds.attrs.get("sea_level", 0.0)),
        "land_km2": float(ds.attrs["land_km2"]),
        "steps": steps,
        "exposed_shelf_km2": float(ds.attrs["exposed_shelf_km2"]),
        "ice_km2": float(ds.attrs["ice_km2"]),
        "filled_km2": float(cell_area(ds).where(ds["filled"].astype(bool)).sum()),
    }


# ----------------------------------------------------------------------------- fit


def fit_stage(cfg: Config, baseline: xr.Dataset, cache: StageCache, *, base_key: str = ""):
    """Read, clean and thin the records and fit the niche on the prepared baseline."""
    from timeslice.niche.workflow import fit_niche
    from timeslice.readers import read_occurrences

    n = cfg.niche
    if n.model is not None:
        return _fitted_model(n.model, baseline), content_key("fit-file", file_digest(n.model))
    key = content_key(
        "fit", base_key, file_digest(cfg.species.occurrences), cfg.species.model_dump(mode="json"),
        n.model_dump(mode="json"), cfg.run.seed,
        [file_digest(f) for f in (n.calibration_mask, n.background_file) if f is not None],
    )

    def compute():
        records = read_occurrences(cfg.species.occurrences, columns=cfg.species.columns)
        sp = cfg.species
        with _about(cfg.species.occurrences):
            return fit_niche(
                records, baseline, variables=n.variables, algorithm=n.algorithm,
                algorithm_params=n.params or None, buffer_km=n.buffer_km,
                n_background=n.n_background, thin=n.thin, uncertainty_max_m=n.uncertainty_max_m,
                years=n.years, taxon=sp.taxon, taxon_field=sp.taxon_field,
                fold_subspecies=sp.fold_subspecies, keep_basis=n.keep_basis,
                drop_flags=n.drop_flags, centroid_min_records=n.centroid_min_records,
                centroid_min_uncertainty_m=n.centroid_min_uncertainty_m,
                screen_max_r=n.screen_max_r, screen_max_vif=n.screen_max_vif,
                priority=n.priority, cv_block_km=n.cv_block_km, cv_folds=n.cv_folds,
                cv_scheme=n.cv_scheme, calibration=n.calibration,
                calibration_mask=n.calibration_mask, background_file=n.background_file,
                min_records=n.min_records, importance_repeats=n.importance_repeats,
                threshold_rule=n.threshold, threshold_value=n.threshold_value, seed=cfg.run.seed,
            )

    return cache.obj("fit", key, compute), key


def _fitted_model(path: Path, baseline: xr.Dataset):
    """A model fitted earlier (`timeslice fit`), checked against this run's baseline: every
    predictor present, and in the same units (the baseline's values must overlap the model's
    calibration range, or the predictors were computed differently)."""
    from timeslice.niche.persist import load_model

    fit = load_model(path)
    missing = [v for v in fit.variables if v not in baseline]
    if missing:
        raise DataError(f"niche.model = {str(path)!r}: the model uses {missing}, which the "
                        "baseline does not have; refit the model on this baseline")
    for v in fit.variables:
        bg = fit.background[v].to_numpy(float)
        lo, hi = float(np.nanmin(bg)), float(np.nanmax(bg))
        here = baseline[v].where(baseline["land"].astype(bool)) if "land" in baseline else baseline[v]
        med = float(here.median())
        width = max(hi - lo, 1e-9)
        if not lo - width <= med <= hi + width:
            raise DataError(
                f"niche.model = {str(path)!r}: predictor {v!r} of this baseline (median "
                f"{med:.4g}) lies far outside the model's calibration range ({lo:.4g}..{hi:.4g}); "
                "the baseline's units or scale differ from the one the model was fitted on")
    return fit


# ----------------------------------------------------------------------------- transfer


def transfer_stage(
    cfg: Config, fit, slices: list[xr.Dataset], cache: StageCache, *, fit_key: str = "",
    progress: Progress = _quiet,
) -> xr.Dataset:
    """Project the fitted niche onto every prepared slice and stack the results."""
    from timeslice.transfer.project import project_slice

    import dask

    from timeslice.series.stacking import check_same_grid, stack_slices

    check_same_grid(slices)
    variables = list(fit.variables)
    reference = fit.background[variables]
    tc = cfg.transfer
    chunks = "auto" if tc.chunks == "auto" else {"lat": tc.chunks, "lon": tc.chunks}
    keys = [content_key("transfer", fit_key, _dataset_key(ds), tc.model_dump()) for ds in slices]
    results: list[xr.Dataset | None] = [cache.load("transfer", k) for k in keys]
    todo = [i for i, r in enumerate(results) if r is None]
    progress("transfer", len(slices) - len(todo), len(slices))
    # slices are independent: compute them in batches of one graph each, so the scheduler runs
    # them in parallel while each finished batch is cached before the next starts
    batch = tc.batch
    for start in range(0, len(todo), batch):
        idx = todo[start:start + batch]
        lazy = [
            project_slice(fit.model, slices[i], variables=variables, reference=reference,
                          threshold=fit.threshold, clamp=tc.clamp, chunks=chunks,
                          chunk_budget_mb=tc.chunk_budget_mb)
            for i in idx
        ]
        for i, res in zip(idx, dask.compute(*lazy, optimize_graph=False)):
            cache.store("transfer", keys[i], res)
            results[i] = res
        progress("transfer", len(slices) - len(todo) + start + len(idx), len(slices))
    meta = ("slice_label", "year", "period", "model", "scenario")
    parts = [
        res.assign(land=ds["land"].astype(bool), ice=ds["ice"].astype(bool))
        .assign_attrs({k: ds.attrs[k] for k in meta})
        for ds, res in zip(slices, results)
    ]
    stack = stack_slices(parts)
    stack = stack.assign_coords(
        sea_level=("slice", [float(ds.attrs.get("sea_level", 0.0)) for ds in slices]))
    stack["elevation"] = slices[0]["elevation"].astype("float32")
    stack["calibration_area"] = fit.calibration_area.astype(bool).reindex_like(
        stack["elevation"], method="nearest"
    )
    return stack


def _dataset_key(ds: xr.Dataset) -> str:
    import hashlib

    h = hashlib.sha256()
    for name in sorted(ds.data_vars):
        h.update(name.encode())
        h.update(np.ascontiguousarray(ds[name].values).tobytes())
    h.update(json.dumps({k: str(v) for k, v in sorted(ds.attrs.items())}).encode())
    return h.hexdigest()[:24]


# ----------------------------------------------------------------------------- summarise


def summarise_stage(cfg: Config, stack: xr.Dataset):
    """Change, stability, refugia, movement, ensembles and the hindcast across the series.

    Returns a :class:`timeslice.series.analysis.SeriesResult`.
    """
    from timeslice.readers import read_dated_records
    from timeslice.series.analysis import analyse_series

    ser = cfg.series
    records = None
    source = str(cfg.species.dated_records)
    if cfg.species.dated_records is not None:
        records = read_dated_records(cfg.species.dated_records)
    past = "scenario" in stack.coords and "past" in {str(x) for x in stack["scenario"].values}
    fossils = _dated_fossils(cfg) if past else None
    if fossils is not None and len(fossils):
        # fossil records of the taxon with ages, dropped from the calibration: hindcast material
        name = f"fossil records of {cfg.species.occurrences.name}"
        records = fossils if records is None else pd.concat([records, fossils], ignore_index=True)
        source = name if cfg.species.dated_records is None else f"{source} + {name}"
    window = ser.refugium_window
    if window is None:
        # default refugium window: the past slices and the reference (the glacial-to-present
        # question); with no past slices, every slice
        past = [str(p) for p, sc in zip(stack["period"].values, stack["scenario"].values)
                if str(sc) == "past"]
        window = list(dict.fromkeys(past)) + [_reference(cfg)] if past else None
    with _about(cfg.species.dated_records if records is not None else None):
        result = analyse_series(
            stack, reference=_reference(cfg), window=window, rate=ser.dispersal_rate,
            rate_key="series.dispersal_rate", through=ser.movement_through,
            neighbours=ser.graph_neighbours, factors=ser.partition_factors, records=records,
            records_source=source, max_offset_years=ser.hindcast_max_offset_years,
        )
    sites = None
    if cfg.species.diversity is not None:
        from timeslice.series.genetics import read_diversity_table, stability_vs_diversity

        with _about(cfg.species.diversity):
            sites = read_diversity_table(cfg.species.diversity,
                                         column=cfg.species.diversity_column)
            table = stability_vs_diversity(result.series, sites)
        result.tables["diversity"] = table
        result.tables["diversity_sites"] = table.attrs["sites"]
    if ser.hypotheses:
        from timeslice.series.hypotheses import compare_hypotheses

        table, layers = compare_hypotheses(stack, ser.hypotheses, records=records, sites=sites)
        result.tables["hypotheses"] = table
        result.series = result.series.assign(dict(layers.data_vars))
    if cfg.biotic.partner is not None or cfg.biotic.competitor is not None:
        _apply_biotic(cfg, stack, result, window=window)
    if ser.zones is not None:
        from timeslice.series.zonal import read_zones, zonal_table

        with _about(ser.zones):
            result.tables["zones"] = zonal_table(
                result.series, read_zones(ser.zones, name_field=ser.zones_name_field))
    return result


def _apply_biotic(cfg: Config, stack: xr.Dataset, result, *, window) -> None:
    """Partner/competitor layers per slice onto the grid; the biotically constrained layers,
    table and refugium join the series beside the abiotic ones (which stay unchanged)."""
    from timeslice.harmonise.regrid import regrid
    from timeslice.readers.layers import open_layer
    from timeslice.series.biotic import biotic_layers, biotic_table

    b = cfg.biotic
    labels = [str(x) for x in stack["slice"].values]
    layers: dict[str, xr.DataArray] = {}
    for role, per in b.files(labels).items():
        fields, opened = [], {}
        for lab in labels:
            path = per[lab]
            if path not in opened:
                with _about(path):
                    opened[path] = regrid(open_layer(path, what=f"biotic.{role}"), stack,
                                          source=str(path))
            fields.append(opened[path].assign_coords(lat=stack["lat"], lon=stack["lon"]))
        layers[role] = xr.concat(fields, dim="slice").assign_coords(slice=stack["slice"])
    # the model's threshold travels with the `suitable` layer (transfer.project_slice)
    threshold = stack["suitable"].attrs.get("threshold")
    threshold = float(threshold) if threshold is not None else None
    out = biotic_layers(stack, partner=layers.get("partner"), competitor=layers.get("competitor"),
                        partner_threshold=b.partner_threshold,
                        competitor_threshold=b.competitor_threshold,
                        competitor_effect=b.competitor_effect, threshold=threshold)
    table, ref = biotic_table(stack, out, reference=_reference(cfg), window=window)
    series = result.series.assign({k: v for k, v in out.data_vars.items()})
    if ref is not None:
        series["refugium_window_biotic"] = ref.drop_vars(
            [c for c in ref.coords if c not in ("lat", "lon")])
    result.series = series
    result.tables["biotic"] = table


def _dated_fossils(cfg: Config) -> pd.DataFrame:
    """The occurrence file's fossil records of the taxon that carry ages (read again: cheap)."""
    from timeslice.niche.data import dated_fossils
    from timeslice.readers import read_occurrences

    sp = cfg.species
    with _about(sp.occurrences):
        occ = read_occurrences(sp.occurrences, columns=sp.columns)
        return dated_fossils(occ, taxon=sp.taxon, taxon_field=sp.taxon_field,
                             fold_subspecies=sp.fold_subspecies, keep_basis=cfg.niche.keep_basis)


def _reference(cfg: Config) -> str:
    ref = cfg.series.reference
    return cfg.climate.baseline_label if ref == "baseline" else ref


# ----------------------------------------------------------------------------- report


def report_stage(
    cfg: Config,
    *,
    series: xr.Dataset,
    summary: pd.DataFrame,
    fit,
    inputs: dict[str, pd.DataFrame],
    out: Path,
    warnings_seen: list[str],
    analysis=None,
) -> dict[str, Path]:
    """Write the NetCDF, tables, maps, plots and HTML report of a finished run."""
    from timeslice import report as R
    from timeslice.narrative import findings, methods_paragraph

    paths: dict[str, Path] = {}
    title = f"{cfg.run.name}"
    history = f"timeslice {__version__} run of {cfg.source.name if cfg.source else 'config'}"
    from timeslice.series.patches import label_patches, refugium_layer

    if refugium_layer(series) is not None:  # the refugium's patches as a layer (R1 largest)
        series = series.assign(refugium_patch=label_patches(series[refugium_layer(series)]))
    paths["series"] = R.write_series(series, out / "series.nc", history=history, title=title)
    paths["summary"] = R.write_csv(summary, out / "summary.csv")
    if analysis is not None and analysis.ensemble is not None:
        paths["ensemble"] = R.write_series(analysis.ensemble, out / "ensemble.nc",
                                           history=history, title=f"{title}: model ensemble")
    tables = {
        "inputs": inputs["inputs"],
        "slice_land": inputs["slice_land"],
        "environment": inputs.get("environment"),
        "cleaning": fit.cleaning,
        "screening": fit.screening,
        "evaluation": fit.evaluation,
        "response": fit.response,
        "importance": fit.importance,
    }
    results = None
    if analysis is not None:
        from timeslice.series.analysis import key_results

        results = key_results(analysis)
        tables["key_results"] = results
        for name, df in analysis.tables.items():
            if name != "summary":
                tables[f"series_{name}"] = df
    for name, df in tables.items():
        if df is not None:
            R.write_csv(df, out / "tables" / f"{name}.csv")
    paths["tables"] = out / "tables"
    figures: list[tuple[str, Path]] = []
    headline: list[tuple[str, Path]] = []
    series = series.load()  # every map reads every layer: compute once
    refuge = "refugium_window" if "refugium_window" in series else "refugium_all_slices"
    from timeslice.report.derived import derived_tables

    # refugium patches, threshold sensitivity and threshold-free change
    extra, patches = derived_tables(series, fit=fit, reference=_reference(cfg),
                                    threshold_value=cfg.niche.threshold_value, refugium=refuge)
    for name, df in extra.items():
        R.write_csv(df, out / "tables" / f"{name}.csv")
    tables.update(extra)
    if cfg.output.vector:
        from timeslice.report.vector import write_vectors

        write_vectors(series, out / "vector", patches=patches)
        paths["vector"] = out / "vector"
    if cfg.output.maps:
        maps = out / "maps"
        proj = cfg.output.projection
        R.slice_maps(series, maps, projection=proj)
        stab = R.stability_map(
            series, maps / "stability.png", refugium=refuge, projection=proj,
            variable="stability_window" if "stability_window" in series else "stability_all_slices",
            patches=patches[1] if patches is not None else None)
        change = R.change_map(series, maps / "panel_change.png", projection=proj)
        headline = [("Stability (fraction of slices suitable) with refugia outlined", stab),
                    ("Gain, loss and stable range against the reference slice", change)]
        figures.append(("Suitability in every slice (shared colour scale; hatched: novel "
                        "climate, MESS < 0)", R.series_panel(series, maps / "panel_suitability.png",
                                                             projection=proj)))
        figures.append(("Novel climate: MESS per slice (negative = outside the calibration "
                        "range)", R.novelty_map(series, maps / "panel_mess.png", projection=proj,
                                                columns="model")))
        figures.append(("Novel climate by ExDet: outside the univariate range (NT1 < 0) or a "
                        "novel combination (NT2 > 1)",
                        R.novelty_map(series, maps / "panel_exdet.png", variable="exdet",
                                      projection=proj, columns="model")))
        if "most_dissimilar" in series:
            figures.append(("Most dissimilar variable: the predictor that sets MESS; where it "
                            "is hatched (novel climate) this predictor lies outside the "
                            "calibration range",
                            R.most_dissimilar_map(series, maps / "panel_most_dissimilar.png",
                                                  projection=proj)))
        ens = analysis.ensemble if analysis is not None else None
        if ens is not None and "agreement" in ens:
            figures.append(("Agreement of the climate models per scenario and period: the "
                            "share of models in which the cell is suitable, majority "
                            "consensus outlined, dotted where the models disagree",
                            R.agreement_map(ens, maps / "panel_agreement.png",
                                            projection=proj)))
        if ens is not None and "dominant" in ens:
            figures.append(("Dominant source of uncertainty per cell (largest share of the "
                            "suitability variance, factorial ANOVA over the ensemble)",
                            R.dominant_source_map(ens, maps / "panel_dominant_source.png",
                                                  projection=proj)))
        if "reachable_limited" in series:
            future = [str(x) for x, sc in zip(series["slice"].values, series["scenario"].values)
                      if str(sc) not in ("past", "baseline")]
            if future:
                last = max(float(series["year"].sel(slice=x)) for x in future)
                pick = [x for x in future if float(series["year"].sel(slice=x)) == last]
                figures.append((
                    f"Suitable and reachable under limited movement "
                    f"({cfg.series.dispersal_rate or 'no rate: as occupied'}) at the last period",
                    R.reach_map(series.assign(reachable=series["reachable_limited"]),
                                maps / "panel_reach.png", slices=pick, projection=proj),
                ))
        paths["maps"] = maps
    plots = out / "plots"
    figures.append(("Suitable area through time", R.area_through_time(summary, plots / "area.png")))
    figures.extend(inputs.get("extra_figures", []))
    div_sites = analysis.tables.get("diversity_sites") if analysis is not None else None
    if div_sites is not None and "stability" in div_sites:
        from timeslice.report.plots import diversity_plot

        layer = analysis.tables["diversity"]["layer"].iloc[0] if len(analysis.tables["diversity"]) else None
        if layer in series:
            figures.append(("Sampled populations: genetic diversity against stability, and the "
                            "sites on the stability map",
                            diversity_plot(div_sites, analysis.tables["diversity"],
                                           series[layer], plots / "diversity.png")))
    env = inputs.get("environment")
    if env is not None and len(env) > 1:
        for col, words in (("environmental_availability", "share of the niche's climates "
                            "still found on the slice's land"),
                           ("analog_fraction", "share of the slice's land in the calibration "
                            "climate")):
            figures.append((f"Through time: {words}", R.area_through_time(
                env, plots / f"{col}.png", column=col, ylabel=col.replace("_", " "),
                title=words[0].upper() + words[1:])))
    figures.append(("Gain and loss per slice", R.gain_loss_bars(summary, plots / "gain_loss.png")))
    figures.append(("Range-centroid track", R.centroid_track(
        summary, plots / "centroid_track.png", land=series["land"].isel(slice=0),
        projection=cfg.output.projection)))
    detail = analysis.tables.get("detail") if analysis is not None else None
    if detail is not None and "lat_q50" in detail:
        figures.append(("Latitude and elevation of the suitable range (median, 10-90 % band)",
                        R.shift_plot(detail, plots / "shifts.png")))
    if fit.response is not None:
        figures.append(("Response curves (shaded: calibration range; outside it the model "
                        "extrapolates)", R.response_curves(fit.response, plots / "response.png")))
    if fit.importance is not None and fit.importance["importance_mean"].notna().any():
        figures.append(("Permutation importance of the predictors",
                        R.importance_bars(fit.importance, plots / "importance.png")))
    if "threshold_sensitivity" in extra and (
            extra["threshold_sensitivity"]["slice"] != _reference(cfg)).any():
        figures.append(("Change in suitable area under each threshold rule (median and range "
                        "over models): how much the headline hangs on the threshold",
                        R.threshold_plot(extra["threshold_sensitivity"],
                                         plots / "threshold_sensitivity.png",
                                         reference=_reference(cfg))))
    if cfg.output.geotiff:
        R.export(series, out / "geotiff")
        if analysis is not None and analysis.ensemble is not None:
            # agreement, consensus, spread and variance shares per scenario x period
            R.export(analysis.ensemble, out / "geotiff" / "ensemble")
        paths["geotiff"] = out / "geotiff"
    from timeslice.niche.evaluate import weak_model_message

    # checked on every run (the fit may come from the cache): a red card and a line on stderr
    weak = weak_model_message(fit.evaluation)
    if weak:
        warnings.warn(weak, TimesliceWarning, stacklevel=2)
        warnings_seen = [*warnings_seen, weak]
    if cfg.output.report:
        models = sorted({str(m) for m in series["model"].values} - {"observed"})
        scenarios = sorted({str(m) for m in series["scenario"].values} - {"baseline"})
        ref_label = cfg.climate.baseline_label if cfg.series.reference == "baseline" else cfg.series.reference
        ctx = R.ReportContext(
            title=title,
            headline_figures=headline,
            key_numbers=R.key_numbers(results if results is not None else summary,
                                      series=series, refugium=refuge),
            outputs={
                "all layers, CF NetCDF": "series.nc",
                "one row per slice": "summary.csv",
                **({"model agreement and variance shares": "ensemble.nc"}
                   if "ensemble" in paths else {}),
                **({"refugium patches (GeoJSON, one feature per patch)":
                    "vector/refugium_patches.geojson",
                    "suitable area per slice (GeoJSON)": "vector/suitable.geojson"}
                   if "vector" in paths else {}),
                **({"refugium patches, one row each": "tables/refugium_patches.csv"}
                   if "refugium_patches" in extra else {}),
                **({"suitable area under every threshold rule":
                    "tables/threshold_sensitivity.csv",
                    "threshold-free change of suitability": "tables/suitability_change.csv"}
                   if "threshold_sensitivity" in extra else {}),
                "run manifest": "manifest.json",
            },
            species=cfg.species.name,
            summary=summary,
            tables={k: v for k, v in tables.items()
                    if v is not None and k not in ("response", "series_summary",
                                                   "threshold_sensitivity",
                                                   "suitability_change")},
            figures=figures,
            methods=methods_paragraph(
                species=cfg.species.name, fit_params=fit.params,
                n_slices=int((series["scenario"].values.astype(str) != "baseline").sum()),
                models=models, scenarios=[x for x in scenarios if x != "past"] or scenarios,
                reference=ref_label, clamp=cfg.transfer.clamp, evaluation=fit.evaluation,
                window=getattr(analysis, "window", None) if analysis is not None else None,
                cell_km=_cell_km(series),
            ),
            run_info={"config": str(cfg.source), "seed": cfg.run.seed, "version": __version__,
                      "warnings": "; ".join(warnings_seen) or "none"},
            highlights=findings(results) if results is not None else [],
            alerts=[weak] if weak else [],
        )
        paths["report"] = R.write_report(ctx, out / "report.html")
    return paths


# ----------------------------------------------------------------------------- run


def run(
    cfg: Config,
    out: str | os.PathLike,
    *,
    force: bool = False,
    progress: Progress = _quiet,
    command: list[str] | None = None,
    cache_dir: str | os.PathLike | None = None,
) -> RunResult:
    """Run every stage of `cfg` and write the outputs into `out`.

    Parameters
    ----------
    cfg : Config
        Validated configuration (:func:`timeslice.config.load_config`). With several species
        (``[[species]]``) each is run into ``out/species/NAME`` over the same harmonised
        slices, and the assemblage is summarised in ``out`` (:func:`run_assemblage`).
    out : path
        Output folder; created if needed. Finished stages are cached in ``out/.cache``.
    force : bool
        Recompute every stage even if a cached result exists.
    cache_dir : path, optional
        Stage cache folder (default ``out/.cache``); species of one run share one.
    """
    from timeslice.report import write_manifest

    if cfg.multi_species:
        return run_assemblage(cfg, out, force=force, progress=progress, command=command)
    out = Path(out)
    # every input is expanded and its headers checked before the output folder is touched
    input_files = cfg.check_files()
    _make_out(out)
    started = _begin_run(out, cfg, command)
    cache = StageCache(Path(cache_dir) if cache_dir is not None else out / ".cache", force=force)
    result = RunResult(out=out)
    t = result.timings
    from timeslice.transfer.scheduler import scheduler

    address = None if cfg.run.scheduler in ("threads", "") else cfg.run.scheduler
    with scheduler(address, cfg.run.workers), warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", TimesliceWarning)
        with _timed(t, "harmonise"):
            baseline, slices, inputs = harmonise_stage(cfg, cache, progress=progress)
        with _timed(t, "fit"):
            fit, fit_key = fit_stage(cfg, baseline, cache, base_key=_dataset_key(baseline))
        with _timed(t, "transfer"):
            stack = transfer_stage(cfg, fit, [baseline, *slices], cache, fit_key=fit_key,
                                   progress=progress)
            from timeslice.transfer.espace import environment_table

            # each transfer seen in environmental space (availability, analog fraction)
            inputs["environment"] = environment_table(fit, [baseline, *slices])
            if cfg.output.report:
                from timeslice.report.espace import environment_panels

                # the figure is drawn here, where the slices' predictors are at hand
                inputs["extra_figures"] = [(
                    "Each slice in environmental space (first two principal components of the "
                    "calibration climate; loadings on the axes): background grey, presences "
                    "black, the slice's land climate blue, suitable green, outside the "
                    "calibration range red",
                    environment_panels(fit, [baseline, *slices], stack,
                                       out / "plots" / "environment.png", seed=cfg.run.seed))]
        with _timed(t, "summarise"):
            analysis = summarise_stage(cfg, stack)
        series, summary = analysis.series, analysis.tables["summary"].copy()
        if "period" not in summary and "period" in series.coords:
            periods = dict(zip(series["slice"].values, series["period"].values))
            summary.insert(4, "period", [str(periods.get(x, "")) for x in summary["slice"]])
        with _timed(t, "report"):
            result.paths = report_stage(
                cfg, series=series, summary=summary, fit=fit, inputs=inputs, out=out,
                warnings_seen=[str(w.message) for w in caught], analysis=analysis,
            )
        from timeslice.series.analysis import key_results

        result.key_results = key_results(analysis)
        result.fit, result.analysis = fit, analysis
    # the warnings were collected for the report; show them to the user too, once each
    for w in {str(w.message): w for w in caught}.values():
        warnings.showwarning(w.message, w.category, w.filename, w.lineno)
    inputs_used = {str(f.path) for fs in input_files.values() for f in fs}
    written, removed = _finish_run(out, started)
    result.paths["manifest"] = write_manifest(
        {
            "status": "complete",
            "files": written,
            "removed_stale": removed,
            "config": cfg.model_dump(mode="json"),
            "config_path": str(cfg.source),
            "inputs": sorted(inputs_used),
            "input_sets": {k: [str(f.path) for f in fs] for k, fs in input_files.items()},
            "seed": cfg.run.seed,
            "timings": t,
            "command": command or sys.argv,
            "outputs": [str(p) for p in result.paths.values()],
            "cache": {"reused": len(cache.hits), "computed": len(cache.misses)},
            "warnings": sorted({str(w.message) for w in caught}),
            "series_notes": list(analysis.notes),
        },
        out / "manifest.json",
    )
    result.summary = summary
    result.cache_hits, result.cache_misses = cache.hits, cache.misses
    return result


#: What a run writes in its folder (files, and folders whose every file is an output). A file
#: there that the current run did not write is left over from an earlier run and is removed
#: when the run completes, so the folder always holds one run.
RUN_FILES = ("series.nc", "ensemble.nc", "summary.csv", "report.html", "assemblage.nc")
RUN_FOLDERS = ("maps", "plots", "tables", "geotiff", "vector", "species")


def _run_outputs(out: Path) -> list[Path]:
    files = [out / f for f in RUN_FILES if (out / f).is_file()]
    for d in RUN_FOLDERS:
        if (out / d).is_dir():
            files += sorted(p for p in (out / d).rglob("*") if p.is_file())
    return files


def _begin_run(out: Path, cfg: Config, command) -> int:
    """Mark the folder as holding an unfinished run; remove temporary files a killed run left.

    Returns the start time (ns) that tells this run's outputs from older ones.
    """
    from timeslice.report import write_manifest

    for tmp in out.rglob(".*.part"):
        with contextlib.suppress(OSError):
            tmp.unlink()
    started = time.time_ns()
    write_manifest({"status": "incomplete", "config": cfg.model_dump(mode="json"),
                    "config_path": str(cfg.source), "inputs": [], "seed": cfg.run.seed,
                    "command": command or sys.argv}, out / "manifest.json")
    return started


def _finish_run(out: Path, started: int) -> tuple[list[str], list[str]]:
    """(files this run wrote, stale files of earlier runs removed), as paths relative to `out`."""
    written, removed = [], []
    for p in _run_outputs(out):
        rel = p.relative_to(out).as_posix()
        if p.stat().st_mtime_ns >= started:
            written.append(rel)
        else:
            with contextlib.suppress(OSError):
                p.unlink()
                removed.append(rel)
    for d in RUN_FOLDERS:  # folders emptied by the clean-up go too
        for sub in sorted((out / d).rglob("*"), reverse=True) if (out / d).is_dir() else []:
            if sub.is_dir() and not any(sub.iterdir()):
                sub.rmdir()
        if (out / d).is_dir() and not any((out / d).iterdir()):
            (out / d).rmdir()
    return sorted(written), sorted(removed)


def _require_complete(out: Path, what: str) -> None:
    """Refuse to read a run whose manifest says it did not finish."""
    import json as _json

    path = out / "manifest.json"
    if not path.is_file():
        return
    try:
        status = _json.loads(path.read_text(encoding="utf-8")).get("status", "complete")
    except (ValueError, OSError, AttributeError):  # not a manifest: read_manifest says so
        return
    if status != "complete":
        raise DataError(
            f"{out}: the run in this folder did not finish (manifest.json says {status!r}), so "
            f"its outputs may be of two runs; finish it with `timeslice run CONFIG --out {out}` "
            f"(finished stages are reused) before `{what}`"
        )


def _cell_km(ds: xr.Dataset) -> float:
    """Typical cell size, km: the square root of the mean land cell area (authalic sphere)."""
    from timeslice.grid import cell_area

    area = cell_area(ds)
    if "land" in ds and "slice" in ds["land"].dims:
        land = ds["land"].isel(slice=0).astype(bool)
        if bool(land.any()):
            area = area.where(land)
    return float(np.sqrt(float(area.mean())))


def run_assemblage(cfg: Config, out: str | os.PathLike, *, force: bool = False,
                   progress: Progress = _quiet, command: list[str] | None = None) -> RunResult:
    """Several species over the same slices: each species run into ``out/species/NAME`` (the
    climate is harmonised once: every species reads the shared stage cache), then the
    assemblage: predicted richness per cell and slice, its change against the reference and
    the refugia the species share (``assemblage.nc``, ``tables/assemblage.csv``).

    Species are run one after another and only the running richness sum is kept between them,
    so peak memory does not grow with the number of species.
    """
    from timeslice.config import _slug
    from timeslice.grid import cell_area
    from timeslice.report import open_series, write_csv, write_manifest, write_series

    out = Path(out)
    input_files = cfg.check_files()
    _make_out(out)
    started = _begin_run(out, cfg, command)
    result = RunResult(out=out)
    richness = shared = None
    names = []
    for sub in cfg.species_configs():
        name = sub.species.name
        names.append(name)
        res = run(sub, out / "species" / _slug(name), force=force, progress=progress,
                  command=command, cache_dir=out / ".cache")
        result.paths[f"species {name}"] = res.out
        with open_series(res.out / "series.nc") as ds:
            suit = (ds["suitable"] == 1).astype("int16").load()
            refuge = next((v for v in ("refugium_window", "refugium_all_slices") if v in ds), None)
            ref = ds[refuge].astype("int16").load() if refuge else None
            coords = ds[["suitable"]].drop_vars("suitable").load()
        richness = suit if richness is None else richness + suit
        if ref is not None:
            shared = ref if shared is None else shared + ref
    reference = cfg.climate.baseline_label if cfg.series.reference == "baseline" else cfg.series.reference
    land = richness.isel(slice=0) >= 0
    layers = xr.Dataset(coords=coords.coords)
    layers["richness"] = richness.assign_attrs(
        units="1", long_name="predicted richness (number of species climatically suitable)")
    layers["richness_change"] = (richness - richness.sel(slice=reference)).astype("int16").assign_attrs(
        units="1", long_name=f"change in predicted richness against {reference}")
    if shared is not None:
        layers["shared_refugia"] = shared.assign_attrs(
            units="1", long_name="number of species whose refugium the cell is")
    result.paths["assemblage"] = write_series(
        layers, out / "assemblage.nc", history=f"timeslice {__version__} assemblage",
        title=f"{cfg.run.name}: assemblage of {len(names)} species")
    area = cell_area(layers)
    rows = []
    for label in layers["slice"].values:
        r = layers["richness"].sel(slice=label)
        rows.append({"slice": str(label),
                     "mean_richness": float((r * area).sum() / area.where(land).sum()),
                     "max_richness": int(r.max()),
                     "area_all_species_km2": float(area.where(r == len(names)).sum()),
                     "area_any_species_km2": float(area.where(r >= 1).sum())})
    table = pd.DataFrame(rows)
    if shared is not None:
        table.attrs["shared_refugia_km2"] = float(area.where(layers["shared_refugia"] == len(names)).sum())
    result.paths["assemblage_table"] = write_csv(table, out / "tables" / "assemblage.csv")
    written, removed = _finish_run(out, started)
    result.paths["manifest"] = write_manifest(
        {"status": "complete", "files": written, "removed_stale": removed,
         "config": cfg.model_dump(mode="json"), "config_path": str(cfg.source),
         "inputs": sorted({str(f.path) for fs in input_files.values() for f in fs}),
         "seed": cfg.run.seed, "command": command or sys.argv, "species": names},
        out / "manifest.json")
    result.summary = table
    return result


def _make_out(out: Path) -> None:
    from timeslice.io import writable_folder

    writable_folder(out, what="--out")


# ----------------------------------------------------------------------------- single stages


def run_harmonise(cfg: Config, out: str | os.PathLike, *, force: bool = False,
                  progress: Progress = _quiet) -> dict[str, Path]:
    """Harmonise every slice and write one CF NetCDF per slice plus the input table."""
    from timeslice.io import file_stem
    from timeslice.report import write_csv, write_series

    out = Path(out)
    cfg.check_files()
    cache = StageCache(out / ".cache", force=force)
    baseline, slices, tables = harmonise_stage(cfg, cache, progress=progress)
    paths: dict[str, Path] = {}
    for ds in [baseline, *slices]:
        label = str(ds.attrs["slice_label"])
        paths[label] = write_series(
            ds, out / "harmonised" / f"{file_stem(label)}.nc",  # never a path of its own
            history=f"timeslice {__version__} harmonise", title=f"harmonised slice {label}",
        )
    paths["inputs"] = write_csv(tables["inputs"], out / "tables" / "inputs.csv")
    paths["slice_land"] = write_csv(tables["slice_land"], out / "tables" / "slice_land.csv")
    return paths


def run_fit(cfg: Config, out: str | os.PathLike, *, force: bool = False) -> dict[str, Path]:
    """Fit the niche on the harmonised baseline; write the model, tables and response curves."""
    from timeslice.niche.persist import save_model
    from timeslice.report import response_curves, write_csv

    out = Path(out)
    if cfg.multi_species:
        raise ConfigError(
            f"{cfg.source}: `timeslice fit` fits one species; this config lists "
            f"{len(cfg.species)} ([[species]]): run `timeslice run` (each species gets its "
            "model in species/NAME), or keep one [species] table for `fit`")
    cfg.check_files()
    cache = StageCache(out / ".cache", force=force)
    cfg_base = cfg.model_copy(update={"slices": []})
    baseline, _, _ = harmonise_stage(cfg_base, cache)
    fit, _ = fit_stage(cfg, baseline, cache, base_key=_dataset_key(baseline))
    paths = {"model": save_model(fit, out / "model.pkl")}
    for name in ("cleaning", "screening", "evaluation", "response", "importance"):
        df = getattr(fit, name, None)
        if df is not None:
            paths[name] = write_csv(df, out / "tables" / f"{name}.csv")
    if fit.response is not None:
        paths["response_plot"] = response_curves(fit.response, out / "plots" / "response.png")
    return paths


def run_summarise(
    out: str | os.PathLike,
    *,
    reference: str | None = None,
    rate: str | None = None,
    window: list[str] | None = None,
    dated_records: str | os.PathLike | None = None,
    progress: Progress = _quiet,
    target: str | os.PathLike | None = None,
) -> RunResult:
    """Summarise a finished run again with other series options, and refresh every output
    (in the run's folder, or in `target` with the run's cache, leaving the run as it is).

    The run's own configuration (from its manifest) is taken with the given series options laid
    over it, and the run is repeated: harmonising, fitting and transferring come from the stage
    cache of `out` (nothing is refitted), while the series summaries, ``series.nc``,
    ``summary.csv``, ``ensemble.nc``, tables, maps, plots, the report and the manifest are
    written anew. So ``summarise`` and ``run`` give the same numbers for the same options, by
    construction: there is one code path.

    Parameters
    ----------
    out : path
        Output folder of a finished run (holding ``manifest.json``).
    reference, rate, window, dated_records : optional
        New values of ``series.reference``, ``series.dispersal_rate``,
        ``series.refugium_window`` and ``species.dated_records``; None keeps the run's own.
    """
    from timeslice.config import SeriesConfig, parse_config
    from timeslice.report import read_manifest

    out = Path(out)
    manifest = out / "manifest.json"
    if not manifest.is_file():
        raise DataError(f"{out}: no manifest.json; run `timeslice run CONFIG --out {out}` first")
    _require_complete(out, "timeslice summarise")
    info = read_manifest(manifest, verify=False)
    cfg = parse_config(info["config"], source=info.get("config_path") or "<config>")
    updates: dict[str, Any] = {}
    for key, value in (("reference", reference), ("dispersal_rate", rate),
                       ("refugium_window", window)):
        if value is not None:
            updates[key] = value
    data = {**cfg.series.model_dump(), **updates}
    try:
        cfg.series = SeriesConfig.model_validate(data)
    except Exception as err:  # pydantic's ValidationError
        raise DataError(f"summarise: {str(err).splitlines()[-1].strip()}") from err
    if dated_records is not None:
        cfg.species.dated_records = Path(dated_records).resolve()
    from timeslice.config import _check_references

    _check_references(cfg, "summarise")
    command = ["timeslice", "summarise", str(out)]
    for flag, value in (("--reference", reference), ("--rate", rate),
                        ("--dated-records", dated_records)):
        if value is not None:
            command += [flag, str(value)]
    for w in window or []:
        command += ["--window", str(w)]
    if target is not None:
        # a second folder with the new options; the run's own folder stays as it is
        return run(cfg, Path(target), progress=progress, command=command + ["--out", str(target)],
                   cache_dir=out / ".cache")
    return run(cfg, out, progress=progress, command=command)


def run_export(out: str | os.PathLike, *, fmt: str = "geotiff",
               variables: list[str] | None = None,
               target: str | os.PathLike | None = None) -> list[Path]:
    """Export the layers of a finished run's ``series.nc`` (GeoTIFF) into `target`
    (default ``out/geotiff``); `variables` chooses layers (default every layer on the grid)."""
    from timeslice.report.geotiff import export_file

    out = Path(out)
    if fmt != "geotiff":
        raise DataError(f"--format must be 'geotiff', got {fmt!r}")
    path = out / "series.nc"
    if not path.is_file():
        raise DataError(f"{path}: not found; run `timeslice run CONFIG --out {out}` first")
    _require_complete(out, "timeslice export")
    folder = Path(target) if target is not None else out / "geotiff"
    written = export_file(path, folder, variables=variables)
    ensemble = out / "ensemble.nc"
    if ensemble.is_file() and variables is None:
        # agreement, consensus and variance shares across models, beside the series layers
        written += export_file(ensemble, folder / "ensemble")
    return written


def rerun(manifest: str | os.PathLike, out: str | os.PathLike | None = None, *,
          progress: Progress = _quiet) -> RunResult:
    """Repeat the run recorded in `manifest` (inputs must still have their recorded hashes)."""
    from timeslice.config import parse_config
    from timeslice.report import read_manifest

    _require_complete(Path(manifest).resolve().parent, "timeslice rerun")
    info = read_manifest(manifest, verify=True)
    if not isinstance(info.get("config"), dict):
        raise InputFileError(f"{manifest}: the manifest holds no configuration table, so the run "
                             "cannot be repeated from it; start a new run from the config file")
    cfg = parse_config(info["config"], source=info.get("config_path") or "<config>")
    target = Path(out) if out is not None else Path(manifest).resolve().parent
    return run(cfg, target, force=True, progress=progress,
               command=["timeslice", "rerun", str(manifest)])
