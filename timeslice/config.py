"""The run configuration: one TOML file, validated by pydantic models.

Every error names the file and the key (``niche.buffer_km``), what was expected and the fix; a
misspelled key gets the closest valid spelling. Relative paths are resolved against the folder of
the config file. See docs/config.md for every key.
"""

from __future__ import annotations

import difflib
import math
import re
import tomllib
from pathlib import Path
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator

from timeslice.errors import ConfigError, InputFileError, TimesliceError

__all__ = [
    "BioticConfig",
    "ClimateConfig",
    "ClimateInput",
    "Config",
    "NicheConfig",
    "OutputConfig",
    "RunConfig",
    "SeriesConfig",
    "SliceConfig",
    "SliceSpec",
    "SpeciesConfig",
    "TransferConfig",
    "load_config",
    "parse_config",
]


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=False)


class RunConfig(_Section):
    """``[run]``: the run's name, seed and scheduler (docs/config.md)."""

    name: str = "timeslice run"
    #: 0 .. 2**32 - 1 (the range numpy's and scikit-learn's seeds accept)
    seed: int = Field(0, ge=0, le=2**32 - 1)
    scheduler: str = "threads"
    workers: int | None = Field(None, ge=1)


class GridConfig(_Section):
    """The common target grid. Longitudes run east from `lon_min` to `lon_max`: a region across
    the 180° meridian is ``lon_min = 160, lon_max = 200`` or, the same, ``lon_max = -160``
    (see :func:`timeslice.grid.make_grid`); ``lon_max = lon_min + 360`` is global."""

    lon_min: float = Field(ge=-360.0, le=360.0)
    lon_max: float = Field(ge=-360.0, le=720.0)
    lat_min: float = Field(ge=-90.0, le=90.0)
    lat_max: float = Field(ge=-90.0, le=90.0)
    resolution: float = Field(gt=0)

    @model_validator(mode="after")
    def _extent(self) -> GridConfig:
        if self.lat_min >= self.lat_max:
            raise ValueError(f"`lat_min` ({self.lat_min:g}) must be south of `lat_max` "
                             f"({self.lat_max:g})")
        if self.lon_min == self.lon_max:
            raise ValueError("`lon_min` equals `lon_max`; give the eastern edge (lon_max = "
                             "lon_min + 360 for a global grid)")
        width = self.lon_max - self.lon_min
        while width <= 0:  # lon_max < lon_min: the region crosses the 180° meridian
            width += 360.0
        if width > 360.0 + 1e-9:
            raise ValueError(f"`lon_min`..`lon_max` span {width:g}°, more than 360°; give at "
                             "most one turn round the globe")
        if self.resolution > min(width, self.lat_max - self.lat_min):
            raise ValueError(f"`resolution` {self.resolution:g}° is larger than the grid "
                             "extent; give a smaller cell size")
        cells = (width / self.resolution) * ((self.lat_max - self.lat_min) / self.resolution)
        if cells > MAX_GRID_CELLS:
            raise ValueError(f"`resolution` {self.resolution:g}° gives {cells:.3g} cells, more "
                             f"than {MAX_GRID_CELLS:.0e} (a global 30-arc-second grid has "
                             "9.3e8); give a coarser cell size or a smaller region")
        return self


#: Largest target grid accepted, in cells: a global 30-arc-second grid (43200 x 21600) fits.
MAX_GRID_CELLS = 1e9


#: Canonical variables a units/scale/aliases/variables mapping may name.
_CANONICAL = ("tasmin", "tasmax", "tas", "pr", "elevation", "ice",
              *(f"bio{i}" for i in range(1, 20)))


class ClimateInput(_Section):
    """One climate input: its files and the options that describe those files only.

    Written in the config as a path, a glob or a list (``baseline = "obs/*.nc"``), or as a
    table (``[climate.baseline] files = "obs/{variable}_{month:02d}.tif"``, ``scale = {tasmin =
    0.1}``). `units` and `scale` apply to this input alone, never to another file.
    """

    files: str | list[str]
    #: units of the stored values per canonical variable, used instead of (or where the file
    #: lacks) its own units attribute
    units: dict[str, str] = Field(default_factory=dict)
    #: multiplier per canonical variable applied to the stored values before unit conversion
    scale: dict[str, float] = Field(default_factory=dict)
    #: canonical name -> variable name(s) in the file, tried before the built-in names
    aliases: dict[str, str | list[str]] = Field(default_factory=dict)
    #: canonical name -> the text standing for it in a ``{variable}`` file pattern
    variables: dict[str, str] | None = None

    @model_validator(mode="before")
    @classmethod
    def _from_path(cls, value):
        if isinstance(value, (str, Path)):
            return {"files": str(value)}
        if isinstance(value, list):
            return {"files": [str(v) for v in value]}
        return value

    @field_validator("files")
    @classmethod
    def _files(cls, v):
        if isinstance(v, list) and not v:
            raise ValueError("the list of files is empty; give at least one path")
        return v

    @field_validator("units", "scale", "aliases", "variables")
    @classmethod
    def _canonical_keys(cls, v):
        for k in v or {}:
            if k not in _CANONICAL:
                close = difflib.get_close_matches(k, _CANONICAL, n=1)
                hint = f"; did you mean {close[0]!r}?" if close else ""
                raise ValueError(f"{k!r} is not a canonical variable (tasmin, tasmax, tas, pr, "
                                 f"elevation, ice, bio1..bio19){hint}")
        return v

    @field_validator("scale")
    @classmethod
    def _positive(cls, v):
        for k, x in v.items():
            if not (x > 0 and x < float("inf")):
                raise ValueError(f"scale of {k!r} must be a positive number, got {x!r}")
        return v

    def patterns(self) -> list[str]:
        """The file paths or patterns, as a list."""
        return [self.files] if isinstance(self.files, str) else list(self.files)

    def expand(self, *, key: str, role: str = "monthly", model: str | None = None):
        """The sorted :class:`~timeslice.readers.filesets.InputFile` list of this input."""
        from timeslice.readers.filesets import expand_files, substitute_model

        pats = self.patterns()
        if model is not None:
            pats = [substitute_model(p, model) for p in pats]
        return expand_files(pats, key=key, variables=self.variables or _ROLE_VARIABLES[role])

    def reader_options(self, global_aliases: dict[str, list[str]] | None = None) -> dict:
        """Keyword arguments of :func:`timeslice.readers.open_climate` for this input."""
        aliases: dict[str, list[str]] = {k: list(v) for k, v in (global_aliases or {}).items()}
        for k, v in self.aliases.items():
            aliases[k] = [v] if isinstance(v, str) else list(v)
        return {"aliases": aliases or None, "units": dict(self.units) or None,
                "scale": dict(self.scale) or None}

    def merged(self, other: ClimateInput | None) -> ClimateInput:
        """These files with `other`'s options laid over this input's (per variable)."""
        if other is None:
            return self
        return self.model_copy(update={
            "units": {**self.units, **other.units}, "scale": {**self.scale, **other.scale},
            "aliases": {**self.aliases, **other.aliases},
            "variables": other.variables if other.variables is not None else self.variables,
        })


