"""Invented records of the demo: Darwin Core occurrences of the plant (with planted errors),
of its invented relatives (target group) and dated fossil-like records."""

from __future__ import annotations

import datetime as _dt

import numpy as np

from timeslice.demo.scenario import EFFORT, NICHE, SEA_LEVEL_21KA, SPECIES, TARGET_GROUP
from timeslice.demo.world import World, bio10_bio12


DWC_COLUMNS = [
    "occurrenceID", "scientificName", "decimalLatitude", "decimalLongitude",
    "coordinateUncertaintyInMeters", "occurrenceStatus", "basisOfRecord", "eventDate", "year",
    "individualCount",
]


def _random_date(rng: np.random.Generator) -> tuple[str, int]:
    start = _dt.date(1950, 1, 1).toordinal()
    end = _dt.date(2020, 12, 31).toordinal()
    d = _dt.date.fromordinal(int(rng.integers(start, end + 1)))
    return d.isoformat(), d.year


def _sample_points(rng, weights: np.ndarray, lon: np.ndarray, lat: np.ndarray, res: float,
                   n: int) -> tuple[np.ndarray, np.ndarray]:
    w = weights.ravel() / weights.sum()
    idx = rng.choice(w.size, size=n, replace=True, p=w)
    iy, ix = np.unravel_index(idx, weights.shape)
    plon = lon[ix] + rng.uniform(-0.45, 0.45, n) * res
    plat = lat[iy] + rng.uniform(-0.45, 0.45, n) * res
    return plon, plat


