"""Saving and loading fitted niche models (joblib pickles written atomically)."""

from __future__ import annotations

import os
import pickle
from pathlib import Path

import joblib

from timeslice.errors import InputFileError
from timeslice.io import atomic_path

__all__ = ["FORMAT", "load_model", "save_model"]

#: Identifier stored in every model file.
FORMAT = "timeslice-niche-model"


def _version() -> str:
    from timeslice import __version__

    return __version__


def save_model(fit, path: str | os.PathLike) -> Path:
    """Write a :class:`timeslice.niche.workflow.NicheFit` to `path`.

    The file holds the fit and the timeslice and scikit-learn versions; it is written to a
    temporary name beside `path` and renamed when complete.

    Parameters
    ----------
    fit : NicheFit
        The fitted niche.
    path : str or path
        File to write.

    Returns
    -------
    pathlib.Path
        `path`.
"""
    import sklearn

    payload = {
        "format": FORMAT,
        "timeslice_version": _version(),
        "sklearn_version": sklearn.__version__,
        "fit": fit,
    }
    path = Path(path)
    with atomic_path(path) as tmp:
        joblib.dump(payload, tmp, compress=3)
    return path


def load_model(path: str | os.PathLike):
    """Read a model written by :func:`save_model`.

    Parameters
    ----------
    path : str or path
        A file written by :func:`save_model`.

    Returns
    -------
    NicheFit
        The fitted model and its tables.

    Raises
    ------
    InputFileError
        Missing file, not a timeslice model file, or saved by another timeslice version
        (pickled estimators are not portable across versions: refit the model).
"""
    path = Path(path)
    if not path.exists():
        raise InputFileError(f"{path}: model file not found; fit one first (niche stage) or check the path")
    try:
        payload = joblib.load(path)
    except (pickle.UnpicklingError, EOFError, ValueError, KeyError, IndexError, AttributeError,
            ModuleNotFoundError, ImportError, OSError, TypeError) as err:
        raise InputFileError(
            f"{path}: not a readable timeslice model file ({type(err).__name__}); refit the model"
        ) from err
    if not isinstance(payload, dict) or payload.get("format") != FORMAT:
        raise InputFileError(f"{path}: not a timeslice model file; refit the model")
    saved = payload.get("timeslice_version")
    if saved != _version():
        raise InputFileError(
            f"{path}: model was saved by timeslice {saved}, this is timeslice {_version()}; "
            "refit the model with this version (or install timeslice " + str(saved) + ")"
        )
    return payload["fit"]
