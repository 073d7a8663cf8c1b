"""Stage order of a run: harmonise -> fit -> transfer -> summarise -> report.

This is the only module that reads the :class:`~timeslice.config.Config`; every stage below it
takes explicit arguments. Each stage's output is cached under a content key
(:mod:`timeslice.cache`), so a rerun skips finished work and a killed run resumes.
"""

from __future__ import annotations

import contextlib
import json
import os
import sys
import time
import warnings
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from timeslice import __version__
from timeslice.cache import StageCache, content_key, file_digest
from timeslice.config import Config, SliceSpec
from timeslice.errors import ConfigError, DataError, TimesliceWarning
from timeslice.progress import Progress, no_progress
from timeslice.stage_inputs import (
    about,
    apply_biotic,
    dated_fossils,
    fine_baseline,
    input_row,
    prepare_model_slice,
    reference_label,
    shown,
    with_inputs,
)

__all__ = ["RunResult", "dataset_key", "espace_stage", "fit_stage", "fitted_model", "harmonise_stage",
           "report_options", "run", "summarise_stage", "transfer_stage"]


@dataclass
class RunResult:
    """What a run produced: output paths, the tables and the timings per stage.

    Parameters
    ----------
    out : Path
        The run folder.
    paths : dict of str to Path
        Every output written, by kind.
    summary : pandas.DataFrame or None
        One row per slice.
    timings : dict of str to float
        Wall seconds per stage.
    cache_hits, cache_misses : list of str
        Stage cache entries reused and computed.
    key_results : pandas.DataFrame or None
        The headline numbers (:func:`timeslice.series.key_results`), as in the report.
    fit : NicheFit
        The fitted niche (:class:`timeslice.niche.workflow.NicheFit`).
    analysis : SeriesResult
        The series results (:class:`timeslice.series.analysis.SeriesResult`).
    """

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


def harmonise_stage(
    cfg: Config, cache: StageCache, *, progress: Progress = no_progress
) -> tuple[xr.Dataset, list[xr.Dataset], dict[str, pd.DataFrame]]:
    """Prepare the observed baseline and every configured slice on the common grid.

    Returns the prepared baseline, the prepared slices (config order) and two tables: `inputs`
    (one row per input file: grid, units, calendar, what was done) and `slice_land` (land,
    exposed shelf and ice areas per slice).

    Parameters
    ----------
    cfg : Config
        The run's configuration ([climate], [[slices]], [grid]).
    cache : StageCache
        The stage cache.
    progress : callable
        ``progress("harmonise", done, total)`` after each slice.
    """
    from timeslice.harmonise.prepare import prepare_slice
    from timeslice.readers.filesets import file_set_digest

    c = cfg.climate
    specs = cfg.slice_specs()
    monthly = c.baseline_kind == "monthly"
    files = cfg.input_files()
    fine, elev, elev_ds = fine_baseline(cfg, files)

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
    baseline, table = _cached_slice(cache, base_key, lambda: with_inputs(prepare_slice(
        fine_baseline=fine if monthly else None, bio=None if monthly else fine,
        sea_level=c.present_sea_level, label=c.baseline_label, year=c.baseline_year,
        period=c.baseline_period, model="observed", scenario="baseline", **common,
    ), [("fine_baseline", fine), ("elevation", elev_ds)]))
    progress("harmonise", 1, total)
    rows = [input_row(c.baseline_label, "observed", "baseline",
                       shown(files["climate.baseline"]), baseline)]
    tables = [table]
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

        def compute(spec: SliceSpec = spec, mb_files=mb_files, ice_files=ice_files):
            return prepare_model_slice(cfg, spec, fine=fine, common=common, mb_files=mb_files,
                                        ice_files=ice_files, model_baselines=model_baselines)

        ds, table = _cached_slice(cache, key, compute)
        slices.append(ds)
        tables.append(table)
        src = shown(slice_files)
        rows.append(input_row(spec.label, spec.model, spec.scenario, src, ds))
        progress("harmonise", i + 2, total)
    inputs = pd.concat(tables, ignore_index=True)
    return baseline, slices, {"inputs": inputs, "slice_land": pd.DataFrame(rows)}


