"""Movement through the series: what part of the suitable area can be reached.

Three assumptions side by side (they bracket the truth; none is a forecast):

* ``"none"``: the species stays where it is; occupied cells are kept while they stay suitable.
* ``"limited"``: between consecutive slices it spreads from the occupied cells up to a distance
  (rate × time between the slices), along shortest paths through cells that pass a rule (land by
  default), then keeps only suitable cells.
* ``"unlimited"``: every suitable cell is reached.

Distances are geodesic shortest paths over the 8-neighbour (or 16-neighbour) graph of cell
centres with great-circle edge lengths on the authalic sphere, never distances in degrees.
"""

from __future__ import annotations

import functools
import re
from collections.abc import Sequence
from typing import Literal

import numpy as np
import xarray as xr
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import dijkstra

from timeslice import layers
from timeslice.errors import ConfigError, DataError
from timeslice.grid import haversine_km, is_global_lon, lon_order
from timeslice.series._checks import (
    check_dataarray,
    drop_nondim,
    suitable_mask,
    valid_mask,
)

__all__ = [
    "ASSUMPTIONS",
    "distance_from",
    "grid_graph",
    "movement",
    "parse_rate",
    "reachable",
    "step_distances",
]

Assumption = Literal["none", "limited", "unlimited"]
Through = Literal["land", "suitable", "any"]

#: The movement assumptions, in the order they are reported.
ASSUMPTIONS: tuple[str, ...] = ("none", "limited", "unlimited")

# Length units to km and time units to years.
_LENGTH_KM = {"m": 1e-3, "km": 1.0}
_TIME_YR = {
    "yr": 1.0, "year": 1.0, "years": 1.0, "a": 1.0, "y": 1.0,
    "decade": 10.0, "decades": 10.0, "dec": 10.0,
    "century": 100.0, "centuries": 100.0,
    "kyr": 1000.0, "ka": 1000.0, "kyrs": 1000.0,
}
_RATE_RE = re.compile(
    r"^\s*(?P<num>[-+]?(\d+(\.\d*)?|\.\d+)([eE][-+]?\d+)?)\s*(?P<unit>.*?)\s*$"
)


def parse_rate(rate: str | float | int, *, name: str = "rate") -> float:
    """Parse a spread rate such as ``"2 km/yr"``, ``"500 km/kyr"`` or ``"10 km per decade"``.

    Parameters
    ----------
    rate : str
        A non-negative number followed by a length unit (``m``, ``km``), ``/`` or ``per``, and a
        time unit (``yr``/``year``/``a``, ``decade``, ``century``, ``kyr``/``ka``). A bare
        number is refused: the unit decides a factor of 1000.
    name : str
        Name of the setting, used in error messages.

    Returns
    -------
    float, [km yr-1]

    Examples
    --------
    >>> parse_rate("500 km/kyr")
    0.5
    >>> parse_rate("10 km per decade")
    1.0
    """
    accepted = "e.g. '2 km/yr', '500 km/kyr', '10 km/decade', '300 m/yr'"
    if isinstance(rate, bool) or not isinstance(rate, (str, int, float)):
        raise ConfigError(f"`{name}` must be text with units ({accepted}), got {rate!r}")
    if not isinstance(rate, str):
        raise ConfigError(f"`{name}` = {rate!r} has no unit; write it with one ({accepted})")
    m = _RATE_RE.match(rate)
    if m is None:
        raise ConfigError(f"`{name}` = {rate!r} is not a number with a unit ({accepted})")
    value = float(m.group("num"))
    unit = m.group("unit").lower().replace(" per ", "/").replace("per ", "/")
    unit = re.sub(r"\s+", "", unit)
    if not unit:
        raise ConfigError(f"`{name}` = {rate!r} has no unit; write it with one ({accepted})")
    parts = unit.split("/")
    if len(parts) == 1 and parts[0].endswith("-1"):  # CF style "km yr-1" (spaces removed)
        for length in _LENGTH_KM:
            if parts[0].startswith(length) and parts[0][len(length):-2] in _TIME_YR:
                parts = [length, parts[0][len(length):-2]]
                break
    if len(parts) != 2 or parts[0] not in _LENGTH_KM or parts[1] not in _TIME_YR:
        raise ConfigError(
            f"`{name}` = {rate!r}: unknown unit {m.group('unit')!r}; use a length per time "
            f"({accepted})"
        )
    if value < 0 or not np.isfinite(value):
        raise ConfigError(f"`{name}` = {rate!r} must be a finite rate >= 0")
    return value * _LENGTH_KM[parts[0]] / _TIME_YR[parts[1]]


