"""The commands of a run folder: a whole run (one species or several), single stages, and
what reads a finished run (summarise again, export, rerun).

:mod:`timeslice.pipeline` knows the order of the stages of one species; this module is what
the command line and the Python API call.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path
from typing import Any

import pandas as pd
import xarray as xr

from timeslice import __version__
from timeslice.cache import StageCache
from timeslice.config import Config
from timeslice.errors import ConfigError, DataError, InputFileError
from timeslice.pipeline import (
    RunResult,
    dataset_key,
    fit_stage,
    harmonise_stage,
    run as run_species,
)
from timeslice.progress import Progress, no_progress
from timeslice.runfolder import begin_run, finish_run, make_out, require_complete

__all__ = ["rerun", "run", "run_assemblage", "run_export", "run_fit", "run_harmonise",
           "run_summarise"]



def run(
    cfg: Config,
    out: str | os.PathLike,
    *,
    force: bool = False,
    progress: Progress = no_progress,
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
    progress : callable, optional
        ``progress(stage, done, total)`` as the stages advance.
    command : list of str, optional
        The command line recorded in the manifest (default ``sys.argv``).
    cache_dir : path, optional
        Stage cache folder (default ``out/.cache``).

    Returns
    -------
    RunResult
        Output paths, tables, the fit, the series analysis and the timings.
    """
    from timeslice.series_only import SeriesOnlyConfig, run_series_only

    if isinstance(cfg, SeriesOnlyConfig):  # the user's own suitability maps: series stage only
        return run_series_only(cfg, out, progress=progress, command=command)
    if cfg.multi_species:
        return run_assemblage(cfg, out, force=force, progress=progress, command=command)
    return run_species(cfg, out, force=force, progress=progress, command=command,
                       cache_dir=cache_dir)


def run_assemblage(cfg: Config, out: str | os.PathLike, *, force: bool = False,
                   progress: Progress = no_progress, command: list[str] | None = None) -> RunResult:
    """Several species over the same slices: each species run into ``out/species/NAME`` (the
    climate is harmonised once: every species reads the shared stage cache), then the
    assemblage: predicted richness per cell and slice, its change against the reference and
    the refugia the species share (``assemblage.nc``, ``tables/assemblage.csv``).

    Species are run one after another and only the running richness sum is kept between them,
    so peak memory does not grow with the number of species.

    Parameters
    ----------
    cfg : Config
        Validated configuration with several ``[[species]]``.
    out : str or os.PathLike
        Output folder.
    force : bool
        Recompute every stage.
    progress : callable, optional
        ``progress(stage, done, total)``.
    command : list of str, optional
        Command line recorded in the manifests.
    """
    from timeslice.config import slug
    from timeslice.grid import cell_area
    from timeslice.report import write_csv, write_manifest, write_series
    from timeslice.report.zarr_store import open_store

    out = Path(out)
    input_files = cfg.check_files()
    make_out(out)
    started = begin_run(out, cfg.model_dump(mode="json"), str(cfg.source), cfg.run.seed, command)
    result = RunResult(out=out)
    richness = shared = None
    names = []
    for sub in cfg.species_configs():
        name = sub.species.name
        names.append(name)
        res = run_species(sub, out / "species" / slug(name), force=force, progress=progress,
                  command=command, cache_dir=out / ".cache")
        result.paths[f"species {name}"] = res.out
        with open_store(res.out) as ds:  # series.nc or series.zarr
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
    written, removed = finish_run(out, started)
    result.paths["manifest"] = write_manifest(
        {"status": "complete", "files": written, "removed_stale": removed,
         "config": cfg.model_dump(mode="json"), "config_path": str(cfg.source),
         "inputs": sorted({str(f.path) for fs in input_files.values() for f in fs}),
         "seed": cfg.run.seed, "command": command or sys.argv, "species": names},
        out / "manifest.json")
    result.summary = table
    return result


# ----------------------------------------------------------------------------- single stages


def run_harmonise(cfg: Config, out: str | os.PathLike, *, force: bool = False,
                  progress: Progress = no_progress) -> dict[str, Path]:
    """Harmonise every slice and write one CF NetCDF per slice plus the input table.

    Parameters
    ----------
    cfg : Config
        Validated configuration.
    out : str or os.PathLike
        Output folder.
    force : bool
        Recompute every stage.
    progress : callable, optional
        ``progress(stage, done, total)``.
    """
    from timeslice.io import file_stem
    from timeslice.report import write_csv, write_series

    out = Path(out)
    from timeslice.series_only import require_climate

    require_climate(cfg, "timeslice harmonise")
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


