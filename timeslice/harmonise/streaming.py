"""Row-block engine of one prepared slice: bounded memory whatever the size of the fine grid.

A :class:`SlicePlan` says how to read one block of latitude rows of the slice's climate
(downscaled monthly fields or ready bioclimatic layers), of the elevation and of the ice
fraction. :func:`run_slice` walks the blocks once, computes the land masks, the
bioclimatic variables and the counts of every block and hands each finished block to a
sink (arrays in memory, or a NetCDF file written as it goes). Every step is per cell, so a
block gives the same numbers as the whole grid; the only whole-grid steps are

* the fill of land cells without baseline climate (nearest complete cell): the blocks that
  hold such cells are finished in a second pass, after the donors are known;
* clipping negative precipitation, done on every cell when any cell-month is below
  -1e-6 mm: a block holding only tiny negatives that was finished before a real negative
  was seen is recomputed;
* the land, ice and shelf areas: sums of per-row sums (``math.fsum``), so the total does not
  depend on the block size (it may differ from one whole-grid ``numpy.sum`` in the last
  digits, ~1e-16 relative).
"""

from __future__ import annotations

import math
import threading
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np

from timeslice.errors import DataError
from timeslice.harmonise.bioclim import BIO_NAMES, bioclim_rows
from timeslice.harmonise.landmask import TEMPERATURE_LEVELS
from timeslice.harmonise.rowblocks import row_blocks

__all__ = ["BlockSink", "SlicePlan", "SliceSummary", "run_slice", "MASKS"]

#: The mask layers of a prepared slice, in file order after ``elevation``.
MASKS = ("land", "ice", "exposed_shelf", "filled")

#: Precipitation below this (mm month-1) counts as negative (and triggers clipping).
NEGATIVE_PR = -1e-6


@dataclass
class SlicePlan:
    """How to compute one slice block by block.

    Parameters
    ----------
    kind : {"monthly", "bio"}
        Monthly ``tasmin``, ``tasmax``, ``pr`` (bioclimatic variables computed per block) or
        ready ``bio1``..``bio19``.
    read_climate : callable
        ``read_climate(r0, r1) -> (fields, counts)``: fresh writable arrays of rows
        ``r0:r1`` ((12, rows, lon) for monthly, (rows, lon) for bio) and a dict of counts
        summed over blocks (e.g. ``n_swapped``).
    read_elevation : callable
        ``read_elevation(r0, r1) -> float32 array (rows, lon)`` [m].
    read_ice : callable or None
        ``read_ice(r0, r1) -> ice fraction (rows, lon)`` or None without ice.
    lat, lon : numpy.ndarray
        Target coordinates.
    sea_level, ice_threshold, lapse_rate : float
        As in :func:`timeslice.harmonise.prepare_slice`.
    rows : int
        Latitude rows per block.
    bio_rows : int
        Rows per call of the bioclimatic kernel inside a block (a divisor of `rows`).
    label : str
        Slice label (for messages).
    clip : {"maximum", "clip"}
        How negative precipitation is set to 0 (the two give the same numbers but for the
        sign of zero).
    workers : int
        Blocks in flight (threads).
    """

    kind: str
    read_climate: Callable
    read_elevation: Callable
    read_ice: Callable | None
    lat: np.ndarray
    lon: np.ndarray
    sea_level: float
    ice_threshold: float
    lapse_rate: float
    rows: int
    bio_rows: int
    label: str = ""
    clip: str = "maximum"
    workers: int = 2

    @property
    def names(self) -> tuple[str, ...]:
        """Climate variables of a block."""
        return ("tasmin", "tasmax", "pr") if self.kind == "monthly" else BIO_NAMES


class BlockSink:
    """Receiver of finished blocks (subclasses keep them in memory or write them)."""

    def write(self, r0: int, r1: int, layers: dict[str, np.ndarray]) -> None:
        """Store rows ``r0:r1`` of every layer.

        Parameters
        ----------
        r0, r1 : int
            First and one-past-last row.
        layers : dict of str to numpy.ndarray
            ``bio1``..``bio19`` (float32), ``elevation`` (float32) and the masks (bool), each
            (rows, lon).

        Returns
        -------
        None
        """
        raise NotImplementedError


@dataclass
class SliceSummary:
    """What the whole-grid log lines and attributes of a slice need.

    Parameters
    ----------
    counts : dict
        Sums of the reader's counts (``n_swapped``, ``n_uncovered``).
    land_km2, ice_km2, exposed_shelf_km2 : float
        Areas of the masks.
    n_filled : int
        Land cells filled from the nearest complete cell.
    n_negative : int
        Cell-months of precipitation below -1e-6 mm (set to 0).
    """

    counts: dict = field(default_factory=dict)
    land_km2: float = 0.0
    ice_km2: float = 0.0
    exposed_shelf_km2: float = 0.0
    n_filled: int = 0
    n_negative: int = 0