def _cached_slice(cache: StageCache, key: str, prepare) -> tuple[xr.Dataset, pd.DataFrame]:
    """A prepared slice and its input table, each its own cache entry under `key`.

    `prepare()` returns both; it runs at most once, when either entry is missing.
    """
    made: dict[str, Any] = {}

    def both() -> dict[str, Any]:
        if not made:
            made["ds"], made["table"] = prepare()
        return made

    ds = cache.dataset("harmonise", key, lambda: both()["ds"])
    return ds, cache.table("harmonise", key, lambda: both()["table"])


# ----------------------------------------------------------------------------- fit


def fit_stage(cfg: Config, baseline: xr.Dataset, cache: StageCache, *, base_key: str = "",
              progress: Progress = no_progress):
    """Read, clean and thin the records and fit the niche on the prepared baseline.

    Parameters
    ----------
    cfg : Config
        The run's configuration (``[species]``, ``[niche]``, ``run.seed``).
    baseline : xarray.Dataset
        The prepared baseline slice.
    cache : StageCache
        The stage cache.
    base_key : str
        Content key of the baseline (part of the fit's key).
    progress : callable, optional
        ``progress("fit", done, total)`` per cross-validation fold (not part of the key).
    """
    from timeslice.niche.workflow import fit_niche
    from timeslice.readers import read_occurrences

    n = cfg.niche
    if n.model is not None:
        return fitted_model(n.model, baseline), content_key("fit-file", file_digest(n.model))
    key = content_key(
        "fit", base_key, file_digest(cfg.species.occurrences), cfg.species.model_dump(mode="json"),
        n.model_dump(mode="json"), cfg.run.seed,
        [file_digest(f) for f in (n.calibration_mask, n.background_file) if f is not None],
    )

    def compute():
        records = read_occurrences(cfg.species.occurrences, columns=cfg.species.columns)
        sp = cfg.species
        with about(cfg.species.occurrences):
            # the baseline comes from the stage cache lazily; the fit samples it across the
            # calibration area and at every record, so it reads the one slice into memory
            return fit_niche(
                records, baseline.compute(), variables=n.variables, algorithm=n.algorithm,
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
                progress=progress,
            )

    return cache.obj("fit", key, compute), key


def fitted_model(path: Path, baseline: xr.Dataset):
    """A model fitted earlier (`timeslice fit`), checked against this run's baseline: every
    predictor present, and in the same units (the baseline's values must overlap the model's
    calibration range, or the predictors were computed differently).

    Parameters
    ----------
    path : Path
        A model file written by ``timeslice fit``.
    baseline : xarray.Dataset
        This run's prepared baseline.
    """
    from timeslice.niche.persist import load_model

    fit = load_model(path)
    # the baseline comes from the stage cache lazily; the checks below take medians of it
    baseline = baseline.compute()
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


def _stream_source(cfg: Config, cache: StageCache, ds: xr.Dataset,
                   variables: list[str]) -> str | None:
    """The cached file a prepared slice can be transferred from by row blocks, or None (no
    cache folder, a dask scheduler or explicit chunks asked for, predictors not 2-D)."""
    local = cfg.run.scheduler in ("threads", "") and not cfg.run.workers
    source = ds.encoding.get("source")
    if (cache.root is None or not local or cfg.transfer.chunks != "auto" or not source
            or not Path(source).is_file()
            or any(ds[v].dims != ("lat", "lon") for v in variables)):
        return None
    return source


