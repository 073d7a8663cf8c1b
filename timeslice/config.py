"""The run configuration: one TOML file, validated by pydantic models.

Every error names the file and the key (``niche.buffer_km``), what was expected and the fix; a
misspelled key gets the closest valid spelling. Relative paths are resolved against the folder of
the config file. See docs/config.md for every key.
"""

from __future__ import annotations

import difflib
import tomllib
from pathlib import Path
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator

from timeslice.errors import ConfigError, InputFileError

__all__ = [
    "ClimateConfig",
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
    name: str = "timeslice run"
    seed: int = 0
    scheduler: str = "threads"
    workers: int | None = None


class GridConfig(_Section):
    lon_min: float
    lon_max: float
    lat_min: float
    lat_max: float
    resolution: float = Field(gt=0)


class ClimateConfig(_Section):
    baseline: Path
    elevation: Path
    baseline_kind: Literal["monthly", "bioclim"] = "monthly"
    baseline_label: str = "baseline"
    baseline_period: str = "present"
    baseline_year: float = 2000.0
    models: dict[str, Path] = Field(default_factory=dict)
    aliases: dict[str, list[str]] = Field(default_factory=dict)
    units: dict[str, str] = Field(default_factory=dict)
    scale: dict[str, float] = Field(default_factory=dict)
    regrid: Literal["auto", "conservative", "bilinear"] | dict[str, Literal["auto", "conservative", "bilinear"]] = "auto"
    pr_floor: float = Field(0.1, ge=0.0)
    ratio_quantile: float = Field(0.98, gt=0.5, le=1.0)
    present_sea_level: float = 0.0
    ice_threshold: float = Field(0.5, ge=0.0, le=1.0)
    lapse_rate: float = Field(0.0065, ge=0.0)


class SliceConfig(_Section):
    """One entry of ``[[slices]]``; expands to one slice per model in `models`."""

    name: str
    file: str | None = None
    kind: Literal["monthly", "bioclim"] = "monthly"
    between: list[str] | None = None
    scenario: str = "past"
    period: str | None = None
    year: float | None = None
    age_bp: float | None = None
    sea_level: float = 0.0
    ice: Path | None = None
    models: list[str] | None = None

    @model_validator(mode="after")
    def _one_time(self) -> SliceConfig:
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
    name: str = "species"
    occurrences: Path
    columns: dict[str, str] | None = None
    dated_records: Path | None = None


class NicheConfig(_Section):
    algorithm: str = "ellipsoid"
    params: dict[str, Any] = Field(default_factory=dict)
    variables: list[str] | None = None
    buffer_km: float = Field(300.0, gt=0)
    n_background: int = Field(10000, gt=0)
    thin: str | float | None = "cell"
    uncertainty_max_m: float | None = None
    years: tuple[int, int] | None = None
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
    importance_repeats: int = Field(5, ge=0)
    threshold: str = "p10"
    threshold_value: float | None = None

    @field_validator("thin")
    @classmethod
    def _thin(cls, v):
        if isinstance(v, str) and v not in {"cell", "none"}:
            try:
                return float(v)
            except ValueError as err:
                raise ValueError("`thin` is \"cell\", \"none\" or a distance in km") from err
        return None if v == "none" else v


class TransferConfig(_Section):
    clamp: bool = False
    chunks: int | Literal["auto"] = "auto"
    chunk_budget_mb: float = Field(64.0, gt=0)

    @field_validator("chunks")
    @classmethod
    def _chunks(cls, v):
        if isinstance(v, int) and v <= 0:
            raise ValueError("`chunks` is \"auto\" or a positive number of cells")
        return v


class SeriesConfig(_Section):
    reference: str = "baseline"
    dispersal_rate: str | None = None
    refugium_window: list[str] | tuple[float, float] | None = None
    movement_through: Literal["land", "suitable", "any"] = "land"
    graph_neighbours: Literal[8, 16] = 8
    partition_factors: list[str] | None = None
    hindcast_max_offset_years: float | None = Field(None, gt=0)


class OutputConfig(_Section):
    maps: bool = True
    geotiff: bool = False
    report: bool = True


class Config(_Section):
    run: RunConfig = Field(default_factory=RunConfig)
    grid: GridConfig | None = None
    climate: ClimateConfig
    slices: list[SliceConfig] = Field(default_factory=list)
    species: SpeciesConfig
    niche: NicheConfig = Field(default_factory=NicheConfig)
    transfer: TransferConfig = Field(default_factory=TransferConfig)
    series: SeriesConfig = Field(default_factory=SeriesConfig)
    output: OutputConfig = Field(default_factory=OutputConfig)

    #: path of the TOML file this came from (not a key)
    source: Path | None = Field(default=None, exclude=True)

    def check_files(self) -> None:
        """Raise :class:`InputFileError` naming the key of the first input file that is missing."""
        keys: list[tuple[str, Path | None]] = [
            ("climate.baseline", self.climate.baseline),
            ("climate.elevation", self.climate.elevation),
            ("species.occurrences", self.species.occurrences),
            ("species.dated_records", self.species.dated_records),
            ("niche.calibration_mask", self.niche.calibration_mask),
            ("niche.background_file", self.niche.background_file),
        ]
        keys += [(f"climate.models.{k}", v) for k, v in self.climate.models.items()]
        keys += [(f"slices[{i}].ice", s.ice) for i, s in enumerate(self.slices)]
        for key, path in keys:
            if path is not None and not _exists(path):
                raise InputFileError(
                    f"{self.source}: {key} = {str(path)!r}: file not found; fix the path "
                    "(relative paths are read from the config file's folder)"
                )
        for spec in self.slice_specs():
            for f in spec.files():
                if not _exists(f):
                    raise InputFileError(
                        f"{self.source}: slice {spec.label!r} (slices file pattern): "
                        f"{str(f)!r} not found; fix the path or the model list"
                    )

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
        return SliceSpec(
            label=f"{m}_{s.scenario}_{s.name}" if s.scenario != "past" else f"{m}_{s.name}",
            model=m,
            scenario=s.scenario,
            period=period,
            year=year,
            file=_resolve(self.source, s.file.format(model=m)) if s.file else None,
            kind=s.kind,
            between=ends or None,
            model_baseline=self.climate.models[m],
            sea_level=s.sea_level,
            ice=s.ice,
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
        return specs


class SliceSpec(BaseModel):
    """One fully resolved slice of the run."""

    label: str
    model: str
    scenario: str
    period: str
    year: float
    file: Path | None
    kind: Literal["monthly", "bioclim"] = "monthly"
    between: list[SliceSpec] | None = None
    model_baseline: Path
    sea_level: float = 0.0
    ice: Path | None = None

    def files(self) -> list[Path]:
        """Every model file this slice is built from."""
        if self.between:
            return [f for e in self.between for f in e.files()]
        return [self.file] if self.file is not None else []


def _exists(path: Path) -> bool:
    """True for an existing file, or a glob pattern matching at least one file."""
    if any(ch in str(path) for ch in "*?["):
        return bool(list(path.parent.glob(path.name)))
    return path.exists()


def _resolve(base: Path | None, p: str | Path) -> Path:
    p = Path(p).expanduser()
    if base is not None and not p.is_absolute():
        p = (base.parent / p).resolve()
    return p


def _section_keys(model: type[BaseModel]) -> list[str]:
    return list(model.model_fields)


_SECTIONS: dict[str, type[BaseModel]] = {
    "": Config,
    "run": RunConfig,
    "grid": GridConfig,
    "climate": ClimateConfig,
    "slices": SliceConfig,
    "species": SpeciesConfig,
    "niche": NicheConfig,
    "transfer": TransferConfig,
    "series": SeriesConfig,
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


def parse_config(data: dict, *, source: str | Path = "<config>") -> Config:
    """Validate a config mapping; relative paths resolve against the folder of `source`."""
    src = Path(source)
    try:
        cfg = Config.model_validate(data)
    except ValidationError as err:
        raise ConfigError(_format_error(err, str(source))) from err
    cfg.source = src.resolve() if src.name != "<config>" else None
    base = cfg.source
    c = cfg.climate
    c.baseline = _resolve(base, c.baseline)
    c.elevation = _resolve(base, c.elevation)
    c.models = {k: _resolve(base, v) for k, v in c.models.items()}
    for s in cfg.slices:
        if s.ice is not None:
            s.ice = _resolve(base, s.ice)
    cfg.species.occurrences = _resolve(base, cfg.species.occurrences)
    if cfg.species.dated_records is not None:
        cfg.species.dated_records = _resolve(base, cfg.species.dated_records)
    for key in ("calibration_mask", "background_file"):
        value = getattr(cfg.niche, key)
        if value is not None:
            setattr(cfg.niche, key, _resolve(base, value))
    if cfg.niche.calibration == "mask" and cfg.niche.calibration_mask is None:
        raise ConfigError(f"{source}: niche.calibration = \"mask\" needs niche.calibration_mask "
                          "(a raster or NetCDF of 0/1)")
    return cfg


def load_config(path: str | Path) -> Config:
    """Read and validate a TOML config file.

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