#: Variables a ``{variable}`` pattern stands for, per kind of input, when `variables` is not
#: given: the monthly fields a slice needs, or the 19 bioclimatic variables.
_ROLE_VARIABLES: dict[str, dict[str, str]] = {
    "monthly": {"tasmin": "tasmin", "tasmax": "tasmax", "pr": "pr"},
    "bioclim": {f"bio{i}": f"bio{i}" for i in range(1, 20)},
    "elevation": {"elevation": "elevation"},
    "ice": {"ice": "ice"},
}


def _check_units(source, key: str, inp: ClimateInput | None) -> None:
    """Refuse at config load a declared unit that cannot describe its variable."""
    if inp is None:
        return
    from timeslice.units import (
        parse_units,
        precipitation_conversion,
        temperature_conversion,
    )
    from timeslice.errors import DataError

    for var, text in inp.units.items():
        try:
            if var in ("tasmin", "tasmax", "tas"):
                temperature_conversion(text, variable=var, source=key)
            elif var == "pr":
                precipitation_conversion(text, variable=var, source=key)
            elif var == "elevation":
                from cf_xarray.units import units as ureg

                if parse_units(text, variable=var, source=key).dimensionality != ureg.m.dimensionality:
                    raise DataError(f"{key}: units {text!r} of 'elevation' are not a length")
            elif var == "ice" and str(text).strip() not in {"1", "", "fraction", "0-1", "%", "percent"}:
                raise DataError(f"{key}: units {text!r} of 'ice' must be '1' (fraction) or '%'")
        except DataError as err:
            msg = str(err).split(": ", 1)[-1]
            raise ConfigError(f"{source}: {key}.units.{var} = {text!r}: {msg}") from err


class ClimateConfig(_Section):
    """``[climate]``: the baseline, elevation, model baselines and regridding (docs/config.md)."""

    baseline: ClimateInput
    elevation: ClimateInput
    baseline_kind: Literal["monthly", "bioclim"] = "monthly"
    baseline_label: str = "baseline"
    baseline_period: str = "present"
    baseline_year: float = 2000.0
    models: dict[str, ClimateInput] = Field(default_factory=dict)
    aliases: dict[str, list[str]] = Field(default_factory=dict)
    #: refused when given: units and scale belong to the input they describe
    units: dict[str, str] = Field(default_factory=dict)
    scale: dict[str, float] = Field(default_factory=dict)
    regrid: Literal["auto", "conservative", "bilinear"] | dict[str, Literal["auto", "conservative", "bilinear"]] = "auto"

    @field_validator("regrid")
    @classmethod
    def _regrid_keys(cls, v):
        if isinstance(v, dict):
            ClimateInput._canonical_keys(v)
        return v
    pr_floor: float = Field(0.1, ge=0.0)
    ratio_quantile: float = Field(0.98, gt=0.5, le=1.0)
    present_sea_level: float = 0.0
    ice_threshold: float = Field(0.5, ge=0.0, le=1.0)
    #: K m-1; at most the dry-adiabatic rate g / c_p = 9.8 K km-1 (the limit the harmonise
    #: stage also applies), checked here so it is refused before any work
    lapse_rate: float = Field(0.0065, ge=0.0, le=0.0098)

    @field_validator("baseline_period")
    @classmethod
    def _period_order(cls, v):
        m = re.fullmatch(r"\s*(-?\d+)\s*-\s*(-?\d+)\s*", v)
        if m and int(m.group(2)) < int(m.group(1)):
            raise ValueError(f"`baseline_period` {v!r} ends before it starts; give "
                             "'first-last', e.g. \"1981-2010\"")
        return v

    @field_validator("units", "scale")
    @classmethod
    def _per_input(cls, v, info):
        if v:
            raise ValueError(
                f"[climate] {info.field_name} would apply to every input (baseline and every "
                f"model file alike); give it per input instead, e.g. [climate.baseline] "
                f"files = \"...\", {info.field_name} = {{...}}, a table under [climate.models], "
                f"or `{info.field_name}` in a [[slices]] entry"
            )
        return v