def step_distances(years: Sequence[float], rate_km_per_year: float) -> np.ndarray:
    """Distance allowed between consecutive slices: rate × |Δyear| (first entry 0).

    Parameters
    ----------
    years : sequence of float
        Representative years of the slices, in chain order.
    rate_km_per_year : float
        Spread rate (see :func:`parse_rate`).

    Returns
    -------
    numpy.ndarray, [km]
    """
    y = np.asarray(years, dtype=float)
    if y.ndim != 1 or not np.all(np.isfinite(y)):
        raise DataError("slice `year` values must be finite numbers to turn a rate into distances")
    return np.concatenate([[0.0], np.abs(np.diff(y)) * float(rate_km_per_year)])


def _is_global(lon: np.ndarray) -> bool:
    return is_global_lon(lon)


def _check_continuous(lon: np.ndarray) -> None:
    """A grid split at 180° (wrapped to [-180, 180)) would make neighbours of cells that are
    a whole region apart and cut the real neighbours at 180°: refuse it."""
    order, _ = lon_order(lon, source="movement grid")
    if not np.array_equal(order, np.arange(order.size)):
        raise DataError(
            "movement grid: the longitudes jump (a region across 180° wrapped to [-180, 180)); "
            "put it on a continuous axis first (timeslice.grid.continuous_lon)"
        )


