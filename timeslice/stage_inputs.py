"""How the stages open the inputs the config names: climate files with their own options,
the observed baseline on the common grid, each configured slice prepared against its model's
baseline, the dated fossils of the occurrence file and the biotic layers.

These read the :class:`~timeslice.config.Config` on behalf of :mod:`timeslice.pipeline`, which
calls them; the order of the stages stays in the pipeline.
"""

from __future__ import annotations

import contextlib
import json
import re
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pandas as pd
import xarray as xr

from timeslice.config import Config, SliceSpec
from timeslice.errors import DataError, TimesliceError

__all__ = ["about", "apply_biotic", "dated_fossils", "fine_baseline", "input_row",
           "prepare_model_slice", "reference_label", "shown", "with_inputs"]


@contextlib.contextmanager
def about(path: Path | str | None) -> Iterator[None]:
    """Prefix an error raised while working on `path` with the file name, if it lacks it.

    Parameters
    ----------
    path : Path, str or None
        The file being worked on.
    """
    try:
        yield
    except TimesliceError as err:
        name = str(path)
        if path is None or name in str(err) or Path(name).name in str(err):
            raise
        raise type(err)(f"{name}: {err}") from err


_YEARS = re.compile(r"\s*-?\d{1,5}\s*-\s*-?\d{1,5}\s*")