def run_fit(cfg: Config, out: str | os.PathLike, *, force: bool = False,
            progress: Progress = no_progress) -> dict[str, Path]:
    """Fit the niche on the harmonised baseline; write the model, tables and response curves.

    Parameters
    ----------
    cfg : Config
        Validated configuration (one species).
    out : str or os.PathLike
        Output folder.
    force : bool
        Recompute every stage.
    progress : callable, optional
        ``progress(stage, done, total)``: harmonising the baseline, then per fold of the fit.
    """
    from timeslice.niche.persist import save_model
    from timeslice.report import response_curves, write_csv

    out = Path(out)
    from timeslice.series_only import require_climate

    require_climate(cfg, "timeslice fit")
    if cfg.multi_species:
        raise ConfigError(
            f"{cfg.source}: `timeslice fit` fits one species; this config lists "
            f"{len(cfg.species)} ([[species]]): run `timeslice run` (each species gets its "
            "model in species/NAME), or keep one [species] table for `fit`")
    cfg.check_files()
    cache = StageCache(out / ".cache", force=force)
    cfg_base = cfg.model_copy(update={"slices": []})
    baseline, _, _ = harmonise_stage(cfg_base, cache, progress=progress)
    fit, _ = fit_stage(cfg, baseline, cache, base_key=dataset_key(baseline), progress=progress)
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
    progress: Progress = no_progress,
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
    progress : callable, optional
        ``progress(stage, done, total)``.
    target : path, optional
        Write the new summaries into this folder (with the run's cache) and leave the run as
        it is.

    Returns
    -------
    RunResult
        As :func:`run`.
    """
    from timeslice.config import SeriesConfig, parse_config
    from timeslice.report import read_manifest

    out = Path(out)
    manifest = out / "manifest.json"
    if not manifest.is_file():
        raise DataError(f"{out}: no manifest.json; run `timeslice run CONFIG --out {out}` first")
    require_complete(out, "timeslice summarise")
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
    from timeslice.series_only import SeriesOnlyConfig, check_suitability

    if isinstance(cfg, SeriesOnlyConfig):  # a run of the user's own suitability maps
        if dated_records is not None:
            raise DataError("summarise --dated-records: this run summarises supplied "
                            "suitability maps, without climate to hindcast from; drop it")
        check_suitability(cfg, "summarise")
    else:
        if dated_records is not None:
            cfg.species.dated_records = Path(dated_records).resolve()
        from timeslice.config import check_references

        check_references(cfg, "summarise")
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
    (default ``out/geotiff``); `variables` chooses layers (default every layer on the grid).

    Parameters
    ----------
    out : str or os.PathLike
        Folder of a finished run.
    fmt : str
        Export format (``"geotiff"``).
    variables : list of str, optional
        Layers to export (default every layer on the grid).
    target : str or os.PathLike, optional
        Output folder (default ``out/geotiff``).
    """
    from timeslice.report.zarr_store import export_store, find_series

    out = Path(out)
    if fmt != "geotiff":
        raise DataError(f"--format must be 'geotiff', got {fmt!r}")
    path = find_series(out)  # series.nc or series.zarr ([output] format)
    if path is None:
        raise DataError(f"{out / 'series.nc'}: not found; run `timeslice run CONFIG --out {out}` "
                        "first")
    require_complete(out, "timeslice export")
    folder = Path(target) if target is not None else out / "geotiff"
    written = export_store(path, folder, variables=variables)
    ensemble = find_series(out, "ensemble")
    if ensemble is not None and variables is None:
        # agreement, consensus and variance shares across models, beside the series layers
        written += export_store(ensemble, folder / "ensemble")
    return written


def rerun(manifest: str | os.PathLike, out: str | os.PathLike | None = None, *,
          progress: Progress = no_progress) -> RunResult:
    """Repeat the run recorded in `manifest` (inputs must still have their recorded hashes).

    Parameters
    ----------
    manifest : str or os.PathLike
        ``manifest.json`` of a finished run.
    out : str or os.PathLike, optional
        Output folder (default: the manifest's folder).
    progress : callable, optional
        ``progress(stage, done, total)``.
    """
    from timeslice.config import parse_config
    from timeslice.report import read_manifest

    require_complete(Path(manifest).resolve().parent, "timeslice rerun")
    info = read_manifest(manifest, verify=True)
    if not isinstance(info.get("config"), dict):
        raise InputFileError(f"{manifest}: the manifest holds no configuration table, so the run "
                             "cannot be repeated from it; start a new run from the config file")
    cfg = parse_config(info["config"], source=info.get("config_path") or "<config>")
    target = Path(out) if out is not None else Path(manifest).resolve().parent
    return run(cfg, target, force=True, progress=progress,
               command=["timeslice", "rerun", str(manifest)])
