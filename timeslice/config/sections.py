"""The sections of the run configuration: one pydantic model per TOML table.

Each model names its keys and their checks; :mod:`timeslice.config` assembles them into
:class:`~timeslice.config.Config` and adds the checks that span sections. docs/config.md lists
every key.
"""

from __future__ import annotations

import difflib
import re
from pathlib import Path
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from timeslice.errors import ConfigError

__all__ = [
    "BioticConfig",
    "CANONICAL",
    "ClimateConfig",
    "ClimateInput",
    "GridConfig",
    "MAX_GRID_CELLS",
    "NicheConfig",
    "OutputConfig",
    "PREDICTORS",
    "ROLE_VARIABLES",
    "RunConfig",
    "Section",
    "SeriesConfig",
    "SliceConfig",
    "SpeciesConfig",
    "TransferConfig",
    "check_units",
]


class Section(BaseModel):
    """Base of every section: unknown keys are refused (so a misspelling is reported)."""

    model_config = ConfigDict(extra="forbid", frozen=False)


class RunConfig(Section):
    """``[run]``: the run's name, seed and scheduler (docs/config.md)."""

    name: str = "timeslice run"
    #: 0 .. 2**32 - 1 (the range numpy's and scikit-learn's seeds accept)
    seed: int = Field(0, ge=0, le=2**32 - 1)
    scheduler: str = "threads"
    workers: int | None = Field(None, ge=1)


class GridConfig(Section):
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
CANONICAL = ("tasmin", "tasmax", "tas", "pr", "elevation", "ice",
              *(f"bio{i}" for i in range(1, 20)))


class ClimateInput(Section):
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
            if k not in CANONICAL:
                close = difflib.get_close_matches(k, CANONICAL, n=1)
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
        return expand_files(pats, key=key, variables=self.variables or ROLE_VARIABLES[role])

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
ROLE_VARIABLES: dict[str, dict[str, str]] = {
    "monthly": {"tasmin": "tasmin", "tasmax": "tasmax", "pr": "pr"},
    "bioclim": {f"bio{i}": f"bio{i}" for i in range(1, 20)},
    "elevation": {"elevation": "elevation"},
    "ice": {"ice": "ice"},
}


def check_units(source, key: str, inp: ClimateInput | None) -> None:
    """Refuse at config load a declared unit that cannot describe its variable.

    Parameters
    ----------
    source : str or Path
        The config file, named in the error.
    key : str
        The input's key (``climate.baseline``, ``slices[2]``).
    inp : ClimateInput or None
        The input whose declared units are checked.
    """
    if inp is None:
        return
    from timeslice.errors import DataError
    from timeslice.units import (
        fraction_factor,
        length_factor,
        parse_units,
        precipitation_conversion,
        temperature_conversion,
    )

    for var, text in inp.units.items():
        try:
            if var in ("tasmin", "tasmax", "tas"):
                temperature_conversion(text, variable=var, source=key)
            elif var == "pr":
                precipitation_conversion(text, variable=var, source=key)
            elif var == "elevation":
                # parsed first: an empty or unknown unit gets the parser's own line
                parse_units(text, variable=var, source=key)
                _as_declared(length_factor, key, var, text, "are not a length")
            elif var == "ice":
                _as_declared(fraction_factor, key, var, text, "must be '1' (fraction) or '%'")
        except DataError as err:
            msg = str(err).split(": ", 1)[-1]
            raise ConfigError(f"{source}: {key}.units.{var} = {text!r}: {msg}") from err


def _as_declared(factor, key: str, var: str, text: str, refusal: str) -> None:
    """Run a factor of :mod:`timeslice.units` on a declared unit; refuse it in the config's words."""
    from timeslice.errors import DataError

    try:
        factor(text, variable=var, source=key)
    except DataError as err:
        raise DataError(f"{key}: units {text!r} of {var!r} {refusal}") from err


class ClimateConfig(Section):
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


class SliceConfig(Section):
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


class SpeciesConfig(Section):
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


class NicheConfig(Section):
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
            if name not in PREDICTORS:
                close = difflib.get_close_matches(name, PREDICTORS, n=1)
                hint = f"; did you mean {close[0]!r}?" if close and close[0] != name else ""
                raise ValueError(f"{name!r} is not a predictor (bio1..bio19 or elevation){hint}")
        dup = sorted({x for x in v if v.count(x) > 1})
        if dup:
            raise ValueError(f"{dup} named more than once; name each predictor once")
        return v


#: Predictors a niche may use: the bioclimatic variables of every prepared slice and elevation.
PREDICTORS = (*(f"bio{i}" for i in range(1, 20)), "elevation")


class TransferConfig(Section):
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


class SeriesConfig(Section):
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


class BioticConfig(Section):
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


class OutputConfig(Section):
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
