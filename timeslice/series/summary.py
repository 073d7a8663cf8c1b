"""One call that summarises a stacked series: change maps, stability, refugia, the table."""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import pandas as pd
import xarray as xr

from timeslice.series._checks import check_label, check_labels, check_stack, drop_nondim
from timeslice.series.change import change_map, change_table
from timeslice.series.stability import refugium, stability

__all__ = ["summarise"]


def summarise(
    stack: xr.Dataset,
    *,
    reference: str = "baseline",
    chains: Mapping[str, Sequence[str]] | None = None,
) -> tuple[xr.Dataset, pd.DataFrame]:
    """Add change, stability and refugium layers to a stacked series and build its table.

    Parameters
    ----------
    stack : xarray.Dataset
        Stacked series (``suitable(slice, lat, lon)``, optionally ``suitability``, ``mess``...).
    reference : str, default "baseline"
        Label of the reference slice for gain/loss/stable.
    chains : mapping of str to list of str, optional
        Named windows of slice labels (e.g. ``{"past": ["21ka", "6ka", "baseline"]}``); each
        adds ``stability_<name>`` and ``refugium_<name>`` over its slices. Stability and
        refugium over all slices are always added.

    Returns
    -------
    (xarray.Dataset, pandas.DataFrame)
        The stack with ``change(slice, lat, lon)``, ``stability(lat, lon)``,
        ``refugium(lat, lon)`` added (lazy where the input is), and the per-slice table of
        :func:`timeslice.series.change.change_table`.

    Raises
    ------
    timeslice.errors.DataError
        Unknown `reference` label (the message lists the labels), unknown labels in `chains`.
    """
    check_stack(stack)
    iref = check_label(stack, reference)
    suitable = stack["suitable"]
    ref = suitable.isel(slice=iref)
    out = stack.copy()
    out["change"] = change_map(suitable, ref)
    out["change"].attrs["reference_slice"] = str(reference)
    out["stability"] = drop_nondim(stability(suitable))
    out["refugium"] = drop_nondim(refugium(suitable))
    for name, labels in (chains or {}).items():
        labels = check_labels(stack, labels, what=f"chains[{name!r}]")
        sub = suitable.sel(slice=labels)
        out[f"stability_{name}"] = drop_nondim(stability(sub))
        out[f"refugium_{name}"] = drop_nondim(refugium(sub))
        for v in (f"stability_{name}", f"refugium_{name}"):
            out[v].attrs["slices"] = " ".join(labels)
    history = out.attrs.get("history", "")
    line = f"timeslice.series.summarise: change against '{reference}', stability, refugium"
    out.attrs["history"] = f"{history}\n{line}".strip()
    table = change_table(stack, reference=reference)
    return out, table
