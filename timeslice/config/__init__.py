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
from typing import Literal

from pydantic import BaseModel, Field, ValidationError

from timeslice.errors import ConfigError, InputFileError, TimesliceError

from timeslice.config.sections import (
    BioticConfig,
    ClimateConfig,
    ClimateInput,
    GridConfig,
    NicheConfig,
    OutputConfig,
    RunConfig,
    Section,
    SeriesConfig,
    SliceConfig,
    SpeciesConfig,
    TransferConfig,
    check_units,
)

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


class Config(Section):
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
        check_units(source, key, inp)
    for k, v in c.models.items():
        check_units(source, f"climate.models.{k}", v)


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
