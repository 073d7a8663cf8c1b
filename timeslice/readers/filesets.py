"""Climate inputs as file sets: single files, globs, lists and ``{variable}``/``{month}`` patterns.

Climate-model archives ship one file per variable (often per 5-20 years) and gridded
climatologies one raster per variable and month. A config path is expanded here, once, into a
sorted list of :class:`InputFile` (path plus the variable and month the pattern names), which the
reader, the stage cache key, the manifest and ``rerun`` all use. :func:`check_file_set` reads only
the file headers, so a pattern matching nothing, an unsupported file (GRIB, curvilinear or
rotated-pole grids, no latitude/longitude) or files that disagree on the grid are refused before
any work starts.
"""

from __future__ import annotations

import glob as _glob
import os
import re
import string
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

from timeslice.errors import ConfigError, InputFileError, shorten
from timeslice.readers.registry import format_names, get_reader, readers

__all__ = [
    "InputFile",
    "PLACEHOLDERS",
    "check_file_set",
    "check_pattern",
    "expand_files",
    "file_set_digest",
    "input_files",
    "sniff_format",
    "substitute_model",
    "unsupported_message",
]

#: Placeholders a climate path may hold: ``{model}`` (slice files, one per model),
#: ``{variable}`` (one file set per canonical variable) and ``{month}`` (1..12; a format spec
#: such as ``{month:02d}`` gives 01..12).
PLACEHOLDERS = ("model", "variable", "month")

_GLOB_CHARS = "*?["


@dataclass(frozen=True, order=True)
class InputFile:
    """One input file and what its path pattern says it holds.

    Parameters
    ----------
    path : pathlib.Path
        The file.
    variable : str, optional
        Canonical variable named by a ``{variable}`` pattern (None: the reader identifies it).
    month : int, optional
        Month 1..12 named by a ``{month}`` pattern (None: from the file's own time axis).
    """

    path: Path
    #: canonical variable named by a ``{variable}`` pattern (None: the reader identifies it)
    variable: str | None = None
    #: month 1..12 named by a ``{month}`` pattern (None: from the file's own time axis)
    month: int | None = None


def check_pattern(pattern: str, *, key: str, allowed: Iterable[str] = PLACEHOLDERS) -> set[str]:
    """Placeholders used in `pattern`; raise :class:`ConfigError` naming `key` for a bad one.

    A stray ``{`` or ``}``, an unknown placeholder or a format spec that does not fit a month
    number is refused with the fix, before any file is touched.

    Parameters
    ----------
    pattern : str
        A configured path.
    key : str
        Config key named in messages.
    allowed : iterable of str
        Placeholders allowed for this key (default: :data:`PLACEHOLDERS`).

    Returns
    -------
    set of str
        The placeholders `pattern` uses.

    Raises
    ------
    ConfigError
        A malformed pattern, an unknown placeholder or a bad format spec.
    """
    allowed = set(allowed)
    try:
        fields = [f for _, f, spec, _ in string.Formatter().parse(pattern) if f is not None]
    except ValueError as err:
        raise ConfigError(
            f"{key} = {pattern!r}: {err}; placeholders are {_names(allowed)}, and a literal "
            "brace is written '{{' or '}}'"
        ) from err
    for f in fields:
        if f not in allowed:
            raise ConfigError(
                f"{key} = {pattern!r}: unknown placeholder {{{f}}}; use {_names(allowed)}"
            )
    try:
        pattern.format(model="m", variable="v", month=1)
    except (ValueError, TypeError, IndexError, KeyError) as err:
        raise ConfigError(
            f"{key} = {pattern!r}: the placeholder format is not valid ({err}); e.g. write "
            "{month:02d} for 01..12"
        ) from err
    return set(fields)


def _names(allowed: Iterable[str]) -> str:
    return ", ".join(f"{{{a}}}" for a in sorted(allowed))


def substitute_model(pattern: str, model: str) -> str:
    """Fill ``{model}`` only, leaving ``{variable}`` and ``{month}`` for :func:`expand_files`.

    Parameters
    ----------
    pattern : str
        A configured path.
    model : str
        The model name.

    Returns
    -------
    str
    """
    return re.sub(r"\{model\}", model.replace("\\", "\\\\"), pattern)


