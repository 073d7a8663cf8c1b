"""The one table of output layers: name, units, long_name, description, CF flags, colour map.

Every stage that makes an output layer stamps its attributes from this table
(:func:`stamp`); the writers (NetCDF, GeoTIFF) check them (:func:`check` on units and flags)
and only complete what a layer lacks (a dataset handed to them unstamped; boolean masks take
the table's words as they become int8 flags); the maps take their colour maps from it. A new
layer is one :func:`register` call (see docs/extending.md, "An output layer").

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
* A stage may qualify a ``long_name`` with what the run chose: the table's words followed by
  a space, comma or semicolon and a qualifier (``"suitable and reachable, limited movement"``,
  ``"fraction of the refugium window's slices suitable (baseline 21ka)"``) agree with it.
* ``per_chain`` entries also describe the per-chain layers ``<name>_<chain>``
  (``refugium_window_alder`` uses ``refugium_window``).

The novelty layers (``mess``, ``most_dissimilar``, ``nt1``, ``nt2``) are in :data:`BUILT_IN`
like every other layer the tool writes; a module that registers the same entry again is a
no-op, a different entry under a taken name is refused (``replace=True`` to override).
"""

from __future__ import annotations

from collections.abc import Hashable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, TypeVar

import numpy as np
import xarray as xr

from timeslice.errors import DataError

__all__ = [
    "BUILT_IN", "CHECKED_KEYS", "INHERITED_NOISE", "LAYERS", "WRITER_KEYS", "LayerSpec",
    "agrees", "check", "disagreements", "flag_list", "register", "spec", "stamp",
]

#: Attributes :func:`check` compares with the table ("flags": the value-meaning pairs).
#: ``standard_name`` is written from the table where a layer has none but not compared: a
#: field passed through from an input keeps the standard name its reader gave it.
CHECKED_KEYS = ("units", "long_name", "cell_methods", "flags")
#: What the writers refuse to write against the table: units and flag meanings.
WRITER_KEYS = ("units", "flags")

