"""Content-keyed stage cache: a rerun skips what is finished, a killed run resumes.

Each stage output is stored under ``DIR/.cache/<stage>/<key>.<ext>``, where the key is a SHA-256
of the stage's inputs (file hashes, the config values the stage reads and the package version).
Files are written atomically (temporary name, then rename), so a run killed at any point leaves
either a complete entry or none. A write that fails (a full disk) stops the run with one line
naming the cache; an entry that cannot be read back (damaged on disk) is computed again.

Datasets (``.nc``) are returned opened lazily from the entry, hit or miss: chunked dask arrays
read when a later stage computes them, so slices are not held in memory between stages. Tables
(``.csv``, their column dtypes on the first line) and picklable objects (``.pkl``) are entries
of their own. Without a cache folder (``root=None``) every value is computed and returned in
memory.
"""

from __future__ import annotations

import hashlib
import json
import os
import pickle
import warnings
from pathlib import Path
from typing import Any

import pandas as pd
import xarray as xr

from timeslice import __version__
from timeslice.errors import InputFileError, TimesliceWarning, write_failure
from timeslice.io import atomic_path

__all__ = ["StageCache", "file_digest", "content_key"]

_DIGESTS: dict[tuple[str, int, int], str] = {}


def file_digest(path: str | os.PathLike) -> str:
    """SHA-256 of a file (or of every file a glob pattern matches), memoised by size and mtime.

    Raises :class:`InputFileError` naming the path when it is missing, a folder or unreadable.

    Parameters
    ----------
    path : str or os.PathLike
        A file, or a glob pattern (every file it matches, in sorted order).
    """
    p = Path(path)
    if any(ch in str(p) for ch in "*?["):
        files = sorted(p.parent.glob(p.name))
        h = hashlib.sha256()
        for f in files:
            h.update(file_digest(f).encode())
        return h.hexdigest()
    if p.is_dir():
        raise InputFileError(f"{p}: is a folder, expected a file; give the file in it")
    try:
        st = p.stat()
        memo = (str(p.resolve()), st.st_size, st.st_mtime_ns)
        if memo in _DIGESTS:
            return _DIGESTS[memo]
        h = hashlib.sha256()
        with open(p, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)
    except OSError as err:
        raise InputFileError(f"{p}: cannot be read ({err.strerror or err}); check that the file "
                             "exists and is readable") from err
    _DIGESTS[memo] = h.hexdigest()
    return _DIGESTS[memo]


def content_key(*parts: Any) -> str:
    """Stable SHA-256 of JSON-serialisable parts plus the package version.

    Parameters
    ----------
    *parts : JSON-serialisable
        What the stage result depends on (input digests, config values).
    """
    blob = json.dumps([__version__, *parts], sort_keys=True, default=str)
    return hashlib.sha256(blob.encode()).hexdigest()[:24]


