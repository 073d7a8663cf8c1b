"""The one table of output layers: name, units, long_name, description, CF flags, colour map.

Every stage that makes an output layer stamps its attributes from this table
(:func:`stamp`); the writers (NetCDF, GeoTIFF) only verify them (:func:`check`); the maps
take their colour maps from it. A new layer is one :func:`register` call (see
docs/extending.md, "An output layer").

This module is low-level on purpose: it imports only the standard library, numpy, xarray and
:mod:`timeslice.errors`, so every stage package (transfer, series, report) can import it.

Rules the table encodes
-----------------------
* ``units`` ``"1"`` for fractions, indices and flags (CF 1.8 section 3.1).
* Categorical layers are integers with ``flag_values`` / ``flag_meanings`` (CF 1.8 section 3.5).
  A layer whose classes depend on the run (the most dissimilar variable, numbered patches)
  leaves both unset here and its stage writes them.
* Boolean masks give ``bool_flags``, the meanings of 0 and 1; the NetCDF writer stores them
  as int8 with ``flag_values = 0, 1``.
* A stage may qualify a ``long_name`` with a parenthesised tail naming what the run chose
  (the window's slices): ``"<table long_name> (<qualifier>)"`` agrees with the table.
* ``per_chain`` entries also describe the per-chain layers ``<name>_<chain>``
  (``refugium_window_alder`` uses ``refugium_window``).
"""

from __future__ import annotations

from collections.abc import Hashable, Mapping
from dataclasses import dataclass
from typing import Any, TypeVar

import numpy as np
import xarray as xr

from timeslice.errors import DataError

__all__ = [
    "FIXED_KEYS", "LAYERS", "LayerSpec", "check", "disagreements", "register", "spec", "stamp",
]

#: Attributes whose value the table fixes (when the entry sets them).
FIXED_KEYS = ("units", "standard_name", "long_name", "cell_methods", "flag_meanings")


@dataclass(frozen=True)
class LayerSpec:
    """Description of one output layer.

    Parameters
    ----------
    name : str
        Variable name in the outputs (``series.nc``, GeoTIFF file names).
    units : str, default "1"
        CF ``units``; ``"1"`` for fractions, indices and flags.
    long_name : str
        CF ``long_name``: a short human title.
    description : str, default ""
        One sentence on how to read the layer (written as the ``description`` attribute).
    standard_name : str, optional
        CF standard name, where the standard name table has one.
    cell_methods : str, optional
        CF ``cell_methods``.
    flag_values : tuple of int, optional
        Codes of a categorical layer (CF ``flag_values``), with `flag_meanings`.
    flag_meanings : str, optional
        Space-separated meanings of `flag_values`, one word each.
    bool_flags : str, optional
        Meanings of 0 and 1 of a boolean mask ("not_refugium refugium").
    cmap : str, optional
        Matplotlib colour map name the maps draw the layer with (continuous layers).
    colorbar_label : str, optional
        Label of the maps' colour bar; default the long_name.
    per_chain : bool, default False
        The entry also describes ``<name>_<chain>`` layers.

    Returns
    -------
    LayerSpec
        A frozen (hashable, comparable) description.
    """

    name: str
    units: str = "1"
    long_name: str = ""
    description: str = ""
    standard_name: str | None = None
    cell_methods: str | None = None
    flag_values: tuple[int, ...] | None = None
    flag_meanings: str | None = None
    bool_flags: str | None = None
    cmap: str | None = None
    colorbar_label: str | None = None
    per_chain: bool = False

    def __post_init__(self) -> None:
        if not self.name or not str(self.name).isidentifier():
            raise ValueError(f"LayerSpec: `name` must be an identifier, got {self.name!r}")
        if not self.long_name:
            raise ValueError(f"LayerSpec {self.name!r}: give a `long_name`")
        if (self.flag_values is None) != (self.flag_meanings is None):
            raise ValueError(f"LayerSpec {self.name!r}: give `flag_values` and "
                             "`flag_meanings` together")
        if self.flag_values is not None:
            object.__setattr__(self, "flag_values", tuple(int(v) for v in self.flag_values))
            if len(self.flag_values) != len(str(self.flag_meanings).split()):
                raise ValueError(f"LayerSpec {self.name!r}: {len(self.flag_values)} "
                                 f"flag_values but meanings {self.flag_meanings!r}")
        if self.bool_flags is not None and len(self.bool_flags.split()) != 2:
            raise ValueError(f"LayerSpec {self.name!r}: `bool_flags` needs two words "
                             f"(meanings of 0 and 1), got {self.bool_flags!r}")

    @property
    def flags(self) -> list[tuple[int, str]]:
        """(value, meaning) pairs of the layer's classes (``[]`` for continuous layers).

        Returns
        -------
        list of (int, str)
            From `flag_values`/`flag_meanings`, else 0 and 1 with `bool_flags`.
        """
        if self.flag_values is not None:
            return list(zip(self.flag_values, str(self.flag_meanings).split()))
        if self.bool_flags is not None:
            return list(zip((0, 1), self.bool_flags.split()))
        return []

    def attrs(self, dtype: Any = None) -> dict[str, Any]:
        """The attributes :func:`stamp` writes.

        Parameters
        ----------
        dtype : numpy dtype, optional
            Type of the layer; integer layers get ``flag_values`` of that type (CF 1.8
            section 3.5), boolean layers get no flag attributes (the writer adds them with
            the int8 encoding).

        Returns
        -------
        dict
            ``units``, ``long_name``, ``description`` and the optional keys the entry sets.
        """
        out: dict[str, Any] = {"units": self.units, "long_name": self.long_name}
        for key in ("standard_name", "cell_methods"):
            if getattr(self, key) is not None:
                out[key] = getattr(self, key)
        if self.description:
            out["description"] = self.description
        kind = np.dtype(dtype).kind if dtype is not None else "i"
        if kind != "b":
            if self.flag_values is not None:
                out["flag_values"] = np.asarray(self.flag_values,
                                                dtype=dtype if kind in "iu" else np.int8)
                out["flag_meanings"] = self.flag_meanings
            elif self.bool_flags is not None and kind in "iu":
                out["flag_values"] = np.asarray([0, 1], dtype=dtype)
                out["flag_meanings"] = self.bool_flags
        return out


