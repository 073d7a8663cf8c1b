"""The climate reader registry: one entry per file format, keyed by the format key that
:func:`timeslice.readers.filesets.sniff_format` returns.

:func:`timeslice.readers.open_climate` opens each file through the entry of its format, and
:func:`~timeslice.readers.filesets.check_file_set` reads each file's grid through it; the
refusal of an unrecognised file lists the registered formats. Adding a format is one call to
:func:`register` (docs/extending.md, "A reader"). An entry names its functions as
``"module:function"`` so this module imports no reader, and importing one reader never imports
another.

An opener takes ``(entry, options)`` (an :class:`~timeslice.readers.filesets.InputFile` and a
:class:`ReadOptions`) and returns an :class:`xarray.Dataset`:

- ``canonical=False`` (the usual case): the fields as the file stores them, like
  :func:`xarray.open_dataset` gives them (file variable names, ``units`` and ``standard_name``
  attributes, ``lat``/``lon`` coordinates in any order or range, an optional decoded time axis).
  The shared canonicalisation (:mod:`timeslice.readers.canonical`) names and converts them, and
  series split over several files are joined in time, exactly as for NetCDF.
- ``canonical=True``: fields already named and converted (as :func:`~timeslice.readers.open_raster`
  does for band-per-month rasters).
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

__all__ = [
    "ReadOptions",
    "Reader",
    "format_names",
    "get_reader",
    "readers",
    "register",
    "unregister",
]


@dataclass(frozen=True)
class ReadOptions:
    """What the config says about one climate input, passed to every opener.

    Parameters
    ----------
    aliases : mapping, optional
        Canonical name -> file variable name(s).
    scale : float or mapping, optional
        Multiplier of the stored values (one, or one per canonical variable).
    units : str or mapping, optional
        Units of the stored values (one, or one per canonical variable).
    variable : str, optional
        Canonical variable of a one-variable file (rasters).
    band_names : sequence of str, optional
        One name per band (rasters).
    chunks : optional
        Dask chunks, as for :func:`xarray.open_dataset`.
    source : str, optional
        Name used in messages (default: the file path).
    """

    aliases: Mapping[str, str | Sequence[str]] | None = None
    scale: float | Mapping[str, float] | None = None
    units: str | Mapping[str, str] | None = None
    variable: str | None = None
    band_names: Sequence[str] | None = None
    chunks: Any = None
    source: str | None = None


def _resolve(target: str | Callable) -> Callable:
    if callable(target):
        return target
    module, _, name = str(target).partition(":")
    return getattr(importlib.import_module(module), name)


@dataclass(frozen=True)
class Reader:
    """One climate file format.

    Parameters
    ----------
    key : str
        Format key (what :func:`~timeslice.readers.filesets.sniff_format` returns).
    opener : str or callable
        ``opener(entry, options) -> xarray.Dataset`` or its ``"module:function"``.
    names : tuple of str
        Format names for messages (``("NetCDF",)``).
    suffixes : tuple of str
        File suffixes, lower case with the dot (``(".nc",)``), tried after the first bytes.
    magic : tuple of bytes
        Prefixes of the first bytes that identify the format.
    sniff : callable, optional
        ``sniff(head: bytes) -> bool`` for a format not told by a fixed prefix.
    canonical : bool, default False
        The opener returns canonical fields (see the module docstring).
    grid : str or callable, optional
        ``grid(path) -> (lat, lon)`` cell centres read from the header only, for the checks
        before a run; without it the file is opened with default options.
    """

    key: str
    opener: str | Callable
    names: tuple[str, ...]
    suffixes: tuple[str, ...] = ()
    magic: tuple[bytes, ...] = ()
    sniff: Callable[[bytes], bool] | None = None
    canonical: bool = False
    grid: str | Callable | None = field(default=None)

    def open(self, entry, options: ReadOptions):
        """Open one file.

        Parameters
        ----------
        entry : timeslice.readers.filesets.InputFile
            The file and what its path pattern says it holds.
        options : ReadOptions

        Returns
        -------
        xarray.Dataset
        """
        return _resolve(self.opener)(entry, options)

    def header_grid(self, path):
        """``(lat, lon)`` cell centres of one file, reading as little as the format allows.

        Parameters
        ----------
        path : pathlib.Path

        Returns
        -------
        (numpy.ndarray, numpy.ndarray)
        """
        if self.grid is not None:
            return _resolve(self.grid)(path)
        from timeslice.grid import find_lonlat
        from timeslice.readers.filesets import InputFile

        ds = self.open(InputFile(path), ReadOptions(source=str(path)))
        lon, lat = find_lonlat(ds, source=str(path))
        return ds[lat].values, ds[lon].values


_READERS: dict[str, Reader] = {}


def register(reader: Reader, *, replace: bool = False) -> Reader:
    """Add a format to the registry.

    Parameters
    ----------
    reader : Reader
    replace : bool, default False
        Allow replacing an entry of the same key.

    Returns
    -------
    Reader
        `reader`, so the call can be used as an expression.

    Raises
    ------
    ValueError
        The key is taken (and `replace` is false), or a suffix belongs to another format.
    """
    if reader.key in _READERS and not replace:
        raise ValueError(f"a reader for format {reader.key!r} is already registered")
    for other in _READERS.values():
        clash = set(other.suffixes) & set(reader.suffixes)
        if other.key != reader.key and clash:
            raise ValueError(f"suffix {sorted(clash)[0]!r} already belongs to {other.key!r}")
    _READERS[reader.key] = reader
    return reader


def unregister(key: str) -> None:
    """Remove a format (for tests that register a throwaway one).

    Parameters
    ----------
    key : str
        Format key; an unknown key is ignored.

    Returns
    -------
    None
    """
    _READERS.pop(key, None)


def readers() -> list[Reader]:
    """The registered formats, in registration order.

    Returns
    -------
    list of Reader
    """
    return list(_READERS.values())


def get_reader(key: str) -> Reader:
    """The registry entry of one format key.

    Parameters
    ----------
    key : str

    Returns
    -------
    Reader

    Raises
    ------
    KeyError
        No reader is registered for `key`.
    """
    return _READERS[key]


def format_names() -> str:
    """The registered formats for a message: ``"NetCDF, GeoTIFF or ESRI ASCII grid"``.

    Returns
    -------
    str
    """
    names = [n for r in _READERS.values() for n in r.names]
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " or " + names[-1]


def _ascii_grid(head: bytes) -> bool:
    """ESRI ASCII grids start with the text ``ncols``."""
    return head.lstrip().lower().startswith(b"ncols")


# The magic numbers are those of the formats' own specifications: NetCDF classic/64-bit
# ("CDF" + version byte), HDF5 (netCDF-4), TIFF and BigTIFF (byte order + 42 or 43).
register(Reader(
    "netcdf", "timeslice.readers.netcdf:open_netcdf", names=("NetCDF",),
    suffixes=(".nc", ".nc4", ".cdf", ".netcdf", ".h5"),
    magic=(b"CDF\x01", b"CDF\x02", b"CDF\x05", b"\x89HDF\r\n\x1a\n"),
    grid="timeslice.readers.netcdf:header_grid",
))
register(Reader(
    "raster", "timeslice.readers.raster:open_raster_file", names=("GeoTIFF", "ESRI ASCII grid"),
    suffixes=(".tif", ".tiff", ".gtiff", ".asc"),
    magic=(b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+"), sniff=_ascii_grid, canonical=True,
    grid="timeslice.readers.raster:header_grid",
))
