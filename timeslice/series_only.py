"""Suitability maps a user brings, through the series stage only (no climate, no records).

A practitioner who has per-slice suitability rasters from elsewhere (GeoTIFF or NetCDF, 0..1)
can have the series stage summarise them — stability, refugia, movement, ensembles, change,
tables, maps and the report — with a ``[suitability]`` table in place of ``[climate]``,
``[[slices]]`` and ``[species]``::

    [suitability]
    files = "maps/{slice}.tif"     # one raster per slice; {slice} is the slice label
    threshold = 0.42               # suitable where suitability >= threshold
    land = "nan"                   # land where the raster has a value (or a 0/1 raster)

    [[suitability.slices]]
    label = "present"
    year = 2000
    scenario = "baseline"

    [[suitability.slices]]
    label = "lgm"
    age_bp = 21000
    model = "gcm_a"

Everything a wrong input would cost is checked before the output folder is touched, each with
one line naming the key or file: a missing file, values outside 0..1, grids that differ, no
threshold. Novelty (MESS, ExDet) needs the climate and is not assessed; the report says so.
"""

from __future__ import annotations

import os
import re
import sys
from pathlib import Path
from typing import Any

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

from timeslice.config import ClimateConfig, Config, SpeciesConfig
from timeslice.errors import ConfigError, DataError, InputFileError
from timeslice.progress import Progress, no_progress

__all__ = ["NO_NOVELTY_NOTE", "SeriesOnlyConfig", "SuitabilityConfig", "SuitabilitySlice",
           "check_suitability", "parse_series_only", "read_suitability", "require_climate",
           "run_series_only", "suitability_stack"]

#: What the report and the manifest say in place of the novelty layers.
NO_NOVELTY_NOTE = (
    "Novelty could not be assessed: the suitability maps were supplied without their climate, "
    "so there are no MESS or ExDet layers, and areas where a model extrapolates beyond its "
    "calibration climate are not flagged; ask whoever made the maps for them.")

#: Relative tolerance on the grid coordinates of the rasters (fraction of a cell).
GRID_TOLERANCE = 1e-6


class SuitabilitySlice(BaseModel):
    """One entry of ``[[suitability.slices]]``: a slice's label and metadata.

    Parameters
    ----------
    label : str
        Slice label (``{slice}`` in the file pattern, names in the outputs).
    year, age_bp : float
        Exactly one: the representative year CE, or years before 1950.
    period : str, optional
        Period the map describes (default from the year or age).
    model, scenario : str
        Climate model (default ``"observed"`` for the baseline scenario, else ``"unnamed"``)
        and scenario (``"baseline"``, ``"past"`` or a forcing scenario; default ``"past"``).
    sea_level : float
        Sea level relative to present, m (recorded, not used).
    file : str, optional
        This slice's raster, instead of the ``files`` pattern.
    """

    model_config = ConfigDict(extra="forbid")

    label: str
    year: float | None = None
    age_bp: float | None = None
    period: str | None = None
    model: str | None = None
    scenario: str = "past"
    sea_level: float = 0.0
    file: str | None = None

    @model_validator(mode="after")
    def _one_time(self) -> SuitabilitySlice:
        if (self.year is None) == (self.age_bp is None):
            raise ValueError("give exactly one of `year` (CE) or `age_bp` (years before 1950)")
        if not self.label.strip():
            raise ValueError("`label` is empty; give each slice a name")
        return self

    @property
    def year_ce(self) -> float:
        """Representative year CE (1950 − age for a slice given in years before present)."""
        return float(self.year) if self.year is not None else 1950.0 - float(self.age_bp)

    @property
    def period_text(self) -> str:
        """The period as given, else the age in ka BP or the year."""
        if self.period:
            return self.period
        return f"{self.age_bp / 1000:g} ka BP" if self.age_bp is not None else f"{self.year:g}"

    @property
    def model_name(self) -> str:
        """The climate model, with the documented default."""
        if self.model:
            return self.model
        return "observed" if self.scenario == "baseline" else "unnamed"


class SuitabilityConfig(BaseModel):
    """``[suitability]``: the user's own suitability rasters, one per slice.

    Parameters
    ----------
    files : str, optional
        Path pattern with ``{slice}`` (the slice label), relative to the config file.
    threshold : float
        Suitability at or above which a cell counts as suitable, in (0, 1].
    land : str
        ``"nan"``: land where each slice's raster has a value; or the path of a 0/1 raster
        shared by every slice.
    elevation : str, optional
        Elevation raster (m) on the same grid, for the elevation columns and patch ranges.
    slices : list of SuitabilitySlice
        The slices, in series order.
    """

    model_config = ConfigDict(extra="forbid")

    files: str | None = None
    threshold: float | None = None
    land: str = "nan"
    elevation: str | None = None
    slices: list[SuitabilitySlice] = Field(default_factory=list)


