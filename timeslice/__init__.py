"""timeslice: transfer one fitted ecological niche model onto a series of climate time slices."""

from __future__ import annotations

__all__ = ["__version__", "load_config", "open_series", "run"]


def __getattr__(name: str):
    """``timeslice.__version__``, looked up on first use (PEP 562).

    Reading the installed version imports :mod:`importlib.metadata` (tens of milliseconds),
    which ``timeslice --help`` need not pay.

    Parameters
    ----------
    name : str
        The attribute asked for.

    Returns
    -------
    str
        The version, for ``__version__``.

    Raises
    ------
    AttributeError
        For any other name.
    """
    if name == "__version__":
        from importlib.metadata import PackageNotFoundError, version

        try:
            found = version("timeslice")
        except PackageNotFoundError:  # running from a source tree without installation
            found = "0.0.0+unknown"
        globals()["__version__"] = found
        return found
    raise AttributeError(f"module 'timeslice' has no attribute {name!r}")


def run(config, out, *, force: bool = False):
    """Run every stage of a configuration and write the outputs into `out` (Python API).

    Parameters
    ----------
    config : path, mapping or :class:`timeslice.config.Config`
        A TOML file, a mapping with the same keys (relative paths are read from the current
        folder), or a loaded config.
    out : path
        Output folder (finished stages are cached in ``out/.cache``).
    force : bool
        Recompute every stage.

    Returns
    -------
    timeslice.pipeline.RunResult
        ``paths`` (every output written), ``summary`` (one row per slice), ``key_results``
        (the headline numbers), ``fit`` (the fitted niche: model, thresholds, tables) and
        ``analysis`` (the series: ``analysis.series`` is the summarised Dataset,
        ``analysis.tables`` the tables), ``timings``.
    """
    import os
    from collections.abc import Mapping
    from pathlib import Path

    from timeslice.config import Config, load_config as _load, parse_config
    from timeslice.commands import run as _run

    if isinstance(config, Config):
        cfg = config
    elif isinstance(config, Mapping):
        cfg = parse_config(dict(config), source=Path.cwd() / "<python>.toml")
    elif isinstance(config, (str, os.PathLike)):
        cfg = _load(config)
    else:
        from timeslice.errors import ConfigError

        raise ConfigError(f"timeslice.run: `config` must be a TOML path, a mapping or a Config, "
                          f"got {type(config).__name__}")
    return _run(cfg, out, force=force, command=["python", "timeslice.run"])


def load_config(path):
    """Read and validate a TOML config (:func:`timeslice.config.load_config`).

    Parameters
    ----------
    path : path
        The TOML file.

    Returns
    -------
    timeslice.config.Config
        The validated configuration.
    """
    from timeslice.config import load_config as _load

    return _load(path)


def open_series(path, **kwargs):
    """Open a run's ``series.nc`` or ``ensemble.nc`` (:func:`timeslice.report.open_series`).

    Parameters
    ----------
    path : path
        The file (or a run folder's data store, as :func:`timeslice.report.open_series`
        takes it).
    **kwargs
        Passed on to :func:`timeslice.report.open_series`.

    Returns
    -------
    xarray.Dataset
        The layers, lazily loaded.
    """
    from timeslice.report import open_series as _open

    return _open(path, **kwargs)
