"""The series stage and the outputs of a run on the user's own suitability maps
(:mod:`timeslice.series_only`): the same summaries, data files, tables, vectors, maps and report
as a full run, minus what needs the climate or the fitted model (novelty layers and maps,
threshold rules computed from presences, response curves, evaluation).
"""

from __future__ import annotations

import re
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import pandas as pd
import xarray as xr

from timeslice.progress import Progress, no_progress

__all__ = ["analyse_own", "methods_text", "write_own_outputs"]

#: Figures drawn from novelty layers, which a run of supplied maps does not have.
_NOVELTY_FIGURES = ("novelty_map", "most_dissimilar_map")


def analyse_own(cfg, stack: xr.Dataset):
    """Change, stability, refugia, movement, ensembles (and hypotheses, zones) of the maps.

    Parameters
    ----------
    cfg : timeslice.series_only.SeriesOnlyConfig
        The configuration (``[series]`` options).
    stack : xarray.Dataset
        From :func:`timeslice.series_only.suitability_stack`.

    Returns
    -------
    timeslice.series.analysis.SeriesResult
    """
    from timeslice.series.analysis import analyse_series

    ser = cfg.series
    reference = cfg.reference_label()
    window = ser.refugium_window
    if window is None:
        # as in a full run: the past slices and the reference, else every slice
        past = [s.period_text for s in cfg.suitability.slices if s.scenario == "past"]
        window = list(dict.fromkeys(past)) + [reference] if past else None
    result = analyse_series(
        stack, reference=reference, window=window, rate=ser.dispersal_rate,
        rate_key="series.dispersal_rate", through=ser.movement_through,
        neighbours=ser.graph_neighbours, factors=ser.partition_factors, records=None,
        max_offset_years=ser.hindcast_max_offset_years)
    if ser.hypotheses:
        from timeslice.series.hypotheses import compare_hypotheses

        table, found = compare_hypotheses(stack, ser.hypotheses, records=None, sites=None)
        result.tables["hypotheses"] = table
        result.series = result.series.assign(dict(found.data_vars))
    if ser.zones is not None:
        from timeslice.series.zonal import read_zones, zonal_table

        result.tables["zones"] = zonal_table(
            result.series, read_zones(ser.zones, name_field=ser.zones_name_field))
    return result


def methods_text(cfg, *, n_slices: int, reference: str, window) -> str:
    """The methods paragraph of a run on supplied maps: where the maps came from, the
    threshold, what was summarised and what could not be assessed.

    Parameters
    ----------
    cfg : timeslice.series_only.SeriesOnlyConfig
        The configuration.
    n_slices : int
        Number of slices.
    reference : str
        Label of the reference slice.
    window : list, tuple or None
        The refugium window used.

    Returns
    -------
    str
    """
    from timeslice.series_only import NO_NOVELTY_NOTE

    sc = cfg.suitability
    land = ("each map's cells with a value" if sc.land == "nan"
            else f"the land raster {Path(sc.land).name}")
    if window is None:
        win = "every slice"
    elif isinstance(window, tuple):
        win = f"every slice from year {window[0]:g} to {window[1]:g} CE"
    else:
        win = "the slices " + ", ".join(f"'{w}'" for w in window)
    return (
        f"The climatic suitability of {n_slices} slices was supplied as rasters "
        f"([suitability] files, values 0..1) and not modelled here; no niche was fitted and no "
        f"climate was read. A cell counted as suitable where its suitability was at least "
        f"{float(sc.threshold):g} (the threshold given with the maps); land was {land}. Areas "
        f"are sums of cell areas on the authalic sphere; gain, loss and stability are relative "
        f"to the slice '{reference}'; a refugium is a cell suitable in {win} of every model "
        f"(Carnaval & Moritz 2008; Graham et al. 2010). {NO_NOVELTY_NOTE}")


def _threshold_tables(series: xr.Dataset, threshold: float, reference: str):
    """The threshold-free change and the one threshold given (no rules without presences)."""
    from timeslice.series.thresholds import (
        continuous_change_table,
        sensitivity_summary,
        threshold_table,
    )

    thr = threshold_table(series, {"given": threshold}, reference=reference, rule_of_run="given")
    cont = continuous_change_table(series, reference=reference)
    return {"threshold_sensitivity": thr, "suitability_change": cont,
            "threshold_summary": sensitivity_summary(thr, cont, reference=reference)}


def _data_files(cfg, opts, series, summary, analysis, out: Path) -> tuple[dict, dict]:
    """series (NetCDF or Zarr), ensemble, summary.csv and the series tables."""
    from timeslice.report.tables import write_csv
    from timeslice.report.zarr_store import series_writer
    from timeslice.series.analysis import key_results

    write, ext = series_writer(cfg.output.format)
    paths: dict[str, Path] = {
        "series": write(series, out / f"series{ext}", history=opts.history, title=opts.title),
        "summary": write_csv(summary, out / "summary.csv"),
    }
    if analysis.ensemble is not None:
        paths["ensemble"] = write(analysis.ensemble, out / f"ensemble{ext}",
                                  history=opts.history, title=f"{opts.title}: model ensemble")
    tables: dict[str, pd.DataFrame] = {"key_results": key_results(analysis)}
    tables.update({f"series_{k}": v for k, v in analysis.tables.items() if k != "summary"})
    for name, df in tables.items():
        write_csv(df, out / "tables" / f"{name}.csv")
    paths["tables"] = out / "tables"
    return paths, tables