class SeriesOnlyConfig(Config):
    """A configuration whose suitability comes from the user's rasters (``[suitability]``):
    the series, output and run tables of :class:`~timeslice.config.Config`, no climate and
    no species records.

    Parameters
    ----------
    suitability : SuitabilityConfig
        The rasters, the threshold and the slices.
    run, series, output : RunConfig, SeriesConfig, OutputConfig
        As in :class:`~timeslice.config.Config`.
    climate, species, grid, slices : None
        Not used (refused when given).
    niche, transfer, biotic : NicheConfig, TransferConfig, BioticConfig
        Not used (only their defaults are accepted).
    source : Path or None
        The TOML file it came from.
    """

    climate: ClimateConfig | None = None
    species: SpeciesConfig | None = None
    suitability: SuitabilityConfig

    @property
    def multi_species(self) -> bool:
        """Always False: the maps are of one species."""
        return False

    def reference_label(self) -> str:
        """Label of the reference slice of the change summaries (``[series] reference``).

        Returns
        -------
        str
        """
        ref = self.series.reference
        if ref != "baseline":
            return ref
        return next(s.label for s in self.suitability.slices if s.scenario == "baseline")

    def raster_paths(self) -> dict[str, Path]:
        """Slice label -> its raster (per-slice ``file`` or the ``files`` pattern).

        Returns
        -------
        dict of str to Path
        """
        out: dict[str, Path] = {}
        for s in self.suitability.slices:
            pattern = s.file if s.file is not None else self.suitability.files
            out[s.label] = _resolve(self.source, str(pattern).replace("{slice}", s.label))
        return out

    def single_files(self) -> list[tuple[str, Path]]:
        """Config key and path of every one-file input (rasters, land, elevation, zones).

        Returns
        -------
        list of (str, Path)
        """
        sc = self.suitability
        out = [(f"suitability.files ({lab})", p) for lab, p in self.raster_paths().items()]
        if sc.land != "nan":
            out.append(("suitability.land", _resolve(self.source, sc.land)))
        if sc.elevation is not None:
            out.append(("suitability.elevation", _resolve(self.source, sc.elevation)))
        if self.series.zones is not None:
            out.append(("series.zones", Path(self.series.zones)))
        return out

    def input_files(self) -> dict[str, list]:
        """Config key -> input files, as :meth:`Config.input_files` (for the manifest).

        Returns
        -------
        dict of str to list of InputFile
        """
        from timeslice.readers.filesets import InputFile

        return {key: [InputFile(path)] for key, path in self.single_files()}

    def check_files(self, *, headers: bool = True) -> dict[str, list]:
        """Refuse, before any work, a raster that is missing, not a suitability in 0..1 or on
        another grid than the first; return :meth:`input_files`.

        Parameters
        ----------
        headers : bool
            Also read every raster and check its values and grid (default True).

        Returns
        -------
        dict of str to list of InputFile
        """
        for key, path in self.single_files():
            if not path.is_file():
                raise InputFileError(f"{self.source}: {key} = {str(path)!r}: file not found; fix "
                                     "the path (relative paths are read from the config file's "
                                     "folder)")
        if headers:
            read_suitability(self)
        return self.input_files()


def _resolve(base: Path | None, p: str | Path) -> Path:
    p = Path(p).expanduser()
    if not p.is_absolute() and base is not None:
        p = base.parent / p
    return p


def _error_line(err: ValidationError, source: str) -> str:
    first = err.errors()[0]
    key = ".".join(str(x) for x in first["loc"])
    key = re.sub(r"\.(\d+)", r"[\1]", key)
    if first["type"] == "extra_forbidden":
        return f"{source}: unknown key {key!r} (see docs/config.md, [suitability])"
    if first["type"] == "missing":
        return f"{source}: required key {key!r} is missing (see docs/config.md, [suitability])"
    msg = str(first["msg"]).removeprefix("Value error, ")
    got = first.get("input")
    return f"{source}: key {key!r}: {msg}" + ("" if isinstance(got, dict) else f", got {got!r}")


#: Tables a run of the user's own maps cannot use: each needs climate or records.
_NOT_USED = {
    "climate": "the suitability maps replace the climate",
    "slices": "the slices are listed under [[suitability.slices]]",
    "species": "there are no records to read",
    "grid": "the maps' own grid is used",
}