class SliceConfig(_Section):
    """One entry of ``[[slices]]``; expands to one slice per model in `models`."""

    name: str
    #: path, glob or list; may hold {model}, {variable} and {month}
    file: str | list[str] | None = None
    #: options describing this slice's files (laid over its model's options, per variable)
    units: dict[str, str] = Field(default_factory=dict)
    scale: dict[str, float] = Field(default_factory=dict)
    aliases: dict[str, str | list[str]] = Field(default_factory=dict)
    variables: dict[str, str] | None = None
    kind: Literal["monthly", "bioclim"] = "monthly"
    between: list[str] | None = None
    scenario: str = "past"
    period: str | None = None
    year: float | None = None
    age_bp: float | None = None
    #: sea level relative to present, m; default 0, or for a `between` slice the sea level
    #: interpolated in time between its two ends (as its climate is)
    sea_level: float | None = None
    ice: ClimateInput | None = None
    models: list[str] | None = None

    @field_validator("file")
    @classmethod
    def _files(cls, v):
        if isinstance(v, list) and not v:
            raise ValueError("the list of files is empty; give at least one path")
        return v

    def options(self) -> ClimateInput | None:
        """This slice's own file options, or None."""
        if not (self.units or self.scale or self.aliases or self.variables):
            return None
        return ClimateInput(files=["-"], units=self.units, scale=self.scale,
                            aliases=self.aliases, variables=self.variables)

    @model_validator(mode="after")
    def _one_time(self) -> SliceConfig:
        ClimateInput.model_validate({"files": "-", "units": self.units, "scale": self.scale,
                                     "aliases": self.aliases, "variables": self.variables})
        if self.period is not None:
            m = re.fullmatch(r"\s*(-?\d+)\s*-\s*(-?\d+)\s*", self.period)
            if m and int(m.group(2)) < int(m.group(1)):
                raise ValueError(f"`period` {self.period!r} ends before it starts; give "
                                 "'first-last', e.g. \"2041-2060\"")
        if (self.year is None) == (self.age_bp is None):
            raise ValueError("give exactly one of `year` (CE) or `age_bp` (years before 1950)")
        if (self.file is None) == (self.between is None):
            raise ValueError(
                "give exactly one of `file` (model output) or `between` (names of two other "
                "slices to interpolate between)"
            )
        if self.between is not None and len(self.between) != 2:
            raise ValueError("`between` names exactly two other slices, e.g. [\"21ka\", \"6ka\"]")
        if self.between is not None and self.kind != "monthly":
            raise ValueError("`between` works on monthly model fields; drop `kind = \"bioclim\"`")
        return self


class SpeciesConfig(_Section):
    """``[species]`` (or one ``[[species]]`` entry): the records and how to read them."""

    name: str = "species"
    occurrences: Path
    columns: dict[str, str] | None = None
    dated_records: Path | None = None
    #: the taxon to model: scientific or accepted name(s), or taxon key(s); None = the file's only species
    taxon: str | int | list[str | int] | None = None
    taxon_field: Literal["auto", "scientific_name", "accepted_name", "taxon_key"] = "auto"
    fold_subspecies: bool = False
    #: CSV of sampled populations (lon, lat, a diversity measure) to test the refugium map
    #: against: stability and distance to the nearest refugium vs diversity
    diversity: Path | None = None
    #: the diversity column of `diversity` (default: its only numeric column besides lon/lat)
    diversity_column: str | None = None
    #: [niche] keys for this species only, when several species share one run
    niche: dict[str, Any] = Field(default_factory=dict)


class NicheConfig(_Section):
    """``[niche]``: cleaning, calibration area, background, screening, algorithm, threshold."""

    #: a fitted model written by `timeslice fit` (model.pkl): transfer it without refitting;
    #: the other [niche] keys are then not used
    model: Path | None = None
    algorithm: str = "envelope"  # chosen by the truth benchmark (docs/truth.md)
    params: dict[str, Any] = Field(default_factory=dict)
    variables: list[str] | None = None
    buffer_km: float = Field(200.0, gt=0)  # chosen by the truth benchmark (docs/truth.md)
    n_background: int = Field(10000, gt=0)
    thin: str | float | None = "cell"
    uncertainty_max_m: float | None = Field(None, gt=0)
    years: tuple[int, int] | None = None
    keep_basis: list[Literal["fossil", "living"]] = Field(default_factory=list)
    drop_flags: list[str] | None = None
    centroid_min_records: int | None = Field(5, ge=2)
    centroid_min_uncertainty_m: float = Field(10000.0, ge=0)
    screen_max_r: float = Field(0.7, gt=0, le=1)
    screen_max_vif: float = Field(10.0, gt=1)
    priority: list[str] | None = None
    cv_block_km: float = Field(100.0, gt=0)
    cv_folds: int = Field(5, ge=2)
    cv_scheme: Literal["random", "checkerboard"] = "random"
    calibration: Literal["buffer", "hull_buffer", "mask"] = "buffer"
    calibration_mask: Path | None = None
    background_file: Path | None = None
    min_records: int = Field(10, ge=1)
    importance_repeats: int = Field(5, ge=0, le=1000)
    threshold: str = "max_sss"  # chosen by the truth benchmark (docs/truth.md)
    threshold_value: float | None = None

    @field_validator("thin")
    @classmethod
    def _thin(cls, v):
        if isinstance(v, str) and v not in {"cell", "none"}:
            try:
                v = float(v)
            except ValueError as err:
                raise ValueError("`thin` is \"cell\", \"none\" or a distance in km") from err
        if isinstance(v, float) and not v > 0:
            raise ValueError("`thin` as a distance must be more than 0 km")
        return None if v == "none" else v

    @field_validator("years")
    @classmethod
    def _years(cls, v):
        if v is not None and v[1] < v[0]:
            raise ValueError(f"`years` {list(v)} ends before it starts; give [first, last]")
        return v

    @field_validator("variables", "priority")
    @classmethod
    def _predictors(cls, v, info):
        if v is None:
            return v
        if info.field_name == "variables" and not v:
            raise ValueError("the list of predictors is empty; name at least one (bio1..bio19) "
                             "or leave `variables` out to offer all nineteen")
        for name in v:
            if name not in _PREDICTORS:
                close = difflib.get_close_matches(name, _PREDICTORS, n=1)
                hint = f"; did you mean {close[0]!r}?" if close and close[0] != name else ""
                raise ValueError(f"{name!r} is not a predictor (bio1..bio19 or elevation){hint}")
        dup = sorted({x for x in v if v.count(x) > 1})
        if dup:
            raise ValueError(f"{dup} named more than once; name each predictor once")
        return v