def transfer_stage(
    cfg: Config, fit, slices: list[xr.Dataset], cache: StageCache, *, fit_key: str = "",
    progress: Progress = no_progress,
) -> xr.Dataset:
    """Project the fitted niche onto every prepared slice and stack the results.

    Parameters
    ----------
    cfg : Config
        The run's configuration ([transfer]).
    fit : NicheFit
        The fitted niche.
    slices : list of xarray.Dataset
        The prepared slices, baseline first.
    cache : StageCache
        The stage cache.
    fit_key : str
        Content key of the fit (part of each transfer's key).
    progress : callable
        ``progress("transfer", done, total)`` after each batch.
    """
    from timeslice.transfer.files import project_file
    from timeslice.transfer.project import project_slice

    import dask

    from timeslice.series.stacking import check_same_grid, stack_slices

    check_same_grid(slices)
    variables = list(fit.variables)
    reference = fit.background[variables]
    tc = cfg.transfer
    chunks = "auto" if tc.chunks == "auto" else {"lat": tc.chunks, "lon": tc.chunks}
    if not any(v.chunks for ds in slices for v in ds.data_vars.values()):
        # slices in memory: one fused pass by row blocks on local threads, no dask graph
        # (the same values; project_slice computes them now)
        chunks = None
    keys = [content_key("transfer", fit_key, dataset_key(ds), tc.model_dump()) for ds in slices]
    results: list[xr.Dataset | None] = [cache.load("transfer", k) for k in keys]
    todo = [i for i, r in enumerate(results) if r is None]
    progress("transfer", len(slices) - len(todo), len(slices))
    # prepared slices are files of the stage cache: on local threads each goes from its file
    # to its transfer entry by row blocks (timeslice.transfer.files.project_file, the same
    # values), never whole in memory and without a dask graph
    sources = {i: _stream_source(cfg, cache, slices[i], variables) for i in todo}
    for i in [i for i in todo if sources[i]]:
        results[i] = cache.write("transfer", keys[i], lambda tmp, src=sources[i]: project_file(
            fit.model, src, tmp, variables=variables, reference=reference,
            threshold=fit.threshold, clamp=tc.clamp, budget_mb=tc.chunk_budget_mb))
        todo.remove(i)
        progress("transfer", len(slices) - len(todo), len(slices))
    # the others (in memory, or for a cluster scheduler) are independent: compute them in
    # batches of one graph each, so the scheduler runs them in parallel while each finished
    # batch is cached before the next starts
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
            results[i] = cache.store("transfer", keys[i], res)
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


def dataset_key(ds: xr.Dataset) -> str:
    """Content key of a dataset: its variables' values and its attributes.

    Parameters
    ----------
    ds : xarray.Dataset
        A prepared slice.

    Returns
    -------
    str
        24 hex digits of SHA-256.
    """
    import hashlib

    h = hashlib.sha256()
    for name in sorted(ds.data_vars):
        h.update(name.encode())
        h.update(np.ascontiguousarray(ds[name].values).tobytes())
    h.update(json.dumps({k: str(v) for k, v in sorted(ds.attrs.items())}).encode())
    return h.hexdigest()[:24]


# ----------------------------------------------------------------------------- summarise


def summarise_stage(cfg: Config, stack: xr.Dataset, *, progress: Progress = no_progress):
    """Change, stability, refugia, movement, ensembles and the hindcast across the series.

    Returns a :class:`timeslice.series.analysis.SeriesResult`.

    Parameters
    ----------
    cfg : Config
        The run's configuration (``[series]``, dated records, diversity, biotic layers).
    stack : xarray.Dataset
        The stacked transfers (:func:`transfer_stage`).
    progress : callable, optional
        ``progress("summarise", done, total)`` after each analysis step (the series analysis,
        then diversity, hypotheses, biotic layers and zones where configured).
    """
    from timeslice.readers import read_dated_records
    from timeslice.series.analysis import analyse_series

    # the transfers come from the stage cache lazily; the series analysis reads every layer many
    # times and reduces over the slices in numpy's order, so it takes the stack in memory (read
    # once here), which keeps its numbers those of an in-memory stack
    stack = stack.compute()
    ser = cfg.series
    total = 1 + sum([cfg.species.diversity is not None, bool(ser.hypotheses),
                     cfg.biotic.partner is not None or cfg.biotic.competitor is not None,
                     ser.zones is not None])
    steps = iter(range(1, total + 1))
    progress("summarise", 0, total)
    records = None
    source = str(cfg.species.dated_records)
    if cfg.species.dated_records is not None:
        records = read_dated_records(cfg.species.dated_records)
    past = "scenario" in stack.coords and "past" in {str(x) for x in stack["scenario"].values}
    fossils = dated_fossils(cfg) if past else None
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
        window = list(dict.fromkeys(past)) + [reference_label(cfg)] if past else None
    with about(cfg.species.dated_records if records is not None else None):
        result = analyse_series(
            stack, reference=reference_label(cfg), window=window, rate=ser.dispersal_rate,
            rate_key="series.dispersal_rate", through=ser.movement_through,
            neighbours=ser.graph_neighbours, factors=ser.partition_factors, records=records,
            records_source=source, max_offset_years=ser.hindcast_max_offset_years,
        )
    progress("summarise", next(steps), total)
    sites = None
    if cfg.species.diversity is not None:
        from timeslice.series.genetics import read_diversity_table, stability_vs_diversity

        with about(cfg.species.diversity):
            sites = read_diversity_table(cfg.species.diversity,
                                         column=cfg.species.diversity_column)
            table = stability_vs_diversity(result.series, sites)
        result.tables["diversity"] = table
        result.tables["diversity_sites"] = table.attrs["sites"]
        progress("summarise", next(steps), total)
    if ser.hypotheses:
        from timeslice.series.hypotheses import compare_hypotheses

        table, layers = compare_hypotheses(stack, ser.hypotheses, records=records, sites=sites)
        result.tables["hypotheses"] = table
        result.series = result.series.assign(dict(layers.data_vars))
        progress("summarise", next(steps), total)
    if cfg.biotic.partner is not None or cfg.biotic.competitor is not None:
        apply_biotic(cfg, stack, result, window=window)
        progress("summarise", next(steps), total)
    if ser.zones is not None:
        from timeslice.series.zonal import read_zones, zonal_table

        with about(ser.zones):
            result.tables["zones"] = zonal_table(
                result.series, read_zones(ser.zones, name_field=ser.zones_name_field))
        progress("summarise", next(steps), total)
    return result


