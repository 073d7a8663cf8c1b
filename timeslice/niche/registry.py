"""The niche-algorithm registry: every list of algorithm names is derived from here.

Config validation, :func:`make_model`, the methods paragraph of the report
and the docs check all read :data:`ALGORITHMS`. Adding an algorithm is one
:func:`register` call (or one entry below) with its estimator class and the clause the methods
paragraph prints; nothing else needs to know.

Estimators are named as ``"module:Class"`` and imported only when used, so this module imports
none of them (no import cycle between the estimator modules).
"""

from __future__ import annotations

import dataclasses
import difflib
import importlib
from typing import Any

from timeslice.errors import ConfigError

__all__ = ["ALGORITHMS", "Algorithm", "estimator_class", "make_model", "methods_text", "names", "register"]


@dataclasses.dataclass(frozen=True)
class Algorithm:
    """One niche algorithm: its config name, estimator and methods-paragraph clause.

    Parameters
    ----------
    name : str
        The config name (``[niche] algorithm``).
    estimator : str
        ``"module:Class"`` of a scikit-learn-style estimator (``fit``, ``predict_proba``).
    methods : str
        What the methods paragraph says the niche was modelled with, with its citation.
    """

    name: str
    #: ``"module:Class"`` of a scikit-learn-style estimator (``fit``, ``predict_proba``)
    estimator: str
    #: what the methods paragraph says the niche was modelled with, with its citation
    methods: str


ALGORITHMS: dict[str, Algorithm] = {}


def register(algorithm: Algorithm) -> Algorithm:
    """Add (or replace) an algorithm; returns it.

    Parameters
    ----------
    algorithm : Algorithm
        The algorithm to add.

    Returns
    -------
    Algorithm
        `algorithm`.
    """
    ALGORITHMS[algorithm.name] = algorithm
    return algorithm


def names() -> tuple[str, ...]:
    """Sorted names of the registered algorithms.

    Returns
    -------
    tuple of str
        The names, sorted.
    """
    return tuple(sorted(ALGORITHMS))


def estimator_class(name: str) -> type:
    """The estimator class of a registered algorithm (imported on first use).

    Parameters
    ----------
    name : str
        A registered algorithm name.

    Returns
    -------
    type
        The estimator class.
    """
    module, _, cls = ALGORITHMS[name].estimator.partition(":")
    return getattr(importlib.import_module(module), cls)


def make_model(name: str, **params: Any):
    """Build a niche estimator by name.

    Parameters
    ----------
    name : str
        A registered algorithm name (:func:`names`; case and ``-``/``_`` are not significant).
    **params
        Hyperparameters of that estimator.

    Returns
    -------
    estimator
        An unfitted estimator of the algorithm.

    Raises
    ------
    ConfigError
        Unknown name (the closest valid name is suggested) or unknown parameter.
    """
    key = str(name).strip().lower().replace("-", "_")
    if key not in ALGORITHMS:
        close = difflib.get_close_matches(key, list(ALGORITHMS), n=1, cutoff=0.5)
        hint = f"did you mean {close[0]!r}? " if close else ""
        raise ConfigError(
            f"unknown algorithm {name!r}; {hint}choose one of {', '.join(names())}"
        )
    cls = estimator_class(key)
    valid = cls().get_params(deep=False)
    unknown = [p for p in params if p not in valid]
    if unknown:
        close = difflib.get_close_matches(unknown[0], list(valid), n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise ConfigError(
            f"algorithm {key!r} has no parameter {unknown[0]!r} (valid: {', '.join(sorted(valid))}){hint}"
        )
    try:
        return cls(**params)
    except TypeError as err:  # pragma: no cover - guarded above
        raise ConfigError(f"algorithm {key!r}: {err}") from err


def methods_text(name: str) -> str:
    """The methods-paragraph clause of an algorithm (its name when unknown).

    Parameters
    ----------
    name : str
        An algorithm name.

    Returns
    -------
    str
        The clause.
    """
    spec = ALGORITHMS.get(str(name))
    return spec.methods if spec is not None else str(name)


for _a in (
    Algorithm("envelope", "timeslice.niche.models:EnvelopeNiche",
              "a percentile envelope (Nix 1986; Busby 1991)"),
    Algorithm("ellipsoid", "timeslice.niche.models:EllipsoidNiche",
              "a Mahalanobis ellipsoid around the presence centroid, suitability = 1 − χ² CDF of "
              "the squared distance (Farber & Kadmon 2003, Ecol. Model. 160:115)"),
    Algorithm("point_process", "timeslice.niche.learners:PointProcessNiche",
              "a lasso-penalised Poisson point-process model fitted as heavily weighted logistic "
              "regression (Warton & Shepherd 2010; Fithian & Hastie 2013; Renner & Warton 2013); "
              "its output is a relative suitability exp(η − η_max) capped at 1, not a "
              "probability of presence"),
    Algorithm("spline", "timeslice.niche.learners:SplineNiche",
              "a penalised regression-spline GLM of presence against background"),
    Algorithm("forest", "timeslice.niche.forest:ForestNiche",
              "a random forest with down-sampled background (Valavi et al. 2021)"),
    Algorithm("ensemble", "timeslice.niche.learners:EnsembleNiche",
              "a weighted mean of several algorithms, weights from their cross-validated scores "
              "(a relative suitability, not a probability)"),
):
    register(_a)