class StageCache:
    """Cache of finished stage outputs below `root` (``None`` disables caching).

    Parameters
    ----------
    root : str, os.PathLike or None
        Cache folder (``OUT/.cache``); None disables caching.
    force : bool
        Recompute every entry (and overwrite it) instead of reusing it.
    """

    def __init__(self, root: str | os.PathLike | None, *, force: bool = False):
        self.root = None if root is None else Path(root)
        self.force = force
        self.hits: list[str] = []
        self.misses: list[str] = []

    def _path(self, stage: str, key: str, ext: str) -> Path | None:
        if self.root is None:
            return None
        return self.root / stage / f"{key}.{ext}"

    def load(self, stage: str, key: str) -> xr.Dataset | None:
        """The cached Dataset for (stage, key), opened lazily, or None (always None with `force`).

        The entry stays on disk: its variables are chunked dask arrays read when computed, so a
        slice is not held in memory between stages. The file stays open while the dataset is
        used; an entry overwritten meanwhile (``--force``) is replaced by a rename, which leaves
        the open file readable.

        Parameters
        ----------
        stage : str
            Stage name (the entry's folder).
        key : str
            Content key of the entry.
        """
        path = self._path(stage, key, "nc")
        if path is None or self.force or not path.exists():
            return None
        try:
            opened = _open_entry(path)
        except (OSError, RuntimeError, ValueError) as err:
            _discard(path, err)
            return None
        self.hits.append(f"{stage}/{key}")
        return opened

    def store(self, stage: str, key: str, ds: xr.Dataset) -> xr.Dataset:
        """Write a computed (or lazy) Dataset under (stage, key), atomically, and return the
        entry opened lazily (the computed dataset itself when caching is disabled).

        Dask-backed variables are computed as they are written, chunk by chunk. Raises
        :class:`InputFileError` naming the cache file when the write fails (full disk,
        read-only folder); no partial entry is left.

        Parameters
        ----------
        stage : str
            Stage name (the entry's folder).
        key : str
            Content key of the entry.
        ds : xarray.Dataset
            The stage result.
        """
        self.misses.append(f"{stage}/{key}")
        path = self._path(stage, key, "nc")
        if path is None:
            return ds.compute() if hasattr(ds, "compute") else ds
        _write_atomically(path, lambda tmp: _encode_bools(ds).to_netcdf(tmp, engine="netcdf4"))
        return _open_entry(path)

    def write(self, stage: str, key: str, writer) -> xr.Dataset | None:
        """Make the entry (stage, key) by letting `writer` write its NetCDF file, atomically,
        and return it opened lazily; None when caching is disabled (compute in memory instead).

        For stages that stream their result from file to file (the transfer by row blocks):
        the result never exists whole in memory.

        Parameters
        ----------
        stage : str
            Stage name (the entry's folder).
        key : str
            Content key of the entry.
        writer : callable
            ``writer(path)`` writes the complete NetCDF file at `path` (a temporary name).
        """
        path = self._path(stage, key, "nc")
        if path is None:
            return None
        self.misses.append(f"{stage}/{key}")
        _write_atomically(path, writer)
        return _open_entry(path)

    def dataset(self, stage: str, key: str, compute) -> xr.Dataset:
        """Return the cached Dataset for (stage, key), or compute, store and return it.

        With a cache folder both a hit and a miss return the entry opened lazily
        (:meth:`load`); without one, the computed dataset.

        Parameters
        ----------
        stage : str
            Stage name (the entry's folder).
        key : str
            Content key of the entry.
        compute : callable
            ``compute()`` returns the Dataset (lazy or in memory) when the entry is missing.
        """
        cached = self.load(stage, key)
        if cached is not None:
            return cached
        return self.store(stage, key, compute())

    def table(self, stage: str, key: str, compute) -> pd.DataFrame:
        """Return the cached table for (stage, key), or compute, store and return it.

        A table is stored as CSV under ``<stage>/<key>.csv`` with its column dtypes on the
        first line, so it reads back with the dtypes it was written with (text columns stay
        text: an empty string is not turned into a missing value).

        Parameters
        ----------
        stage : str
            Stage name (the entry's folder).
        key : str
            Content key of the entry.
        compute : callable
            ``compute()`` returns the :class:`pandas.DataFrame` when the entry is missing.
        """
        return self._read_or_compute(
            self._path(stage, key, "csv"), f"{stage}/{key}.csv", _read_table,
            (OSError, ValueError, KeyError, TypeError), compute, _write_table)

    def obj(self, stage: str, key: str, compute):
        """Return the cached picklable object for (stage, key), or compute and store it."""
        return self._read_or_compute(
            self._path(stage, key, "pkl"), f"{stage}/{key}", _read_pickle,
            (OSError, EOFError, pickle.UnpicklingError, AttributeError, ImportError), compute,
            _write_pickle)

    def _read_or_compute(self, path: Path | None, label: str, read, errors: tuple, compute,
                         write):
        """The entry at `path` read back (a damaged one, raising one of `errors`, is
        discarded), or `compute()` written there atomically by ``write(value, tmp)``."""
        if path is not None and path.exists() and not self.force:
            try:
                value = read(path)
            except errors as err:
                _discard(path, err)
            else:
                self.hits.append(label)
                return value
        self.misses.append(label)
        value = compute()
        if path is not None:
            _write_atomically(path, lambda tmp: write(value, tmp))
        return value


def _write_atomically(path: Path, writer) -> None:
    """``writer(tmp)`` writes the entry at a temporary name, renamed to `path` when complete;
    a failed write becomes one line naming the cache file."""
    with _writing(path):
        with atomic_path(path) as tmp:
            writer(tmp)