def _refuse_unused(data: dict, source: str) -> None:
    for key, why in _NOT_USED.items():
        if data.get(key) not in (None, [], {}):
            raise ConfigError(f"{source}: [{key}] is not used with [suitability] ({why}); remove "
                              f"it, or remove [suitability] to fit a model from climate and "
                              "records")
    for key, model in (("niche", "NicheConfig"), ("transfer", "TransferConfig"),
                       ("biotic", "BioticConfig")):
        from timeslice import config as C

        given = data.get(key) or {}
        defaults = getattr(C, model)().model_dump(mode="json")
        changed = sorted(k for k, v in given.items() if defaults.get(k, object()) != v)
        if changed:
            raise ConfigError(f"{source}: [{key}] {changed[0]} is not used with [suitability] "
                              "(no model is fitted or transferred); remove it")


def require_climate(cfg: Config, what: str) -> None:
    """Refuse a stage that needs climate (harmonise, fit) on a configuration of own maps.

    Parameters
    ----------
    cfg : Config
        The loaded configuration.
    what : str
        The command, for the message.

    Raises
    ------
    ConfigError
        If `cfg` brings its own suitability maps (``[suitability]``).
    """
    if isinstance(cfg, SeriesOnlyConfig):
        raise ConfigError(f"{cfg.source}: `{what}` needs [climate] and [species]; this config "
                          "brings its own suitability maps ([suitability]): use `timeslice run`")


def check_suitability(cfg: SeriesOnlyConfig, source: str) -> None:
    """Check the ``[suitability]`` and ``[series]`` choices of a configuration of own maps.

    Parameters
    ----------
    cfg : SeriesOnlyConfig
        The configuration.
    source : str
        Where it came from, named in the message.

    Raises
    ------
    ConfigError
        No threshold or one outside (0, 1], no slices, repeated labels, a slice without a
        raster, an unknown reference, window or hypothesis name, a bad movement rate.
    """
    sc, ser = cfg.suitability, cfg.series
    if sc.threshold is None:
        raise ConfigError(f"{source}: suitability.threshold is missing; give the suitability at "
                          "or above which a cell counts as suitable (0 < threshold <= 1), e.g. "
                          "the threshold the maps' model was evaluated with")
    if not 0.0 < float(sc.threshold) <= 1.0:
        raise ConfigError(f"{source}: suitability.threshold = {sc.threshold!r} is not in "
                          "(0, 1]; give a suitability threshold")
    if not sc.slices:
        raise ConfigError(f"{source}: [suitability] lists no slices; add one "
                          "[[suitability.slices]] table per map (label, year or age_bp)")
    labels = [s.label for s in sc.slices]
    dup = sorted({x for x in labels if labels.count(x) > 1})
    if dup:
        raise ConfigError(f"{source}: suitability.slices: labels must be unique, repeated: {dup}")
    from timeslice.io import file_stem

    stems = [file_stem(x) for x in labels]
    clash = sorted({x for x, st in zip(labels, stems) if stems.count(st) > 1})
    if clash:
        raise ConfigError(f"{source}: suitability.slices: labels {clash} give the same file name "
                          "(maps and GeoTIFFs keep letters, digits, '.', '_' and '-'); rename one")
    for i, s in enumerate(sc.slices):
        if s.file is None and (sc.files is None or ("{slice}" not in sc.files
                                                    and len(sc.slices) > 1)):
            raise ConfigError(f"{source}: suitability.slices[{i}] ({s.label!r}) has no raster: "
                              "give suitability.files with {slice} in it (e.g. "
                              "\"maps/{slice}.tif\") or a `file` for this slice")
    base = [s.label for s in sc.slices if s.scenario == "baseline"]
    if ser.reference == "baseline" and len(base) != 1:
        raise ConfigError(f"{source}: series.reference = \"baseline\" needs exactly one slice "
                          f"with scenario = \"baseline\" (found {len(base)}); mark the reference "
                          "slice so, or give series.reference = a slice label")
    if ser.reference != "baseline" and ser.reference not in labels:
        raise ConfigError(f"{source}: series.reference = {ser.reference!r} is not a slice "
                          f"label (have {labels})")
    names = set(labels) | {s.period_text for s in sc.slices}
    windows = [("series.refugium_window", w) for w in ser.refugium_window or []
               if isinstance(ser.refugium_window, list)]
    windows += [(f"series.hypotheses.{h}", w) for h, ws in ser.hypotheses.items() for w in ws]
    for key, w in windows:
        if w not in names:
            raise ConfigError(f"{source}: {key} names {w!r}, which is neither a slice label nor "
                              f"a period (have {sorted(names)})")
    if ser.dispersal_rate is not None:
        from timeslice.series.dispersal import parse_rate

        try:
            parse_rate(ser.dispersal_rate, name="series.dispersal_rate")
        except ConfigError as err:
            raise ConfigError(f"{source}: {err}") from err