#: Every known output layer, by name. Add to it with :func:`register`.
LAYERS: dict[str, LayerSpec] = {}


def register(layer: LayerSpec, *, replace: bool = False) -> LayerSpec:
    """Add a layer to the table.

    Parameters
    ----------
    layer : LayerSpec
        The layer's description.
    replace : bool, default False
        Allow replacing a different entry of the same name (tests, deliberate overrides).
        Registering an entry equal to the one in the table is always allowed (a module
        imported twice).

    Returns
    -------
    LayerSpec
        `layer`, so a module can keep it: ``MESS = register(LayerSpec(...))``.
    """
    if not isinstance(layer, LayerSpec):
        raise TypeError(f"register: expected a LayerSpec, got {type(layer).__name__}")
    old = LAYERS.get(layer.name)
    if old is not None and old != layer and not replace:
        raise ValueError(f"register: layer {layer.name!r} is already in the table with other "
                         "attributes; change that entry or pass replace=True")
    LAYERS[layer.name] = layer
    return layer


def spec(name: Hashable) -> LayerSpec | None:
    """The table entry of layer `name`, or None for a layer the table does not describe.

    Parameters
    ----------
    name : str
        A layer name; per-chain names (``refugium_window_alder``) give the entry they extend
        when that entry is ``per_chain``.

    Returns
    -------
    LayerSpec or None
    """
    key = str(name)
    if key in LAYERS:
        return LAYERS[key]
    # the longest table name that `key` extends (refugium_window_alder -> refugium_window)
    bases = sorted((b for b in LAYERS if key.startswith(b + "_")), key=len, reverse=True)
    if bases and LAYERS[bases[0]].per_chain:
        return LAYERS[bases[0]]
    return None


_T = TypeVar("_T", xr.DataArray, xr.Dataset)


def stamp(obj: _T, name: str | None = None, *, qualifier: str | None = None) -> _T:
    """Set a layer's attributes from the table (in place; also returned).

    Parameters
    ----------
    obj : xarray.DataArray or xarray.Dataset
        The layer, or a dataset holding it.
    name : str, optional
        Table name of the layer; default the DataArray's name. With a Dataset: the variable
        to stamp; None stamps every variable of the dataset the table describes.
    qualifier : str, optional
        Parenthesised tail of the long_name naming what the run chose (a window's slices).

    Returns
    -------
    xarray.DataArray or xarray.Dataset
        `obj`, its layer attributes now the table's (other attributes kept).
    """
    if isinstance(obj, xr.Dataset):
        names = [name] if name is not None else [n for n in obj.data_vars if spec(n)]
        for n in names:
            if n not in obj.data_vars:
                raise DataError(f"stamp: the dataset has no layer {n!r}")
            stamp(obj[n], str(n), qualifier=qualifier)
        return obj
    if not isinstance(obj, xr.DataArray):
        raise DataError(f"stamp: expected an xarray DataArray or Dataset, got "
                        f"{type(obj).__name__}")
    key = str(name if name is not None else obj.name)
    entry = spec(key)
    if entry is None:
        raise DataError(f"stamp: layer {key!r} is not in the layer table; register it in "
                        "timeslice.layers (docs/extending.md, 'An output layer')")
    attrs = entry.attrs(obj.dtype)
    if qualifier:
        attrs["long_name"] = f"{entry.long_name} ({qualifier})"
    if entry.flag_values is None and entry.bool_flags is None:
        # run-dependent classes (variable names, patch numbers) stay the stage's own
        attrs.pop("flag_values", None)
    obj.attrs.update(attrs)
    return obj