#: Predictors a niche may use: the bioclimatic variables of every prepared slice and elevation.
_PREDICTORS = (*(f"bio{i}" for i in range(1, 20)), "elevation")


class TransferConfig(_Section):
    """``[transfer]``: clamping, chunking and batching of the projection."""

    clamp: bool = False
    chunks: int | Literal["auto"] = "auto"
    chunk_budget_mb: float = Field(64.0, gt=0)
    #: slices computed in one dask graph before the batch is cached (smaller: finer resume)
    batch: int = Field(4, ge=1)

    @field_validator("chunks")
    @classmethod
    def _chunks(cls, v):
        if isinstance(v, int) and v <= 0:
            raise ValueError("`chunks` is \"auto\" or a positive number of cells")
        return v


class SeriesConfig(_Section):
    """``[series]``: reference slice, movement, refugium window, ensembles, zones."""

    reference: str = "baseline"
    dispersal_rate: str | None = None
    refugium_window: list[str] | tuple[float, float] | None = None
    movement_through: Literal["land", "suitable", "any"] = "land"
    graph_neighbours: Literal[8, 16] = 8
    partition_factors: list[str] | None = None
    hindcast_max_offset_years: float | None = Field(None, gt=0)
    #: named refugium hypotheses: name -> slice labels or periods of its window, each scored
    #: against the dated records and the genetic diversity table side by side
    hypotheses: dict[str, list[str]] = Field(default_factory=dict)
    #: GeoJSON polygons (protected areas, regions) to summarise suitable area, change,
    #: refugia and novelty in, per zone and slice
    zones: Path | None = None
    #: the feature property naming each zone (default `name`, else the feature number)
    zones_name_field: str | None = None


class BioticConfig(_Section):
    """Biotic limits: a required partner and a competitor, per slice (optional)."""

    #: presence (0/1) or suitability (0..1) of a required partner (host, pollinator,
    #: mutualist); a path, or a pattern with {label} for one file per slice label
    partner: str | None = None
    #: presence or suitability of a competitor or excluder; path or {label} pattern
    competitor: str | None = None
    partner_threshold: float = Field(0.5, ge=0.0)
    competitor_threshold: float = Field(0.5, ge=0.0)
    #: "exclude" (not suitable where the competitor is present) or a factor in [0, 1) that
    #: multiplies suitability there before the model's threshold is applied again
    competitor_effect: Literal["exclude"] | float = "exclude"

    @field_validator("competitor_effect")
    @classmethod
    def _effect(cls, v):
        if not isinstance(v, str) and not 0.0 <= float(v) < 1.0:
            raise ValueError("`competitor_effect` is \"exclude\" or a factor in [0, 1)")
        return v

    def files(self, labels: list[str]) -> dict[str, dict[str, Path]]:
        """``{"partner"|"competitor": {slice label: file}}`` for the layers given."""
        out: dict[str, dict[str, Path]] = {}
        for role in ("partner", "competitor"):
            pat = getattr(self, role)
            if pat is not None:
                out[role] = {lab: Path(pat.replace("{label}", lab)) for lab in labels}
        return out


class OutputConfig(_Section):
    """``[output]``: which outputs a run writes and how maps are drawn."""

    maps: bool = True
    geotiff: bool = False
    #: GeoJSON outlines of the refugium patches and of the suitable area per slice in vector/
    vector: bool = True
    report: bool = True
    #: map projection: "lonlat" (plain latitude-longitude), "equal_area" (Lambert azimuthal
    #: equal-area centred on the region) or "polar" (the same centred on the nearer pole)
    projection: Literal["lonlat", "equal_area", "polar"] = "lonlat"
    #: resolution of the figures, dots per inch (PNG pixels; the cell rasters inside SVG/PDF)
    dpi: int = Field(110, ge=30, le=1200)
    #: file format of the figures: "png", or vector "svg" / "pdf" for print
    figure_format: Literal["png", "svg", "pdf"] = "png"
    #: data files of the run: "netcdf" (series.nc, ensemble.nc) or "zarr" (series.zarr,
    #: ensemble.zarr: chunk files written in parallel by the dask workers)
    format: Literal["netcdf", "zarr"] = "netcdf"