def parse_series_only(data: dict, *, source: str | Path = "<config>") -> SeriesOnlyConfig:
    """Validate a configuration with ``[suitability]`` (the user's own suitability rasters).

    Parameters
    ----------
    data : dict
        The parsed TOML.
    source : str or Path
        The file it came from: named in every error; relative paths start in its folder.

    Returns
    -------
    SeriesOnlyConfig

    Raises
    ------
    ConfigError
        A key is unknown, missing or wrong, a table that needs climate or records is given,
        or a raster file is missing (one line naming the key).
    """
    src = str(source)
    _refuse_unused(data, src)
    try:
        cfg = SeriesOnlyConfig.model_validate(data)
    except ValidationError as err:
        raise ConfigError(_error_line(err, src)) from err
    path = Path(source)
    cfg.source = path.resolve() if path.name != "<config>" else None
    if cfg.series.zones is not None:
        cfg.series.zones = _resolve(cfg.source, cfg.series.zones)
    check_suitability(cfg, src)
    cfg.check_files(headers=False)  # a missing raster costs nothing
    return cfg


def read_suitability(cfg: SeriesOnlyConfig) -> dict[str, Any]:
    """Read and check every raster of the configuration.

    Parameters
    ----------
    cfg : SeriesOnlyConfig
        The configuration.

    Returns
    -------
    dict
        ``maps`` (label -> (lat, lon) DataArray, float32), ``land`` (shared 0/1 raster as a
        bool DataArray, or None) and ``elevation`` (DataArray or None).

    Raises
    ------
    DataError
        Values outside 0..1, an all-missing map, grids that differ, a land raster not 0/1.
    """
    from timeslice.readers.layers import open_layer

    maps: dict[str, Any] = {}
    first = None
    for label, path in cfg.raster_paths().items():
        key = f"suitability.files ({label})"
        da = open_layer(path, what=key).astype("float32").load()
        values = da.values[np.isfinite(da.values)]
        if values.size == 0:
            raise DataError(f"{path}: {key}: every cell is missing (NaN); give the map of "
                            "slice {label!r}")
        lo, hi = float(values.min()), float(values.max())
        if lo < 0.0 or hi > 1.0:
            raise DataError(f"{path}: {key}: values {lo:g}..{hi:g}: not a suitability in 0..1; "
                            "rescale the map to 0..1 (e.g. divide a 0..100 map by 100)")
        first = _same_grid(da, first, path, key)
        maps[label] = da
    sc = cfg.suitability
    land = elevation = None
    if sc.land != "nan":
        path = _resolve(cfg.source, sc.land)
        raw = open_layer(path, what="suitability.land").load()
        _same_grid(raw, first, path, "suitability.land")
        vals = np.unique(raw.values[np.isfinite(raw.values)])
        if not set(vals.tolist()) <= {0.0, 1.0}:
            raise DataError(f"{path}: suitability.land must be a 0/1 raster (1 = land), found "
                            f"values {vals[:5].tolist()}")
        land = raw == 1
    if sc.elevation is not None:
        path = _resolve(cfg.source, sc.elevation)
        elevation = open_layer(path, what="suitability.elevation").astype("float32").load()
        _same_grid(elevation, first, path, "suitability.elevation")
    return {"maps": maps, "land": land, "elevation": elevation}


def _same_grid(da, first, path: Path, key: str):
    """Refuse a raster on another grid than the first one read; return the reference grid."""
    if first is None:
        return (da["lat"].values, da["lon"].values, path)
    lat, lon, where = first
    res = float(abs(lat[1] - lat[0])) if lat.size > 1 else 1.0
    same = (da["lat"].size == lat.size and da["lon"].size == lon.size
            and np.allclose(da["lat"].values, lat, rtol=0, atol=GRID_TOLERANCE * res)
            and np.allclose(da["lon"].values, lon, rtol=0, atol=GRID_TOLERANCE * res))
    if not same:
        raise DataError(f"{path}: {key}: its grid ({da['lon'].size} x {da['lat'].size} cells) "
                        f"differs from that of {where.name} ({lon.size} x {lat.size}); put every "
                        "map on one grid first")
    return first


