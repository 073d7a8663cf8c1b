"""Run manifest: configuration, input hashes, versions, seed, timings and command line."""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import os
import platform
import sys
from collections.abc import Iterable, Mapping
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path
from typing import Any

from timeslice.errors import InputFileError
from timeslice.report._output import output_path

__all__ = ["DEPENDENCIES", "hash_file", "package_versions", "read_manifest", "write_manifest"]

#: Distributions whose versions are recorded (import names differ for some).
DEPENDENCIES = (
    "timeslice", "numpy", "scipy", "pandas", "xarray", "dask", "distributed", "netCDF4",
    "cftime", "scikit-learn", "pint", "cf-xarray", "rasterio", "rioxarray", "matplotlib",
    "cartopy", "pyproj", "shapely", "typer", "rich", "pydantic",
)

MANIFEST_VERSION = 1


def hash_file(path: str | os.PathLike, *, chunk_size: int = 1 << 20) -> str:
    """SHA-256 hex digest of a file (FIPS 180-4), read in chunks.

    Parameters
    ----------
    path : path-like
        An existing file.
    chunk_size : int, default 1 MiB
        Bytes per read.

    Returns
    -------
    str
        64 lower-case hexadecimal characters.
    """
    p = Path(path)
    if not p.is_file():
        raise InputFileError(f"{p}: no such file to hash; check the input path in the config")
    h = hashlib.sha256()
    with p.open("rb") as fh:
        for block in iter(lambda: fh.read(chunk_size), b""):
            h.update(block)
    return h.hexdigest()


def package_versions(names: Iterable[str] = DEPENDENCIES) -> dict[str, str | None]:
    """Installed versions of `names` (None when a distribution is not installed).

    Parameters
    ----------
    names : iterable of str
        Distribution names.
    """
    out: dict[str, str | None] = {}
    for name in names:
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = None
    return out


def _jsonable(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, set)):
        return [_jsonable(v) for v in value]
    if isinstance(value, Path):
        return str(value)
    if hasattr(value, "model_dump"):  # pydantic models
        return _jsonable(value.model_dump(mode="json"))
    if hasattr(value, "item") and callable(value.item):  # numpy scalars
        try:
            return value.item()
        except (TypeError, ValueError):
            pass
    if isinstance(value, (str, int, float, bool)) or value is None:
        return value
    return str(value)


def write_manifest(info: Mapping[str, Any], path: str | os.PathLike) -> Path:
    """Write the run manifest as JSON.

    Parameters
    ----------
    info : mapping
        Any of: ``config`` (mapping or pydantic model), ``config_path``, ``inputs`` (list of
        input file paths, hashed here; or a mapping path -> digest already computed),
        ``seed``, ``timings`` (stage -> seconds), ``command`` (list of argv strings; default
        ``sys.argv``), ``outputs`` (list of paths), and anything else (kept as given).
    path : path-like
        Target ``manifest.json``.

    Returns
    -------
    pathlib.Path
        The written file.

    Notes
    -----
    Versions come from :func:`importlib.metadata.version`; missing ones are ``null``. The
    fields ``config``, ``seed``, ``command`` and ``working_directory`` are what a rerun needs;
    ``inputs`` (absolute path -> ``sha256``, ``bytes``) lets the rerun check that the input
    files are unchanged (:func:`read_manifest`).
    """
    data: dict[str, Any] = {"manifest_version": MANIFEST_VERSION}
    data["created_utc"] = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    raw_inputs = info.get("inputs", [])
    inputs: dict[str, dict[str, Any]] = {}
    if isinstance(raw_inputs, Mapping):
        for k, v in raw_inputs.items():
            inputs[str(Path(k).resolve())] = {"sha256": str(v)}
    else:
        for p in raw_inputs:
            # Absolute paths, so a rerun from another working directory finds the same files.
            full = Path(p).resolve()
            inputs[str(full)] = {"sha256": hash_file(full), "bytes": full.stat().st_size}
    for key, value in info.items():
        if key != "inputs":
            data[str(key)] = _jsonable(value)
    data["inputs"] = dict(sorted(inputs.items()))
    data.setdefault("working_directory", os.getcwd())
    data.setdefault("command", list(sys.argv))
    data.setdefault("seed", None)
    data.setdefault("timings", {})
    data["versions"] = package_versions()
    data["python"] = sys.version.split()[0]
    data["platform"] = platform.platform()
    target = Path(path)
    with output_path(target) as tmp:
        tmp.write_text(json.dumps(data, indent=2, sort_keys=False) + "\n", encoding="utf-8")
    return target


def read_manifest(path: str | os.PathLike, *, verify: bool = True) -> dict[str, Any]:
    """Read a manifest and (optionally) check that every input still has its recorded hash.

    Raises :class:`timeslice.errors.InputFileError` naming the first changed or missing
    input, so a rerun never silently uses different data.

    Parameters
    ----------
    path : str or os.PathLike
        The ``manifest.json``.
    verify : bool
        Check that every input still has its recorded SHA-256.
    """
    p = Path(path)
    if not p.is_file():
        raise InputFileError(f"{p}: no such manifest; give the manifest.json of an earlier run")
    try:
        data = json.loads(p.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as err:
        raise InputFileError(f"{p}: not a JSON manifest ({err}); give the manifest.json of a run") from err
    if not isinstance(data, dict) or "inputs" not in data:
        raise InputFileError(f"{p}: no `inputs` field; this is not a timeslice manifest")
    for key, kind in (("inputs", dict), ("config", dict)):
        if key in data and not isinstance(data[key], kind):
            raise InputFileError(f"{p}: `{key}` is a {type(data[key]).__name__}, not a table; "
                                 "the manifest was edited or damaged: rerun from the config")
    if verify:
        for name, rec in data["inputs"].items():
            want = rec.get("sha256") if isinstance(rec, dict) else rec
            if not Path(name).is_file():
                raise InputFileError(
                    f"{name}: input listed in {p} is missing; restore it or rerun from a config"
                )
            got = hash_file(name)
            if got != want:
                raise InputFileError(
                    f"{name}: changed since the run in {p} (sha256 {got[:12]}… != {want[:12]}…); "
                    "restore the original file or start a new run from the config"
                )
    return data
