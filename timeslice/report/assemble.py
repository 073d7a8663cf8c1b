"""Everything a finished run writes, from the stage results: data files, tables, figures, report.

:func:`write_outputs` is the report stage. It takes the stage results (the summarised series,
the fit, the series analysis, the input tables) and :class:`ReportOptions` (the few settings
it needs, filled in by the pipeline, so this package never reads the config), and writes in
steps: the data (``series.nc``, ``ensemble.nc``, ``summary.csv``, ``tables/``), the derived
tables (refugium patches, threshold sensitivity), vectors, maps, plots, GeoTIFFs and the HTML
report. Figures are listed first as :class:`FigureJob` and drawn afterwards, so progress can be
counted and the drawing kept in one place.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from timeslice import layers
from timeslice.errors import TimesliceWarning
from timeslice.progress import Progress, no_progress

__all__ = ["FigureJob", "ReportOptions", "cell_km", "run_information", "write_outputs"]




@dataclass(frozen=True)
class ReportOptions:
    """The settings the report stage reads (the pipeline fills them in from the config).

    Parameters
    ----------
    title : str
        Run name, the title of the files and the report.
    history : str
        The NetCDF ``history`` line.
    species : str
        Species name as the report prints it.
    reference : str
        Label of the reference slice of the change summaries.
    threshold_value : float or None
        The fixed threshold of ``[niche] threshold_value`` (a column of the sensitivity table).
    maps, vector, geotiff, report : bool
        Which outputs to write.
    projection : str or None
        Map projection (None: plain longitude-latitude).
    dispersal_rate : str or None
        Movement rate as configured, for the reach-map caption.
    clamp : bool
        Whether predictors were clamped to the calibration range (methods paragraph).
    config_path, seed, version : str, int, str
        Run information printed in the report.
    data_format : {"netcdf", "zarr"}
        Format of the data files (``[output] format``): ``series.nc`` or ``series.zarr``.
    dpi : int
        Resolution of the figures (``[output] dpi``).
    figure_format : {"png", "svg", "pdf"}
        File format of the figures (``[output] figure_format``).
    processes : int
        Processes drawing the figures (the main one and ``processes - 1`` workers).
    """

    title: str
    history: str
    species: str
    reference: str
    threshold_value: float | None = None
    maps: bool = True
    vector: bool = True
    geotiff: bool = True
    report: bool = True
    projection: str | None = None
    dispersal_rate: str | None = None
    clamp: bool = True
    config_path: str = ""
    seed: int = 0
    version: str = ""
    data_format: str = "netcdf"
    dpi: int = 110
    figure_format: str = "png"
    processes: int = 2


@dataclass
class FigureJob:
    """One figure to draw: its caption, the function that draws it and its arguments.

    Parameters
    ----------
    caption : str
        Caption in the report.
    draw : callable
        Plotting function; returns the path written.
    args, kwargs : tuple, dict
        Its arguments.
    headline : bool
        Shown at the top of the report instead of among the figures.
    cost : float
        Rough relative drawing cost (map panels), so the costliest are started first.
    """

    caption: str
    draw: Callable[..., Path]
    args: tuple = ()
    kwargs: dict[str, Any] = field(default_factory=dict)
    headline: bool = False
    cost: float = 1.0

    def run(self) -> Path:
        """Draw the figure.

        Returns
        -------
        Path
            The file written.
        """
        return self.draw(*self.args, **self.kwargs)


def cell_km(ds: xr.Dataset) -> float:
    """Typical cell size, km: the square root of the mean land cell area (authalic sphere).

    Parameters
    ----------
    ds : xarray.Dataset
        A dataset on the grid, with ``land`` per slice if available.

    Returns
    -------
    float
        Cell size in km.
    """
    from timeslice.grid import cell_area

    area = cell_area(ds)
    if "land" in ds and "slice" in ds["land"].dims:
        land = ds["land"].isel(slice=0).astype(bool)
        if bool(land.any()):
            area = area.where(land)
    return float(np.sqrt(float(area.mean())))


def write_outputs(
    opts: ReportOptions,
    *,
    series: xr.Dataset,
    summary: pd.DataFrame,
    fit,
    inputs: dict[str, Any],
    out: Path,
    warnings_seen: list[str],
    analysis=None,
    progress: Progress = no_progress,
) -> dict[str, Path]:
    """Write the NetCDF, tables, vectors, maps, plots, GeoTIFFs and HTML report of a run.

    Parameters
    ----------
    opts : ReportOptions
        The settings of the report stage.
    series : xarray.Dataset
        The summarised series (:class:`timeslice.series.analysis.SeriesResult` ``.series``).
    summary : pandas.DataFrame
        One row per slice.
    fit : timeslice.niche.workflow.NicheFit
        The fitted niche.
    inputs : dict
        The harmonise tables (``inputs``, ``slice_land``), ``environment`` and
        ``extra_figures`` (caption, path) drawn by earlier stages.
    out : Path
        Run folder.
    warnings_seen : list of str
        Warnings of the run, printed in the report.
    analysis : timeslice.series.analysis.SeriesResult, optional
        The series analysis (tables, ensemble, window).
    progress : callable, optional
        ``progress("report", done, total)`` after each figure.

    Returns
    -------
    dict of str to Path
        The outputs written, by kind.
    """
    from timeslice.series.patches import label_patches, refugium_layer

    if refugium_layer(series) is not None:  # the refugium's patches as a layer (R1 largest)
        series = series.assign(refugium_patch=label_patches(series[refugium_layer(series)]))
    series = layers.stamp(series.copy())  # the table's words in every file (NetCDF, GeoTIFF)
    paths, tables, results = _write_data(opts, series, summary, fit, inputs, out, analysis)
    series = series.load()  # every map reads every layer: compute once
    refuge = "refugium_window" if "refugium_window" in series else "refugium_all_slices"
    from timeslice.report.derived import derived_tables
    from timeslice.report.tables import write_csv

    # refugium patches, threshold sensitivity and threshold-free change
    extra, patches = derived_tables(series, fit=fit, reference=opts.reference,
                                    threshold_value=opts.threshold_value, refugium=refuge)
    for name, df in extra.items():
        write_csv(df, out / "tables" / f"{name}.csv")
    tables.update(extra)
    if opts.vector:
        from timeslice.report.vector import write_vectors

        write_vectors(series, out / "vector", patches=patches)
        paths["vector"] = out / "vector"
    jobs: list[FigureJob] = []
    if opts.maps:
        jobs += map_jobs(opts, series, analysis, out / "maps", refuge=refuge, patches=patches)
        paths["maps"] = out / "maps"
    jobs += plot_jobs(opts, series, summary, fit, inputs, analysis, extra, out / "plots")
    headline, figures = _draw(jobs, progress, processes=opts.processes)
    if opts.geotiff:
        _write_geotiffs(series, analysis, out / "geotiff")
        paths["geotiff"] = out / "geotiff"
    from timeslice.niche.evaluate import weak_model_message

    # checked on every run (the fit may come from the cache): a red card and a line on stderr
    weak = weak_model_message(fit.evaluation)
    if weak:
        warnings.warn(weak, TimesliceWarning, stacklevel=2)
        warnings_seen = [*warnings_seen, weak]
    if opts.report:
        paths["report"] = _write_html(
            opts, series=series, summary=summary, fit=fit, analysis=analysis, out=out,
            tables=tables, results=results, extra=extra, paths=paths, refuge=refuge,
            headline=headline, figures=figures, warnings_seen=warnings_seen, weak=weak)
    return paths


def _write_data(opts: ReportOptions, series, summary, fit, inputs, out: Path, analysis):
    """series.nc, ensemble.nc, summary.csv and every table; returns (paths, tables, results)."""
    from timeslice.report.tables import write_csv
    from timeslice.report.zarr_store import series_writer

    write_series, ext = series_writer(opts.data_format)  # NetCDF file or Zarr store
    paths: dict[str, Path] = {
        "series": write_series(series, out / f"series{ext}", history=opts.history,
                               title=opts.title),
        "summary": write_csv(summary, out / "summary.csv"),
    }
    if analysis is not None and analysis.ensemble is not None:
        paths["ensemble"] = write_series(analysis.ensemble, out / f"ensemble{ext}",
                                         history=opts.history,
                                         title=f"{opts.title}: model ensemble")
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
            write_csv(df, out / "tables" / f"{name}.csv")
    paths["tables"] = out / "tables"
    return paths, tables, results


def map_jobs(opts: ReportOptions, series: xr.Dataset, analysis, maps: Path, *, refuge: str,
             patches) -> list[FigureJob]:
    """The map figures of a run, in report order (the per-slice maps are drawn at once).

    Parameters
    ----------
    opts : ReportOptions
        Report settings (projection, movement rate).
    series : xarray.Dataset
        The summarised series, loaded.
    analysis : SeriesResult or None
        For the ensemble maps.
    maps : Path
        Folder of the maps.
    refuge : str
        Name of the refugium layer outlined on the stability map.
    patches : tuple or None
        Refugium patches from :func:`timeslice.report.derived.derived_tables`.

    Returns
    -------
    list of FigureJob
    """
    from timeslice import report as R

    from timeslice.report._layers import slice_labels

    proj = opts.projection
    n = int(series.sizes.get("slice", 1))
    # one job per slice map, so the processes share them out
    jobs = [FigureJob("", R.slice_maps, (series, maps), {"projection": proj, "slices": [x]})
            for x in slice_labels(series)]
    jobs += [
        FigureJob("Stability (fraction of slices suitable) with refugia outlined",
                  R.stability_map, (series, maps / "stability.png"),
                  {"refugium": refuge, "projection": proj,
                   "variable": "stability_window" if "stability_window" in series
                   else "stability_all_slices",
                   "patches": patches[1] if patches is not None else None}, headline=True),
        FigureJob("Gain, loss and stable range against the reference slice", R.change_map,
                  (series, maps / "panel_change.png"), {"projection": proj}, headline=True),
        FigureJob("Suitability in every slice (shared colour scale; hatched: novel climate, "
                  "MESS < 0)", R.series_panel, (series, maps / "panel_suitability.png"),
                  {"projection": proj}),
        FigureJob("Novel climate: MESS per slice (negative = outside the calibration range)",
                  R.novelty_map, (series, maps / "panel_mess.png"),
                  {"projection": proj, "columns": "model"}),
        FigureJob("Novel climate by ExDet: outside the univariate range (NT1 < 0) or a novel "
                  "combination (NT2 > 1)", R.novelty_map, (series, maps / "panel_exdet.png"),
                  {"variable": "exdet", "projection": proj, "columns": "model"}),
    ]
    if "most_dissimilar" in series:
        jobs.append(FigureJob(
            "Most dissimilar variable: the predictor that sets MESS; where it is hatched "
            "(novel climate) this predictor lies outside the calibration range",
            R.most_dissimilar_map, (series, maps / "panel_most_dissimilar.png"),
            {"projection": proj}))
    ens = analysis.ensemble if analysis is not None else None
    if ens is not None and "agreement" in ens:
        jobs.append(FigureJob(
            "Agreement of the climate models per scenario and period: the share of models in "
            "which the cell is suitable, majority consensus outlined, dotted where the models "
            "disagree", R.agreement_map, (ens, maps / "panel_agreement.png"),
            {"projection": proj}))
    if ens is not None and "dominant" in ens:
        jobs.append(FigureJob(
            "Dominant source of uncertainty per cell (largest share of the suitability "
            "variance, factorial ANOVA over the ensemble)", R.dominant_source_map,
            (ens, maps / "panel_dominant_source.png"), {"projection": proj}))
    pick = _last_future_slices(series) if "reachable_limited" in series else []
    if pick:
        jobs.append(FigureJob(
            f"Suitable and reachable under limited movement "
            f"({opts.dispersal_rate or 'no rate: as occupied'}) at the last period",
            R.reach_map, (series.assign(reachable=series["reachable_limited"]),
                          maps / "panel_reach.png"), {"slices": pick, "projection": proj}))
    for job in jobs[len(slice_labels(series)):]:
        job.cost = float(n)  # panels drawn, roughly
    return finish_jobs(jobs, opts)


def finish_jobs(jobs: list[FigureJob], opts: ReportOptions) -> list[FigureJob]:
    """The figure settings of the run on every job: dpi, and the file format as the suffix.

    Parameters
    ----------
    jobs : list of FigureJob
        Jobs whose target files end in ``.png``.
    opts : ReportOptions
        ``dpi`` and ``figure_format``.

    Returns
    -------
    list of FigureJob
        The same jobs, changed in place.
    """
    from timeslice.report.figures import figure_file

    for job in jobs:
        if job.draw is _drawn:
            continue
        job.kwargs.setdefault("dpi", opts.dpi)
        if job.draw.__name__ == "slice_maps":
            job.kwargs["figure_format"] = opts.figure_format
        job.args = tuple(figure_file(a, opts.figure_format)
                         if isinstance(a, Path) and a.suffix == ".png" else a for a in job.args)
    return jobs


def _last_future_slices(series: xr.Dataset) -> list[str]:
    future = [str(x) for x, sc in zip(series["slice"].values, series["scenario"].values)
              if str(sc) not in ("past", "baseline")]
    if not future:
        return []
    last = max(float(series["year"].sel(slice=x)) for x in future)
    return [x for x in future if float(series["year"].sel(slice=x)) == last]


def plot_jobs(opts: ReportOptions, series: xr.Dataset, summary: pd.DataFrame, fit, inputs,
              analysis, extra: dict[str, pd.DataFrame], plots: Path) -> list[FigureJob]:
    """The plots of a run (areas, gain and loss, shifts, responses, importance...), in order.

    Parameters
    ----------
    opts : ReportOptions
        Report settings.
    series : xarray.Dataset
        The summarised series, loaded.
    summary : pandas.DataFrame
        One row per slice.
    fit : NicheFit
        Response curves and importance.
    inputs : dict
        ``environment`` table (availability and analog fraction through time).
    analysis : SeriesResult or None
        Detail and diversity tables.
    extra : dict of DataFrame
        Derived tables (threshold sensitivity).
    plots : Path
        Folder of the plots.

    Returns
    -------
    list of FigureJob
    """
    from timeslice import report as R

    jobs = [FigureJob("Suitable area through time", R.area_through_time,
                      (summary, plots / "area.png"))]
    # figures an earlier stage drew (the slices in environmental space)
    jobs += [FigureJob(caption, _drawn, (path,)) for caption, path in inputs.get("extra_figures", [])]
    jobs += _diversity_jobs(series, analysis, plots)
    env = inputs.get("environment")
    if env is not None and len(env) > 1:
        for col, words in (("environmental_availability", "share of the niche's climates "
                            "still found on the slice's land"),
                           ("analog_fraction", "share of the slice's land in the calibration "
                            "climate")):
            jobs.append(FigureJob(f"Through time: {words}", R.area_through_time,
                                  (env, plots / f"{col}.png"),
                                  {"column": col, "ylabel": col.replace("_", " "),
                                   "title": words[0].upper() + words[1:]}))
    jobs.append(FigureJob("Gain and loss per slice", R.gain_loss_bars,
                          (summary, plots / "gain_loss.png")))
    jobs.append(FigureJob("Range-centroid track", R.centroid_track,
                          (summary, plots / "centroid_track.png"),
                          {"land": series["land"].isel(slice=0), "projection": opts.projection}))
    detail = analysis.tables.get("detail") if analysis is not None else None
    if detail is not None and "lat_q50" in detail:
        jobs.append(FigureJob("Latitude and elevation of the suitable range (median, 10-90 % "
                              "band)", R.shift_plot, (detail, plots / "shifts.png")))
    if fit.response is not None:
        jobs.append(FigureJob("Response curves (shaded: calibration range; outside it the model "
                              "extrapolates)", R.response_curves,
                              (fit.response, plots / "response.png")))
    if fit.importance is not None and fit.importance["importance_mean"].notna().any():
        jobs.append(FigureJob("Permutation importance of the predictors", R.importance_bars,
                              (fit.importance, plots / "importance.png")))
    sens = extra.get("threshold_sensitivity")
    if sens is not None and (sens["slice"] != opts.reference).any():
        jobs.append(FigureJob(
            "Change in suitable area under each threshold rule (median and range over models): "
            "how much the headline hangs on the threshold", R.threshold_plot,
            (sens, plots / "threshold_sensitivity.png"), {"reference": opts.reference}))
    return finish_jobs(jobs, opts)


def _drawn(path: Path) -> Path:
    return path


def _diversity_jobs(series: xr.Dataset, analysis, plots: Path) -> list[FigureJob]:
    div_sites = analysis.tables.get("diversity_sites") if analysis is not None else None
    if div_sites is None or "stability" not in div_sites:
        return []
    from timeslice.report.plots import diversity_plot

    table = analysis.tables["diversity"]
    layer = table["layer"].iloc[0] if len(table) else None
    if layer not in series:
        return []
    return [FigureJob("Sampled populations: genetic diversity against stability, and the sites "
                      "on the stability map", diversity_plot,
                      (div_sites, table, series[layer], plots / "diversity.png"))]


def _draw(jobs: list[FigureJob], progress: Progress, processes: int = 1):
    """Draw every figure (in `processes` processes); returns (headline figures, other
    figures) as (caption, path)."""
    from timeslice.report.figures import draw_all

    progress("report", 0, len(jobs))
    paths = draw_all(jobs, processes=processes,
                     progress=lambda done, total: progress("report", done, total))
    headline: list[tuple[str, Path]] = []
    figures: list[tuple[str, Path]] = []
    for job, path in zip(jobs, paths):
        if job.caption:
            (headline if job.headline else figures).append((job.caption, path))
    return headline, figures


def _write_geotiffs(series: xr.Dataset, analysis, folder: Path) -> None:
    from timeslice.report.geotiff import export

    export(series, folder)
    if analysis is not None and analysis.ensemble is not None:
        # agreement, consensus, spread and variance shares per scenario x period
        export(analysis.ensemble, folder / "ensemble")


def _write_html(opts: ReportOptions, *, series, summary, fit, analysis, out: Path, tables,
                results, extra, paths, refuge, headline, figures, warnings_seen, weak) -> Path:
    from timeslice.report.html import ReportContext, key_numbers, write_report
    from timeslice.report.narrative import findings, methods_paragraph
    from timeslice.report.tables import change_table, scope_years

    models = sorted({str(m) for m in series["model"].values} - {"observed"})
    scenarios = sorted({str(m) for m in series["scenario"].values} - {"baseline"})
    ctx = ReportContext(
        title=opts.title,
        headline_figures=headline,
        key_numbers=key_numbers(results if results is not None else summary,
                                series=series, refugium=refuge),
        outputs=_output_list(paths, extra),
        species=opts.species,
        summary=summary,
        tables={k: v for k, v in tables.items()
                if v is not None and k not in ("response", "series_summary",
                                               "threshold_sensitivity", "suitability_change")},
        figures=figures,
        methods=methods_paragraph(
            species=opts.species, fit_params=fit.params,
            n_slices=int((series["scenario"].values.astype(str) != "baseline").sum()),
            models=models, scenarios=[x for x in scenarios if x != "past"] or scenarios,
            reference=opts.reference, clamp=opts.clamp, evaluation=fit.evaluation,
            window=getattr(analysis, "window", None) if analysis is not None else None,
            cell_km=cell_km(series),
        ),
        run_info=run_information(opts, fit=fit, series=series, inputs=tables.get("inputs"),
                                 analysis=analysis, warnings_seen=warnings_seen),
        highlights=findings(results, years=scope_years(summary)) if results is not None else [],
        change=change_table(results, summary) if results is not None else None,
        alerts=[weak] if weak else [],
    )
    return write_report(ctx, out / "report.html")


def run_information(opts: ReportOptions, *, fit, series: xr.Dataset, inputs=None,
                    analysis=None, warnings_seen=()) -> dict[str, Any]:
    """The report's run information, in the order of the stages: the run, harmonise, fit,
    transfer, summarise, report, and the warnings in the order they were raised.

    Parameters
    ----------
    opts : ReportOptions
        Version, configuration file, seed, figure settings.
    fit : NicheFit
        Its parameters (algorithm, threshold, records).
    series : xarray.Dataset
        The summarised series (slices, models, scenarios).
    inputs : pandas.DataFrame, optional
        The harmonise table (one row per climate input).
    analysis : SeriesResult, optional
        Its refugium window.
    warnings_seen : sequence of str
        The run's warnings, in the order raised (repeats shown once).

    Returns
    -------
    dict of str to object
        Item -> value; the seed stays an integer (the report prints it plainly).
    """
    p = dict(getattr(fit, "params", {}) or {})
    labels = [str(s) for s in series["slice"].values] if "slice" in series.coords else []
    models = sorted({str(m) for m in series["model"].values} - {"observed"}) \
        if "model" in series.coords else []
    scenarios = list(dict.fromkeys(str(s) for s in series["scenario"].values)) \
        if "scenario" in series.coords else []
    window = getattr(analysis, "window", None) if analysis is not None else None
    info: dict[str, Any] = {"timeslice version": opts.version,
                            "configuration": opts.config_path, "seed": int(opts.seed)}
    if inputs is not None:
        info["harmonise: climate inputs"] = f"{len(inputs)} (one row each in the inputs table)"
    if p:
        rule, thr = p.get("threshold_rule", ""), p.get("threshold")
        info["fit: algorithm"] = str(p.get("algorithm", ""))
        info["fit: threshold"] = (f"{rule}, {float(thr):.4g}" if thr is not None else str(rule))
        if "n_records_used" in p:
            info["fit: records used"] = (f"{p['n_records_used']} of "
                                         f"{p.get('n_records_input', '?')}")
    info["transfer: slices"] = (f"{len(labels)} ({len(models)} climate models; scenarios: "
                                f"{', '.join(scenarios) or 'none'})")
    info["summarise: reference slice"] = opts.reference
    if isinstance(window, tuple) and len(window) == 2 and all(
            isinstance(w, (int, float)) for w in window):
        info["summarise: refugium window"] = f"years {window[0]:g} to {window[1]:g}"
    elif window:
        info["summarise: refugium window"] = ", ".join(map(str, window))
    info["report: figures"] = (f"{opts.figure_format.upper()} at {opts.dpi} dpi, projection "
                               f"{opts.projection or 'lonlat'}")
    seen = list(dict.fromkeys(str(w) for w in warnings_seen))
    info["warnings, in the order raised"] = (
        " ".join(f"({k + 1}) {w}" for k, w in enumerate(seen)) if seen else "none")
    return info


def _output_list(paths: dict[str, Path], extra: dict[str, pd.DataFrame]) -> dict[str, str]:
    return {
        "all layers, CF NetCDF": paths["series"].name if "series" in paths else "series.nc",
        "one row per slice": "summary.csv",
        **({"model agreement and variance shares": paths["ensemble"].name}
           if "ensemble" in paths else {}),
        **({"refugium patches (GeoJSON, one feature per patch)": "vector/refugium_patches.geojson",
            "suitable area per slice (GeoJSON)": "vector/suitable.geojson"}
           if "vector" in paths else {}),
        **({"refugium patches, one row each": "tables/refugium_patches.csv"}
           if "refugium_patches" in extra else {}),
        **({"suitable area under every threshold rule": "tables/threshold_sensitivity.csv",
            "threshold-free change of suitability": "tables/suitability_change.csv"}
           if "threshold_sensitivity" in extra else {}),
        "run manifest": "manifest.json",
    }
