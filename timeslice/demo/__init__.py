"""Generator of the invented demo scenario.

Everything here is invented: an island landmass in the middle of an ocean, its climate, three
climate models (``alder``, ``birch``, ``cedar``) with their own biases, an ice sheet at 21 ka,
and an invented cold-adapted plant *Nivalia demonstrata* (invented genus) with occurrence and
dated fossil-like records. No real place, species or data set is used.

The scenario is a deterministic function of ``seed`` and ``resolution``: the same arguments give
the same files bit for bit (no timestamps are written). :func:`generate` writes

- ``baseline.nc``: fine monthly climatology ``tasmin``, ``tasmax`` (degC), ``pr`` (mm/month),
  NaN at sea (so the pipeline has to fill exposed shelf);
- ``dem.nc``: ``elevation`` in m (negative below present sea level);
- ``ice_21ka.nc``: ``sftgif`` in % on a 0.5 degree grid;
- ``models/<model>/<slice>.nc``: raw model output on a 1 degree grid (K, kg m-2 s-1,
  longitudes 0..360, ``cedar`` with descending latitude, calendars noleap / 360_day);
- ``occurrences.csv`` (Darwin Core columns), ``dated_records.csv``;
- ``host_plant.nc``, ``populations.csv``, ``reserves.geojson``: an invented host plant the
  species needs, invented sampled populations with a haplotype diversity, two invented
  reserves (for the biotic, genetic and zonal parts of a run);
- ``truth.json``: the niche parameters, the true niche area and what was put in.

The package: :mod:`~timeslice.demo.scenario` (the invented parameters),
:mod:`~timeslice.demo.world` (landscape, true climate, known niche, ice, slice changes),
:mod:`~timeslice.demo.records` (occurrence, target-group and dated records) and
:mod:`~timeslice.demo.files` (writing the files); :func:`generate` puts them together.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

import numpy as np

from timeslice.demo.files import (
    jsonable,
    rows_to_csv,
    truth_document,
    write_climate,
    write_extras,
    write_text,
)
from timeslice.demo.records import (
    DWC_COLUMNS,
    dated_record_rows,
    occurrence_rows,
    target_group_rows,
)
from timeslice.demo.scenario import (
    CLIMATE,
    DEFAULT_SEED,
    EFFORT,
    FINE_EXTENT,
    HOST_MAX_ELEVATION_M,
    ICE_RESOLUTION,
    KM_PER_DEGREE,
    LAPSE_RATE_K_PER_M,
    MODEL_EXTENT,
    MODEL_RESOLUTION,
    MODELS,
    NICHE,
    SEA_LEVEL_21KA,
    SECONDS_PER_DAY,
    SLICES,
    SPECIES,
    TARGET_GROUP,
    WATER_DENSITY,
)
from timeslice.demo.world import (
    World,
    bio10_bio12,
    landscape_params,
    niche_probability,
    presence_probability,
    true_21ka,
)
from timeslice.errors import ConfigError

__all__ = [
    "CLIMATE",
    "DEFAULT_SEED",
    "EFFORT",
    "FINE_EXTENT",
    "HOST_MAX_ELEVATION_M",
    "ICE_RESOLUTION",
    "KM_PER_DEGREE",
    "LAPSE_RATE_K_PER_M",
    "MODELS",
    "MODEL_EXTENT",
    "MODEL_RESOLUTION",
    "NICHE",
    "SEA_LEVEL_21KA",
    "SECONDS_PER_DAY",
    "SLICES",
    "SPECIES",
    "TARGET_GROUP",
    "WATER_DENSITY",
    "generate",
    "main",
    "presence_probability",
    "sha256_of",
    "write_default",
]


def _check_resolution(resolution: float) -> int:
    try:
        r = float(resolution)
    except (TypeError, ValueError):
        raise ConfigError(f"demo `resolution` must be a number of degrees, got {resolution!r}") \
            from None
    k = round(MODEL_RESOLUTION / r) if r > 0 else 0
    if r <= 0 or k < 1 or abs(k * r - MODEL_RESOLUTION) > 1e-9 or r > 0.5:
        raise ConfigError(
            f"demo `resolution` must divide 1 degree evenly and be at most 0.5 "
            f"(e.g. 0.1, 0.25, 0.5), got {resolution!r}"
        )
    return k


def generate(out_dir: str | os.PathLike, *, seed: int = DEFAULT_SEED,
             resolution: float = 0.1, target_group: bool = False) -> dict[str, Path]:
    """Write the invented demo scenario to `out_dir`.

    Parameters
    ----------
    out_dir : path
        Folder to write into (created if missing). Existing demo files are replaced
        atomically (temporary name, then rename); other files are left alone.
    seed : int
        Seed of every random choice; the same seed and resolution give identical bytes.
    resolution : float
        Fine-grid cell size in degrees; must divide 1 degree and be at most 0.5 (0.1 for
        the committed demo; 0.25 or 0.5 for quick tests).
    target_group : bool
        Also write ``target_group.csv``: Darwin Core records of four invented related species
        (:data:`TARGET_GROUP`) sampled with the same effort as the focal species, for a
        bias-matched (target-group) background. Off by default; the other files do not
        change when it is switched on.

    Returns
    -------
    dict of str to pathlib.Path
        Keys ``baseline``, ``dem``, ``ice_21ka``, ``occurrences``, ``dated_records``,
        ``truth`` and ``<model>/<slice>`` (e.g. ``alder/baseline``, ``cedar/21ka``), and
        ``target_group`` when asked for.

    Raises
    ------
    timeslice.errors.ConfigError
        `seed` not an integer, `resolution` not usable, or `out_dir` an existing file.

    Notes
    -----
    Temperature falls with elevation at the standard-atmosphere lapse rate,

    .. math:: T(z) = T_0(\\varphi) - \\Gamma z, \\quad \\Gamma = 6.5\\ \\mathrm{K\\,km^{-1}}

    (ICAO 1993, Manual of the ICAO Standard Atmosphere, Doc 7488/3). Precipitation fluxes
    in the model files are depths per month divided by the month's length in the model's
    calendar (CF Conventions 1.8, section 4.4.1) and multiplied by the density of water,
    1000 kg m-3. The presence probability of the invented plant is

    .. math:: p = \\exp\\left(-\\tfrac12\\left(\\tfrac{B_{10} - \\mu}{\\sigma}\\right)^2\\right)
              \\left(1 + \\exp\\left(-\\tfrac{B_{12} - m}{s}\\right)\\right)^{-1}

    with :math:`B_{10}` the mean temperature of the warmest quarter and :math:`B_{12}` the
    annual precipitation (O'Donnell & Ignizio 2012, USGS Data Series 691), parameters in
    :data:`NICHE`.

    Examples
    --------
    >>> paths = generate(tmp_path, resolution=0.5)  # doctest: +SKIP
    >>> sorted(paths)[:3]  # doctest: +SKIP
    ['alder/21ka', 'alder/6ka', 'alder/baseline']
    """
    if not isinstance(seed, (int, np.integer)) or isinstance(seed, bool):
        raise ConfigError(f"demo `seed` must be an integer, got {seed!r}")
    k = _check_resolution(resolution)
    res = MODEL_RESOLUTION / k
    from timeslice.io import writable_folder

    out = writable_folder(out_dir, what="demo output folder")
    rng = np.random.default_rng(seed)
    p = landscape_params(rng)
    w = World(p, res, k)
    paths = write_climate(w, p, out, seed)

    prob = np.where(w.land, niche_probability(*bio10_bio12(**w.fine)), 0.0)
    clim21, land21 = true_21ka(w)
    prob21 = np.where(land21, niche_probability(*bio10_bio12(**clim21)), 0.0)
    n_clean = 480
    occ_rows, bad_counts = occurrence_rows(rng, lon=w.lon, lat=w.lat, res=res, z=w.z,
                                           prob=prob, dist=w.dist, n_clean=n_clean)
    paths["occurrences"] = out / "occurrences.csv"
    write_text(rows_to_csv(occ_rows, DWC_COLUMNS), paths["occurrences"])
    dated = dated_record_rows(rng, lon=w.lon, lat=w.lat, res=res, z=w.z, prob=prob,
                              prob21=prob21)
    paths["dated_records"] = out / "dated_records.csv"
    write_text(rows_to_csv(dated, ["record_id", "lon", "lat", "age_bp", "age_sd", "material"]),
               paths["dated_records"])

    # invented partner, sampled populations and reserves: their own stream of random numbers,
    # so the other files stay the same
    paths.update(write_extras(w, out, seed, prob=prob, prob21=prob21))

    if target_group:
        # its own stream of random numbers, so the other files stay the same
        tg_rows = target_group_rows(np.random.default_rng([int(seed), 2]), w)
        paths["target_group"] = out / "target_group.csv"
        write_text(rows_to_csv(tg_rows, DWC_COLUMNS), paths["target_group"])

    truth_doc = truth_document(w, p, seed=seed, prob=prob, prob21=prob21, land21=land21,
                               bad_counts=bad_counts, n_clean=n_clean, dated=dated,
                               target_group=target_group)
    paths["truth"] = out / "truth.json"
    write_text(json.dumps(jsonable(truth_doc), indent=2, sort_keys=True) + "\n",
               paths["truth"])
    return paths


def _repo_demo_dir() -> Path:
    return Path(__file__).resolve().parents[2] / "demo_data"


def write_default(out_dir: str | os.PathLike | None = None) -> dict[str, Path]:
    """Regenerate the committed demo files (``demo_data/`` in the repository by default).

    Parameters
    ----------
    out_dir : path, optional
        Folder to write into instead.

    Returns
    -------
    dict of str to pathlib.Path
        As :func:`generate`.
    """
    return generate(_repo_demo_dir() if out_dir is None else out_dir)


def sha256_of(paths: dict[str, Path]) -> dict[str, str]:
    """SHA-256 of every written file, for reproducibility checks.

    Parameters
    ----------
    paths : dict of str to pathlib.Path
        Files, e.g. as returned by :func:`generate`.

    Returns
    -------
    dict of str to str
        Hex digest per key, keys sorted.
    """
    return {k: hashlib.sha256(Path(v).read_bytes()).hexdigest() for k, v in sorted(paths.items())}


def main(argv: list[str] | None = None) -> int:
    """``python -m timeslice.demo [OUT_DIR]``: regenerate the demo files.

    Parameters
    ----------
    argv : list of str, optional
        Arguments (default ``sys.argv[1:]``): an optional output folder.

    Returns
    -------
    int
        Exit code, 0.
    """
    import sys

    args = sys.argv[1:] if argv is None else argv
    paths = write_default(args[0] if args else None)
    total = sum(Path(v).stat().st_size for v in paths.values())
    print(f"wrote {len(paths)} files ({total / 1e6:.2f} MB) to {Path(paths['dem']).parent}")
    return 0