@dataclass
class _Fill:
    """Donor values of the need cells of one block."""

    cells: tuple[np.ndarray, np.ndarray]  # rows (in block), columns
    values: dict[str, np.ndarray]  # (..., n) donor values, float32
    dz: np.ndarray  # (n,) elevation of the cell - of its donor, float64


@dataclass
class _State:
    """Per-row and per-block results gathered over the passes."""

    nlat: int
    band: np.ndarray
    dlon: np.ndarray
    rows_area: dict[str, np.ndarray]
    land_any: bool = False
    have: dict[int, np.ndarray] = field(default_factory=dict)  # packed bits per block
    need: dict[int, np.ndarray] = field(default_factory=dict)  # flat need indices per block
    seen: dict[str, bool] = field(default_factory=dict)
    counts: dict = field(default_factory=dict)
    negatives: dict[int, int] = field(default_factory=dict)
    tiny_unclipped: set = field(default_factory=set)
    fills: dict[int, _Fill] = field(default_factory=dict)
    lock: threading.Lock = field(default_factory=threading.Lock)

    def area(self, r0: int, r1: int) -> np.ndarray:
        """Cell areas of rows r0:r1 [km2], the products of :func:`timeslice.grid.cell_area`."""
        from timeslice.grid import AUTHALIC_RADIUS_KM

        return AUTHALIC_RADIUS_KM**2 * np.outer(self.band[r0:r1], self.dlon)


def _row_areas(lat: np.ndarray, lon: np.ndarray):
    """``|band_i|`` and ``dlon_j`` of the cell-area product of :func:`timeslice.grid.cell_area`."""
    import xarray as xr

    from timeslice.grid import grid_edges

    probe = xr.Dataset(coords={"lat": ("lat", lat), "lon": ("lon", lon)})
    lat_b, lon_b = (np.deg2rad(b) for b in grid_edges(probe))
    band = np.abs(np.sin(lat_b[:, 1]) - np.sin(lat_b[:, 0]))
    dlon = np.abs(lon_b[:, 1] - lon_b[:, 0])
    return band, dlon


def block_masks(z: np.ndarray, ice_frac: np.ndarray | None, *, sea_level: float,
                ice_threshold: float) -> dict[str, np.ndarray]:
    """Land, ice and exposed shelf of a block, as :func:`timeslice.harmonise.land_mask`.

    Parameters
    ----------
    z : numpy.ndarray
        Elevation [m] relative to present sea level.
    ice_frac : numpy.ndarray or None
        Ice fraction (NaN: no ice).
    sea_level, ice_threshold : float
        The slice's sea level [m] and the ice threshold.

    Returns
    -------
    dict of str to numpy.ndarray of bool
        ``land``, ``ice``, ``exposed_shelf``.
    """
    above = z > float(sea_level)
    if ice_frac is not None:
        ice = (np.where(np.isnan(ice_frac), 0.0, ice_frac) >= float(ice_threshold)) & above
    else:
        ice = np.zeros(z.shape, dtype=bool)
    land = above & ~ice
    return {"land": land, "ice": ice, "exposed_shelf": land & (z <= 0.0)}


def _complete(plan: SlicePlan, fields: dict[str, np.ndarray]) -> np.ndarray:
    have = None
    for v in plan.names:
        ok = np.isfinite(fields[v])
        if ok.ndim == 3:
            ok = ok.all(axis=0)
        have = ok if have is None else have & ok
    return have