def _agrees(key: str, have: Any, want: Any) -> bool:
    if key == "long_name":
        text = str(have)
        return text == want or text.startswith(f"{want} (")
    return str(have) == str(want)


def disagreements(name: Hashable, attrs: Mapping[str, Any]) -> list[str]:
    """What in `attrs` contradicts the table entry of layer `name`.

    Parameters
    ----------
    name : str
        Layer name.
    attrs : mapping
        The layer's attributes.

    Returns
    -------
    list of str
        One phrase per disagreeing attribute (``[]`` when they agree or the layer is not in
        the table). A missing attribute is no disagreement; an extra leading flag value
        (-1 "not_land" added by the NetCDF writer) neither.
    """
    entry = spec(name)
    if entry is None:
        return []
    want = entry.attrs()
    problems = []
    for key in FIXED_KEYS:
        if key == "flag_meanings":
            continue
        if key in want and key in attrs and not _agrees(key, attrs[key], want[key]):
            problems.append(f"{key} {str(attrs[key])!r} (the table has {want[key]!r})")
    if entry.flag_values is not None and "flag_meanings" in attrs:
        have = list(zip(np.atleast_1d(np.asarray(attrs.get("flag_values", []))).tolist(),
                        str(attrs["flag_meanings"]).split()))
        if not set(entry.flags) <= set(have) or len(have) > len(entry.flags) + 1:
            problems.append(f"flags {have} (the table has {entry.flags})")
    return problems


def check(ds: xr.Dataset | xr.DataArray, *, where: str = "write") -> None:
    """Refuse a dataset whose layer attributes disagree with the table.

    Parameters
    ----------
    ds : xarray.Dataset or xarray.DataArray
        Layers about to be written.
    where : str, default "write"
        Name of the caller for the message (``"write_series"``, ``"geotiff.export"``).

    Returns
    -------
    None
        Raises :class:`timeslice.errors.DataError` naming the layer and the attribute.
    """
    items = ds.data_vars.items() if isinstance(ds, xr.Dataset) else [(ds.name, ds)]
    for name, da in items:
        problems = disagreements(name, da.attrs)
        if problems:
            raise DataError(
                f"{where}: layer {str(name)!r} disagrees with the layer table: "
                f"{'; '.join(problems)}; stamp it with timeslice.layers.stamp or change its "
                "entry in timeslice/layers.py"
            )