def expand_files(
    patterns: str | os.PathLike | Sequence[str | os.PathLike],
    *,
    key: str,
    variables: Mapping[str, str] | None = None,
) -> list[InputFile]:
    """Expand paths, globs and ``{variable}``/``{month}`` patterns into sorted input files.

    Parameters
    ----------
    patterns : path, glob or list of them
        Each may hold ``{variable}`` (filled from `variables`) and ``{month}`` (1..12).
    key : str
        Config key named in messages (e.g. ``climate.baseline``).
    variables : mapping, optional
        Canonical variable -> the text that stands for it in file names (e.g.
        ``{"tasmin": "tmin"}``); needed when a pattern holds ``{variable}``.

    Returns
    -------
    list of InputFile
        Sorted by path; every file once.

    Raises
    ------
    InputFileError
        A path is missing, or a pattern (with its placeholders filled) matches no file.
    ConfigError
        A pattern is malformed, or holds ``{variable}`` without variables to fill it.
    """
    items = [patterns] if isinstance(patterns, (str, os.PathLike)) else list(patterns)
    if not items:
        raise ConfigError(f"{key}: the list of files is empty; give at least one path")
    found: dict[Path, InputFile] = {}
    for item in items:
        text = os.fspath(item)
        fields = check_pattern(text, key=key, allowed=("variable", "month"))
        if "variable" in fields and not variables:
            raise ConfigError(
                f"{key} = {text!r}: the pattern holds {{variable}} but no variables are known "
                "for this input; give `variables` (e.g. {tasmin = \"tmin\"})"
            )
        var_items = list(variables.items()) if "variable" in fields else [(None, None)]
        months: list[int | None] = list(range(1, 13)) if "month" in fields else [None]
        for canon, token in var_items:
            for month in months:
                name = text.format(variable=token, month=month) if fields else text
                for path in _match(name, pattern=text, key=key):
                    entry = InputFile(path, canon, month)
                    old = found.get(path)
                    if old is not None and old != entry:
                        raise ConfigError(
                            f"{key} = {text!r}: {path.name} matches for both "
                            f"{_what(old)} and {_what(entry)}; make the pattern specific"
                        )
                    found[path] = entry
    return sorted(found.values())


def input_files(path) -> list[InputFile]:
    """Files of one climate input as given to the reader: a path, a glob, a list of them, or
    :class:`InputFile` entries (already expanded by :func:`expand_files`).

    Parameters
    ----------
    path : str, path-like, InputFile or sequence of them

    Returns
    -------
    list of InputFile
        In the order given (globs sorted).

    Raises
    ------
    InputFileError
        A path is missing or a folder, or a glob matches nothing.
    """
    if isinstance(path, InputFile):
        return [path]
    if isinstance(path, (str, os.PathLike)):
        items = [path]
    elif isinstance(path, Sequence):
        items = list(path)
    else:
        raise InputFileError(f"climate input {path!r}: expected a path, a glob or a list of paths")
    out: list[InputFile] = []
    for item in items:
        if isinstance(item, InputFile):
            out.append(item)
            continue
        text = os.fspath(item)
        if any(ch in text for ch in _GLOB_CHARS):
            found = sorted(_glob.glob(text))
            if not found:
                raise InputFileError(f"{text}: the pattern matches no file; check the path")
            out.extend(InputFile(Path(f)) for f in found)
        else:
            p = Path(text)
            if p.is_dir():
                raise InputFileError(f"{text}: is a folder; give the files in it (e.g. '{text}/*.nc')")
            if not p.is_file():
                raise InputFileError(f"{text}: file not found; check the path in the config")
            out.append(InputFile(p))
    return out


def _what(f: InputFile) -> str:
    parts = [f.variable or "", f"month {f.month}" if f.month else ""]
    return " ".join(p for p in parts if p) or "the whole file"


def _match(name: str, *, pattern: str, key: str) -> list[Path]:
    if any(ch in name for ch in _GLOB_CHARS):
        hits = sorted(Path(p) for p in _glob.glob(name) if Path(p).is_file())
        if not hits:
            filled = "" if name == pattern else f" (filled: {name!r})"
            raise InputFileError(
                f"{key} = {pattern!r}{filled}: the pattern matches no file; check the folder "
                "and the file names"
            )
        return hits
    p = Path(name)
    if p.is_dir():
        raise InputFileError(
            f"{key} = {pattern!r}: {name!r} is a folder; give the files in it (e.g. "
            f"'{name.rstrip('/')}/*.nc')"
        )
    if not p.is_file():
        filled = "" if name == pattern else f" (filled: {name!r})"
        raise InputFileError(
            f"{key} = {pattern!r}{filled}: file not found; fix the path (relative paths are "
            "read from the config file's folder)"
        )
    return [p]


def file_set_digest(files: Iterable[InputFile | str | os.PathLike]) -> str:
    """SHA-256 over the sorted files' own digests and their tags (the stage cache key).

    Parameters
    ----------
    files : iterable of InputFile or path-like

    Returns
    -------
    str
        Hexadecimal digest.
    """
    import hashlib

    from timeslice.cache import file_digest

    h = hashlib.sha256()
    entries = sorted(f if isinstance(f, InputFile) else InputFile(Path(f)) for f in files)
    for f in entries:
        h.update(f"{f.path.resolve()}|{f.variable}|{f.month}|".encode())
        h.update(file_digest(f.path).encode())
    return h.hexdigest()


# ----------------------------------------------------------------------------- formats