def _bio_of(plan: SlicePlan, fields: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    if plan.kind != "monthly":
        return {b: fields[b].astype(np.float32, copy=False) for b in BIO_NAMES}
    n = fields["tasmin"].shape[1]
    out = np.empty((19, n, fields["tasmin"].shape[2]), dtype=np.float32)
    for s0, s1 in row_blocks(n, plan.bio_rows):
        out[:, s0:s1] = bioclim_rows(*(fields[v][:, s0:s1] for v in plan.names))
    return {b: out[i] for i, b in enumerate(BIO_NAMES)}


def _apply_fill(plan: SlicePlan, fields: dict[str, np.ndarray], fill: _Fill) -> None:
    ni, nj = fill.cells
    for v in plan.names:
        vals = fill.values[v]
        if v in TEMPERATURE_LEVELS:
            vals = vals - plan.lapse_rate * fill.dz
        fields[v][..., ni, nj] = vals


def _clip_negative(plan: SlicePlan, pr: np.ndarray, state: _State, known: bool):
    """Count negative precipitation; clip it when any is known. Returns (count, tiny)."""
    neg = int((pr < NEGATIVE_PR).sum())
    tiny = False
    if neg or known:
        if plan.clip == "maximum":
            np.maximum(pr, 0.0, out=pr)
        else:
            np.clip(pr, 0.0, None, out=pr)
    else:
        tiny = bool((pr < 0).any())
    return neg, tiny


def _finish_block(plan: SlicePlan, sink: BlockSink, state: _State, b: int, r0: int, r1: int,
                  fields, z, masks, need) -> None:
    """Fill, clip, compute the bioclimatic variables and hand the block to the sink."""
    fill = state.fills.get(b)
    if fill is not None:
        _apply_fill(plan, fields, fill)
    if plan.kind == "monthly":
        with state.lock:
            known = any(state.negatives.values())
        neg, tiny = _clip_negative(plan, fields["pr"], state, known)
        with state.lock:
            state.negatives[b] = neg
            if tiny:
                state.tiny_unclipped.add(b)
            else:
                state.tiny_unclipped.discard(b)
    layers = _bio_of(plan, fields)
    sea = ~masks["land"]
    for arr in layers.values():
        arr[sea] = np.nan
    layers.update(elevation=z, **masks, filled=need & masks["land"])
    with state.lock:
        sink.write(r0, r1, layers)


def _first_pass(plan: SlicePlan, sink: BlockSink, state: _State, b: int, r0: int,
                r1: int) -> None:
    fields, counts = plan.read_climate(r0, r1)
    z = plan.read_elevation(r0, r1)
    ice = plan.read_ice(r0, r1) if plan.read_ice is not None else None
    masks = block_masks(z, ice, sea_level=plan.sea_level, ice_threshold=plan.ice_threshold)
    have = _complete(plan, fields)
    land = masks["land"]
    need = land & ~have
    seen = {}
    for v in plan.names:
        first = fields[v][0] if fields[v].ndim == 3 else fields[v]
        seen[v] = bool(np.isfinite(first[land]).any())
    with state.lock:
        for k, n in counts.items():
            state.counts[k] = state.counts.get(k, 0) + n
        for v, s in seen.items():
            state.seen[v] = state.seen.get(v, False) or s
        area = state.area(r0, r1)
        for name in ("land", "ice", "exposed_shelf"):
            state.rows_area[name][r0:r1] = np.where(masks[name], area, 0.0).sum(axis=1)
        state.land_any = state.land_any or bool(land.any())
        state.have[b] = np.packbits(have, axis=None)
    if need.any():
        with state.lock:
            state.need[b] = np.flatnonzero(need)
        return  # finished in the fill pass, once the donors are known
    _finish_block(plan, sink, state, b, r0, r1, fields, z, masks, need)


def _recompute(plan: SlicePlan, sink: BlockSink, state: _State, b: int, r0: int,
               r1: int) -> None:
    fields, _ = plan.read_climate(r0, r1)
    z = plan.read_elevation(r0, r1)
    ice = plan.read_ice(r0, r1) if plan.read_ice is not None else None
    masks = block_masks(z, ice, sea_level=plan.sea_level, ice_threshold=plan.ice_threshold)
    need = masks["land"] & ~_complete(plan, fields)
    _finish_block(plan, sink, state, b, r0, r1, fields, z, masks, need)


def _plan_fill(plan: SlicePlan, state: _State, blocks: list[tuple[int, int]]) -> None:
    """Nearest complete cell of every need cell, and the donors' values (a second read of
    the blocks that hold donors). Same donors as :func:`timeslice.harmonise.fill_exposed`."""
    from scipy.spatial import cKDTree

    nlon = plan.lon.size
    ncell = [(r1 - r0) * nlon for r0, r1 in blocks]
    have = np.concatenate([np.unpackbits(state.have[b], count=ncell[b]).astype(bool)
                           for b in range(len(blocks))])
    need_flat = np.concatenate([state.need[b] + blocks[b][0] * nlon for b in sorted(state.need)])
    if not have.any():
        raise DataError("`climate` has no cell with complete climate to fill from")
    lat = np.deg2rad(plan.lat)
    lon = np.deg2rad(plan.lon)

    def xyz(flat_idx):
        i, j = np.divmod(flat_idx, nlon)
        la, lo = lat[i], lon[j]
        return np.stack([np.cos(la) * np.cos(lo), np.cos(la) * np.sin(lo), np.sin(la)], -1)

    donors = np.flatnonzero(have)
    del have
    tree = cKDTree(xyz(donors))
    _, idx = tree.query(xyz(need_flat))
    del tree
    src = donors[idx]
    del donors
    uniq, inverse = np.unique(src, return_inverse=True)
    values, z_of = _donor_values(plan, blocks, uniq)
    z_need = _elevation_at(plan, blocks, need_flat)
    start = 0
    for b in sorted(state.need):
        n = state.need[b].size
        sel = inverse[start:start + n]
        ni, nj = np.divmod(state.need[b], nlon)
        state.fills[b] = _Fill(
            cells=(ni, nj),
            values={v: values[v][..., sel] for v in plan.names},
            dz=z_need[start:start + n] - z_of[sel],
        )
        start += n


def _donor_values(plan: SlicePlan, blocks, flat_idx: np.ndarray):
    """Climate (after downscaling) and elevation of the cells `flat_idx` (sorted)."""
    nlon = plan.lon.size
    values: dict[str, list] = {v: [] for v in plan.names}
    z_parts = []
    for r0, r1 in blocks:
        lo, hi = np.searchsorted(flat_idx, [r0 * nlon, r1 * nlon])
        if lo == hi:
            continue
        i, j = np.divmod(flat_idx[lo:hi] - r0 * nlon, nlon)
        fields, _ = plan.read_climate(r0, r1)
        for v in plan.names:
            values[v].append(fields[v][..., i, j])
        z_parts.append(np.asarray(plan.read_elevation(r0, r1), dtype=float)[i, j])
    return ({v: np.concatenate(p, axis=-1) for v, p in values.items()},
            np.concatenate(z_parts))


def _elevation_at(plan: SlicePlan, blocks, flat_idx: np.ndarray) -> np.ndarray:
    nlon = plan.lon.size
    parts = []
    for r0, r1 in blocks:
        lo, hi = np.searchsorted(flat_idx, [r0 * nlon, r1 * nlon])
        if lo < hi:
            i, j = np.divmod(flat_idx[lo:hi] - r0 * nlon, nlon)
            parts.append(np.asarray(plan.read_elevation(r0, r1), dtype=float)[i, j])
    return np.concatenate(parts)


def _each(plan: SlicePlan, func, items) -> None:
    items = list(items)
    if plan.workers <= 1 or len(items) <= 1:
        for it in items:
            func(*it)
        return
    with ThreadPoolExecutor(max_workers=plan.workers) as pool:
        for f in [pool.submit(func, *it) for it in items]:
            f.result()


def run_slice(plan: SlicePlan, sink: BlockSink) -> SliceSummary:
    """Compute every block of one slice and hand it to `sink`.

    Parameters
    ----------
    plan : SlicePlan
        How to read a block.
    sink : BlockSink
        Where finished blocks go.

    Returns
    -------
    SliceSummary
        Counts and areas for the slice's log and attributes.

    Raises
    ------
    DataError
        When a climate variable has no value on any land cell, or nothing can be filled from.
    """
    nlat = plan.lat.size
    band, dlon = _row_areas(plan.lat, plan.lon)
    state = _State(nlat=nlat, band=band, dlon=dlon,
                   rows_area={m: np.zeros(nlat) for m in MASKS[:3]})
    blocks = row_blocks(nlat, plan.rows)
    _each(plan, lambda b, r0, r1: _first_pass(plan, sink, state, b, r0, r1),
          [(b, r0, r1) for b, (r0, r1) in enumerate(blocks)])
    for v in plan.names:
        if state.land_any and not state.seen.get(v, False):
            raise DataError(
                f"slice {plan.label!r}: variable {v!r} has no value on any land cell of the target grid; check that "
                "the input covers the target area"
            )
    if state.need:
        _plan_fill(plan, state, blocks)
        _each(plan, lambda b: _recompute(plan, sink, state, b, *blocks[b]),
              [(b,) for b in sorted(state.need)])
    if any(state.negatives.values()) and state.tiny_unclipped:
        redo = sorted(state.tiny_unclipped)
        _each(plan, lambda b: _recompute(plan, sink, state, b, *blocks[b]), [(b,) for b in redo])
    areas = {m: math.fsum(state.rows_area[m]) for m in MASKS[:3]}
    return SliceSummary(
        counts=state.counts, land_km2=areas["land"], ice_km2=areas["ice"],
        exposed_shelf_km2=areas["exposed_shelf"],
        n_filled=int(sum(n.size for n in state.need.values())),
        n_negative=int(sum(state.negatives.values())),
    )