def _read_pickle(path: Path):
    with open(path, "rb") as fh:
        return pickle.load(fh)


def _write_pickle(value, path: Path) -> None:
    with open(path, "wb") as fh:
        pickle.dump(value, fh, protocol=pickle.HIGHEST_PROTOCOL)


class _writing:
    """Turn a failed cache write into one line naming the cache file and what to do."""

    def __init__(self, path: Path):
        self.path = path

    def __enter__(self) -> None:
        return None

    def __exit__(self, kind, err, tb) -> bool:
        if isinstance(err, (OSError, RuntimeError)):
            failure = write_failure(self.path, err, what=" the stage cache entry")
            if failure is not None:
                raise InputFileError(
                    f"{failure}; finished stages stay cached and are reused") from err
        return False


def _discard(path: Path, err: BaseException) -> None:
    """Drop a cache entry that cannot be read back, so it is computed again."""
    warnings.warn(f"stage cache entry {path.name} could not be read "
                  f"({type(err).__name__}); computing it again", TimesliceWarning, stacklevel=3)
    try:
        path.unlink()
    except OSError:
        pass


def _encode_bools(ds: xr.Dataset) -> xr.Dataset:
    out = ds.copy()
    for name, var in ds.variables.items():
        if "_FillValue" not in var.encoding and "_FillValue" not in var.attrs:
            # no fill value of its own: write none, so the entry (read raw) has the attributes
            # that were stored, not a NaN fill xarray adds to floats (coordinates included)
            out[name].encoding["_FillValue"] = None
        if var.dtype == bool:
            out[name] = var.astype("int8")
            out[name].attrs = dict(var.attrs, _timeslice_bool=1)
        # NetCDF attrs cannot hold bools or None
        out[name].attrs = {
            k: (int(v) if isinstance(v, bool) else v)
            for k, v in out[name].attrs.items()
            if v is not None
        }
    out.attrs = {k: (int(v) if isinstance(v, bool) else v) for k, v in ds.attrs.items() if v is not None}
    return out


def _open_entry(path: Path) -> xr.Dataset:
    """A cache entry opened lazily, chunked as stored, its booleans restored (lazily)."""
    # raw values: a fill value such as -1 of an int8 flag layer must stay -1, not NaN
    return _restore_bools(xr.open_dataset(path, engine="netcdf4", mask_and_scale=False,
                                          chunks={}))


_TABLE_DTYPES = "# dtypes: "


def _write_table(table: pd.DataFrame, path: Path) -> None:
    """A table as CSV, its column dtypes as JSON on the first line."""
    dtypes = {str(c): str(t) for c, t in table.dtypes.items()}
    if len(dtypes) != table.shape[1]:
        raise ValueError("a cached table needs unique column names")
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(_TABLE_DTYPES + json.dumps(dtypes) + "\n")
        table.to_csv(fh, index=False)


def _read_table(path: Path) -> pd.DataFrame:
    """A table written by :func:`_write_table`, with its dtypes (floats exactly: pandas writes
    the shortest repr and its default parser reads it back bit for bit)."""
    with open(path, encoding="utf-8", newline="") as fh:
        first = fh.readline()
        if not first.startswith(_TABLE_DTYPES):
            raise ValueError("no dtypes line")
        dtypes = json.loads(first[len(_TABLE_DTYPES):])
        if not dtypes:
            return pd.DataFrame()
        text = [c for c, t in dtypes.items() if t in ("object", "str", "string")]
        table = pd.read_csv(fh, dtype={c: str for c in text}, keep_default_na=False,
                            na_values={c: ["", "NaN", "nan"] for c in dtypes if c not in text})
    if list(table.columns) != list(dtypes):
        raise ValueError("columns differ from the dtypes line")
    return table.astype({c: t for c, t in dtypes.items() if c not in text})


def _restore_bools(ds: xr.Dataset) -> xr.Dataset:
    for name in list(ds.variables):
        if ds[name].attrs.get("_timeslice_bool") == 1:
            attrs = {k: v for k, v in ds[name].attrs.items() if k != "_timeslice_bool"}
            ds[name] = ds[name].astype(bool)
            ds[name].attrs = attrs
    return ds