def espace_stage(cfg: Config, fit, slices: list[xr.Dataset], stack: xr.Dataset,
                 out: Path) -> dict[str, Any]:
    """Each transfer seen in environmental space: the table (availability, analog fraction)
    and, with a report, the figure (drawn here, where the slices' predictors are at hand).

    Parameters
    ----------
    cfg : Config
        The run's configuration (``output.report``, ``run.seed``).
    fit : NicheFit
        The fitted niche (its background is the calibration climate).
    slices : list of xarray.Dataset
        The prepared slices, baseline first.
    stack : xarray.Dataset
        The stacked transfers.
    out : Path
        Run folder (the figure goes to ``plots/environment.png``).

    Returns
    -------
    dict
        ``environment`` (table) and ``extra_figures`` (caption, path) for the report.
    """
    from timeslice.transfer.espace import environment_table

    extra: dict[str, Any] = {"environment": environment_table(fit, slices)}
    if cfg.output.report:
        from timeslice.report.espace import environment_panels

        extra["extra_figures"] = [(
            "Each slice in environmental space (first two principal components of the "
            "calibration climate; loadings on the axes): background grey, presences "
            "black, the slice's land climate blue, suitable green, outside the "
            "calibration range red",
            environment_panels(fit, slices, stack, out / "plots" / "environment.png",
                               seed=cfg.run.seed, dpi=cfg.output.dpi,
                               figure_format=cfg.output.figure_format))]
    return extra


def _complete_manifest(cfg: Config, out: Path, started: int, *, input_files, result, command,
                       cache: StageCache, warnings_seen: list[str], notes: list[str]) -> Path:
    """List the run's files, remove stale ones and write the manifest as complete."""
    from timeslice.report import write_manifest
    from timeslice.runfolder import finish_run

    written, removed = finish_run(out, started)
    return write_manifest(
        {
            "status": "complete",
            "files": written,
            "removed_stale": removed,
            "config": cfg.model_dump(mode="json"),
            "config_path": str(cfg.source),
            "inputs": sorted({str(f.path) for fs in input_files.values() for f in fs}),
            "input_sets": {k: [str(f.path) for f in fs] for k, fs in input_files.items()},
            "seed": cfg.run.seed,
            "timings": result.timings,
            "command": command or sys.argv,
            "outputs": [str(p) for p in result.paths.values()],
            "cache": {"reused": len(cache.hits), "computed": len(cache.misses)},
            "warnings": warnings_seen,
            "series_notes": notes,
        },
        out / "manifest.json",
    )