class Config(_Section):
    """A whole validated configuration (:func:`load_config`); the keys are in docs/config.md."""

    run: RunConfig = Field(default_factory=RunConfig)
    grid: GridConfig | None = None
    climate: ClimateConfig
    slices: list[SliceConfig] = Field(default_factory=list)
    #: one species, or several (`[[species]]`) over the same harmonised slices
    species: SpeciesConfig | list[SpeciesConfig]
    niche: NicheConfig = Field(default_factory=NicheConfig)
    transfer: TransferConfig = Field(default_factory=TransferConfig)
    series: SeriesConfig = Field(default_factory=SeriesConfig)
    biotic: BioticConfig = Field(default_factory=BioticConfig)
    output: OutputConfig = Field(default_factory=OutputConfig)

    #: path of the TOML file this came from (not a key)
    source: Path | None = Field(default=None, exclude=True)

    @property
    def multi_species(self) -> bool:
        """True when the config lists several species (``[[species]]``)."""
        return isinstance(self.species, list)

    def species_configs(self) -> list[Config]:
        """One config per species (the shared climate, series and output settings, that
        species' records and its own `niche` keys laid over `[niche]`)."""
        if not self.multi_species:
            return [self]
        out = []
        for i, sp in enumerate(self.species):
            try:
                niche = NicheConfig.model_validate({**self.niche.model_dump(), **sp.niche})
            except ValidationError as err:
                raise ConfigError(_format_error(err, f"{self.source}: species[{i}].niche")) from err
            sub = self.model_copy(update={"species": sp.model_copy(update={"niche": {}}),
                                          "niche": niche})
            sub.source = self.source
            out.append(sub)
        return out

    def climate_inputs(self) -> list[tuple[str, ClimateInput, str, str | None]]:
        """Every climate input of the run as ``(config key, input, role, model)``."""
        c = self.climate
        role = "monthly" if c.baseline_kind == "monthly" else "bioclim"
        out: list[tuple[str, ClimateInput, str, str | None]] = [
            ("climate.baseline", c.baseline, role, None),
            ("climate.elevation", c.elevation, "elevation", None),
        ]
        out += [(f"climate.models.{k}", v, "monthly", k) for k, v in c.models.items()]
        seen: set[str] = set()
        for spec in self.slice_specs():
            for end in (spec.between or [spec]):
                if end.source is not None and end.label not in seen:
                    seen.add(end.label)
                    out.append((f"slices[{end.index}].file ({end.label})", end.source, end.kind,
                                end.model))
            if spec.ice is not None and f"ice:{spec.label}" not in seen:
                seen.add(f"ice:{spec.label}")
                out.append((f"slices[{spec.index}].ice ({spec.label})", spec.ice, "ice",
                            spec.model))
        return out

    def input_files(self) -> dict[str, list]:
        """Config key -> sorted input files (:class:`~timeslice.readers.filesets.InputFile`).

        Every path, glob and ``{variable}``/``{month}`` pattern is expanded once here; the
        stage cache, the manifest and ``rerun`` all use this list.
        """
        from timeslice.readers.filesets import InputFile

        files: dict[str, list] = {}
        for key, inp, role, model in self.climate_inputs():
            files[key] = inp.expand(key=f"{self.source}: {key}" if self.source else key,
                                    role=role, model=model)
        for key, path in self.single_files():
            files[key] = [InputFile(path)]
        labels = [self.climate.baseline_label, *[s.label for s in self.slice_specs()]]
        for role, per in self.biotic.files(labels).items():
            files[f"biotic.{role}"] = sorted({InputFile(p) for p in per.values()})
        return files

    def single_files(self) -> list[tuple[str, Path]]:
        """Config key and path of every one-file input: each species' records, dated records
        and diversity table, the calibration mask, background file and fitted model (per
        species when `[[species]]` gives them), and the zones."""
        subs = self.species_configs() if self.multi_species else [self]
        out: list[tuple[str, Path | None]] = []
        for i, sub in enumerate(subs):
            sp, n = sub.species, sub.niche
            pre, npre = ((f"species[{i}].", f"species[{i}].niche.") if self.multi_species
                         else ("species.", "niche."))
            out += [(pre + "occurrences", sp.occurrences), (pre + "dated_records", sp.dated_records),
                    (pre + "diversity", sp.diversity),
                    (npre + "calibration_mask", n.calibration_mask),
                    (npre + "background_file", n.background_file), (npre + "model", n.model)]
        out.append(("series.zones", self.series.zones))
        return [(k, Path(p)) for k, p in out if p is not None]

    def check_files(self, *, headers: bool = True) -> dict[str, list]:
        """Refuse, before any work, an input that is missing, unreadable, unsupported or whose
        files disagree on the grid; return :meth:`input_files`.

        Raises :class:`InputFileError` (or :class:`ConfigError`) naming the key.
        """
        from timeslice.readers.filesets import check_file_set

        files = self.input_files()
        labels = [self.climate.baseline_label, *[s.label for s in self.slice_specs()]]
        for role, per in self.biotic.files(labels).items():
            for lab, path in per.items():
                if not path.is_file():
                    raise InputFileError(
                        f"{self.source}: biotic.{role}: {str(path)!r} (slice {lab!r}) not found; "
                        "give one file per slice label ({label} in the pattern) or one file")
        for key, path in self.single_files():
            if not path.exists():
                raise InputFileError(
                    f"{self.source}: {key} = {str(path)!r}: file not found; fix the path "
                    "(relative paths are read from the config file's folder)"
                )
            if path.is_dir():
                raise InputFileError(
                    f"{self.source}: {key} = {str(path)!r} is a folder; give the file in it "
                    "(a CSV, tab-separated text, .gz or .zip of records, or a raster for a mask)"
                )
        if headers:
            inputs = {key: inp for key, inp, _, _ in self.climate_inputs()}
            for key, inp in inputs.items():
                pats = inp.patterns()
                try:
                    check_file_set(files[key], key=f"{self.source}: {key}" if self.source
                                   else key, pattern=pats[0] if len(pats) == 1 else None)
                except TimesliceError as err:
                    if key in str(err):
                        raise
                    # a refusal of the file's format names the file; say which key gave it
                    prefix = f"{self.source}: {key}" if self.source else key
                    raise type(err)(f"{prefix}: {err}") from err
        return files

    def _spec(self, i: int, s: SliceConfig, m: str) -> SliceSpec:
        year = s.year if s.year is not None else 1950.0 - float(s.age_bp)
        period = s.period or (f"{s.age_bp / 1000:g} ka BP" if s.age_bp is not None else f"{year:g}")
        ends: list[SliceSpec] = []
        if s.between is not None:
            for name in s.between:
                match = [
                    (j, o) for j, o in enumerate(self.slices)
                    if o.name == name and o.between is None
                    and (o.models is None or m in o.models) and o.scenario in (s.scenario, "past")
                ]
                if not match:
                    names = sorted({o.name for o in self.slices if o.between is None})
                    close = difflib.get_close_matches(name, names, n=1)
                    hint = f"; did you mean {close[0]!r}?" if close else f" (have {names})"
                    raise ConfigError(
                        f"{self.source}: slices[{i}].between names {name!r}, which is not a slice "
                        f"with a `file` for model {m!r}{hint}"
                    )
                ends.append(self._spec(match[0][0], match[0][1], m))
            lo, hi = sorted(e.year for e in ends)
            if not lo < year < hi:
                raise ConfigError(
                    f"{self.source}: slices[{i}] ({s.name!r}) year {year:g} is not between the "
                    f"years of {s.between} ({lo:g}, {hi:g}); interpolation does not extrapolate"
                )
        from timeslice.readers.filesets import substitute_model

        model_input = self.climate.models[m]
        source = None
        if s.file is not None:
            pats = [s.file] if isinstance(s.file, str) else list(s.file)
            pats = [str(_resolve(self.source, substitute_model(p, m))) for p in pats]
            # the model's options describe its files; the slice's own options override them
            source = ClimateInput(files=pats if len(pats) > 1 else pats[0],
                                  units=model_input.units, scale=model_input.scale,
                                  aliases=model_input.aliases,
                                  variables=model_input.variables).merged(s.options())
        ice = None
        if s.ice is not None:
            ipats = [str(_resolve(self.source, substitute_model(p, m))) for p in s.ice.patterns()]
            ice = s.ice.model_copy(update={"files": ipats if len(ipats) > 1 else ipats[0]})
        return SliceSpec(
            label=f"{m}_{s.scenario}_{s.name}" if s.scenario != "past" else f"{m}_{s.name}",
            index=i,
            model=m,
            scenario=s.scenario,
            period=period,
            year=year,
            file=Path(source.patterns()[0]) if source is not None else None,
            source=source,
            kind=s.kind,
            between=ends or None,
            model_baseline=model_input.model_copy(update={"files": [
                substitute_model(p, m) for p in model_input.patterns()]}),
            sea_level=_sea_level(s, year, ends),
            ice=ice,
        )

    def slice_specs(self) -> list[SliceSpec]:
        """Expand ``[[slices]]`` over models into one spec per (model, slice)."""
        specs: list[SliceSpec] = []
        for i, s in enumerate(self.slices):
            models = s.models if s.models is not None else list(self.climate.models)
            if not models:
                raise ConfigError(
                    f"{self.source}: slices[{i}] ({s.name!r}) needs a model: list one under "
                    "[climate.models] or give `models`"
                )
            for m in models:
                if m not in self.climate.models:
                    close = difflib.get_close_matches(m, list(self.climate.models), n=1)
                    hint = f"; did you mean {close[0]!r}?" if close else ""
                    raise ConfigError(
                        f"{self.source}: slices[{i}].models names {m!r}, which has no baseline "
                        f"under [climate.models] (have {sorted(self.climate.models)}){hint}"
                    )
                specs.append(self._spec(i, s, m))
        labels = [sp.label for sp in specs]
        dup = {x for x in labels if labels.count(x) > 1}
        if dup or self.climate.baseline_label in labels:
            raise ConfigError(
                f"{self.source}: slice labels must be unique, repeated: "
                f"{sorted(dup | ({self.climate.baseline_label} & set(labels)))}"
            )
        _check_file_names([self.climate.baseline_label, *labels], self.source)
        return specs


