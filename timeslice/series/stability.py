"""Stability of suitability through a series, and refugia.

A cell that is not land in a slice counts as not suitable in that slice (suitability 0), so a
cell drowned or under ice at any time in the window cannot be a refugium. Cells that are land
in no slice are NaN (fractions, sums) or False (refugium).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from timeslice.errors import DataError
from timeslice.series._checks import check_dataarray, is_suitable, is_valid

__all__ = [
    "DEFAULT_EPS",
    "geometric_mean",
    "minimum_suitability",
    "refugium",
    "stability",
    "static_stability",
]

#: Floor on suitability before taking logarithms (so ln 0 is finite); a project convention.
DEFAULT_EPS = 1e-6


def _check_dim(da: xr.DataArray, dim: str, name: str) -> None:
    if dim not in da.dims:
        raise DataError(f"`{name}` has no dimension {dim!r} (has {list(da.dims)}); pass `dim=`")
    if da.sizes[dim] == 0:
        raise DataError(f"`{name}` has no slices along {dim!r}; give at least one slice")


def _ever_land(suitable: xr.DataArray, dim: str) -> xr.DataArray:
    return is_valid(suitable).any(dim)


def stability(suitable: xr.DataArray, *, dim: str = "slice") -> xr.DataArray:
    """Fraction of slices in which a cell is suitable.

    Parameters
    ----------
    suitable : xarray.DataArray
        Suitable layers with dim `dim`: 1 suitable, 0 not, -1/NaN not land.
    dim : str, default "slice"
        Dimension over which to count.

    Returns
    -------
    xarray.DataArray, [1]
        ``stability`` in [0, 1]; NaN where the cell is land in no slice.

    Notes
    -----
    .. math:: F(j) = \\frac{1}{T} \\sum_{t=1}^{T} [s_t(j) = 1]

    over all :math:`T` slices (a slice where the cell is not land counts as not suitable).
    """
    check_dataarray(suitable, name="suitable", dims=())
    _check_dim(suitable, dim, "suitable")
    frac = is_suitable(suitable).mean(dim).astype(np.float32)
    out = frac.where(_ever_land(suitable, dim))
    out.name = "stability"
    out.attrs = {
        "units": "1",
        "long_name": "fraction of slices suitable",
        "description": (
            f"share of the {suitable.sizes[dim]} slices along '{dim}' in which the cell is "
            "suitable; not-land slices count as not suitable; NaN where never land"
        ),
        "valid_range": np.array([0.0, 1.0], dtype=np.float32),
    }
    return out


def refugium(suitable: xr.DataArray, *, dim: str = "slice") -> xr.DataArray:
    """Cells suitable in every slice along `dim` (climatic refugia).

    Parameters
    ----------
    suitable : xarray.DataArray
        Suitable layers with dim `dim`.
    dim : str, default "slice"
        Dimension (select the window of slices before calling).

    Returns
    -------
    xarray.DataArray of bool
        ``refugium``: True where suitable in all slices.

    References
    ----------
    Carnaval, A. C., & Moritz, C. (2008). Historical climate modelling predicts patterns of
    current biodiversity in the Brazilian Atlantic forest. J. Biogeogr. 35:1187-1201.
    Graham, C. H., Moritz, C., & Williams, S. E. (2006). Habitat history improves prediction of
    biodiversity in rainforest fauna. PNAS 103:632-636.
    """
    check_dataarray(suitable, name="suitable", dims=())
    _check_dim(suitable, dim, "suitable")
    out = is_suitable(suitable).all(dim)
    out.name = "refugium"
    out.attrs = {
        "units": "1",
        "long_name": "climatic refugium",
        "description": (
            f"true where suitable in every one of the {suitable.sizes[dim]} slices along '{dim}'"
        ),
        "flag_values": np.array([0, 1], dtype=np.int8),
        "flag_meanings": "not_refugium refugium",
    }
    return out


def _log_floor(suitability: xr.DataArray, eps: float) -> xr.DataArray:
    # Not-land (NaN) counts as suitability 0, i.e. ln(eps).
    return np.log(np.maximum(suitability.fillna(0.0), eps))


def _check_suitability(suitability: xr.DataArray, dim: str, eps: float) -> None:
    check_dataarray(suitability, name="suitability", dims=())
    _check_dim(suitability, dim, "suitability")
    if not (isinstance(eps, (int, float)) and 0 < eps < 1):
        raise DataError(f"`eps` must be a number in (0, 1), got {eps!r}")


def static_stability(
    suitability: xr.DataArray, *, dim: str = "slice", eps: float = DEFAULT_EPS
) -> xr.DataArray:
    """Static stability: sum over slices of the log of suitability.

    Parameters
    ----------
    suitability : xarray.DataArray
        Continuous suitability in [0, 1] with dim `dim`; NaN = not land (taken as 0).
    dim : str, default "slice"
    eps : float, default 1e-6
        Floor on suitability before the logarithm.

    Returns
    -------
    xarray.DataArray, [1]
        ``static_stability`` (≤ 0; 0 = suitability 1 in every slice); NaN where never land.

    Notes
    -----
    .. math:: \\mathrm{SS}(j) = \\sum_{t=1}^{T} \\ln \\max(S_t(j), \\varepsilon)

    References
    ----------
    Graham, C. H., VanDerWal, J., Phillips, S. J., Moritz, C., & Williams, S. E. (2010).
    Dynamic refugia and species persistence: tracking spatial shifts in habitat through time.
    Ecography 33:1062-1069.
    """
    _check_suitability(suitability, dim, eps)
    out = _log_floor(suitability, eps).sum(dim).astype(np.float32)
    out = out.where(suitability.notnull().any(dim))
    out.name = "static_stability"
    out.attrs = {
        "units": "1",
        "long_name": "static stability (sum of log suitability)",
        "description": (
            f"sum over {suitability.sizes[dim]} slices of ln(max(S, {eps:g})); "
            "not-land counts as S = 0"
        ),
        "eps": float(eps),
    }
    return out


def geometric_mean(
    suitability: xr.DataArray, *, dim: str = "slice", eps: float = DEFAULT_EPS
) -> xr.DataArray:
    """Geometric mean suitability through the series.

    Returns
    -------
    xarray.DataArray, [1]
        ``geometric_mean_suitability`` in [eps, 1]; NaN where never land.

    Notes
    -----
    .. math:: G(j) = \\exp\\Big(\\frac{1}{T}\\sum_{t=1}^{T} \\ln \\max(S_t(j), \\varepsilon)\\Big)
              = \\exp(\\mathrm{SS}(j) / T)

    References
    ----------
    Graham, C. H., VanDerWal, J., Phillips, S. J., Moritz, C., & Williams, S. E. (2010).
    Ecography 33:1062-1069.
    """
    _check_suitability(suitability, dim, eps)
    out = np.exp(_log_floor(suitability, eps).mean(dim)).astype(np.float32)
    out = out.where(suitability.notnull().any(dim))
    out.name = "geometric_mean_suitability"
    out.attrs = {
        "units": "1",
        "long_name": "geometric mean suitability",
        "description": (
            f"exp(mean over {suitability.sizes[dim]} slices of ln(max(S, {eps:g}))); "
            "not-land counts as S = 0"
        ),
        "eps": float(eps),
    }
    return out


def minimum_suitability(suitability: xr.DataArray, *, dim: str = "slice") -> xr.DataArray:
    """Lowest suitability of a cell through the series (not land counts as 0).

    Returns
    -------
    xarray.DataArray, [1]
        ``minimum_suitability`` in [0, 1]; NaN where never land.
    """
    check_dataarray(suitability, name="suitability", dims=())
    _check_dim(suitability, dim, "suitability")
    out = suitability.fillna(0.0).min(dim).astype(np.float32)
    out = out.where(suitability.notnull().any(dim))
    out.name = "minimum_suitability"
    out.attrs = {
        "units": "1",
        "long_name": "minimum suitability through the series",
        "description": (
            f"minimum over {suitability.sizes[dim]} slices; not-land counts as 0"
        ),
    }
    return out