def _table() -> None:
    """Fill :data:`LAYERS` with the layers the tool writes."""
    fraction = "1"
    for entry in (
        LayerSpec(
            "suitability", fraction, "climatic suitability",
            "relative suitability of the cell's climate for the species, 0..1, from the "
            "niche model fitted on the baseline climate",
            cmap="viridis", colorbar_label="climatic suitability (0-1)"),
        LayerSpec(
            "suitable", fraction, "climatically suitable (suitability at or above the threshold)",
            "suitability >= threshold on land; -1 marks cells that are not land in the slice",
            flag_values=(-1, 0, 1), flag_meanings="not_land unsuitable suitable"),
        LayerSpec(
            "mess", fraction, "multivariate environmental similarity surface",
            "MESS (Elith, Kearney & Phillips 2010): negative values mean at least one "
            "variable lies outside the reference range (novel climate)",
            cmap="PuOr", colorbar_label="MESS (< 0: novel climate)"),
        LayerSpec(
            "most_dissimilar", fraction, "most dissimilar variable",
            "variable with the lowest univariate similarity in MESS"),
        LayerSpec(
            "nt1", fraction, "ExDet univariate extrapolation (NT1)",
            "NT1 (Mesgaran, Cousens & Webber 2014): 0 inside every univariate reference "
            "range, negative outside",
            cmap="cividis", colorbar_label="NT1 (< 0: outside the reference range)"),
        LayerSpec(
            "nt2", fraction, "ExDet combination novelty (NT2)",
            "NT2 (Mesgaran, Cousens & Webber 2014): squared Mahalanobis distance over its "
            "largest reference value; > 1 is a novel combination",
            cmap="cividis", colorbar_label="NT2 (> 1: novel combination)"),
        LayerSpec(
            "change", fraction, "range change against the reference slice",
            "0 unsuitable in both, 1 gained, 2 lost, 3 suitable in both the slice and the "
            "reference slice; -1 not land",
            flag_values=(-1, 0, 1, 2, 3), flag_meanings="not_land absent gain loss stable"),
        LayerSpec(
            "land", fraction, "land in the slice",
            "1 where the cell is land in the slice (elevation above the slice's sea level and "
            "not under an ice sheet)",
            standard_name="land_binary_mask", bool_flags="sea_or_ice land"),
        LayerSpec(
            "ice", fraction, "ice sheet in the slice",
            "1 where an ice sheet covers the cell in the slice (not land for the niche)",
            bool_flags="no_ice ice"),
        LayerSpec(
            "exposed_shelf", fraction, "exposed continental shelf",
            "land in the slice that lies below present sea level",
            bool_flags="not_exposed exposed"),
        LayerSpec(
            "reachable", fraction, "suitable and reachable",
            flag_values=(-1, 0, 1), flag_meanings="not_land not_reached reached",
            per_chain=True),
        LayerSpec("clamp_effect", fraction, "effect of clamping on suitability"),
        LayerSpec(
            "elevation", "m", "present-day surface elevation",
            "elevation relative to present mean sea level; negative below it",
            standard_name="surface_altitude", cell_methods="area: mean"),
        LayerSpec(
            "calibration_area", fraction, "calibration area of the niche model",
            "cells the background sample and the novelty reference were drawn from",
            bool_flags="outside inside"),
        LayerSpec(
            "stability", fraction, "fraction of slices suitable",
            "share of the slices in which the cell is suitable (0..1)",
            cmap="viridis", colorbar_label="fraction of slices suitable", per_chain=True),
        LayerSpec(
            "refugium", fraction, "climatic refugium (suitable in every slice)",
            "1 where the cell is land and suitable in every slice of the series (a hypothesis "
            "of climatic stability, not of occupancy)",
            bool_flags="not_refugium refugium", per_chain=True),
        LayerSpec(
            "stability_all_slices", fraction,
            "fraction of all slices suitable (past and future together)",
            "share of every slice of the series, past and future, in which the cell is "
            "suitable (0..1)", per_chain=True),
        LayerSpec(
            "refugium_all_slices", fraction,
            "climatic refugium over all slices (past and future together)",
            "1 where the cell is land and suitable in every slice of the series, past and "
            "future together (a hypothesis of climatic stability, not of occupancy)",
            bool_flags="not_refugium refugium", per_chain=True),
        LayerSpec(
            "refugium_all_slices_analog", fraction,
            "climatic refugium over all slices, in analog climate",
            "as refugium_all_slices, and in analog climate in every slice",
            bool_flags="not_refugium refugium", per_chain=True),
        LayerSpec(
            "stability_window", fraction, "fraction of the refugium window's slices suitable",
            "share of the slices of the refugium window in which the cell is suitable (0..1)",
            per_chain=True),
        LayerSpec(
            "refugium_window", fraction, "climatic refugium over the refugium window",
            "1 where the cell is land and suitable in every slice of the refugium window, in "
            "every model (a hypothesis of climatic stability, not of occupancy)",
            bool_flags="not_refugium refugium", per_chain=True),
        LayerSpec(
            "refugium_window_analog", fraction,
            "climatic refugium over the refugium window, in analog climate",
            "as refugium_window, and in analog climate in every slice of the window",
            bool_flags="not_refugium refugium", per_chain=True),
        LayerSpec(
            "refugium_patch", fraction, "connected patch of the refugium",
            "8-connected patches of the report's refugium layer numbered by decreasing area "
            "(1 the largest, named R1); 0 outside; see tables/refugium_patches.csv",
            per_chain=True),
        LayerSpec("static_stability", fraction, "static stability (sum of log suitability)",
                  per_chain=True),
        LayerSpec(
            "cell_area", "km2", "grid cell area",
            "area on the authalic sphere, R = 6371.0072 km", standard_name="cell_area"),
        LayerSpec(
            "agreement", fraction, "fraction of climate models in which the cell is suitable",
            cmap="viridis",
            colorbar_label="share of climate models in which the cell is suitable"),
    ):
        register(entry)


_table()