def _open_input(inp, c, *, files=None, period: str | None = None, require=None, role="monthly",
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


def fine_baseline(cfg: Config, files: dict[str, list]):
    """The observed baseline and the elevation, opened and put on the common grid (or on a
    continuous longitude axis): (baseline, elevation field, elevation dataset).

    Parameters
    ----------
    cfg : Config
        The run's configuration ([climate], [grid]).
    files : dict of str to list
        Expanded input files (:meth:`Config.input_files`).
    """
    from timeslice.grid import continuous_lon, make_grid
    from timeslice.harmonise.regrid import regrid

    c = cfg.climate
    monthly = c.baseline_kind == "monthly"
    fine = _open_input(c.baseline, c, files=files["climate.baseline"], period=c.baseline_period,
                 require=["tasmin", "tasmax", "pr"] if monthly else None)
    elev_ds = _open_input(c.elevation, c, files=files["climate.elevation"])
    elev = elev_ds["elevation"] if "elevation" in elev_ds else elev_ds[list(elev_ds.data_vars)[0]]
    if cfg.grid is not None:
        g = cfg.grid
        target = make_grid(
            lon_min=g.lon_min, lon_max=g.lon_max, lat_min=g.lat_min, lat_max=g.lat_max,
            resolution=g.resolution,
        )
        return regrid(fine, target), regrid(elev, target), elev_ds
    fine = continuous_lon(fine, source=str(c.baseline))  # a region across 180° as one axis
    elev = regrid(elev, fine) if elev.sizes != {k: fine.sizes[k] for k in ("lat", "lon")} else elev
    return fine, elev, elev_ds


def prepare_model_slice(cfg: Config, spec: SliceSpec, *, fine: xr.Dataset, common: dict,
                         mb_files, ice_files, model_baselines: dict[str, xr.Dataset]
                         ) -> tuple[xr.Dataset, pd.DataFrame]:
    """One configured slice prepared on the grid: a bioclimatic slice as given, a model slice
    (or one interpolated between two) downscaled against its model's own baseline, which is
    opened once per model into `model_baselines`; with the table of the inputs it was built
    from (:func:`with_inputs`).

    Parameters
    ----------
    cfg : Config
        The run's configuration ([climate]).
    spec : SliceSpec
        The slice.
    fine : xarray.Dataset
        The observed baseline on the grid.
    common : dict
        Options shared by every slice (elevation, thresholds, regrid method).
    mb_files, ice_files : list
        Expanded files of the model's baseline and of the slice's ice (or None).
    model_baselines : dict of str to xarray.Dataset
        Model baselines opened so far, by model (filled as needed).
    """
    from timeslice.harmonise.interpolate import between
    from timeslice.harmonise.plausibility import check_change
    from timeslice.harmonise.prepare import prepare_slice

    c = cfg.climate
    monthly = c.baseline_kind == "monthly"
    ice_ds = _open_input(spec.ice, c, files=ice_files) if spec.ice else None
    ice = _ice_field(ice_ds) if ice_ds is not None else None
    used = [("ice", ice_ds)] if ice_ds is not None else []
    meta = dict(label=spec.label, year=spec.year, period=spec.period, model=spec.model,
                scenario=spec.scenario, sea_level=spec.sea_level, ice=ice)
    if spec.kind == "bioclim":
        with about(spec.file):
            bio = _open_input(spec.source, c, period=spec.period, role="bioclim",
                        key=f"slices[{spec.index}].file")
            return with_inputs(prepare_slice(fine_baseline=fine if monthly else None,
                                              bio=bio, **meta, **common),
                                [("bioclim_slice", bio), *used])
    if spec.model not in model_baselines:
        model_baselines[spec.model] = _open_input(
            spec.model_baseline, c, files=mb_files, period=c.baseline_period,
            require=["tasmin", "tasmax", "pr"])
    mb_name = shown(mb_files)
    if spec.between:
        a, b = spec.between
        with about(a.file):
            raw_a = _open_input(a.source, c, period=a.period, key=f"slices[{a.index}].file")
            raw_b = _open_input(b.source, c, period=b.period, key=f"slices[{b.index}].file")
            check_change(raw_a, model_baselines[spec.model], slice_source=shown(a.files()),
                         baseline_source=mb_name)
            check_change(raw_b, model_baselines[spec.model], slice_source=shown(b.files()),
                         baseline_source=mb_name)
            raw = between(raw_a, raw_b, spec.year, year_a=a.year, year_b=b.year,
                          sea_level_a=a.sea_level, sea_level_b=b.sea_level)
        src = f"{a.file.name} + {b.file.name}"
    else:
        with about(spec.file):
            raw = _open_input(spec.source, c, files=spec.files(), period=spec.period,
                        require=["tasmin", "tasmax", "pr"], key=f"slices[{spec.index}].file")
            check_change(raw, model_baselines[spec.model], slice_source=shown(spec.files()),
                         baseline_source=mb_name)
        src = spec.file
    with about(src):
        return with_inputs(
            prepare_slice(fine_baseline=fine, model_slice=raw,
                          model_baseline=model_baselines[spec.model], **meta, **common),
            [("model_slice", raw), ("model_baseline", model_baselines[spec.model]), *used])


def shown(files) -> str:
    """A file list as shown in tables and messages: the one name, or the first and a count.

    Parameters
    ----------
    files : sequence
        Paths or :class:`~timeslice.readers.filesets.InputFile` objects.
    """
    names = [Path(getattr(f, "path", f)).name for f in files]
    if not names:
        return ""
    return names[0] if len(names) == 1 else f"{names[0]} (+{len(names) - 1} files)"


def with_inputs(ds: xr.Dataset, used: list[tuple[str, xr.Dataset]]
                ) -> tuple[xr.Dataset, pd.DataFrame]:
    """A prepared slice and the table of the inputs it was built from (one row per input:
    grid, units, calendar, what was done), which the stage cache keeps as a table entry.

    Parameters
    ----------
    ds : xarray.Dataset
        A prepared slice (returned unchanged).
    used : list of (str, xarray.Dataset)
        The role and data of each input it was built from.

    Returns
    -------
    tuple of (xarray.Dataset, pandas.DataFrame)
        The slice and its input table.
    """
    from timeslice.harmonise.report import input_table

    label = str(ds.attrs["slice_label"])
    table = input_table([{"slice": label, "role": role, "data": data} for role, data in used],
                        prepared={label: ds})
    return ds, table


def input_row(label, model, scenario, path, ds: xr.Dataset) -> dict[str, Any]:
    """One row of the per-slice land table: labels, the source, what harmonising did and the
    land, ice and shelf areas.

    Parameters
    ----------
    label, model, scenario : str
        The slice's label, model and scenario.
    path : str
        The slice's source as shown.
    ds : xarray.Dataset
        The prepared slice.
    """
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


def apply_biotic(cfg: Config, stack: xr.Dataset, result, *, window) -> None:
    """Partner/competitor layers per slice onto the grid; the biotically constrained layers,
    table and refugium join the series beside the abiotic ones (which stay unchanged).

    Parameters
    ----------
    cfg : Config
        The run's configuration ([biotic]).
    stack : xarray.Dataset
        The stacked transfers.
    result : SeriesResult
        The series results; its series and tables are extended in place.
    window : list of str or None
        The refugium window.
    """
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
                with about(path):
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
    table, ref = biotic_table(stack, out, reference=reference_label(cfg), window=window)
    series = result.series.assign({k: v for k, v in out.data_vars.items()})
    if ref is not None:
        series["refugium_window_biotic"] = ref.drop_vars(
            [c for c in ref.coords if c not in ("lat", "lon")])
    result.series = series
    result.tables["biotic"] = table


def dated_fossils(cfg: Config) -> pd.DataFrame:
    """The occurrence file's fossil records of the taxon that carry ages (read again: cheap).

    Parameters
    ----------
    cfg : Config
        The run's configuration ([species], [niche] keep_basis).
    """
    from timeslice.niche.data import dated_fossils
    from timeslice.readers import read_occurrences

    sp = cfg.species
    with about(sp.occurrences):
        occ = read_occurrences(sp.occurrences, columns=sp.columns)
        return dated_fossils(occ, taxon=sp.taxon, taxon_field=sp.taxon_field,
                             fold_subspecies=sp.fold_subspecies, keep_basis=cfg.niche.keep_basis)


def reference_label(cfg: Config) -> str:
    """Label of the reference slice of the change summaries.

    Parameters
    ----------
    cfg : Config
        The run's configuration ([series] reference).
    """
    ref = cfg.series.reference
    return cfg.climate.baseline_label if ref == "baseline" else ref