def report_options(cfg: Config):
    """The settings of the report stage, read from the config.

    Parameters
    ----------
    cfg : Config
        The run's configuration.

    Returns
    -------
    timeslice.report.assemble.ReportOptions
    """
    from timeslice.report.assemble import ReportOptions

    return ReportOptions(
        title=cfg.run.name,
        history=f"timeslice {__version__} run of {cfg.source.name if cfg.source else 'config'}",
        species=cfg.species.name, reference=reference_label(cfg),
        threshold_value=cfg.niche.threshold_value, maps=cfg.output.maps,
        vector=cfg.output.vector, geotiff=cfg.output.geotiff, report=cfg.output.report,
        projection=cfg.output.projection, dpi=cfg.output.dpi,
        figure_format=cfg.output.figure_format, dispersal_rate=cfg.series.dispersal_rate,
        clamp=cfg.transfer.clamp, config_path=str(cfg.source), seed=cfg.run.seed,
        version=__version__, data_format=cfg.output.format)


# ----------------------------------------------------------------------------- run


def run(
    cfg: Config,
    out: str | os.PathLike,
    *,
    force: bool = False,
    progress: Progress = no_progress,
    command: list[str] | None = None,
    cache_dir: str | os.PathLike | None = None,
) -> RunResult:
    """Run every stage of `cfg` (one species) and write the outputs into `out`.

    Several species (``[[species]]``) are run by :func:`timeslice.commands.run`, which calls
    this once per species and then summarises the assemblage.

    Parameters
    ----------
    cfg : Config
        Validated configuration (:func:`timeslice.config.load_config`), one species.
    out : path
        Output folder; created if needed. Finished stages are cached in ``out/.cache``.
    force : bool
        Recompute every stage even if a cached result exists.
    progress : callable, optional
        ``progress(stage, done, total)`` as the stages advance.
    command : list of str, optional
        The command line recorded in the manifest (default ``sys.argv``).
    cache_dir : path, optional
        Stage cache folder (default ``out/.cache``); species of one run share one.

    Returns
    -------
    RunResult
        Output paths, tables, the fit, the series analysis and the timings.
    """
    from timeslice.runfolder import begin_run, make_out

    if cfg.multi_species:
        raise ConfigError(f"{cfg.source}: several species ([[species]]): run them with "
                          "timeslice.commands.run, which runs each and the assemblage")
    out = Path(out)
    # every input is expanded and its headers checked before the output folder is touched
    input_files = cfg.check_files()
    make_out(out)
    started = begin_run(out, cfg.model_dump(mode="json"), str(cfg.source), cfg.run.seed, command)
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
            fit, fit_key = fit_stage(cfg, baseline, cache, base_key=dataset_key(baseline),
                                     progress=progress)
        with _timed(t, "transfer"):
            stack = transfer_stage(cfg, fit, [baseline, *slices], cache, fit_key=fit_key,
                                   progress=progress)
            inputs.update(espace_stage(cfg, fit, [baseline, *slices], stack, out))
        with _timed(t, "summarise"):
            analysis = summarise_stage(cfg, stack, progress=progress)
        series, summary = analysis.series, analysis.tables["summary"].copy()
        if "period" not in summary and "period" in series.coords:
            periods = dict(zip(series["slice"].values, series["period"].values))
            summary.insert(4, "period", [str(periods.get(x, "")) for x in summary["slice"]])
        with _timed(t, "report"):
            from timeslice.report.assemble import write_outputs

            result.paths = write_outputs(
                report_options(cfg), series=series, summary=summary, fit=fit, inputs=inputs,
                out=out, warnings_seen=[str(w.message) for w in caught], analysis=analysis,
                progress=progress,
            )
        from timeslice.series.analysis import key_results

        result.key_results = key_results(analysis)
        result.fit, result.analysis = fit, analysis
    # the warnings were collected for the report; show them to the user too, once each
    for w in {str(w.message): w for w in caught}.values():
        warnings.showwarning(w.message, w.category, w.filename, w.lineno)
    result.paths["manifest"] = _complete_manifest(
        cfg, out, started, input_files=input_files, result=result, command=command,
        cache=cache, warnings_seen=sorted({str(w.message) for w in caught}),
        notes=list(analysis.notes))
    result.summary = summary
    result.cache_hits, result.cache_misses = cache.hits, cache.misses
    return result