#: Attributes a mask may inherit from the field it was derived from that would mislabel it.
INHERITED_NOISE = ("standard_name", "positive", "source_units", "source_variable",
                   "regrid_method", "valid_min", "valid_max", "valid_range", "axis")


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
    fill_meaning : str, optional
        Meaning of -1 where the stage marks cells without a value with -1 (a fill value) and
        the table has no flag for it; the NetCDF writer writes it as a named flag.

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
    fill_meaning: str | None = None

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

    def meaning(self, value: int) -> str | None:
        """Meaning of code `value` (e.g. -1 "not_land"), None when the entry gives none.

        Parameters
        ----------
        value : int
            A flag value.

        Returns
        -------
        str or None
        """
        found = dict(self.flags).get(int(value))
        if found is None and int(value) == -1:
            return self.fill_meaning
        return found

    def attrs(self, dtype: Any = None) -> dict[str, Any]:
        """The attributes :func:`stamp` writes.

        Parameters
        ----------
        dtype : numpy dtype, optional
            Type of the layer; integer layers get ``flag_values`` of that type (CF 1.8
            section 3.5), boolean masks int8 ``0, 1`` (the type the NetCDF writer stores
            them as), float layers no flags.

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
        code = dtype if kind in "iu" else np.int8
        if self.flag_values is not None and kind in "iu":
            out["flag_values"] = np.asarray(self.flag_values, dtype=code)
            out["flag_meanings"] = self.flag_meanings
        elif self.bool_flags is not None and kind in "iub":
            out["flag_values"] = np.asarray([0, 1], dtype=code)
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


def agrees(layer: LayerSpec, key: str, value: Any) -> bool:
    """Whether attribute `key` = `value` agrees with the table entry `layer`.

    Parameters
    ----------
    layer : LayerSpec
        Table entry.
    key : str
        Attribute name (one of :data:`CHECKED_KEYS`).
    value : object
        The layer's value of it.

    Returns
    -------
    bool
        True when the entry does not fix `key`, or the values agree: equal text, a long_name
        that starts with the table's and goes on with a qualifier (", limited movement",
        " (its slices)", " against baseline"), flags whose values mean what the table says
        (a stage may leave values out; -1 may be the one value the table lacks: cells with
        no data).
    """
    if key == "flags":
        table = dict(layer.flags) if layer.flag_values is not None else {}
        have = dict(value) if isinstance(value, list) else {}
        if not table:
            return True
        extra = [v for v in have if v not in table]
        return (all(have[v] == table[v] for v in have if v in table)
                and (extra == [] or extra == [-1]))
    want = getattr(layer, key, None)
    if want is None:
        return True
    text = str(value)
    if key == "long_name":
        return text == want or (text.startswith(want) and text[len(want)] in " ,;")
    return text == str(want)


def flag_list(attrs: Mapping[str, Any]) -> list[tuple[int, str]]:
    """(value, meaning) pairs of a layer's CF ``flag_values``/``flag_meanings`` attributes.

    Parameters
    ----------
    attrs : mapping
        A layer's attributes.

    Returns
    -------
    list of (int, str)
        Empty when the layer has no flag attributes.
    """
    if "flag_values" not in attrs or "flag_meanings" not in attrs:
        return []
    values = np.atleast_1d(np.asarray(attrs["flag_values"])).tolist()
    return list(zip((int(v) for v in values), str(attrs["flag_meanings"]).split()))


def disagreements(name: Hashable, attrs: Mapping[str, Any], *,
                  keys: Sequence[str] = CHECKED_KEYS) -> list[str]:
    """What in `attrs` contradicts the table entry of layer `name`.

    Parameters
    ----------
    name : str
        Layer name.
    attrs : mapping
        The layer's attributes.
    keys : sequence of str, default :data:`CHECKED_KEYS`
        Attributes to compare ("flags" for the value-meaning pairs).

    Returns
    -------
    list of str
        One phrase per disagreeing attribute (``[]`` when they agree or the layer is not in
        the table). A missing attribute is no disagreement: the writer completes it.
    """
    entry = spec(name)
    if entry is None:
        return []
    problems = []
    for key in keys:
        if key == "flags":
            have: Any = flag_list(attrs)
            if have and not agrees(entry, key, have):
                problems.append(f"flags {have} (the table has {entry.flags})")
        elif key in attrs and not agrees(entry, key, attrs[key]):
            problems.append(f"{key} {str(attrs[key])!r} (the table has "
                            f"{getattr(entry, key)!r})")
    return problems


def stamp(obj: _T, name: str | None = None, *, long_name: str | None = None,
          description: str | None = None, missing_only: bool = False) -> _T:
    """Set a layer's attributes from the table (in place; also returned).

    Parameters
    ----------
    obj : xarray.DataArray or xarray.Dataset
        The layer, or a dataset holding it.
    name : str, optional
        Table name of the layer; default the DataArray's name. With a Dataset: the variable
        to stamp; None stamps every variable of the dataset the table describes.
    long_name : str, optional
        A run-specific long_name: the table's followed by a qualifier (", limited movement",
        " (baseline 21ka)"). Default: a long_name the layer has that agrees with the table,
        else the table's.
    description : str, optional
        A run-specific description (thresholds, slice counts). Default: the layer's own,
        else the table's.
    missing_only : bool, default False
        Write only the attributes the layer lacks (what a writer does to complete a dataset
        it was handed); flags only when it has no ``flag_values``.

    Returns
    -------
    xarray.DataArray or xarray.Dataset
        `obj`, its units, long_name, standard_name, cell_methods and flags now the table's
        (other attributes kept). A boolean mask drops what it inherited from the field it was
        derived from (:data:`INHERITED_NOISE`).
    """
    if isinstance(obj, xr.Dataset):
        names = [name] if name is not None else [n for n in obj.data_vars if spec(n)]
        for n in names:
            if n not in obj.data_vars:
                raise DataError(f"stamp: the dataset has no layer {n!r}")
            obj[n] = stamp(obj[n], str(n), long_name=long_name, description=description,
                           missing_only=missing_only)
        return obj
    if not isinstance(obj, xr.DataArray):
        raise DataError(f"stamp: expected an xarray DataArray or Dataset, got "
                        f"{type(obj).__name__}")
    key = str(name if name is not None else obj.name)
    entry = spec(key)
    if entry is None:
        raise DataError(f"stamp: layer {key!r} is not in the layer table; register it in "
                        "timeslice.layers (docs/extending.md, 'An output layer')")
    attrs = dict(obj.attrs)
    if missing_only:
        new = entry.attrs(obj.dtype)
        if "flag_values" in attrs:
            new.pop("flag_values", None)
            new.pop("flag_meanings", None)
        obj.attrs = {**attrs, **{k: v for k, v in new.items() if k not in attrs}}
        return obj
    if obj.dtype == bool:
        for noise in INHERITED_NOISE:
            attrs.pop(noise, None)
    if long_name is not None and not agrees(entry, "long_name", long_name):
        raise DataError(f"stamp: long_name {long_name!r} of layer {key!r} must start with the "
                        f"table's {entry.long_name!r}")
    own = attrs.get("long_name")
    new = entry.attrs(obj.dtype)
    if attrs.get("standard_name") and obj.dtype != bool:
        new.pop("standard_name", None)  # a passed-through input keeps its reader's name
    if long_name is not None:
        new["long_name"] = long_name
    elif own is not None and agrees(entry, "long_name", own):
        new["long_name"] = own
    if description is not None:
        new["description"] = description
    elif attrs.get("description"):
        new["description"] = attrs["description"]
    if entry.flag_values is None and entry.bool_flags is None:
        # run-dependent classes (variable names, patch numbers) stay the stage's own
        new.pop("flag_values", None)
        new.pop("flag_meanings", None)
    # the table's keys first (units, long_name, ...), then what the stage added
    obj.attrs = {**new, **{k: v for k, v in attrs.items() if k not in new}}
    return obj


def check(ds: xr.Dataset | xr.DataArray, *, where: str = "write",
          keys: Sequence[str] = CHECKED_KEYS) -> None:
    """Refuse layers whose attributes disagree with the table.

    Parameters
    ----------
    ds : xarray.Dataset or xarray.DataArray
        Layers about to be written.
    where : str, default "write"
        Name of the caller for the message (``"write_series"``, ``"geotiff.export"``).
    keys : sequence of str, default :data:`CHECKED_KEYS`
        Attributes to compare. The writers pass :data:`WRITER_KEYS` (units and flags: what a
        reader computes with), so a dataset of the user's own with its own titles is written;
        the stages' outputs agree on every key (a test checks them all).

    Returns
    -------
    None
        Raises :class:`timeslice.errors.DataError` naming the layer and the attribute.
    """
    items = ds.data_vars.items() if isinstance(ds, xr.Dataset) else [(ds.name, ds)]
    for name, da in items:
        problems = disagreements(name, da.attrs, keys=keys)
        if problems:
            raise DataError(
                f"{where}: layer {str(name)!r} disagrees with the layer table: "
                f"{'; '.join(problems)}; stamp it with timeslice.layers.stamp or change its "
                "entry in timeslice/layers.py"
            )


_ONE = "1"  # CF units of fractions, indices and flags
_REFUGE = "not_refugium refugium"

#: The layers the tool writes, in the words of its files; registered below.
BUILT_IN: tuple[LayerSpec, ...] = (
    # transfer: one value per slice and cell
    LayerSpec(
        "suitability", _ONE, "climatic suitability",
        "relative suitability of the cell's climate for the species, 0..1, from the "
        "niche model fitted on the baseline climate",
        cmap="viridis", colorbar_label="climatic suitability (0-1)"),
    LayerSpec(
        "suitable", _ONE, "suitable climate",
        "suitability >= threshold on land; -1 marks cells that are not land in the slice",
        flag_values=(-1, 0, 1), flag_meanings="not_land unsuitable suitable"),
    LayerSpec("clamp_effect", _ONE, "effect of clamping on suitability"),
    LayerSpec(
        "mess", _ONE, "multivariate environmental similarity",
        "MESS (Elith et al. 2010): smallest univariate similarity over the predictors; 100 at "
        "the reference median, 0 at the edge of the reference range, negative outside it "
        "(novel climate: suitability there is extrapolated and not to be trusted)",
        cmap="PuOr", colorbar_label="MESS (< 0: novel climate)"),
    LayerSpec(
        "most_dissimilar", _ONE, "most dissimilar variable",
        "index of the predictor with the smallest MESS similarity (first in order on ties); "
        "-1 where a predictor is missing", fill_meaning="no_data"),
    LayerSpec(
        "nt1", _ONE, "univariate novelty (ExDet NT1)",
        "sum over predictors of the distance outside the reference range, in units of that "
        "range (Mesgaran et al. 2014); 0 inside every range, negative outside (extrapolation: "
        "flagged, not trusted)",
        cmap="cividis", colorbar_label="NT1 (< 0: outside the reference range)"),
    LayerSpec(
        "nt2", _ONE, "combinational novelty (ExDet NT2)",
        "squared Mahalanobis distance from the reference mean over the largest one among "
        "reference points (Mesgaran et al. 2014); above 1 the combination of predictor values "
        "is outside the reference",
        cmap="cividis", colorbar_label="NT2 (> 1: novel combination)"),
    # harmonise and niche: the slice's land, the terrain, the calibration area
    LayerSpec(
        "land", _ONE, "land in the slice",
        "1 where the cell is land in the slice (elevation above the slice's sea level and "
        "not under an ice sheet)",
        standard_name="land_binary_mask", bool_flags="sea_or_ice land"),
    LayerSpec(
        "ice", _ONE, "ice sheet in the slice",
        "1 where an ice sheet covers the cell in the slice (not land for the niche)",
        bool_flags="no_ice ice"),
    LayerSpec(
        "exposed_shelf", _ONE, "exposed continental shelf",
        "land in the slice that lies below present sea level",
        bool_flags="not_exposed exposed"),
    LayerSpec(
        "elevation", "m", "elevation relative to present sea level",
        "elevation relative to present mean sea level; negative below it",
        standard_name="surface_altitude", cell_methods="area: mean"),
    LayerSpec(
        "calibration_area", _ONE, "calibration area of the niche model",
        "cells the background sample and the novelty reference were drawn from",
        bool_flags="outside inside"),
    LayerSpec(
        "cell_area", "km2", "grid cell area",
        "area on the authalic sphere, R = 6371.0072 km", standard_name="cell_area"),
    # series: change, stability, refugia, movement
    LayerSpec(
        "change", _ONE, "change of suitability class against the reference slice",
        "0 unsuitable in both, 1 gained, 2 lost, 3 suitable in both the slice and the "
        "reference slice; -1 not land",
        flag_values=(-1, 0, 1, 2, 3), flag_meanings="not_land absent gain loss stable"),
    LayerSpec(
        "stability", _ONE, "fraction of slices suitable",
        "share of the slices in which the cell is suitable (0..1)",
        cmap="viridis", colorbar_label="fraction of slices suitable", per_chain=True),
    LayerSpec(
        "refugium", _ONE, "climatic refugium (suitable in every slice)",
        "1 where the cell is land and suitable in every slice of the series (a hypothesis "
        "of climatic stability, not of occupancy)",
        bool_flags=_REFUGE, per_chain=True),
    LayerSpec(
        "refugium_analog", _ONE, "climatic refugium in analog climate",
        "1 where the cell is land, suitable and in analog climate in every slice (a "
        "hypothesis of climatic stability, not of occupancy)",
        bool_flags=_REFUGE, per_chain=True),
    LayerSpec(
        "stability_all_slices", _ONE,
        "fraction of all slices suitable (past and future together)",
        "share of every slice of the series, past and future, in which the cell is "
        "suitable (0..1)", per_chain=True),
    LayerSpec(
        "refugium_all_slices", _ONE,
        "climatic refugium over all slices (past and future together)",
        "1 where the cell is land and suitable in every slice of the series, past and "
        "future together (a hypothesis of climatic stability, not of occupancy)",
        bool_flags=_REFUGE, per_chain=True),
    LayerSpec(
        "refugium_all_slices_analog", _ONE,
        "climatic refugium over all slices, in analog climate",
        "as refugium_all_slices, and in analog climate in every slice",
        bool_flags=_REFUGE, per_chain=True),
    LayerSpec(
        "stability_window", _ONE, "fraction of the refugium window's slices suitable",
        "share of the slices of the refugium window in which the cell is suitable (0..1)",
        per_chain=True),
    LayerSpec(
        "refugium_window", _ONE, "climatic refugium over the refugium window",
        "1 where the cell is land and suitable in every slice of the refugium window, in "
        "every model (a hypothesis of climatic stability, not of occupancy)",
        bool_flags=_REFUGE, per_chain=True),
    LayerSpec(
        "refugium_window_analog", _ONE,
        "climatic refugium over the refugium window, in analog climate",
        "as refugium_window, and in analog climate in every slice of the window",
        bool_flags=_REFUGE, per_chain=True),
    LayerSpec(
        "refugium_patch", _ONE, "connected patch",
        "8-connected patches of the report's refugium layer numbered by decreasing area "
        "(1 the largest, named R1); 0 outside; see tables/refugium_patches.csv"),
    LayerSpec("static_stability", _ONE, "static stability (sum of log suitability)",
              per_chain=True),
    LayerSpec("dynamic_stability", _ONE, "dynamic stability (best log-suitability path)",
              per_chain=True),
    LayerSpec("geometric_mean_suitability", _ONE, "geometric mean suitability"),
    LayerSpec("minimum_suitability", _ONE, "minimum suitability through the series"),
    LayerSpec(
        "reachable", _ONE, "suitable and reachable",
        flag_values=(-1, 0, 1), flag_meanings="not_land not_reached reached",
        per_chain=True),
    # series: biotic limits
    # boolean masks written as 0/1 "false true" and read back as integers (no bool_flags)
    LayerSpec("partner_present", _ONE, "required partner present"),
    LayerSpec("competitor_present", _ONE, "competitor present"),
    LayerSpec("suitability_biotic", _ONE, "climatic suitability under biotic limits"),
    LayerSpec(
        "suitable_biotic", _ONE, "suitable under biotic limits",
        flag_values=(-1, 0, 1), flag_meanings="not_land unsuitable suitable"),
    # series: model ensembles (ensemble.nc)
    LayerSpec(
        "agreement", _ONE, "fraction of climate models in which the cell is suitable",
        cmap="viridis",
        colorbar_label="share of climate models in which the cell is suitable"),
    LayerSpec(
        "consensus", _ONE, "majority consensus of climate models",
        flag_values=(-1, 0, 1), flag_meanings="not_land no_majority majority_suitable"),
    LayerSpec("suitability_mean", _ONE, "mean suitability across climate models"),
    LayerSpec("suitability_sd", _ONE,
              "standard deviation of suitability across climate models"),
    LayerSpec("variance_share", _ONE, "share of suitability variance"),
    LayerSpec("ss_total", _ONE, "total sum of squares of suitability"),
    LayerSpec("dominant", _ONE, "source with the largest share of variance"),
    # several species (assemblage.nc)
    LayerSpec("richness", _ONE,
              "predicted richness (number of species climatically suitable)"),
    LayerSpec("richness_change", _ONE, "change in predicted richness"),
    LayerSpec("shared_refugia", _ONE, "number of species whose refugium the cell is"),
)

for _entry in BUILT_IN:
    register(_entry)
del _entry
