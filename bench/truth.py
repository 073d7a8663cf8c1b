"""Virtual-species truth benchmark (run by hand): does the tool recover a niche that is known?

    python bench/truth.py [--resolution 0.1] [--worlds demo,narrow,...] [--docs]
                          [--algorithm spline] [--threshold equal_ss] [--variables bio10,bio12]
                          [--buffer-km 250] [--background random|target_group]

Every world is the invented island of :mod:`timeslice.demo` (its landscape, its observed baseline
and its three invented climate models' slices at 21 ka, 6 ka and two future periods under two
forcings) with an invented species whose niche is known exactly: a Gaussian in the mean
temperature of the warmest quarter (bio10) times a logistic in annual precipitation (bio12),
suitable where the known presence probability is >= 0.5 (the demo's own truth definition,
``timeslice.demo.NICHE``). The demo species uses the demo's committed records; the other species
get records drawn in proportion to probability x sampling effort. The tool runs as a run does
(:func:`timeslice.pipeline.harmonise_stage`, :func:`~timeslice.pipeline.fit_stage`,
:func:`~timeslice.pipeline.transfer_stage`), with the demo configuration's ``[niche]`` settings
unless options override them; the true map of every slice is the known niche applied to the
climate of that slice as the tool prepared it (so the benchmark measures the niche model, and a
separate line compares that climate's truth with the demo's own ``truth.json``).

The approach is the virtual-ecologist one (Zurell et al. 2010, Ecography 33:1015-1028;
Meynard & Kaplan 2013, Global Ecol. Biogeogr. 22:245-257; Leroy et al. 2016, Ecography
39:599-607 -- citations from memory).

Printed per world and slice: true and estimated change in suitable area against the baseline
(percent), the error (percentage points), sign agreement, TSS and Jaccard overlap of the suitable
maps; per world the Jaccard overlap of true and estimated refugia (suitable at 21 ka, 6 ka and
today in every model). Goals: the sign right everywhere, median |error| < 10 pp, refugium
Jaccard >= 0.6. ``--docs`` writes docs/truth.md and docs/truth.png. Everything is invented.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr
from scipy import ndimage

ROOT = Path(__file__).resolve().parents[1]

#: Goals of the benchmark.
GOAL_MEDIAN_ABS_ERROR_PP = 10.0
GOAL_REFUGIUM_JACCARD = 0.6
#: A true change smaller than this (pp) has no meaningful sign: the sign check then asks only
#: that the estimate stay within the same band of zero (our rule, stated in docs/truth.md).
SIGN_TOLERANCE_PP = 5.0

#: Approximate length of one degree of latitude, km (sphere, R = 6371 km).
KM_PER_DEGREE = 111.195


# ---------------------------------------------------------------------------------------------
# invented species
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Species:
    """An invented species: its known niche, how its records are sampled, and why it is here."""

    name: str
    purpose: str
    bio10_optimum: float = 8.5
    bio10_sd: float = 2.5
    bio12_midpoint: float = 700.0
    bio12_scale: float = 60.0
    n_records: int = 400
    #: "demo" (the demo's committed records), "effort" (the demo's effort: coasts, lowlands,
    #: the south), "uniform" (equal effort), "roads" (strong bias: coasts and one road)
    sampling: str = "effort"
    #: records only south of this latitude (a survey region), None for the whole island
    survey_lat_max: float | None = None
    seed: int = 1


WORLDS: dict[str, Species] = {
    "demo": Species(
        "Nivalia demonstrata", "the demo species and its committed records", sampling="demo"),
    "narrow": Species(
        "Nivalia angusta", "narrow thermal niche (bio10 sd 1.2 degC)",
        bio10_optimum=7.5, bio10_sd=1.2, bio12_midpoint=650.0, n_records=250, seed=11),
    "broad": Species(
        "Nivalia lata", "broad thermal niche (bio10 sd 4.5 degC)",
        bio10_optimum=10.0, bio10_sd=4.5, bio12_midpoint=600.0, bio12_scale=70.0,
        n_records=500, seed=12),
    "dry_limited": Species(
        "Nivalia sitiens", "limited by precipitation today (bio12 midpoint 1000 mm)",
        bio10_optimum=11.0, bio10_sd=4.0, bio12_midpoint=1000.0, bio12_scale=70.0,
        n_records=400, seed=13),
    "small_area": Species(
        "Nivalia australis", "records only from a southern survey region (lat < 46.5, equal "
        "effort there): the calibration area is small against the transfer region",
        bio10_optimum=10.0, bio10_sd=2.5, bio12_midpoint=700.0, n_records=300,
        sampling="uniform", survey_lat_max=46.5, seed=14),
    "road_bias": Species(
        "Nivalia viaria", "strong sampling bias: records near coasts and one road",
        bio10_optimum=8.5, bio10_sd=2.5, bio12_midpoint=700.0, n_records=400,
        sampling="roads", seed=15),
}


def true_probability(sp: Species, bio10, bio12):
    """Known presence probability: Gaussian in bio10 times logistic in bio12 (the demo's form)."""
    g = np.exp(-0.5 * ((bio10 - sp.bio10_optimum) / sp.bio10_sd) ** 2)
    return g / (1.0 + np.exp(-(bio12 - sp.bio12_midpoint) / sp.bio12_scale))


def true_suitable(sp: Species, ds: xr.Dataset) -> np.ndarray:
    """Known suitable land cells (p >= 0.5) of a prepared slice."""
    p = true_probability(sp, ds["bio10"].values.astype(float), ds["bio12"].values.astype(float))
    return np.asarray(ds["land"].values, dtype=bool) & (np.nan_to_num(p) >= 0.5)


def _coast_km(land: np.ndarray, lat: np.ndarray, res: float) -> np.ndarray:
    dy = res * KM_PER_DEGREE
    dx = dy * float(np.cos(np.deg2rad(np.mean(lat))))
    return ndimage.distance_transform_edt(land, sampling=(dy, dx))


def _effort(sp: Species, base: xr.Dataset) -> np.ndarray:
    """Relative sampling effort on the prepared baseline grid."""
    from timeslice.demo import EFFORT

    land = np.asarray(base["land"].values, dtype=bool)
    lat, lon = base["lat"].values, base["lon"].values
    res = float(abs(lat[1] - lat[0]))
    z = np.maximum(np.asarray(base["elevation"].values, dtype=float), 0.0)
    dist = _coast_km(land, lat, res)
    lat2 = np.broadcast_to(lat[:, None], land.shape)
    lon2 = np.broadcast_to(lon[None, :], land.shape)
    if sp.sampling == "roads":
        # an invented road from the south coast to the north along a valley, plus the coasts
        road_lon = -31.0 + 0.6 * np.sin((lat2 - 42.0) / 2.0)
        d_road = np.abs(lon2 - road_lon) * KM_PER_DEGREE * np.cos(np.deg2rad(lat2))
        e = 0.01 + np.exp(-dist / 8.0) + 0.8 * np.exp(-d_road / 10.0)
    elif sp.sampling == "uniform":
        e = np.ones(land.shape)
    else:
        e = EFFORT
        e = (e["base"] + e["coast"] * np.exp(-dist / e["coast_km"])
             + e["lowland"] * np.exp(-z / e["lowland_m"])) * (1.0 + (55.0 - lat2) / e["south_deg"])
    if sp.survey_lat_max is not None:
        e = np.where(lat2 < sp.survey_lat_max, e, 0.0)
    return np.where(land, e, 0.0)


def sample_records(sp: Species, base: xr.Dataset, path: Path) -> Path:
    """Draw the species' records (probability x effort) and write them as Darwin Core CSV."""
    rng = np.random.default_rng(sp.seed)
    p = true_probability(sp, base["bio10"].values.astype(float), base["bio12"].values.astype(float))
    w = np.nan_to_num(p) * _effort(sp, base)
    flat = w.ravel() / w.sum()
    idx = rng.choice(flat.size, size=sp.n_records, replace=True, p=flat)
    iy, ix = np.unravel_index(idx, w.shape)
    lat, lon = base["lat"].values, base["lon"].values
    res = float(abs(lat[1] - lat[0]))
    df = pd.DataFrame({
        "occurrenceID": [f"urn:truth-bench:{sp.seed}:{k:05d}" for k in range(sp.n_records)],
        "scientificName": sp.name,
        "decimalLatitude": np.round(lat[iy] + rng.uniform(-0.45, 0.45, sp.n_records) * res, 5),
        "decimalLongitude": np.round(lon[ix] + rng.uniform(-0.45, 0.45, sp.n_records) * res, 5),
        "coordinateUncertaintyInMeters": 100,
        "occurrenceStatus": "present",
        "basisOfRecord": "HumanObservation",
        "year": rng.integers(1980, 2020, sp.n_records),
    })
    path.parent.mkdir(parents=True, exist_ok=True)
    df.to_csv(path, index=False)
    return path


def sample_target_group(sp: Species, base: xr.Dataset, path: Path) -> Path:
    """Records of the demo's invented related species drawn with this world's sampling effort.

    A target-group background (Phillips et al. 2009, Ecol. Appl. 19:181): other species of the
    same invented genus (:data:`timeslice.demo.TARGET_GROUP`) recorded by the same observers, so
    that their records share the focal records' bias (and survey region) but not its niche.
    """
    from timeslice.demo import NICHE, TARGET_GROUP

    rng = np.random.default_rng([sp.seed, 2])
    b10 = base["bio10"].values.astype(float)
    b12 = base["bio12"].values.astype(float)
    effort = _effort(sp, base)
    lat, lon = base["lat"].values, base["lon"].values
    res = float(abs(lat[1] - lat[0]))
    frames = []
    for name, q in TARGET_GROUP.items():
        p = np.exp(-0.5 * ((b10 - q["bio10_optimum_degC"]) / q["bio10_sd_degC"]) ** 2) / (
            1.0 + np.exp(-(b12 - q["bio12_midpoint_mm"]) / NICHE["bio12_scale_mm"]))
        w = np.nan_to_num(p) * effort
        idx = rng.choice(w.size, size=int(q["n"]), replace=True, p=w.ravel() / w.sum())
        iy, ix = np.unravel_index(idx, w.shape)
        n = idx.size
        frames.append(pd.DataFrame({
            "scientificName": name,
            "decimalLatitude": np.round(lat[iy] + rng.uniform(-0.45, 0.45, n) * res, 5),
            "decimalLongitude": np.round(lon[ix] + rng.uniform(-0.45, 0.45, n) * res, 5),
            "occurrenceStatus": "present", "basisOfRecord": "HumanObservation",
        }))
    df = pd.concat(frames, ignore_index=True)
    df.insert(0, "occurrenceID", [f"urn:truth-bench:tg:{sp.seed}:{k:05d}" for k in range(len(df))])
    path.parent.mkdir(parents=True, exist_ok=True)
    df.to_csv(path, index=False)
    return path


# ---------------------------------------------------------------------------------------------
# the invented climate, prepared by the tool
# ---------------------------------------------------------------------------------------------


@dataclass
class Prepared:
    """The demo configuration and its prepared baseline and slices at one resolution."""

    cfg: object
    baseline: xr.Dataset
    slices: list[xr.Dataset]
    cache: object
    workdir: Path
    truth_doc: dict = field(default_factory=dict)


def prepare(workdir: Path, *, resolution: float = 0.1, slices: list[str] | None = None,
            models: list[str] | None = None) -> Prepared:
    """Generate the invented scenario (or use the committed one at 0.1 degree) and harmonise it.

    `slices` keeps only those ``[[slices]]`` names (e.g. ``["21ka"]``); `models` only those
    models. Harmonised slices are cached in ``workdir/.cache``.
    """
    from timeslice.cache import StageCache
    from timeslice.config import load_config
    from timeslice.demo import generate
    from timeslice.demo_config import write_config
    from timeslice.pipeline import harmonise_stage

    workdir = Path(workdir)
    data = ROOT / "demo_data" if abs(resolution - 0.1) < 1e-9 else workdir / f"data_{resolution:g}"
    if data != ROOT / "demo_data" and not (data / "truth.json").is_file():
        generate(data, resolution=resolution)
    workdir.mkdir(parents=True, exist_ok=True)
    cfg = load_config(write_config(workdir / f"demo_{resolution:g}.toml", data=str(data)))
    keep = [s for s in cfg.slices if slices is None or s.name in slices]
    if models is not None:
        keep = [s.model_copy(update={"models": list(models)}) for s in keep]
    cfg = cfg.model_copy(update={"slices": keep})
    cache = StageCache(workdir / ".cache")
    base, prepared, _ = harmonise_stage(cfg, cache)
    doc = json.loads((data / "truth.json").read_text())
    return Prepared(cfg, base, prepared, cache, workdir, doc)


# ---------------------------------------------------------------------------------------------
# scores
# ---------------------------------------------------------------------------------------------


def overlap(true: np.ndarray, est: np.ndarray, weights: np.ndarray,
            valid: np.ndarray | None = None) -> dict[str, float]:
    """Area-weighted TSS and Jaccard index of two boolean maps over `valid` cells.

    TSS = sensitivity + specificity - 1 (Allouche, Tsoar & Kadmon 2006, J. Appl. Ecol.
    43:1223); Jaccard = |A and B| / |A or B| (Jaccard 1912, New Phytol. 11:37), both with cell
    areas as weights.
    """
    true, est = np.asarray(true, bool), np.asarray(est, bool)
    w = np.asarray(weights, float)
    if valid is not None:
        v = np.asarray(valid, bool)
        true, est, w = true[v], est[v], w[v]
    tp = w[true & est].sum()
    fn = w[true & ~est].sum()
    fp = w[~true & est].sum()
    tn = w[~true & ~est].sum()
    sens = tp / (tp + fn) if tp + fn > 0 else np.nan
    spec = tn / (tn + fp) if tn + fp > 0 else np.nan
    union = tp + fn + fp
    return {"tss": float(sens + spec - 1.0), "jaccard": float(tp / union) if union > 0 else np.nan}


def sign_agrees(true_pp: float, est_pp: float, *, tol: float = SIGN_TOLERANCE_PP) -> bool:
    """Same sign of change as the truth.

    A true change within +-`tol` pp has no meaningful sign: it counts as agreeing when the
    estimate is also within +-`tol` pp or has the same sign (a true -2 % estimated as -8 % is
    not a wrong sign; estimated as +8 % it is).
    """
    if abs(true_pp) < tol:
        return bool(abs(est_pp) < tol or np.sign(est_pp) == np.sign(true_pp))
    return bool(np.sign(est_pp) == np.sign(true_pp))


# ---------------------------------------------------------------------------------------------
# one world
# ---------------------------------------------------------------------------------------------


def run_world(prep: Prepared, key: str, *, niche: dict | None = None,
              background: str = "config") -> dict:
    """Fit and transfer the tool for one world; return per-slice rows and the refugium score.

    `background` is ``"config"`` (the demo configuration's choice: with a ``background_file``
    every world gets a target-group file drawn with its own effort, the demo world the
    configured file), ``"random"`` (cells by area) or ``"target_group"`` (as ``"config"`` with a
    file, generated for the demo world too).
    """
    from timeslice.grid import cell_area
    from timeslice.pipeline import dataset_key as _dataset_key, fit_stage, transfer_stage
    from timeslice.series.stability import refugium

    sp = WORLDS[key]
    cfg = prep.cfg
    if sp.sampling == "demo":
        occ = cfg.species.occurrences
    else:
        occ = sample_records(sp, prep.baseline, prep.workdir / "records" / f"{key}.csv")
    upd = dict(niche or {})
    if background == "random":
        upd["background_file"] = None
    elif background == "target_group" or (background == "config"
                                           and cfg.niche.background_file is not None):
        if not (sp.sampling == "demo" and cfg.niche.background_file is not None):
            upd["background_file"] = sample_target_group(
                sp, prep.baseline, prep.workdir / "records" / f"{key}_target_group.csv")
    ncfg = cfg.niche.model_copy(update=upd)
    cfg = cfg.model_copy(update={
        "species": cfg.species.model_copy(update={"occurrences": occ, "name": sp.name}),
        "niche": ncfg,
    })
    t0 = time.process_time()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit, fit_key = fit_stage(cfg, prep.baseline, prep.cache,
                                 base_key=_dataset_key(prep.baseline))
        stack = transfer_stage(cfg, fit, [prep.baseline, *prep.slices], prep.cache,
                               fit_key=fit_key)
    cpu = time.process_time() - t0
    area = cell_area(prep.baseline).values
    prepared = [prep.baseline, *prep.slices]
    est = [np.asarray(stack["suitable"].isel(slice=i).values) == 1 for i in range(len(prepared))]
    true = [true_suitable(sp, ds) for ds in prepared]
    a_true0, a_est0 = area[true[0]].sum(), area[est[0]].sum()
    ev = fit.evaluation.query("summary == 'mean'").iloc[0]
    perfect = _perfect_model(sp, fit, prepared)
    a_perf0 = area[perfect[0]].sum()
    rows = []
    for i, ds in enumerate(prepared):
        land = np.asarray(ds["land"].values, bool)
        t_pp = 100.0 * (area[true[i]].sum() / a_true0 - 1.0)
        e_pp = 100.0 * (area[est[i]].sum() / a_est0 - 1.0) if a_est0 > 0 else np.nan
        ov = overlap(true[i], est[i], area, land)
        # share of the misclassified area that lies in novel climate (flagged by the tool)
        novel = ((np.asarray(stack["mess"].isel(slice=i).values) < 0)
                 | (np.asarray(stack["nt2"].isel(slice=i).values) > 1)) & land
        wrong = (true[i] != est[i]) & land
        novel_share = float(area[wrong & novel].sum() / area[wrong].sum()) if wrong.any() else 0.0
        rows.append({
            "world": key, "slice": str(ds.attrs["slice_label"]), "model": ds.attrs["model"],
            "period": str(ds.attrs["period"]), "scenario": ds.attrs["scenario"],
            "true_km2": float(area[true[i]].sum()), "est_km2": float(area[est[i]].sum()),
            "true_change_pct": t_pp, "est_change_pct": e_pp, "error_pp": e_pp - t_pp,
            "sign_agrees": sign_agrees(t_pp, e_pp), "tss": ov["tss"], "jaccard": ov["jaccard"],
            "perfect_change_pct": 100.0 * (area[perfect[i]].sum() / a_perf0 - 1.0),
            "novel_land_share": float(area[novel].sum() / area[land].sum()),
            "error_in_novel_share": novel_share,
        })
    df = pd.DataFrame(rows)
    # refugia: suitable today and in every past slice, per model (as the run's per-model
    # refugium rows) and over all models together (the run's window refugium)
    past = [i for i, ds in enumerate(prepared) if str(ds.attrs["scenario"]) == "past"]
    groups = {"all models": past}
    for i in past:
        groups.setdefault(str(prepared[i].attrs["model"]), []).append(i)
    ref_rows = []
    for name, idx in groups.items():
        labels = [str(prepared[0].attrs["slice_label"])] + [
            str(prepared[i].attrs["slice_label"]) for i in idx]
        est_ref = np.asarray(refugium(stack["suitable"], window=labels).values, bool)
        true_ref = np.logical_and.reduce([true[0]] + [true[i] for i in idx])
        perf_ref = np.logical_and.reduce([perfect[0]] + [perfect[i] for i in idx])
        inter, union = area[est_ref & true_ref].sum(), area[est_ref | true_ref].sum()
        p_union = area[perf_ref | true_ref].sum()
        ref_rows.append({"world": key, "models": name, "true_refugium_km2": float(area[true_ref].sum()),
                         "est_refugium_km2": float(area[est_ref].sum()),
                         # no true refugium: nothing to overlap (not scored)
                         "refugium_jaccard": float(inter / union) if true_ref.any() else np.nan,
                         "perfect_refugium_jaccard": (float(area[perf_ref & true_ref].sum() / p_union)
                                                      if true_ref.any() else np.nan)})
    ref_df = pd.DataFrame(ref_rows)
    per_model = ref_df[ref_df["models"] != "all models"]
    allm = ref_df[ref_df["models"] == "all models"]["refugium_jaccard"]
    pj = per_model["perfect_refugium_jaccard"]
    ref = {"all_models_jaccard": float(allm.iloc[0]) if len(allm) else np.nan,
           "perfect_jaccard": float(pj.median()) if pj.notna().any() else np.nan,
           "true_refugium_km2": float(per_model["true_refugium_km2"].mean()) if len(per_model) else np.nan,
           "est_refugium_km2": float(per_model["est_refugium_km2"].mean()) if len(per_model) else np.nan,
           "refugium_jaccard": (float(per_model["refugium_jaccard"].median())
                                if per_model["refugium_jaccard"].notna().any() else np.nan),
           "table": ref_df}
    return {
        "rows": df, "refugium": ref, "cpu_s": cpu,
        "fit": {"algorithm": fit.params["algorithm"], "variables": list(fit.variables),
                "threshold_rule": fit.params["threshold_rule"], "threshold": fit.threshold,
                "cv_auc": float(ev["auc"]), "cv_tss": float(ev["tss"]),
                "n_records": int(fit.params["n_records_used"])},
        "maps": {"true": true, "est": est, "lat": prep.baseline["lat"].values,
                 "suitability": [np.nan_to_num(np.asarray(stack["suitability"].isel(slice=i).values,
                                                          float)) for i in range(len(prepared))],
                 "p": [np.nan_to_num(true_probability(sp, ds["bio10"].values.astype(float),
                                                      ds["bio12"].values.astype(float)))
                       for ds in prepared],
                 "threshold": float(fit.threshold), "area": area,
                 "land": [np.asarray(ds["land"].values, bool) for ds in prepared],
                 "lon": prep.baseline["lon"].values},
    }


def _perfect_model(sp: Species, fit, prepared: list[xr.Dataset]) -> list[np.ndarray]:
    """Suitable maps of a perfect model: the true probability as the suitability, thresholded
    by the fit's own rule on the true probability at the fit's presences and background.

    This separates the threshold rule (what "suitable" means to the tool) from the model: a gap
    between the truth and this map is the rule's, a gap between this map and the tool's is the
    model's.
    """
    from timeslice.niche.data import extract
    from timeslice.niche.evaluate import threshold

    base = prepared[0]

    def p_at(points):
        v = extract(base, points[["lon", "lat"]], variables=["bio10", "bio12"])
        return np.nan_to_num(true_probability(sp, v["bio10"].to_numpy(), v["bio12"].to_numpy()))

    t = threshold(p_at(fit.presence), p_at(fit.background), rule=fit.params["threshold_rule"],
                  value=fit.params.get("threshold_value"))
    out = []
    for ds in prepared:
        p = true_probability(sp, ds["bio10"].values.astype(float), ds["bio12"].values.astype(float))
        out.append(np.asarray(ds["land"].values, bool) & (np.nan_to_num(p) >= t))
    return out


def harmonise_check(prep: Prepared) -> pd.DataFrame:
    """Truth on the tool's prepared 21 ka climate (per model) against truth.json's 21 ka truth."""
    from timeslice.demo import presence_probability
    from timeslice.grid import cell_area

    sp = WORLDS["demo"]
    area = cell_area(prep.baseline).values
    a0 = area[true_suitable(sp, prep.baseline)].sum()
    rows = []
    for ds in prep.slices:
        if str(ds.attrs["period"]) != "21 ka BP":
            continue
        m = true_suitable(sp, ds)
        # the benchmark's niche formula is the demo's own (checked here on every slice)
        ref = np.asarray(presence_probability(ds).values) >= 0.5
        assert np.array_equal(m, ref & np.asarray(ds["land"].values, bool))
        rows.append({"model": ds.attrs["model"], "true_km2_on_prepared_climate": area[m].sum(),
                     "change_pct": 100 * (area[m].sum() / a0 - 1)})
    df = pd.DataFrame(rows)
    doc = prep.truth_doc
    if len(df):
        df.attrs["truth_json_change_pct"] = 100 * (
            doc["true_21ka"]["niche_area_km2"] / doc["true_niche_area_km2"] - 1)
    return df


# ---------------------------------------------------------------------------------------------
# tables, docs
# ---------------------------------------------------------------------------------------------


def goals(rows: pd.DataFrame, refugia: dict[str, dict]) -> dict:
    """The three goals over all non-baseline slices."""
    r = rows[rows["scenario"] != "baseline"]
    jac = [v["refugium_jaccard"] for v in refugia.values() if np.isfinite(v["refugium_jaccard"])]
    perfect_sign = [sign_agrees(t, e) for t, e in zip(r["true_change_pct"], r["perfect_change_pct"])]
    return {
        "n_slices": int(len(r)),
        "sign_agrees": int(r["sign_agrees"].sum()),
        "perfect_sign_agrees": int(np.sum(perfect_sign)),
        "perfect_median_abs_error_pp": float(np.median(np.abs(r["perfect_change_pct"]
                                                             - r["true_change_pct"]))),
        "perfect_median_refugium_jaccard": float(np.nanmedian(
            [v.get("perfect_jaccard", np.nan) for v in refugia.values()])),
        "median_abs_error_pp": float(np.median(np.abs(r["error_pp"]))),
        "min_refugium_jaccard": float(min(jac)) if jac else float("nan"),
        "median_refugium_jaccard": float(np.median(jac)) if jac else float("nan"),
    }


def per_period(rows: pd.DataFrame) -> pd.DataFrame:
    """Mean over models per world and period/scenario (the docs table)."""
    r = rows[rows["scenario"] != "baseline"].copy()
    r["abs_error_pp"] = r["error_pp"].abs()
    g = r.groupby(["world", "scenario", "period"], sort=False)
    out = g.agg(true_change_pct=("true_change_pct", "mean"), est_change_pct=("est_change_pct", "mean"),
                perfect_change_pct=("perfect_change_pct", "mean"),
                max_abs_error_pp=("abs_error_pp", "max"), sign_agrees=("sign_agrees", "sum"),
                n=("sign_agrees", "size"), tss=("tss", "mean"), jaccard=("jaccard", "mean"),
                novel=("novel_land_share", "mean"), error_in_novel=("error_in_novel_share", "mean"))
    return out.reset_index()


def markdown(rows: pd.DataFrame, refugia: dict, fits: dict, settings: dict, harm: pd.DataFrame,
             cpu: dict) -> str:
    g = goals(rows, refugia)
    pp = per_period(rows)
    lines = ["| world | slice | true change % | estimated change % | perfect model, tool's "
             "threshold rule % | max abs error pp | sign agrees | TSS | Jaccard | land in novel "
             "climate | misclassified area in novel climate |",
             "|---|---|---:|---:|---:|---:|:---:|---:|---:|---:|---:|"]
    for _, r in pp.iterrows():
        sl = r["period"] if r["scenario"] == "past" else f"{r['scenario']} {r['period']}"
        lines.append(f"| {r['world']} | {sl} | {r['true_change_pct']:+.0f} | "
                     f"{r['est_change_pct']:+.0f} | {r['perfect_change_pct']:+.0f} | "
                     f"{r['max_abs_error_pp']:.0f} | "
                     f"{int(r['sign_agrees'])}/{int(r['n'])} | {r['tss']:.2f} | {r['jaccard']:.2f} | "
                     f"{100 * r['novel']:.0f} % | {100 * r['error_in_novel']:.0f} % |")
    ref = ["| world | purpose | variables kept | CV AUC | CV TSS | true refugium km2 (mean "
           "per model) | estimated km2 | refugium Jaccard (median per model) | all models "
           "together | perfect model, tool's threshold rule | CPU s |",
           "|---|---|---|---:|---:|---:|---:|---:|---:|---:|---:|"]

    def j(v):
        return "n/a (no true refugium)" if not np.isfinite(v) else f"{v:.2f}"

    for k, v in refugia.items():
        f = fits[k]
        ref.append(f"| {k} | {WORLDS[k].purpose} | {', '.join(f['variables'])} | "
                   f"{f['cv_auc']:.2f} | {f['cv_tss']:.2f} | {v['true_refugium_km2']:,.0f} | "
                   f"{v['est_refugium_km2']:,.0f} | {j(v['refugium_jaccard'])} | "
                   f"{j(v['all_models_jaccard'])} | {j(v['perfect_jaccard'])} | {cpu[k]:.1f} |")
    full = ["| world | slice | true % | est. % | error pp | sign | TSS | Jaccard |",
            "|---|---|---:|---:|---:|:---:|---:|---:|"]
    for _, r in rows[rows["scenario"] != "baseline"].iterrows():
        full.append(f"| {r['world']} | {r['slice']} | {r['true_change_pct']:+.1f} | "
                    f"{r['est_change_pct']:+.1f} | {r['error_pp']:+.1f} | "
                    f"{'yes' if r['sign_agrees'] else '**no**'} | {r['tss']:.2f} | {r['jaccard']:.2f} |")
    harm_lines = []
    if len(harm):
        harm_lines = [
            f"Harmonise check (demo world): truth.json puts the 21 ka change at "
            f"{harm.attrs['truth_json_change_pct']:+.1f} % (the mean of the three models' changes "
            "applied on the fine grid); the same niche on the tool's prepared 21 ka climate gives "
            + ", ".join(f"{r.model} {r.change_pct:+.1f} %" for r in harm.itertuples())
            + f" (mean {harm['change_pct'].mean():+.1f} %). The harmonise stage keeps the sign and "
            "size of the true change; the spread is the invented models' own."]
    s = ", ".join(f"{k} = {v}" for k, v in settings.items())
    return "\n".join([
        f"Settings: {s}.", "",
        f"**Goals** over {g['n_slices']} transferred slices (6 periods x 3 models x "
        f"{len(refugia)} worlds): sign right in {g['sign_agrees']}/{g['n_slices']} "
        f"(goal: all); median |error| {g['median_abs_error_pp']:.1f} pp (goal < "
        f"{GOAL_MEDIAN_ABS_ERROR_PP:g}); refugium Jaccard min {g['min_refugium_jaccard']:.2f}, "
        f"median {g['median_refugium_jaccard']:.2f} (goal >= {GOAL_REFUGIUM_JACCARD:g}).", "",
        f"A perfect model (the true probability as suitability) thresholded by the same rule: "
        f"sign right in {g['perfect_sign_agrees']}/{g['n_slices']}, median |error| "
        f"{g['perfect_median_abs_error_pp']:.1f} pp, median refugium Jaccard "
        f"{g['perfect_median_refugium_jaccard']:.2f}.", "",
        *harm_lines, "",
        "### Per world and period (mean over the three models)", "", *lines, "",
        "### Per world: fit and refugia", "", *ref, "",
        "<details><summary>Every slice</summary>", "", *full, "", "</details>", ""])


def figure(results: dict, rows: pd.DataFrame, path: Path) -> Path:
    """True vs estimated change per slice, and true/estimated refugia of the demo world."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    keys = list(results)
    fig = plt.figure(figsize=(12, 5.2), constrained_layout=True)
    gs = fig.add_gridspec(1, 3, width_ratios=[1.3, 1, 1])
    ax = fig.add_subplot(gs[0])
    r = rows[rows["scenario"] != "baseline"]
    markers = "osD^vP"
    for k, m in zip(keys, markers):
        q = r[r["world"] == k]
        ax.scatter(q["true_change_pct"], q["est_change_pct"], marker=m, s=28, label=k,
                   alpha=0.8)
    lim = [min(-100, float(r[["true_change_pct", "est_change_pct"]].min().min()) - 5),
           max(60, float(r[["true_change_pct", "est_change_pct"]].max().max()) + 5)]
    ax.plot(lim, lim, color="0.3", lw=0.8)
    ax.fill_between(lim, [v - GOAL_MEDIAN_ABS_ERROR_PP for v in lim],
                    [v + GOAL_MEDIAN_ABS_ERROR_PP for v in lim], color="0.85", zorder=0)
    ax.axhline(0, color="0.6", lw=0.6)
    ax.axvline(0, color="0.6", lw=0.6)
    ax.set_xlim(lim)
    ax.set_ylim(lim)
    ax.set_xlabel("true change in suitable area, %")
    ax.set_ylabel("estimated change, %")
    ax.set_title("every world, slice and model (band: +-10 pp)")
    ax.legend(fontsize=8, loc="upper left")
    demo = results.get("demo") or results[keys[0]]
    mp = demo["maps"]
    idx = next((i for i, lab in enumerate(demo["rows"]["slice"]) if "21ka" in lab), 0)
    label = str(demo["rows"]["slice"].iloc[idx])
    land = mp["land"][idx]
    colours = matplotlib.colors.ListedColormap(
        ["#ffffff", "#e6e6e6", "#6a8fc7", "#e4a83a", "#2e6b3a"])
    for j, title in enumerate((f"true suitable: {label}", f"tool against truth: {label}")):
        axm = fig.add_subplot(gs[j + 1])
        t, e = mp["true"][idx], mp["est"][idx]
        if j == 0:
            code = np.where(t, 4, np.where(land, 1, 0))
        else:
            code = np.where(t & e, 4, np.where(t, 2, np.where(e, 3, np.where(land, 1, 0))))
        axm.pcolormesh(mp["lon"], mp["lat"], code.astype(float), cmap=colours, vmin=-0.5,
                       vmax=4.5, shading="nearest")
        axm.set_title(title, fontsize=9)
        axm.set_aspect(1 / np.cos(np.deg2rad(47.5)))
        axm.set_xlabel("lon")
        if j == 1:
            from matplotlib.patches import Patch

            axm.legend(handles=[Patch(color="#2e6b3a", label="both"),
                                Patch(color="#6a8fc7", label="missed by the tool"),
                                Patch(color="#e4a83a", label="false suitable")],
                       fontsize=7, loc="lower right")
    fig.suptitle("Virtual-species truth benchmark (invented worlds)")
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path


BEGIN = "<!-- generated by bench/truth.py --docs: begin -->"
END = "<!-- generated by bench/truth.py --docs: end -->"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--resolution", type=float, default=0.1)
    ap.add_argument("--worlds", default=",".join(WORLDS))
    ap.add_argument("--slices", default=None, help="comma-separated [[slices]] names")
    ap.add_argument("--models", default=None, help="comma-separated model names")
    ap.add_argument("--algorithm", default=None)
    ap.add_argument("--threshold", default=None)
    ap.add_argument("--variables", default=None)
    ap.add_argument("--priority", default=None)
    ap.add_argument("--buffer-km", type=float, default=None)
    ap.add_argument("--n-background", type=int, default=None)
    ap.add_argument("--background", default="config", choices=["config", "random", "target_group"],
                    help="config: as the demo configuration; random: cells by area; "
                         "target_group: related species' records with each world's effort")
    ap.add_argument("--work", default="/tmp/timeslice_truth_bench")
    ap.add_argument("--docs", action="store_true", help="write docs/truth.md and docs/truth.png")
    a = ap.parse_args(argv)
    c0 = time.process_time()
    prep = prepare(Path(a.work), resolution=a.resolution,
                   slices=a.slices.split(",") if a.slices else None,
                   models=a.models.split(",") if a.models else None)
    print(f"harmonised {len(prep.slices) + 1} slices: {time.process_time() - c0:.1f} CPU s")
    niche: dict = {}
    if a.algorithm:
        niche["algorithm"] = a.algorithm
    if a.threshold:
        niche["threshold"] = a.threshold
    if a.variables:
        niche["variables"] = a.variables.split(",")
        niche["priority"] = None
    if a.buffer_km:
        niche["buffer_km"] = a.buffer_km
    if a.n_background:
        niche["n_background"] = a.n_background
    if a.priority:
        niche["priority"] = None if a.priority == "none" else a.priority.split(",")
    results, all_rows, refugia, fits, cpu = {}, [], {}, {}, {}
    for key in a.worlds.split(","):
        res = run_world(prep, key, niche=niche, background=a.background)
        results[key], refugia[key], fits[key], cpu[key] = (res, res["refugium"], res["fit"],
                                                          res["cpu_s"])
        all_rows.append(res["rows"])
        f = res["fit"]
        print(f"\n{key}: {WORLDS[key].purpose}; {f['algorithm']} on {', '.join(f['variables'])}, "
              f"{f['threshold_rule']} threshold {f['threshold']:.3f}, CV AUC {f['cv_auc']:.3f} "
              f"TSS {f['cv_tss']:.3f}, {f['n_records']} records, {res['cpu_s']:.1f} CPU s")
        with pd.option_context("display.width", 160, "display.max_columns", 20):
            print(res["rows"][["slice", "true_change_pct", "est_change_pct", "perfect_change_pct",
                               "error_pp", "sign_agrees", "tss", "jaccard",
                               "error_in_novel_share"]]
                  .round(2).to_string(index=False))
        r = res["refugium"]
        print(r["table"].round(2).to_string(index=False))
    rows = pd.concat(all_rows, ignore_index=True)
    g = goals(rows, refugia)
    print(f"\nGOALS: sign {g['sign_agrees']}/{g['n_slices']} (goal all); median |error| "
          f"{g['median_abs_error_pp']:.1f} pp (goal < {GOAL_MEDIAN_ABS_ERROR_PP:g}, ratio "
          f"{g['median_abs_error_pp'] / GOAL_MEDIAN_ABS_ERROR_PP:.2f}); refugium Jaccard min "
          f"{g['min_refugium_jaccard']:.2f} median {g['median_refugium_jaccard']:.2f} (goal >= "
          f"{GOAL_REFUGIUM_JACCARD:g})")
    print(f"PERFECT MODEL, same threshold rule: sign {g['perfect_sign_agrees']}/{g['n_slices']}; "
          f"median |error| {g['perfect_median_abs_error_pp']:.1f} pp; median refugium Jaccard "
          f"{g['perfect_median_refugium_jaccard']:.2f}")
    harm = harmonise_check(prep)
    if len(harm):
        print(f"harmonise check, 21 ka: truth.json {harm.attrs['truth_json_change_pct']:+.1f} %; "
              "on the prepared climate " + ", ".join(
                  f"{r.model} {r.change_pct:+.1f} %" for r in harm.itertuples()))
    print(f"total {time.process_time() - c0:.1f} CPU s")
    if a.docs:
        n = prep.cfg.niche
        settings = {"resolution": f"{a.resolution:g} degree", "algorithm": niche.get("algorithm", n.algorithm),
                    "threshold": niche.get("threshold", n.threshold),
                    "candidate variables": ", ".join(niche.get("variables") or n.variables or ["bio1..bio19"]),
                    "priority": ", ".join(niche.get("priority", n.priority) or []) or "none",
                    "buffer_km": niche.get("buffer_km", n.buffer_km),
                    "n_background": niche.get("n_background", n.n_background),
                    "background": {"random": "random cells by area",
                                   "target_group": "target-group records (each world's effort)",
                                   }.get(a.background, "target-group file" if n.background_file
                                         else "random cells by area")}
        text = markdown(rows, refugia, fits, settings, harm, cpu)
        doc = ROOT / "docs" / "truth.md"
        old = doc.read_text() if doc.is_file() else f"{BEGIN}\n{END}\n"
        head, rest = old.split(BEGIN, 1)
        tail = rest.split(END, 1)[1]
        doc.write_text(f"{head}{BEGIN}\n{text}\n{END}{tail}")
        figure(results, rows, ROOT / "docs" / "truth.png")
        print("wrote docs/truth.md (generated block) and docs/truth.png")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