def _effort(z: np.ndarray, dist: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Relative sampling effort: coasts, lowland "roads" (valleys) and the south (EFFORT)."""
    e = EFFORT
    lat2 = np.broadcast_to(lat[:, None], z.shape)
    return (e["base"] + e["coast"] * np.exp(-dist / e["coast_km"])
            + e["lowland"] * np.exp(-np.maximum(z, 0) / e["lowland_m"])) \
        * (1.0 + (55.0 - lat2) / e["south_deg"])


_UNCERTAINTY_M = np.array([10, 25, 50, 100, 250, 1000, 2000, 5000])
_BASIS = ["HumanObservation", "HumanObservation", "HumanObservation", "PreservedSpecimen",
          "MachineObservation"]


def _presence_rows(rng, plon, plat, kind: str = "clean") -> list[dict]:
    rows = []
    for i in range(plon.size):
        date, year = _random_date(rng)
        rows.append({
            "decimalLatitude": f"{plat[i]:.5f}", "decimalLongitude": f"{plon[i]:.5f}",
            "coordinateUncertaintyInMeters": str(int(rng.choice(_UNCERTAINTY_M))),
            "occurrenceStatus": "present",
            "basisOfRecord": _BASIS[int(rng.integers(len(_BASIS)))],
            "eventDate": date, "year": str(year),
            "individualCount": str(int(rng.integers(1, 25))),
            "_kind": kind,
        })
    return rows


def target_group_rows(rng: np.random.Generator, w: World) -> list[dict]:
    """Clean presence records of the invented related species, with the focal effort.

    Parameters
    ----------
    rng : numpy.random.Generator
        Their own random stream (so the other files do not change when asked for).
    w : World
        The invented world.

    Returns
    -------
    list of dict
        Darwin Core rows (:data:`DWC_COLUMNS` and a ``_kind``), in random order, numbered.
    """
    b10, b12 = bio10_bio12(**w.fine)
    effort = _effort(w.z, w.dist, w.lat)
    rows: list[dict] = []
    for name, q in TARGET_GROUP.items():
        p = np.exp(-0.5 * ((b10 - q["bio10_optimum_degC"]) / q["bio10_sd_degC"]) ** 2) \
            / (1.0 + np.exp(-(b12 - q["bio12_midpoint_mm"]) / NICHE["bio12_scale_mm"]))
        weights = np.where(w.land, p * effort, 0.0)
        plon, plat = _sample_points(rng, weights, w.lon, w.lat, w.res, q["n"])
        for r in _presence_rows(rng, plon, plat):
            r["scientificName"] = name
            rows.append(r)
    order = rng.permutation(len(rows))
    rows = [rows[i] for i in order]
    for k, r in enumerate(rows, start=1):
        r["occurrenceID"] = f"urn:timeslice-demo:target-group:{k:05d}"
    return rows


def occurrence_rows(rng, *, lon, lat, res, z, prob, dist, n_clean: int) -> tuple[list, dict]:
    """Darwin Core occurrence records of the invented plant, with planted errors.

    Clean records are drawn in proportion to the presence probability times the sampling
    effort (:data:`EFFORT`); then swapped coordinates, zeros, points at sea, absences, huge
    uncertainties and exact duplicates are planted for the cleaning step to find.

    Parameters
    ----------
    rng : numpy.random.Generator
        The scenario's random stream (advanced by this call).
    lon, lat : numpy.ndarray
        Fine cell centres, degrees.
    res : float
        Fine cell size, degrees.
    z, prob, dist : numpy.ndarray
        Elevation (m), known presence probability and distance to the coast (km), (lat, lon).
    n_clean : int
        Number of clean records.

    Returns
    -------
    rows : list of dict
        The records in file order (each with a ``_kind``).
    bad_counts : dict of str to int
        Number of planted bad records of each kind.
    """
    lon2, lat2 = np.meshgrid(lon, lat)
    weights = np.where(z > 0, prob * _effort(z, dist, lat), 0.0)
    plon, plat = _sample_points(rng, weights, lon, lat, res, n_clean)
    rows = _presence_rows(rng, plon, plat)

    def clone(kind: str) -> dict:
        r = dict(rows[int(rng.integers(n_clean))])
        r["_kind"] = kind
        return r

    bad_counts = {"swapped_lat_lon": 5, "zero_coordinates": 3, "at_sea": 5,
                  "exact_duplicate": 5, "absent": 4, "huge_uncertainty": 3}
    bad = []
    for _ in range(bad_counts["swapped_lat_lon"]):
        r = clone("swapped_lat_lon")
        r["decimalLatitude"], r["decimalLongitude"] = r["decimalLongitude"], r["decimalLatitude"]
        bad.append(r)
    for _ in range(bad_counts["zero_coordinates"]):
        r = clone("zero_coordinates")
        r["decimalLatitude"], r["decimalLongitude"] = "0.00000", "0.00000"
        bad.append(r)
    sea = (z < -300.0) & (np.abs(lon2 + 30.0) < 9.0) & (np.abs(lat2 - 47.5) < 6.5)
    slon, slat = _sample_points(rng, sea.astype(float), lon, lat, res,
                                bad_counts["at_sea"])
    for i in range(bad_counts["at_sea"]):
        r = clone("at_sea")
        r["decimalLatitude"], r["decimalLongitude"] = f"{slat[i]:.5f}", f"{slon[i]:.5f}"
        bad.append(r)
    for _ in range(bad_counts["absent"]):
        r = clone("absent")
        r["occurrenceStatus"] = "absent"
        r["individualCount"] = "0"
        bad.append(r)
    for _ in range(bad_counts["huge_uncertainty"]):
        r = clone("huge_uncertainty")
        r["coordinateUncertaintyInMeters"] = str(int(rng.choice([50000, 75000, 120000])))
        bad.append(r)
    # ids first, so that exact duplicates repeat the id as well
    allrows = rows + bad
    order = rng.permutation(len(allrows))
    allrows = [allrows[i] for i in order]
    for k, r in enumerate(allrows, start=1):
        r["occurrenceID"] = f"urn:timeslice-demo:nivalia:{k:05d}"
        r["scientificName"] = SPECIES
    dups = [dict(allrows[int(i)]) for i in rng.choice(
        [k for k, r in enumerate(allrows) if r["_kind"] == "clean"],
        size=bad_counts["exact_duplicate"], replace=False)]
    for r in dups:
        r["_kind"] = "exact_duplicate"
    for r in dups:
        pos = int(rng.integers(len(allrows) + 1))
        allrows.insert(pos, r)
    return allrows, bad_counts


def dated_record_rows(rng, *, lon, lat, res, z, prob, prob21) -> list[dict]:
    """Invented fossil-like records with ages.

    Glacial ones on the exposed shelf and in the southern lowlands where the true 21 ka niche
    lies, Holocene ones at mid elevations in the present niche. Ages are chosen so that each
    record is nearest in time to the 21 ka or the 6 ka slice.

    Parameters
    ----------
    rng : numpy.random.Generator
        The scenario's random stream (advanced by this call).
    lon, lat : numpy.ndarray
        Fine cell centres, degrees.
    res : float
        Fine cell size, degrees.
    z, prob, prob21 : numpy.ndarray
        Elevation (m) and the known presence probability today and at 21 ka, (lat, lon).

    Returns
    -------
    list of dict
        Rows ``record_id``, ``lon``, ``lat``, ``age_bp``, ``age_sd``, ``material`` (and the
        ``_setting`` each was drawn in), oldest first.
    """
    lon2, lat2 = np.meshgrid(lon, lat)
    shelf = (z <= 0) & (z > SEA_LEVEL_21KA)
    low_south = (z > 0) & (z < 500) & (lat2 < 47.0)
    montane = (z > 400) & (z < 1800)
    plans = [("exposed shelf", shelf, prob21, 3, (17000, 22000)),
             ("southern lowland", low_south, prob21, 4, (15000, 21500)),
             ("montane", montane, prob, 5, (4000, 9000))]
    materials = ["pollen", "macrofossil", "seed", "leaf fragment"]
    out = []
    for kind, mask, pr_, n, (a0, a1) in plans:
        wts = np.where(mask, 0.02 + pr_**2, 0.0)
        if wts.sum() == 0:  # very coarse test grids
            wts = np.where(z > SEA_LEVEL_21KA, 1.0, 0.0)
        plon, plat = _sample_points(rng, wts, lon, lat, res, n)
        for i in range(n):
            age = float(np.round(rng.uniform(a0, a1), -1))
            sd = float(np.round(30 + 0.02 * age * rng.uniform(0.5, 1.5), 0))
            out.append({"lon": f"{plon[i]:.4f}", "lat": f"{plat[i]:.4f}",
                        "age_bp": f"{age:.0f}", "age_sd": f"{sd:.0f}",
                        "material": materials[int(rng.integers(len(materials)))],
                        "_setting": kind})
    order = np.argsort([-float(r["age_bp"]) for r in out], kind="stable")
    out = [out[i] for i in order]
    for k, r in enumerate(out, start=1):
        r["record_id"] = f"DR{k:03d}"
    return out
