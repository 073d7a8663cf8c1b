"""Every transfer seen in environmental space: a small-multiple figure of the slices.

Each panel shows the first two principal components of the calibration climate (loadings in
the axis labels): the calibration background (grey), the presences (black), the slice's land
climate (light blue), the part of it the model calls suitable (green) and the part outside
the calibration range (novel, red). A reader sees at a glance whether a projection is a
transfer into known climate or an extrapolation.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from timeslice.errors import DataError

__all__ = ["environment_panels", "principal_axes"]


def principal_axes(background: pd.DataFrame, variables: list[str]):
    """Mean, standard deviation and the two leading principal axes (unit vectors) of the
    standardised calibration background, with their shares of variance.

    Parameters
    ----------
    background : pandas.DataFrame
        The background sample (the calibration climate).
    variables : list of str
        The predictors, columns of `background`.

    Returns
    -------
    (mean, sd, axes (k, 2), explained (2,))
    """
    X = background[variables].to_numpy(float)
    X = X[np.all(np.isfinite(X), axis=1)]
    if len(X) < 3:
        raise DataError("environment figure: fewer than 3 complete background rows")
    mean, sd = X.mean(axis=0), X.std(axis=0)
    sd = np.where(sd > 0, sd, 1.0)
    Z = (X - mean) / sd
    u, s, vt = np.linalg.svd(Z - Z.mean(axis=0), full_matrices=False)
    axes = vt[:2].T if vt.shape[0] >= 2 else np.column_stack([vt[0], np.zeros_like(vt[0])])
    var = s**2 / max((s**2).sum(), 1e-300)
    explained = np.r_[var[:2], np.zeros(max(0, 2 - var.size))]
    # a fixed sign: the largest loading of each axis positive
    for j in range(axes.shape[1]):
        if axes[np.argmax(np.abs(axes[:, j])), j] < 0:
            axes[:, j] *= -1
    return mean, sd, axes, explained


def _label(axes, explained, variables, j) -> str:
    top = np.argsort(-np.abs(axes[:, j]))[:3]
    load = ", ".join(f"{axes[i, j]:+.2f} {variables[i]}" for i in top)
    return f"PC{j + 1} ({100 * explained[j]:.0f} %): {load}"


def environment_panels(fit, slices: list[xr.Dataset], stack: xr.Dataset,
                       path: str | os.PathLike, *, max_points: int = 1500, seed: int = 0,
                       dpi: int = 100, figure_format: str | None = None) -> Path:
    """Write the small-multiple environmental-space figure of every slice (PNG, SVG or PDF).

    Parameters
    ----------
    fit : timeslice.niche.workflow.NicheFit
        The fitted niche (variables, presence, background).
    slices : list of xarray.Dataset
        The prepared slices (predictors and ``land``), in the order of `stack`'s slices.
    stack : xarray.Dataset
        The stacked transfer with ``suitable`` per slice.
    path : path-like
        Target file; its suffix is replaced by `figure_format` when that is given.
    max_points : int
        Land cells drawn per slice at most (a seeded random subset).
    seed : int
        Seed of the subsample of points drawn.
    dpi : int
        Resolution, dots per inch: of the PNG, and of the point clouds, which SVG and PDF
        embed as images (thousands of points per panel; axes and text stay vectors).
    figure_format : {"png", "svg", "pdf"}, optional
        File format (``[output] figure_format``); default: the suffix of `path`.

    Returns
    -------
    pathlib.Path
        The file written (a PDF with its PNG preview beside it, for the report).
    """
    from matplotlib.figure import Figure

    from timeslice.report.figures import figure_file, save

    if figure_format is not None:
        path = figure_file(path, figure_format)

    variables = list(fit.variables)
    mean, sd, axes, explained = principal_axes(fit.background, variables)
    bg = fit.background[variables].to_numpy(float)
    pr = fit.presence[variables].to_numpy(float)
    lo, hi = np.nanmin(bg, axis=0), np.nanmax(bg, axis=0)

    def project(X):
        return ((X - mean) / sd) @ axes

    rng = np.random.default_rng(seed)
    n = len(slices)
    ncols = min(4, n)
    nrows = int(np.ceil(n / ncols))
    # a fixed layout (no constrained-layout solve over many panels): the figure is drawn once
    height = 2.7 * nrows + 0.9
    fig = Figure(figsize=(3.0 * ncols, height))
    grid = fig.subplots(nrows, ncols, squeeze=False, sharex=True, sharey=True)
    fig.subplots_adjust(left=0.09 if ncols > 2 else 0.16, right=0.98, top=1 - 0.3 / height,
                        bottom=0.95 / height, wspace=0.08, hspace=0.22)
    bg_ok = bg[np.all(np.isfinite(bg), axis=1)]
    if len(bg_ok) > max_points:
        bg_ok = bg_ok[rng.choice(len(bg_ok), max_points, replace=False)]
    B, P = project(bg_ok), project(pr[np.all(np.isfinite(pr), axis=1)])
    labels = [str(s) for s in stack["slice"].values]
    dots = {"lw": 0, "rasterized": True}  # point clouds as images inside SVG and PDF
    for k, ds in enumerate(slices):
        ax = grid[k // ncols][k % ncols]
        cells = np.flatnonzero(np.asarray(ds["land"].values).astype(bool).ravel())
        if cells.size > max_points:  # a seeded subset first: memory of a few thousand cells
            cells = np.sort(rng.choice(cells, max_points, replace=False))
        X = np.stack([np.asarray(ds[v].values, dtype=float).ravel()[cells] for v in variables],
                     axis=1)
        suit = np.asarray(stack["suitable"].isel(slice=k).values).ravel()[cells] == 1
        ok = np.all(np.isfinite(X), axis=1)
        X, suit = X[ok], suit[ok]
        novel = ~np.all((X >= lo) & (X <= hi), axis=1)
        S = project(X)
        ax.scatter(B[:, 0], B[:, 1], s=2, c="0.75", **dots, label="calibration background")
        ax.scatter(S[:, 0], S[:, 1], s=2, c="#9ecae1", **dots, label="slice land climate")
        ax.scatter(S[suit, 0], S[suit, 1], s=3, c="#31a354", **dots, label="suitable in the slice")
        ax.scatter(S[novel, 0], S[novel, 1], s=3, c="#de2d26", **dots,
                   label="outside the calibration range (novel)")
        ax.scatter(P[:, 0], P[:, 1], s=4, c="k", **dots, label="presences")
        ax.set_title(labels[k] if k < len(labels) else str(k), fontsize=8)
        ax.tick_params(labelsize=7)
    for k in range(n, nrows * ncols):
        grid[k // ncols][k % ncols].set_visible(False)
    for c in range(ncols):  # the lowest panel of each column carries the axis label
        r = max(k // ncols for k in range(n) if k % ncols == c) if c < n else 0
        grid[r][c].xaxis.set_tick_params(labelbottom=True)
        grid[r][c].set_xlabel(_label(axes, explained, variables, 0), fontsize=7)
    for row in grid:
        row[0].set_ylabel(_label(axes, explained, variables, 1), fontsize=7)
    handles, names = grid[0][0].get_legend_handles_labels()
    fig.legend(handles, names, loc="lower center", bbox_to_anchor=(0.5, 0.0), ncols=5,
               fontsize=7, markerscale=4, frameon=False)
    return save(fig, Path(path), dpi=dpi)
