"""The protocol every novelty metric follows, and the registry the transfer loops over.

A novelty metric compares each target cell with the reference set (the background sample within
the calibration area). It is one class with three parts:

* :meth:`NoveltyMetric.prepare` — everything that depends only on the reference, done once per
  transfer (sorted columns, a covariance factor, ranges);
* :meth:`NoveltyMetric.columns` — the metric's values for the finite cells of one block, given
  as the float64 matrix ``good`` of shape (k, n) that the estimator and every other metric share
  (so the data are read and stacked once, whatever the number of metrics);
* :attr:`NoveltyMetric.layers` — the output layers it fills (:class:`OutputLayer`: name, dtype,
  fill value), one array each from :meth:`~NoveltyMetric.columns`, in that order. Their units,
  long_name, description and flags are the entries of the one layer table,
  :mod:`timeslice.layers`; :meth:`~NoveltyMetric.layer_attrs` adds what depends on the
  reference (its size, the predictor names of a flag layer).

:func:`register_metric` adds a class to the metrics every transfer computes by default
(:func:`registered_metrics`); ``project_slice(metrics=...)`` takes any other selection.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np

from timeslice import layers
from timeslice.errors import ConfigError
from timeslice.transfer.reference import REFERENCE_DESCRIPTION, ReferenceSet

__all__ = [
    "NoveltyMetric",
    "OutputLayer",
    "prepare_metrics",
    "register_metric",
    "registered_metrics",
    "unregister_metric",
]


@dataclass(frozen=True)
class OutputLayer:
    """How one output layer of the transfer is stored; its attributes come from the layer table.

    Parameters
    ----------
    name : str
        Variable name in the output; an entry of :data:`timeslice.layers.LAYERS`
        (:func:`timeslice.layers.register` adds one).
    dtype : numpy.dtype or str
        Storage type of the values.
    fill : scalar
        Value of cells without a result (a missing predictor); NaN for floats.
    """

    name: str
    dtype: Any
    fill: Any = np.float32(np.nan)

    def attrs(self) -> dict[str, Any]:
        """The layer-table attributes of this layer for its dtype.

        Returns
        -------
        dict
            ``units``, ``long_name``, ``description`` and the table's flags.
        """
        entry = layers.spec(self.name)
        if entry is None:
            raise ConfigError(
                f"output layer {self.name!r} is not in the layer table; register it with "
                "timeslice.layers.register(LayerSpec(...)) before a metric declares it"
            )
        return entry.attrs(np.dtype(self.dtype))


class NoveltyMetric:
    """Base class of the novelty metrics (see the module docstring for the protocol).

    Subclasses set :attr:`name` and :attr:`layers` and implement :meth:`prepare` and
    :meth:`columns`. A prepared instance is sent to every worker with the block function, so it
    must pickle (numpy arrays and numbers do).
    """

    #: Short name, as in ``project_slice(metrics=...)`` and the docs.
    name: ClassVar[str] = ""
    #: Output layers, in the order :meth:`columns` returns them.
    layers: ClassVar[tuple[OutputLayer, ...]] = ()
    #: Citation of the method, written into the ``history`` attribute.
    reference: ClassVar[str] = ""

    def prepare(self, ref: ReferenceSet) -> None:
        """Compute everything that depends only on the reference sample.

        Parameters
        ----------
        ref : ReferenceSet
            The validated reference sample; its variables are the rows of ``good`` in
            :meth:`columns`, in that order.
        """
        raise NotImplementedError

    def columns(self, good: np.ndarray) -> tuple[np.ndarray, ...]:
        """The metric's layers for the finite cells of one block.

        Parameters
        ----------
        good : numpy.ndarray, shape (k, n), float64
            Predictor values of the cells whose every predictor is finite (rows in the order
            of the reference's variables). Read-only: it is shared with the other metrics.

        Returns
        -------
        tuple of numpy.ndarray
            One array of shape (n,) per entry of :attr:`layers`, any dtype (cast to the
            layer's dtype on output).
        """
        raise NotImplementedError

    def layer(self, name: str) -> OutputLayer:
        """The declared layer called `name`.

        Parameters
        ----------
        name : str
            A layer name of :attr:`layers`.

        Returns
        -------
        OutputLayer
        """
        for out in self.layers:
            if out.name == name:
                return out
        raise KeyError(f"metric {self.name!r} declares no layer {name!r}")

    def layer_attrs(self, layer: str, ref: ReferenceSet) -> dict[str, Any]:
        """Attributes of `layer`: the layer table's, plus the reference description.

        Parameters
        ----------
        layer : str
            One of :attr:`layers`.
        ref : ReferenceSet
            The reference the metric was prepared from.

        Returns
        -------
        dict
        """
        attrs = self.layer(layer).attrs()
        attrs.setdefault("reference_set", REFERENCE_DESCRIPTION)
        attrs.setdefault("reference_points", ref.n_points)
        return attrs


_REGISTRY: dict[str, type[NoveltyMetric]] = {}


def register_metric(metric: type[NoveltyMetric]) -> type[NoveltyMetric]:
    """Add a metric class to those every transfer computes by default (usable as a decorator).

    Parameters
    ----------
    metric : type
        A :class:`NoveltyMetric` subclass with a unique :attr:`~NoveltyMetric.name` whose
        layers are in the layer table (:func:`timeslice.layers.register`).

    Returns
    -------
    type
        `metric`.
    """
    if not (isinstance(metric, type) and issubclass(metric, NoveltyMetric)) or not metric.name:
        raise ConfigError(f"{metric!r} is not a named NoveltyMetric subclass; set `name` and "
                          "subclass timeslice.transfer.metrics.NoveltyMetric")
    for layer in metric.layers:
        layer.attrs()  # one clear line now if the layer table lacks it
    _REGISTRY[metric.name] = metric
    return metric


def unregister_metric(name: str) -> None:
    """Remove a metric from the defaults (nothing happens if it is not registered).

    Parameters
    ----------
    name : str
        The metric's :attr:`~NoveltyMetric.name`.
    """
    _REGISTRY.pop(name, None)


def registered_metrics() -> tuple[type[NoveltyMetric], ...]:
    """The metric classes a transfer computes by default, in registration order.

    Returns
    -------
    tuple of type
        MESS and ExDet first (registered by :mod:`timeslice.transfer.novelty`).
    """
    import timeslice.transfer.novelty  # noqa: F401 - registers the built-in metrics

    return tuple(_REGISTRY.values())


def prepare_metrics(
    metrics: Iterable[type[NoveltyMetric] | NoveltyMetric] | None, ref: ReferenceSet
) -> tuple[NoveltyMetric, ...]:
    """Instances of `metrics` prepared from `ref`.

    Parameters
    ----------
    metrics : iterable of NoveltyMetric classes or instances, optional
        None: :func:`registered_metrics`.
    ref : ReferenceSet
        The reference sample.

    Returns
    -------
    tuple of NoveltyMetric
        Prepared, in the given order; their layer names are unique.
    """
    chosen = registered_metrics() if metrics is None else tuple(metrics)
    out, seen = [], set()
    for m in chosen:
        inst = m() if isinstance(m, type) else m
        if not isinstance(inst, NoveltyMetric):
            raise ConfigError(f"`metrics` entry {m!r} is not a NoveltyMetric")
        names = {layer.name for layer in inst.layers}
        clash = seen.intersection(names)
        if clash:
            raise ConfigError(f"metric {inst.name!r} declares layer {sorted(clash)[0]!r}, "
                              "which another metric of `metrics` fills too")
        seen.update(names)
        inst.prepare(ref)
        out.append(inst)
    return tuple(out)
