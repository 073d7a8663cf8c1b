"""timeslice: transfer one fitted ecological niche model onto a series of climate time slices."""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("timeslice")
except PackageNotFoundError:  # running from a source tree without installation
    __version__ = "0.0.0+unknown"

__all__ = ["__version__", "load_config", "open_series", "run"]


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
    """Read and validate a TOML config (:func:`timeslice.config.load_config`)."""
    from timeslice.config import load_config as _load

    return _load(path)


def open_series(path, **kwargs):
    """Open a run's ``series.nc`` or ``ensemble.nc`` (:func:`timeslice.report.open_series`)."""
    from timeslice.report import open_series as _open

    return _open(path, **kwargs)