#: Longest file-name part a slice label may give (file systems allow 255 bytes per name; the
#: layer prefix and extension take the rest).
MAX_LABEL_STEM = 120


def _check_file_names(labels: list[str], source) -> None:
    """Maps and GeoTIFFs are named after slice labels (:func:`timeslice.io.file_stem`): two
    labels with one file name would overwrite each other, so they are refused naming both."""
    from timeslice.io import file_stem

    seen: dict[str, str] = {}
    for label in labels:
        stem = file_stem(label)
        if len(stem) > MAX_LABEL_STEM:
            raise ConfigError(
                f"{source}: slice label {label[:40]!r}… gives a file name of {len(stem)} "
                f"characters, more than {MAX_LABEL_STEM}; shorten the slice `name` or model name")
        if stem in seen:
            raise ConfigError(
                f"{source}: slice labels {seen[stem]!r} and {label!r} give the same file name "
                f"{stem!r} (maps and GeoTIFFs keep letters, digits, '.', '_' and '-'); rename "
                "one of the slices (or models) so they differ in those characters")
        seen[stem] = label


def _sea_level(s: SliceConfig, year: float, ends: list[SliceSpec]) -> float:
    """A slice's sea level: given, else interpolated linearly in time between its ends (the
    rule :func:`timeslice.harmonise.interpolate.between` applies to the climate), else 0."""
    if s.sea_level is not None:
        return float(s.sea_level)
    if len(ends) == 2:
        a, b = sorted(ends, key=lambda e: e.year)
        w = (year - a.year) / (b.year - a.year)
        return float((1.0 - w) * a.sea_level + w * b.sea_level)
    return 0.0


class SliceSpec(BaseModel):
    """One fully resolved slice of the run."""

    label: str
    #: position of the slice's entry in ``[[slices]]`` (for messages)
    index: int = 0
    model: str
    scenario: str
    period: str
    year: float
    #: the first file or pattern of `source` (None for an interpolated slice)
    file: Path | None
    #: the slice's files with the options that describe them
    source: ClimateInput | None = None
    kind: Literal["monthly", "bioclim"] = "monthly"
    between: list[SliceSpec] | None = None
    model_baseline: ClimateInput
    sea_level: float = 0.0
    ice: ClimateInput | None = None

    def files(self) -> list:
        """Every model file this slice is built from (expanded, sorted)."""
        if self.between:
            return [f for e in self.between for f in e.files()]
        if self.source is None:
            return []
        return self.source.expand(key=f"slices[{self.index}].file ({self.label})",
                                  role=self.kind, model=self.model)


