"""Where the finished row blocks of a prepared slice go: arrays in memory, or a NetCDF file
written block by block (the same encoding as :func:`timeslice.harmonise.write_prepared`)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr

from timeslice.harmonise.streaming import BlockSink

__all__ = ["Layer", "MemorySink", "NetCDFSink", "encoded_attrs"]


class Layer:
    """One output layer of a prepared slice: name, dtype and attributes.

    Parameters
    ----------
    name : str
        Variable name.
    dtype : numpy dtype
        float32 or bool.
    attrs : dict
        Attributes of the variable as returned in memory.
    """

    def __init__(self, name: str, dtype, attrs: dict):
        self.name = name
        self.dtype = np.dtype(dtype)
        self.attrs = dict(attrs)


def encoded_attrs(name: str, dtype, attrs: dict) -> dict:
    """Attributes a layer carries on disk: booleans as int8 0/1 with CF flags, no units.

    Parameters
    ----------
    name : str
        Variable name (used in ``flag_meanings``).
    dtype : numpy dtype
        The in-memory dtype.
    attrs : dict
        In-memory attributes.

    Returns
    -------
    dict
        Attributes to write.
    """
    out = dict(attrs)
    if np.dtype(dtype) == bool:
        out.pop("units", None)
        out.update(flag_values=np.array([0, 1], dtype=np.int8), flag_meanings=f"not_{name} {name}")
    return out


class MemorySink(BlockSink):
    """Blocks into preallocated arrays; :meth:`dataset` returns them as a Dataset.

    Parameters
    ----------
    layers : list of Layer
        The layers, in output order.
    lat, lon : xarray.DataArray
        Target coordinates (values and attributes).
    """

    def __init__(self, layers: list[Layer], lat: xr.DataArray, lon: xr.DataArray):
        self.layers = layers
        self.lat, self.lon = lat, lon
        shape = (lat.size, lon.size)
        self.arrays = {ly.name: np.empty(shape, dtype=ly.dtype) for ly in layers}

    def write(self, r0: int, r1: int, layers: dict[str, np.ndarray]) -> None:
        """Copy rows ``r0:r1`` of every layer into the arrays.

        Parameters
        ----------
        r0, r1 : int
            First and one-past-last row.
        layers : dict of str to numpy.ndarray
            Block of each layer.

        Returns
        -------
        None
        """
        for ly in self.layers:
            self.arrays[ly.name][r0:r1] = layers[ly.name]

    def dataset(self, attrs: dict) -> xr.Dataset:
        """The finished slice.

        Parameters
        ----------
        attrs : dict
            Global attributes.

        Returns
        -------
        xarray.Dataset
        """
        coords = {"lat": ("lat", self.lat.values, dict(self.lat.attrs)),
                  "lon": ("lon", self.lon.values, dict(self.lon.attrs))}
        data = {ly.name: (("lat", "lon"), self.arrays[ly.name], dict(ly.attrs))
                for ly in self.layers}
        return xr.Dataset(data, coords=coords, attrs=dict(attrs))


class NetCDFSink(BlockSink):
    """Blocks straight into a compressed NetCDF-4 file, one chunk per block of rows.

    Parameters
    ----------
    path : path-like
        File to create (the caller renames it into place).
    layers : list of Layer
        The layers, in output order.
    lat, lon : xarray.DataArray
        Target coordinates (values and attributes).
    rows : int
        Rows per block (the chunk height).
    """

    def __init__(self, path, layers: list[Layer], lat: xr.DataArray, lon: xr.DataArray,
                 rows: int):
        import netCDF4
        from xarray.backends.locks import HDF5_LOCK

        self.path = Path(path)
        self.layers = layers
        with HDF5_LOCK:
            self.nc = netCDF4.Dataset(self.path, "w", format="NETCDF4")
            try:
                self._define(lat, lon, max(1, min(int(rows), lat.size)))
            except BaseException:
                self.nc.close()
                raise

    def _define(self, lat: xr.DataArray, lon: xr.DataArray, rows: int) -> None:
        nc = self.nc
        for c in (lat, lon):
            nc.createDimension(c.name, c.size)
            var = nc.createVariable(c.name, c.dtype, (c.name,))
            for k, v in c.attrs.items():
                var.setncattr(k, v)
            var[:] = c.values
        for ly in self.layers:
            floating = np.issubdtype(ly.dtype, np.floating)
            var = nc.createVariable(
                ly.name, ly.dtype if floating else np.int8, ("lat", "lon"), zlib=True,
                complevel=4, shuffle=True, chunksizes=(rows, lon.size),
                fill_value=np.array(np.nan, dtype=ly.dtype) if floating else None,
            )
            # a chunk is written whole, once: a cache of about one chunk per variable (the
            # library's default keeps up to 16-64 MB of written chunks per variable, i.e.
            # the whole output of a mid-sized grid, until the file is closed)
            chunk_bytes = rows * lon.size * var.dtype.itemsize
            var.set_var_chunk_cache(size=chunk_bytes + 2**16, nelems=11, preemption=1.0)
            for k, v in encoded_attrs(ly.name, ly.dtype, ly.attrs).items():
                var.setncattr(k, v)
            if ly.dtype == bool:
                var.setncattr("dtype", "bool")  # read back as bool, as xarray writes it
            var.set_auto_maskandscale(False)

    def write(self, r0: int, r1: int, layers: dict[str, np.ndarray]) -> None:
        """Write rows ``r0:r1`` of every layer.

        Parameters
        ----------
        r0, r1 : int
            First and one-past-last row.
        layers : dict of str to numpy.ndarray
            Block of each layer.

        Returns
        -------
        None
        """
        from xarray.backends.locks import HDF5_LOCK

        with HDF5_LOCK:  # the HDF5 library is not thread-safe: readers hold the same lock
            for ly in self.layers:
                arr = layers[ly.name]
                var = self.nc.variables[ly.name]
                var[r0:r1, :] = arr.astype(np.int8) if ly.dtype == bool else arr

    def close(self, attrs: dict | None = None) -> None:
        """Write the global attributes and close the file.

        Parameters
        ----------
        attrs : dict, optional
            Global attributes (None: close without them, after a failure).

        Returns
        -------
        None
        """
        from xarray.backends.locks import HDF5_LOCK

        with HDF5_LOCK:
            try:
                for k, v in (attrs or {}).items():
                    self.nc.setncattr(k, v)
            finally:
                self.nc.close()