#: Formats recognised only to be refused with a way to convert them (GRIB editions 1 and 2
#: start with "GRIB"); the readable formats and their magic numbers are the reader registry's.
_UNSUPPORTED_MAGIC: tuple[tuple[bytes, str], ...] = ((b"GRIB", "grib"),)
_UNSUPPORTED_SUFFIX = {".grb": "grib", ".grib": "grib", ".grb2": "grib", ".grib2": "grib"}


def sniff_format(path: str | os.PathLike) -> str:
    """The format key of a file, from its first bytes (then its suffix).

    The keys are those of the reader registry (:mod:`timeslice.readers.registry`:
    ``"netcdf"``, ``"raster"`` and any registered format), or ``"grib"`` (recognised, refused)
    or ``"unknown"``. The first bytes are compared with each registered format's magic numbers
    (those of the formats' own specifications), then its sniffing function (ESRI ASCII grids
    start with the text ``ncols``); the suffix decides only when the bytes say nothing.

    Parameters
    ----------
    path : path-like

    Returns
    -------
    str
        The format key.

    Raises
    ------
    InputFileError
        The file cannot be read.
    """
    p = Path(path)
    try:
        with open(p, "rb") as fh:
            head = fh.read(512)
    except OSError as err:
        raise InputFileError(f"{p}: cannot be read ({err.strerror or err}); check the file") from err
    known = readers()
    for reader in known:
        if any(head.startswith(magic) for magic in reader.magic):
            return reader.key
    for magic, kind in _UNSUPPORTED_MAGIC:
        if head.startswith(magic):
            return kind
    for reader in known:
        if reader.sniff is not None and reader.sniff(head):
            return reader.key
    if b"GRIB" in head[:128]:  # GRIB messages behind a small header (WMO bulletin)
        return "grib"
    suffix = p.suffix.lower()
    for reader in known:
        if suffix in reader.suffixes:
            return reader.key
    return _UNSUPPORTED_SUFFIX.get(suffix, "unknown")


def unsupported_message(path: Path, kind: str) -> str | None:
    """The one-line refusal for a file format timeslice does not read, else None.

    Parameters
    ----------
    path : pathlib.Path
    kind : str
        Its format key (:func:`sniff_format`).

    Returns
    -------
    str or None
    """
    if kind == "grib":
        return (
            f"{path}: this is a GRIB file, which timeslice does not read; convert it to "
            f"NetCDF first, e.g. `cdo -f nc4 copy {path.name} {path.stem}.nc`"
        )
    if kind == "unknown":
        return (
            f"{path}: not a {format_names()} (unrecognised first bytes); "
            "give climate data in one of those formats"
        )
    return None


def _signature(lat, lon) -> tuple:
    """Grid identity: sorted latitudes and sorted longitudes wrapped to [-180, 180), so a
    0..360 file and a -180..180 file of the same grid compare equal."""
    import numpy as np

    la = np.sort(np.asarray(lat, dtype=float).ravel())
    lo = np.sort(((np.asarray(lon, dtype=float).ravel() + 180.0) % 360.0) - 180.0)
    return (la.size, lo.size, tuple(np.round(la, 3)), tuple(np.round(lo, 3)))


def _describe(sig: tuple) -> str:
    la, lo = sig[2], sig[3]
    ends = (f"lat {la[0]:g}..{la[-1]:g}, lon {lo[0]:g}..{lo[-1]:g}" if la and lo else "empty")
    return f"{sig[0]} x {sig[1]}, {ends}"


def check_file_set(files: Sequence[InputFile], *, key: str, pattern: str | None = None) -> None:
    """Refuse an input whose files are unreadable, unsupported or on different grids.

    Reads only headers (coordinates), through each format's reader
    (:meth:`~timeslice.readers.registry.Reader.header_grid`), so it is cheap enough to run at
    config load for every input of a run.

    Parameters
    ----------
    files : sequence of InputFile
    key : str
        Config key named in messages.
    pattern : str, optional
        The path pattern the files came from, shown in messages.

    Returns
    -------
    None

    Raises
    ------
    InputFileError
        A file is unreadable or unsupported, or the files are on different grids.
    """
    grids: dict[tuple, list[Path]] = {}
    for f in files:
        kind = sniff_format(f.path)
        msg = unsupported_message(f.path, kind)
        if msg:
            raise InputFileError(msg)
        lat, lon = get_reader(kind).header_grid(f.path)
        grids.setdefault(_signature(lat, lon), []).append(f.path)
    if len(grids) > 1:
        shown = "; ".join(
            f"{paths[0].name}{f' (+{len(paths) - 1})' if len(paths) > 1 else ''}: "
            f"{_describe(s)}"
            for s, paths in list(grids.items())[:3]
        )
        name = f"{key} = {pattern!r}" if pattern else key
        raise InputFileError(shorten(
            f"{name}: the files disagree on the grid ({shown}); give files of one grid per "
            "input, or split them into separate inputs", 400))