def _figures(opts, series, summary, analysis, extra, out: Path, refuge, patches, progress):
    """Every figure a full run draws that needs neither novelty layers nor the fit."""
    from timeslice.report.assemble import map_jobs, plot_jobs

    no_fit = SimpleNamespace(response=None, importance=None)
    jobs = []
    if opts.maps:
        jobs += [j for j in map_jobs(opts, series, analysis, out / "maps", refuge=refuge,
                                     patches=patches)
                 if getattr(j.draw, "__name__", "") not in _NOVELTY_FIGURES]
    jobs += plot_jobs(opts, series, summary, no_fit, {"extra_figures": []}, analysis, extra,
                      out / "plots")
    for job in jobs:  # no novelty layers: nothing is hatched
        job.caption = re.sub(r";\s*hatched[^)]*", "", job.caption)
    headline, figures = [], []
    progress("report", 0, len(jobs))
    for i, job in enumerate(jobs, 1):
        path = job.run()
        if job.caption:
            (headline if job.headline else figures).append((job.caption, path))
        progress("report", i, len(jobs))
    return headline, figures


def write_own_outputs(cfg, analysis, summary: pd.DataFrame, out: Path, *,
                      progress: Progress = no_progress,
                      warnings_seen: list[str] | None = None) -> dict[str, Path]:
    """Write the data files, tables, vectors, maps, plots, GeoTIFFs and report of the maps.

    Parameters
    ----------
    cfg : timeslice.series_only.SeriesOnlyConfig
        The configuration.
    analysis : timeslice.series.analysis.SeriesResult
        From :func:`analyse_own`.
    summary : pandas.DataFrame
        One row per slice.
    out : Path
        Run folder.
    progress : callable, optional
        ``progress("report", done, total)``.
    warnings_seen : list of str, optional
        Warnings of the run, printed in the report.

    Returns
    -------
    dict of str to Path
        The outputs written, by kind.
    """
    from timeslice import __version__
    from timeslice.report.assemble import ReportOptions
    from timeslice.report.tables import write_csv
    from timeslice.series.patches import label_patches, refugium_layer, refugium_patches

    reference = cfg.reference_label()
    opts = ReportOptions(
        title=cfg.run.name, species="the supplied suitability maps", reference=reference,
        history=f"timeslice {__version__} series of the supplied suitability maps of "
                f"{cfg.source.name if cfg.source else 'config'}",
        threshold_value=float(cfg.suitability.threshold), maps=cfg.output.maps,
        vector=cfg.output.vector, geotiff=cfg.output.geotiff, report=cfg.output.report,
        projection=cfg.output.projection, dispersal_rate=cfg.series.dispersal_rate,
        clamp=False, config_path=str(cfg.source), seed=cfg.run.seed, version=__version__,
        data_format=cfg.output.format)
    series = analysis.series
    layer = refugium_layer(series)
    if layer is not None:
        series = series.assign(refugium_patch=label_patches(series[layer]))
    paths, tables = _data_files(cfg, opts, series, summary, analysis, out)
    series = series.load()
    refuge = "refugium_window" if "refugium_window" in series else "refugium_all_slices"
    extra = _threshold_tables(series, float(cfg.suitability.threshold), reference)
    patches = refugium_patches(series, layer=refuge) if refuge in series else None
    if patches is not None:
        extra["refugium_patches"] = patches[1]
    for name, df in extra.items():
        write_csv(df, out / "tables" / f"{name}.csv")
    if opts.vector:
        from timeslice.report.vector import write_vectors

        write_vectors(series, out / "vector", patches=patches)
        paths["vector"] = out / "vector"
    headline, figures = _figures(opts, series, summary, analysis, extra, out, refuge, patches,
                                 progress)
    if opts.maps:
        paths["maps"] = out / "maps"
    if opts.geotiff:
        from timeslice.report.geotiff import export

        export(series, out / "geotiff")
        if analysis.ensemble is not None:
            export(analysis.ensemble, out / "geotiff" / "ensemble")
        paths["geotiff"] = out / "geotiff"
    if opts.report:
        paths["report"] = _report(cfg, opts, series, summary, analysis, tables, extra, paths,
                                  refuge, headline, figures, warnings_seen or [], out)
    return paths


def _report(cfg, opts, series, summary, analysis, tables, extra, paths, refuge, headline,
            figures, warnings_seen, out: Path) -> Path:
    from timeslice.report.html import DEFAULT_CAUTIONS, ReportContext, key_numbers, write_report
    from timeslice.report.narrative import findings
    from timeslice.series_only import NO_NOVELTY_NOTE

    results = tables["key_results"]
    outputs: dict[str, Any] = {"all layers (CF attributes)": paths["series"].name,
                               "one row per slice": "summary.csv"}
    if "ensemble" in paths:
        outputs["model agreement and variance shares"] = paths["ensemble"].name
    if "vector" in paths:
        outputs["suitable area per slice (GeoJSON)"] = "vector/suitable.geojson"
    outputs["run manifest"] = "manifest.json"
    ctx = ReportContext(
        title=opts.title, species=opts.species, summary=summary, headline_figures=headline,
        key_numbers=key_numbers(results, series=series, refugium=refuge), outputs=outputs,
        tables={k: v for k, v in {**tables, **extra}.items()
                if k not in ("series_summary", "threshold_sensitivity", "suitability_change")},
        figures=figures,
        methods=methods_text(cfg, n_slices=int(series.sizes["slice"]), reference=opts.reference,
                             window=getattr(analysis, "window", None)),
        # the caution on flagged novel climate does not hold: nothing could be flagged
        cautions=tuple(NO_NOVELTY_NOTE if "MESS" in c else c for c in DEFAULT_CAUTIONS),
        run_info={"config": opts.config_path, "seed": opts.seed, "version": opts.version,
                  "warnings": "; ".join(warnings_seen) or "none"},
        highlights=findings(results), alerts=[NO_NOVELTY_NOTE])
    return write_report(ctx, out / "report.html")