def _resolve(base: Path | None, p: str | Path) -> Path:
    try:
        p = Path(p).expanduser()
    except RuntimeError:  # "~name" of no known user: kept as written, then "not found"
        p = Path(p)
    if base is not None and not p.is_absolute():
        p = (base.parent / p).resolve()
    return p


def slug(name: str) -> str:
    """Folder name of a species: letters, digits, dots, dashes and underscores."""
    return re.sub(r"[^A-Za-z0-9._-]+", "_", str(name)).strip("._") or "species"


def _resolve_input(base: Path | None, inp: ClimateInput) -> ClimateInput:
    pats = [str(_resolve(base, p)) for p in inp.patterns()]
    return inp.model_copy(update={"files": pats if isinstance(inp.files, list) else pats[0]})


def _check_patterns(cfg: Config, source: str) -> None:
    """Malformed patterns and impossible units are refused at load, naming the key."""
    from timeslice.readers.filesets import check_pattern

    c = cfg.climate
    checks: list[tuple[str, ClimateInput | None, tuple[str, ...]]] = [
        ("climate.baseline", c.baseline, ("variable", "month")),
        ("climate.elevation", c.elevation, ()),
    ]
    checks += [(f"climate.models.{k}", v, ("model", "variable", "month"))
               for k, v in c.models.items()]
    for i, s in enumerate(cfg.slices):
        if s.file is not None:
            pats = [s.file] if isinstance(s.file, str) else s.file
            opts = ClimateInput(files=pats, units=s.units, scale=s.scale)
            checks.append((f"slices[{i}].file", opts, ("model", "variable", "month")))
        checks.append((f"slices[{i}].ice", s.ice, ("model",)))
    for key, inp, allowed in checks:
        if inp is None:
            continue
        for pat in inp.patterns():
            check_pattern(pat, key=f"{source}: {key}", allowed=allowed)
        _check_units(source, key, inp)
    for k, v in c.models.items():
        _check_units(source, f"climate.models.{k}", v)


def _suggest(value: str, choices, what: str) -> str:
    """' did you mean X?' for the closest choice that is not `value` itself, else the list."""
    choices = [str(c) for c in choices]
    close = [c for c in difflib.get_close_matches(str(value), choices, n=3, cutoff=0.5)
             if c != str(value)]
    if close:
        return f"; did you mean {close[0]!r}?"
    shown = ", ".join(repr(c) for c in choices[:12])
    return f"; choose one of {shown}{' …' if len(choices) > 12 else ''}"


def check_references(cfg: Config, source: str) -> None:
    """Names that refer to other parts of the config, and choices of the stages, checked at
    load so a mistake costs no harmonising time."""
    specs = cfg.slice_specs()  # unknown models, bad `between` names, duplicate labels
    c, ser, n = cfg.climate, cfg.series, cfg.niche
    labels = [c.baseline_label, *[s.label for s in specs]]
    periods = [c.baseline_period, *[s.period for s in specs]]
    if ser.reference != "baseline" and ser.reference not in labels:
        raise ConfigError(f"{source}: series.reference = {ser.reference!r} is not a slice label"
                          f"{_suggest(ser.reference, labels, 'slice')}")
    if isinstance(ser.refugium_window, list):
        for w in ser.refugium_window:
            if w not in labels and w not in periods:
                raise ConfigError(
                    f"{source}: series.refugium_window names {w!r}, which is neither a slice "
                    f"label nor a period{_suggest(w, list(dict.fromkeys(periods + labels)), 'slice')}")
    for hname, hwin in ser.hypotheses.items():
        if not re.fullmatch(r"[A-Za-z0-9_]+", hname):
            raise ConfigError(f"{source}: series.hypotheses.{hname}: name hypotheses with letters, "
                              "digits and underscores (they name output layers)")
        for w in hwin:
            if w not in labels and w not in periods:
                raise ConfigError(
                    f"{source}: series.hypotheses.{hname} names {w!r}, which is neither a slice "
                    f"label nor a period{_suggest(w, list(dict.fromkeys(periods + labels)), 'slice')}")
    if ser.dispersal_rate is not None:
        from timeslice.series.dispersal import parse_rate

        try:
            parse_rate(ser.dispersal_rate, name="series.dispersal_rate")
        except ConfigError as err:
            raise ConfigError(f"{source}: {err}") from err
    for f in ser.partition_factors or []:
        if f not in ("algorithm", "model", "scenario"):
            raise ConfigError(f"{source}: series.partition_factors names {f!r}"
                              f"{_suggest(f, ['algorithm', 'model', 'scenario'], 'factor')}")
    from timeslice.niche.evaluate import THRESHOLD_RULES
    from timeslice.niche.registry import names as algorithm_names

    if n.algorithm not in algorithm_names():
        raise ConfigError(f"{source}: niche.algorithm = {n.algorithm!r} is not an algorithm"
                          f"{_suggest(n.algorithm, algorithm_names(), 'algorithm')}")
    if n.params:
        from timeslice.niche.models import make_model

        try:  # parameter names, checked now rather than after harmonising
            make_model(n.algorithm, **n.params)
        except ConfigError as err:
            raise ConfigError(f"{source}: niche.params: {err}") from err
    if n.threshold not in THRESHOLD_RULES:
        raise ConfigError(f"{source}: niche.threshold = {n.threshold!r} is not a threshold rule"
                          f"{_suggest(n.threshold, THRESHOLD_RULES, 'rule')}")
    if n.threshold == "fixed" and (n.threshold_value is None or not 0 < n.threshold_value < 1):
        raise ConfigError(f"{source}: niche.threshold = \"fixed\" needs niche.threshold_value "
                          f"in (0, 1), got {n.threshold_value!r}")