def grid_graph(
    lat: np.ndarray, lon: np.ndarray, *, neighbours: Literal[8, 16] = 8
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Edges of the neighbour graph of a regular lat-lon grid.

    Parameters
    ----------
    lat, lon : numpy.ndarray
        1-D cell-centre coordinates in degrees.
    neighbours : {8, 16}
        8: rook and bishop moves; 16: also knight moves (±1, ±2), which cuts the worst
        direction-dependent overestimate of path length from 8.2 % to 2.7 % on a square grid.

    Returns
    -------
    (rows, cols, km)
        Flat cell indices (``i * nlon + j``) of each undirected edge (each once) and its
        great-circle length in km between cell centres. Longitude wraps on a global grid;
        a regional grid across 180° is connected through it on its continuous axis
        (160 ... 200); a grid split at 180° is refused.
    """
    if neighbours not in (8, 16):
        raise DataError(f"`neighbours` must be 8 or 16, got {neighbours!r}")
    lat = np.asarray(lat, dtype=float)
    lon = np.asarray(lon, dtype=float)
    ny, nx = lat.size, lon.size
    offsets = [(0, 1), (1, 0), (1, 1), (1, -1)]
    if neighbours == 16:
        offsets += [(1, 2), (2, 1), (1, -2), (2, -1)]
    _check_continuous(lon)
    wrap = _is_global(lon)
    ii, jj = np.meshgrid(np.arange(ny), np.arange(nx), indexing="ij")
    rows, cols = [], []
    for di, dj in offsets:
        i2 = ii + di
        j2 = jj + dj
        ok = (i2 >= 0) & (i2 < ny)
        if wrap:
            j2 = j2 % nx
        else:
            ok &= (j2 >= 0) & (j2 < nx)
        ok &= ~((i2 == ii) & (j2 == jj))  # a tiny global grid can wrap onto itself
        rows.append((ii[ok] * nx + jj[ok]).ravel())
        cols.append((i2[ok] * nx + j2[ok]).ravel())
    if not rows or sum(r.size for r in rows) == 0:
        return np.zeros(0, int), np.zeros(0, int), np.zeros(0)
    a = np.concatenate(rows)
    b = np.concatenate(cols)
    # one undirected edge per pair: on small global grids different offsets can wrap onto the
    # same pair, and the sparse format would add their lengths
    lo, hi = np.minimum(a, b), np.maximum(a, b)
    key = np.unique(lo.astype(np.int64) * (ny * nx) + hi)
    lo, hi = key // (ny * nx), key % (ny * nx)
    km = haversine_km(lon[lo % nx], lat[lo // nx], lon[hi % nx], lat[hi // nx])
    return lo, hi, km


@functools.lru_cache(maxsize=8)
def _cached_graph(lat: tuple, lon: tuple, neighbours: int):
    return grid_graph(np.asarray(lat), np.asarray(lon), neighbours=neighbours)


def _graph_for(lat, lon, neighbours):
    return _cached_graph(tuple(np.asarray(lat, float).tolist()),
                         tuple(np.asarray(lon, float).tolist()), int(neighbours))


def _distance_kernel(
    edges: tuple[np.ndarray, np.ndarray, np.ndarray],
    n: int,
    sources: np.ndarray,
    passable: np.ndarray,
    limit: float,
) -> np.ndarray:
    rows, cols, km = edges
    src = np.flatnonzero(sources)
    out = np.full(n, np.inf)
    if src.size == 0:
        return out
    ok = passable | sources
    keep = ok[rows] & ok[cols]
    # zero-length edges would be dropped by the sparse format; grids never have them
    g = coo_matrix((km[keep], (rows[keep], cols[keep])), shape=(n, n)).tocsr()
    d = dijkstra(g, directed=False, indices=src, limit=limit, min_only=True)
    out[:] = d
    return out


def distance_from(
    sources: xr.DataArray,
    *,
    passable: xr.DataArray | None = None,
    limit_km: float = np.inf,
    neighbours: Literal[8, 16] = 8,
) -> xr.DataArray:
    """Shortest-path distance from the nearest source cell through passable cells.

    Parameters
    ----------
    sources : xarray.DataArray of bool, dims (lat, lon)
        Start cells (distance 0).
    passable : xarray.DataArray of bool, dims (lat, lon), optional
        Cells a path may enter (all cells if omitted). Source cells are always passable.
    limit_km : float, default inf
        Paths longer than this are not followed (their cells get inf); bounds the work.
    neighbours : {8, 16}

    Returns
    -------
    xarray.DataArray, [km]
        ``distance`` (inf where unreachable within `limit_km`).

    Notes
    -----
    Multi-source Dijkstra (Dijkstra 1959, Numerische Mathematik 1:269) over the neighbour
    graph of cell centres, edge length the haversine distance on the authalic sphere
    (:func:`timeslice.grid.haversine_km`), via :func:`scipy.sparse.csgraph.dijkstra` with
    ``min_only=True`` and ``limit``.
    """
    check_dataarray(sources, name="sources")
    extra = [d for d in sources.dims if d not in ("lat", "lon")]
    if extra:
        raise DataError(f"`sources` must be one (lat, lon) map, got extra dims {extra}")
    sources = drop_nondim(sources).transpose("lat", "lon")
    src = np.asarray(sources.values).astype(bool)
    ny, nx = src.shape
    if passable is None:
        pas = np.ones_like(src)
    else:
        check_dataarray(passable, name="passable")
        pas = np.asarray(drop_nondim(passable).transpose("lat", "lon").values).astype(bool)
        if pas.shape != src.shape:
            raise DataError(f"`passable` has shape {pas.shape}, `sources` {src.shape}; "
                            "put them on one grid")
    edges = _graph_for(sources["lat"].values, sources["lon"].values, neighbours)
    d = _distance_kernel(edges, ny * nx, src.ravel(), pas.ravel(), float(limit_km))
    out = xr.DataArray(d.reshape(ny, nx), dims=("lat", "lon"),
                       coords={"lat": sources["lat"], "lon": sources["lon"]}, name="distance")
    out.attrs = {
        "units": "km",
        "long_name": "shortest-path distance from the nearest source cell",
        "description": (
            f"Dijkstra over the {neighbours}-neighbour graph of cell centres, great-circle edge "
            "lengths on the authalic sphere (R = 6371.0072 km), through passable cells"
        ),
    }
    return out


def _passable(through, cur, prev) -> np.ndarray:
    if through == "any":
        return np.ones(cur.shape, dtype=bool)
    if through == "land":
        return valid_mask(cur) | valid_mask(prev)
    return suitable_mask(cur) | suitable_mask(prev)  # "suitable": stepping stones only


def _reach_kernel(
    suitable: np.ndarray,
    start: np.ndarray,
    distances: np.ndarray,
    edges,
    assumption: str,
    through: str | np.ndarray,
) -> np.ndarray:
    ns, ny, nx = suitable.shape
    suit = suitable_mask(suitable)
    valid = valid_mask(suitable)
    occ = np.zeros((ns, ny, nx), dtype=bool)
    occ[0] = start & suit[0]
    for t in range(1, ns):
        if assumption == "unlimited":
            occ[t] = suit[t]
            continue
        if assumption == "none" or distances[t] <= 0 or not occ[t - 1].any():
            occ[t] = occ[t - 1] & suit[t]
            continue
        if isinstance(through, np.ndarray):
            pas = through[t] if through.ndim == 3 else through
        else:
            pas = _passable(through, suitable[t], suitable[t - 1])
        d = _distance_kernel(edges, ny * nx, occ[t - 1].ravel(), pas.ravel(), distances[t])
        occ[t] = (d.reshape(ny, nx) <= distances[t]) & suit[t]
    if assumption == "unlimited":
        occ[0] = suit[0]
    code = occ.astype(np.int8)
    code[~valid] = -1
    return code


def _allowed_steps(suitable: xr.DataArray, dim: str, assumption: str, distance_km,
                   rate: str | None) -> np.ndarray:
    """Allowed spread per slice step (km; the first entry unused) from `distance_km` or
    `rate`; zeros unless the movement is limited."""
    ns = suitable.sizes[dim]
    if assumption != "limited":
        return np.zeros(ns)
    if (distance_km is None) == (rate is None):
        raise DataError("give exactly one of `distance_km` or `rate` for limited movement")
    if rate is not None:
        if "year" not in suitable.coords:
            raise DataError("`suitable` has no 'year' coordinate to turn `rate` into "
                            "distances; give `distance_km` instead")
        return step_distances(suitable["year"].values, parse_rate(rate))
    dist = np.broadcast_to(np.asarray(distance_km, dtype=float), (ns,)).copy() \
        if np.ndim(distance_km) == 0 else np.asarray(distance_km, dtype=float)
    if dist.shape != (ns,):
        raise DataError(f"`distance_km` has {dist.size} values for {ns} slices; "
                        "give one number or one per slice")
    if np.any(~np.isfinite(dist[1:])) or np.any(dist[1:] < 0):
        raise DataError("`distance_km` values must be finite and >= 0")
    return dist


def reachable(
    suitable: xr.DataArray,
    start: xr.DataArray,
    *,
    distance_km: float | Sequence[float] | None = None,
    land: xr.DataArray | None = None,
    assumption: Assumption = "limited",
    rate: str | None = None,
    through: Through = "land",
    passable: xr.DataArray | None = None,
    neighbours: Literal[8, 16] = 8,
    dim: str = "slice",
) -> xr.DataArray:
    """Suitable cells that can be reached through a chain of slices under a movement assumption.

    Parameters
    ----------
    suitable : xarray.DataArray
        Suitable layers of one chain ``(slice, lat, lon)`` in time order (1, 0, -1 not land).
    start : xarray.DataArray of bool, dims (lat, lon)
        Occupied cells at the first slice (e.g. the baseline's suitable cells inside the
        calibration area for a future chain; all suitable cells of the oldest slice for a paleo
        chain). Only those that are suitable in the first slice count.
    distance_km : float or sequence of float, optional
        Largest spread between consecutive slices: one number for every step, or one per slice
        (the first entry is ignored). Give this or `rate`.
    land : xarray.DataArray of bool, optional
        Extra restriction of the start cells to land (e.g. the present land mask).
    assumption : {"none", "limited", "unlimited"}, default "limited"
        Movement between slices: none (only start cells that stay suitable), limited (up to
        the step distance), unlimited (every suitable cell).
    rate : str, optional
        Spread rate with units (see :func:`parse_rate`); distances are rate × |Δyear| from the
        ``year`` coordinate along `dim`.
    through : {"land", "suitable", "any"}, default "land"
        Rule for cells a path may enter between slices t−1 and t: land in either slice,
        suitable in either slice (stepping stones), or any cell (sea crossings allowed).
    passable : xarray.DataArray of bool, optional
        Explicit passable cells ``(lat, lon)`` or ``(slice, lat, lon)``; overrides `through`.
    neighbours : {8, 16}, default 8
        Neighbours of a cell in the movement graph (16 adds the knight's moves).
    dim : str, default "slice"
        Dimension of the chain's slices, in time order.

    Returns
    -------
    xarray.DataArray of int8
        ``reachable``: 1 suitable and reached, 0 not, -1 not land (CF flags).

    Notes
    -----
    With occupied set :math:`O_0 = \\text{start} \\cap S_0`,

    .. math:: O_t = \\{j \\in S_t : \\min_{k \\in O_{t-1}} d_{G_t}(k, j) \\le D_t\\}

    where :math:`d_{G_t}` is the shortest-path distance through passable cells and
    :math:`D_t` the allowed step distance. ``"none"`` is :math:`D_t = 0`
    (:math:`O_t = O_{t-1} \\cap S_t`: a cell once lost is not regained); ``"unlimited"`` is
    :math:`O_t = S_t`.
    """
    check_dataarray(suitable, name="suitable", dims=(dim, "lat", "lon"))
    check_dataarray(start, name="start")
    if assumption not in ASSUMPTIONS:
        raise DataError(f"`assumption` must be one of {list(ASSUMPTIONS)}, got {assumption!r}")
    if through not in ("land", "suitable", "any"):
        raise DataError(f"`through` must be 'land', 'suitable' or 'any', got {through!r}")
    suitable = suitable.transpose(dim, "lat", "lon")
    dist = _allowed_steps(suitable, dim, assumption, distance_km, rate)
    st = drop_nondim(start).astype(bool)
    if land is not None:
        st = st & drop_nondim(land).astype(bool)
    st_np = np.asarray(st.transpose("lat", "lon").values)
    if st_np.shape != suitable.shape[1:]:
        raise DataError(f"`start` has shape {st_np.shape}, `suitable` maps {suitable.shape[1:]};"
                        " put them on one grid")
    rule: str | np.ndarray = through
    if passable is not None:
        rule = np.asarray(passable.transpose(*[d for d in (dim, "lat", "lon")
                                               if d in passable.dims]).values).astype(bool)
    edges = _graph_for(suitable["lat"].values, suitable["lon"].values, neighbours)
    code = _reach_kernel(np.asarray(suitable.values), st_np, dist, edges, assumption, rule)
    out = xr.DataArray(code, dims=suitable.dims, coords=suitable.coords, name="reachable")
    out.attrs = {"movement_assumption": assumption, "step_distance_km": dist.astype(float)}
    layers.stamp(out, long_name=f"suitable and reachable, {assumption} movement", description={
        "none": "occupied start cells kept while they stay suitable",
        "limited": "spread between consecutive slices up to the step distance along shortest "
        f"paths through '{through if passable is None else 'passable'}' cells "
        f"({neighbours}-neighbour graph, great-circle edges), then kept if suitable",
        "unlimited": "every suitable cell",
    }[assumption])
    if rate is not None:
        out.attrs["rate"] = str(rate)
    return out


def movement(
    suitable: xr.DataArray,
    start: xr.DataArray,
    *,
    rate: str | None = None,
    distance_km: float | Sequence[float] | None = None,
    through: Through = "land",
    neighbours: Literal[8, 16] = 8,
    dim: str = "slice",
) -> xr.Dataset:
    """The three movement assumptions side by side for one chain.

    Parameters
    ----------
    suitable : xarray.DataArray
        Suitable layers of one chain ``(slice, lat, lon)`` in time order.
    start : xarray.DataArray of bool
        Occupied cells at the first slice.
    rate : str, optional
        Spread rate with units for limited movement.
    distance_km : float or sequence of float, optional
        Step distance instead of `rate`.
    through : {"land", "suitable", "any"}, default "land"
        Cells a path may enter (see :func:`reachable`).
    neighbours : {8, 16}, default 8
        Neighbours of a cell in the movement graph.
    dim : str, default "slice"
        Dimension of the chain's slices.

    Returns
    -------
    xarray.Dataset
        ``reachable_none``, ``reachable_limited``, ``reachable_unlimited`` (int8, see
        :func:`reachable`). Without `rate` and `distance_km`, limited is left out.
    """
    out = {}
    for a in ASSUMPTIONS:
        if a == "limited" and rate is None and distance_km is None:
            continue
        out[f"reachable_{a}"] = reachable(
            suitable, start, assumption=a, rate=rate if a == "limited" else None,
            distance_km=distance_km if a == "limited" else None, through=through,
            neighbours=neighbours, dim=dim,
        )
    return xr.Dataset(out)