def suitability_stack(cfg: SeriesOnlyConfig, rasters: dict[str, Any] | None = None):
    """The stacked series of the user's maps, as the transfer stage would hand it on.

    Parameters
    ----------
    cfg : SeriesOnlyConfig
        The configuration.
    rasters : dict, optional
        From :func:`read_suitability` (read here if not given).

    Returns
    -------
    xarray.Dataset
        ``suitability`` (0..1, NaN off land), ``suitable`` (1/0, −1 off land; the threshold in
        its attributes), ``land``, ``ice`` (none) per slice, ``elevation`` if given; slice
        coordinates ``year``, ``period``, ``model``, ``scenario``, ``sea_level``. No novelty
        layers.
    """
    import xarray as xr

    from timeslice import layers
    from timeslice.series.stacking import stack_slices

    rasters = rasters if rasters is not None else read_suitability(cfg)
    thr = float(cfg.suitability.threshold)
    parts = []
    for s in cfg.suitability.slices:
        suit = rasters["maps"][s.label]
        land = rasters["land"] if rasters["land"] is not None else np.isfinite(suit)
        land = land.assign_coords(lat=suit["lat"], lon=suit["lon"]).astype(bool)
        suit = suit.where(land)
        suitable = xr.where(land, (suit >= np.float32(thr)).astype("int8"), np.int8(-1))
        ds = xr.Dataset({"suitability": suit.astype("float32"),
                         "suitable": suitable.astype("int8"),
                         "land": land, "ice": xr.zeros_like(land)})
        ds.attrs.update(slice_label=s.label, year=s.year_ce, period=s.period_text,
                        model=s.model_name, scenario=s.scenario)
        parts.append(ds)
    stack = stack_slices(parts, variables=["suitability", "suitable", "land", "ice"])
    stack = stack.assign_coords(
        sea_level=("slice", [float(s.sea_level) for s in cfg.suitability.slices]))
    if rasters["elevation"] is not None:
        stack["elevation"] = rasters["elevation"].assign_coords(
            lat=stack["lat"], lon=stack["lon"]).astype("float32")
    for name in ("suitability", "suitable"):
        stack[name] = layers.stamp(stack[name], name)
    stack["suitable"].attrs["threshold"] = thr
    stack.attrs["suitability_source"] = "supplied suitability rasters ([suitability])"
    return stack


def run_series_only(cfg: SeriesOnlyConfig, out: str | os.PathLike, *,
                    progress: Progress = no_progress,
                    command: list[str] | None = None):
    """Summarise the user's own suitability maps and write every output into `out`.

    Parameters
    ----------
    cfg : SeriesOnlyConfig
        The configuration (:func:`parse_series_only`).
    out : path
        Output folder.
    progress : callable, optional
        ``progress(stage, done, total)``.
    command : list of str, optional
        The command line recorded in the manifest.

    Returns
    -------
    timeslice.pipeline.RunResult
        Output paths, the summary, the key results and the series analysis (no fit).
    """
    import time
    import warnings

    from timeslice.errors import TimesliceWarning
    from timeslice.pipeline import RunResult
    from timeslice.report import write_manifest
    from timeslice.runfolder import begin_run, finish_run, make_out
    from timeslice.series.analysis import key_results
    from timeslice.series_only_report import analyse_own, write_own_outputs

    out = Path(out)
    files = cfg.input_files()
    rasters = read_suitability(cfg)  # every check before the folder is touched
    make_out(out)
    started = begin_run(out, cfg.model_dump(mode="json"), str(cfg.source), cfg.run.seed, command)
    result = RunResult(out=out)
    t0 = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", TimesliceWarning)
        stack = suitability_stack(cfg, rasters)
        analysis = analyse_own(cfg, stack)
        result.timings["summarise"] = round(time.perf_counter() - t0, 3)
        t1 = time.perf_counter()
        summary = analysis.tables["summary"].copy()
        result.paths = write_own_outputs(cfg, analysis, summary, out, progress=progress,
                                         warnings_seen=[str(w.message) for w in caught])
        result.timings["report"] = round(time.perf_counter() - t1, 3)
    for w in {str(w.message): w for w in caught}.values():
        warnings.showwarning(w.message, w.category, w.filename, w.lineno)
    written, removed = finish_run(out, started)
    result.paths["manifest"] = write_manifest({
        "status": "complete", "files": written, "removed_stale": removed,
        "config": cfg.model_dump(mode="json"), "config_path": str(cfg.source),
        "inputs": sorted(str(f.path) for fs in files.values() for f in fs),
        "seed": cfg.run.seed, "timings": result.timings, "command": command or sys.argv,
        "outputs": [str(p) for p in result.paths.values()],
        "warnings": sorted({str(w.message) for w in caught}),
        "series_notes": [NO_NOVELTY_NOTE, *analysis.notes]}, out / "manifest.json")
    result.summary, result.analysis = summary, analysis
    result.key_results = key_results(analysis)
    return result