def _section_keys(model: type[BaseModel]) -> list[str]:
    return list(model.model_fields)


_SECTIONS: dict[str, type[BaseModel]] = {
    "": Config,
    "run": RunConfig,
    "grid": GridConfig,
    "climate": ClimateConfig,
    "slices": SliceConfig,
    "baseline": ClimateInput,
    "elevation": ClimateInput,
    "ice": ClimateInput,
    "species": SpeciesConfig,
    "niche": NicheConfig,
    "transfer": TransferConfig,
    "series": SeriesConfig,
    "biotic": BioticConfig,
    "output": OutputConfig,
}


def _format_error(err: ValidationError, source: str) -> str:
    first = err.errors()[0]
    loc = [str(x) for x in first["loc"]]
    key = ".".join(f"[{x}]" if x.isdigit() else x for x in loc).replace(".[", "[")
    if first["type"] == "extra_forbidden":
        section = next((x for x in reversed(loc[:-1]) if not x.isdigit()), "")
        valid = [k for k in _section_keys(_SECTIONS.get(section, Config)) if k != "source"]
        close = difflib.get_close_matches(loc[-1], valid, n=1, cutoff=0.5)
        hint = f"; did you mean {close[0]!r}?" if close else f"; valid keys: {', '.join(valid)}"
        return f"{source}: unknown key {key!r}{hint}"
    if first["type"] == "missing":
        return f"{source}: required key {key!r} is missing (see docs/config.md)"
    msg = first["msg"].removeprefix("Value error, ")
    got = first.get("input")
    got_s = "" if isinstance(got, dict) else f", got {got!r}"
    return f"{source}: key {key!r}: {msg}{got_s}"


def _finite(data, source: str, key: str = "") -> None:
    """TOML has nan and inf; no key of a run takes them."""
    if isinstance(data, dict):
        for k, v in data.items():
            _finite(v, source, f"{key}.{k}" if key else str(k))
    elif isinstance(data, list):
        for i, v in enumerate(data):
            _finite(v, source, f"{key}[{i}]")
    elif isinstance(data, float) and not math.isfinite(data):
        raise ConfigError(f"{source}: key {key!r} is {data!r}; give a finite number")


def parse_config(data: dict, *, source: str | Path = "<config>") -> Config:
    """Validate a config mapping; relative paths resolve against the folder of `source`.

    Parameters
    ----------
    data : dict
        The parsed TOML (or an equivalent mapping).
    source : str or Path
        The file it came from: named in every error, and the folder relative paths start in.

    Returns
    -------
    Config
    """
    src = Path(source)
    _finite(data, str(source))
    if "suitability" in data:  # the user's own suitability maps: the series stage only
        from timeslice.series_only import parse_series_only

        return parse_series_only(data, source=source)
    try:
        cfg = Config.model_validate(data)
    except ValidationError as err:
        raise ConfigError(_format_error(err, str(source))) from err
    cfg.source = src.resolve() if src.name != "<config>" else None
    base = cfg.source
    c = cfg.climate
    c.baseline = _resolve_input(base, c.baseline)
    c.elevation = _resolve_input(base, c.elevation)
    c.models = {k: _resolve_input(base, v) for k, v in c.models.items()}
    for s in cfg.slices:
        if s.ice is not None:
            s.ice = _resolve_input(base, s.ice)
        if s.file is not None:
            s.file = (str(_resolve(base, s.file)) if isinstance(s.file, str)
                      else [str(_resolve(base, f)) for f in s.file])
    _check_patterns(cfg, str(source))
    check_references(cfg, str(source))
    for sp in (cfg.species if cfg.multi_species else [cfg.species]):
        sp.occurrences = _resolve(base, sp.occurrences)
        if sp.dated_records is not None:
            sp.dated_records = _resolve(base, sp.dated_records)
        if sp.diversity is not None:
            sp.diversity = _resolve(base, sp.diversity)
    if cfg.multi_species:
        names = [sp.name for sp in cfg.species]
        slugs = [slug(n) for n in names]
        dup = sorted({n for n, g in zip(names, slugs) if slugs.count(g) > 1})
        if len(names) < 2 or dup:
            raise ConfigError(f"{source}: [[species]] needs at least two species with distinct "
                              f"names (their output folders), got {names}")
        for i, sub in enumerate(cfg.species_configs()):
            check_references(sub, f"{source}: species[{i}]")
    if cfg.series.zones is not None:
        cfg.series.zones = _resolve(base, cfg.series.zones)
    for role in ("partner", "competitor"):
        pat = getattr(cfg.biotic, role)
        if pat is not None:
            from timeslice.readers.filesets import check_pattern

            check_pattern(pat, key=f"{source}: biotic.{role}", allowed=("label",))
            setattr(cfg.biotic, role, str(_resolve(base, pat)))
    for key in ("calibration_mask", "background_file", "model"):
        value = getattr(cfg.niche, key)
        if value is not None:
            setattr(cfg.niche, key, _resolve(base, value))
    if cfg.niche.calibration == "mask" and cfg.niche.calibration_mask is None:
        raise ConfigError(f"{source}: niche.calibration = \"mask\" needs niche.calibration_mask "
                          "(a raster or NetCDF of 0/1)")
    return cfg


def load_config(path: str | Path) -> Config:
    """Read and validate a TOML config file.

    Parameters
    ----------
    path : str or Path
        The TOML file.

    Returns
    -------
    Config

    Raises
    ------
    InputFileError
        The file is missing or is not TOML.
    ConfigError
        A key is unknown, missing or has a bad value.
    """
    p = Path(path)
    if not p.is_file():
        raise InputFileError(f"config file {str(p)!r} not found; give the path to a .toml file")
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as err:
        raise InputFileError(f"{p}: not a valid TOML file ({err}); check the syntax") from err
    return parse_config(data, source=p)
