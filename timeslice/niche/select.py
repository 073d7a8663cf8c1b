"""Predictor screening: pairwise correlation and variance inflation, honouring a priority order."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from timeslice.errors import ConfigError, DataError

__all__ = ["screen", "vif"]


def vif(X: pd.DataFrame | np.ndarray) -> np.ndarray:
    """Variance inflation factor of each column.

    Parameters
    ----------
    X : pandas.DataFrame or ndarray of shape (n, k)
        Predictors (rows with a missing value are left out).

    Returns
    -------
    ndarray of shape (k,)
        VIF of each column.

    Notes
    -----
    :math:`\\mathrm{VIF}_j = 1/(1 - R_j^2)`, with :math:`R_j^2` from the least-squares regression
    (with intercept) of column :math:`j` on the others; equivalently the diagonal of the inverse
    correlation matrix (Belsley, Kuh & Welsch 1980, Regression Diagnostics, Wiley, ch. 3).
    A perfectly collinear column gets ``inf``.
"""
    A = np.asarray(X, dtype=float)
    if A.shape[1] == 1:
        return np.ones(1)
    R = np.corrcoef(A, rowvar=False)
    with np.errstate(all="ignore"):
        try:
            inv = np.linalg.inv(R)
            out = np.diag(inv).copy()
        except np.linalg.LinAlgError:
            out = np.full(A.shape[1], np.inf)
    # a near-singular correlation matrix gives huge or negative diagonals: treat as collinear
    cond = np.linalg.cond(R)
    out = np.where(~np.isfinite(out) | (out < 1.0 - 1e-9) | (cond > 1e12), np.inf, out)
    return out


#: A predictor whose range over the calibration area is at most this fraction of its largest
#: magnitude (or of 1, whichever is larger) is dropped as near-constant (our choice: far below
#: any real bioclimatic gradient, far above float32 rounding of a constant).
NEAR_CONSTANT_RELATIVE = 1e-5


def screen(
    X: pd.DataFrame,
    *,
    max_abs_r: float | None = 0.7,
    max_vif: float | None = 10.0,
    priority: Sequence[str] | None = None,
) -> tuple[list[str], pd.DataFrame]:
    """Choose predictors that are not too collinear.

    Parameters
    ----------
    X : pandas.DataFrame
        One column per candidate predictor, rows = background points of the calibration area.
    max_abs_r : float or None
        Largest |Pearson r| allowed between two kept predictors (None: no correlation step).
    max_vif : float or None
        Largest variance inflation factor allowed among the kept predictors (None: no VIF step).
    priority : sequence of str, optional
        Predictors in order of preference; they are considered first, in this order, and the
        rest follow in column order.

    Returns
    -------
    kept : list of str
        Kept predictors, in `X`'s column order.
    table : pandas.DataFrame
        ``variable, kept, reason, max_abs_r, vif`` for every candidate (``vif`` of the final kept
        set; NaN for dropped ones).

    Raises
    ------
    DataError
        A predictor is entirely missing, or every predictor is (near-)constant (the message
        names them). A single (near-)constant predictor is dropped with its reason in the
        table (:data:`NEAR_CONSTANT_RELATIVE`).
    ConfigError
        `priority` names a column that is not in `X`, or a limit is out of range.

    Notes
    -----
    Step 1 (correlation): visit predictors in priority order and keep one unless its
    :math:`|r|` with an already kept predictor exceeds `max_abs_r`. Step 2 (VIF): while the
    largest VIF among kept predictors exceeds `max_vif`, drop the lowest-priority predictor
    among those above the limit. Rows with any missing value are left out first.
    """
    names, priority = _check_screen_args(X, max_abs_r, max_vif, priority)
    A = X.to_numpy(dtype=float)
    flat = _near_constant(names, A)
    if flat:
        return _screen_without(X, flat, names, max_abs_r=max_abs_r, max_vif=max_vif, priority=priority)
    A = A[np.all(np.isfinite(A), axis=1)]
    if A.shape[0] < 3:
        raise DataError("screen: fewer than 3 background rows have every predictor; check the predictors")
    order = priority + [n for n in names if n not in priority]
    idx = {n: i for i, n in enumerate(names)}
    reason = {n: "" for n in names}
    kept, maxr = _correlation_step(A, names, order, max_abs_r, reason)
    if max_vif is not None:
        _vif_step(A, idx, kept, float(max_vif), reason)
    final_vif = dict(zip(kept, vif(A[:, [idx[k] for k in kept]]) if len(kept) > 1 else [1.0] * len(kept)))
    kept_sorted = [n for n in names if n in kept]
    table = pd.DataFrame(
        {
            "variable": names,
            "kept": [n in kept for n in names],
            "reason": [reason[n] if n not in kept else "kept" for n in names],
            "max_abs_r": [maxr[n] for n in names],
            "vif": [final_vif.get(n, np.nan) for n in names],
        }
    )
    table.attrs["max_abs_r"] = max_abs_r
    table.attrs["max_vif"] = max_vif
    table.attrs["priority"] = priority
    return kept_sorted, table


def _check_screen_args(X, max_abs_r, max_vif, priority) -> tuple[list[str], list[str]]:
    """The candidate names and the priority list, every argument checked."""
    if not isinstance(X, pd.DataFrame):
        raise DataError(f"screen: `X` must be a DataFrame with one column per predictor, got {type(X).__name__}")
    names = [str(c) for c in X.columns]
    if not names:
        raise DataError("screen: no candidate predictors given")
    if max_abs_r is not None and not (0 < float(max_abs_r) <= 1):
        raise ConfigError(f"`screen_max_r` (max |r|) must be in (0, 1], got {max_abs_r}")
    if max_vif is not None and not (float(max_vif) >= 1):
        raise ConfigError(f"`screen_max_vif` must be >= 1, got {max_vif}")
    priority = list(priority or [])
    unknown = [p for p in priority if p not in names]
    if unknown:
        raise ConfigError(
            f"predictor priority names {', '.join(map(repr, unknown))}, not among the candidate "
            f"predictors ({', '.join(names)})"
        )
    return names, priority


def _near_constant(names: list[str], A: np.ndarray) -> dict[str, str]:
    """Predictors that hardly vary, with the reason; stops on one missing everywhere."""
    flat: dict[str, str] = {}
    for j, name in enumerate(names):
        col = A[:, j]
        fin = col[np.isfinite(col)]
        if fin.size == 0:
            raise DataError(f"predictor {name!r} is missing everywhere in the calibration area; drop it from the variables")
        spread = float(np.ptp(fin))
        if spread <= NEAR_CONSTANT_RELATIVE * max(1.0, float(np.max(np.abs(fin)))):
            flat[name] = f"near-constant in the calibration area (range {spread:.3g})"
    return flat


def _screen_without(X, flat: dict[str, str], names, *, max_abs_r, max_vif, priority):
    """Screen the predictors that vary and list the near-constant ones as dropped.

    A predictor that hardly varies carries no information, and any tiny change in a slice puts
    it outside its calibration range: every cell would look novel.
    """
    if len(flat) == len(names):
        raise DataError(
            f"every candidate predictor is (near-)constant in the calibration area "
            f"({', '.join(flat)}); widen the calibration area or choose other variables")
    live = [n for n in names if n not in flat]
    kept, table = screen(X[live], max_abs_r=max_abs_r, max_vif=max_vif,
                         priority=[q for q in priority if q in live])
    extra = pd.DataFrame({"variable": list(flat), "kept": False, "reason": list(flat.values()),
                          "max_abs_r": np.nan, "vif": np.nan})
    out = pd.concat([table, extra], ignore_index=True).set_index("variable").loc[names]
    out = out.reset_index()
    out.attrs.update(table.attrs)
    out.attrs["priority"] = priority
    return kept, out


def _correlation_step(A, names, order, max_abs_r, reason) -> tuple[list[str], dict[str, float]]:
    """Keep predictors in `order` unless |r| with a kept one exceeds `max_abs_r`."""
    idx = {n: i for i, n in enumerate(names)}
    R = np.corrcoef(A, rowvar=False) if len(names) > 1 else np.ones((1, 1))
    maxr = {n: 0.0 for n in names}
    kept: list[str] = []
    for n in order:
        i = idx[n]
        worst, partner = 0.0, None
        for k in kept:
            r = abs(R[i, idx[k]])
            if r > worst:
                worst, partner = r, k
        maxr[n] = worst
        if max_abs_r is not None and worst > float(max_abs_r):
            reason[n] = f"|r| = {worst:.2f} with {partner} (> {float(max_abs_r):g})"
            continue
        kept.append(n)
    return kept, maxr


def _vif_step(A, idx, kept: list[str], max_vif: float, reason) -> None:
    """While the largest VIF exceeds `max_vif`, drop the lowest-priority predictor above it."""
    while len(kept) > 1:
        v = vif(A[:, [idx[k] for k in kept]])
        over = [k for k, vv in zip(kept, v) if vv > max_vif]
        if not over:
            break
        victim = over[-1]  # lowest priority among those above the limit
        vv = v[kept.index(victim)]
        reason[victim] = f"VIF = {vv:.1f} (> {max_vif:g})" if np.isfinite(vv) else "VIF infinite (collinear)"
        kept.remove(victim)
