"""Command line: a thin typer layer over :mod:`timeslice.commands` (no science here).

Start-up is kept short: only typer, the standard library and :mod:`timeslice.errors` are
imported at module level; each command imports what it needs (xarray, scipy, matplotlib,
scikit-learn, the config models) when it runs, so ``timeslice --help`` and every
``timeslice COMMAND --help`` load none of them. Help is plain text (no rich rendering), with
named metavars (``CONFIG``, ``DIR``, ``N``) instead of type labels.
"""

from __future__ import annotations

import contextlib
import errno
import functools
import os
import re
import sys
import time
import warnings
from collections.abc import Iterator
from pathlib import Path
from typing import Annotated, Optional

import typer
from typer.core import TyperCommand

from timeslice.errors import (
    InputFileError,
    TimesliceError,
    TimesliceWarning,
    shorten,
    write_failure,
)

_default_showwarning = warnings.showwarning

#: A type label after an argument's name in help (``CONFIG <path>``), as some typer versions
#: print it.
_TYPE_LABEL = re.compile(r"(?m)^(\s+[A-Z][A-Z_]*) <[\w\[\]|,. ]+>")
#: A required argument in braces on the usage line (``{CONFIG}``).
_BRACED = re.compile(r"\{([A-Z][A-Z_]*)\}")


def plain_help(text: str) -> str:
    """Help text with the argument names as written, without type labels or braces.

    Parameters
    ----------
    text : str
        Help or usage text as typer formats it.

    Returns
    -------
    str
        The same text, ``{CONFIG}`` shown as ``CONFIG`` and ``CONFIG <path>`` as ``CONFIG``.
    """
    return _BRACED.sub(r"\1", _TYPE_LABEL.sub(r"\1", text))


class PlainCommand(TyperCommand):
    """A command whose help and usage lines name the arguments plainly (:func:`plain_help`)."""

    def get_help(self, ctx) -> str:
        """The help page.

        Parameters
        ----------
        ctx : click.Context
            The command's context.

        Returns
        -------
        str
            The help text.
        """
        return plain_help(super().get_help(ctx))

    def get_usage(self, ctx) -> str:
        """The usage line.

        Parameters
        ----------
        ctx : click.Context
            The command's context.

        Returns
        -------
        str
            The usage text.
        """
        return plain_help(super().get_usage(ctx))

app = typer.Typer(
    name="timeslice",
    help=(
        "Transfer one niche model onto a series of climate time slices: suitability, "
        "reach, refugia and novelty, from one TOML config."
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,  # plain help: fast, and no type labels such as <bool> or <path>
)

ConfigArg = Annotated[Path, typer.Argument(metavar="CONFIG", help="Run configuration (TOML).",
                                            show_default=False)]
RunDirArg = Annotated[Path, typer.Argument(metavar="RUN_DIR", help="Output folder of a finished run.",
                                            show_default=False)]
OutOpt = Annotated[Path, typer.Option("--out", "-o", metavar="DIR", help="Output folder (created if needed).")]
VerboseOpt = Annotated[int, typer.Option("--verbose", "-v", count=True, show_default=False,
                                         help="More detail (-v: files and timings).")]
ForceOpt = Annotated[bool, typer.Option("--force", show_default=False,
                                        help="Recompute every stage, ignoring finished ones.")]
SchedulerOpt = Annotated[
    Optional[str],
    typer.Option("--scheduler", metavar="ADDRESS", show_default=False,
                 help="'threads' (default) or the address of a dask.distributed scheduler."),
]
WorkersOpt = Annotated[
    Optional[int], typer.Option("--workers", metavar="N", show_default=False,
                                help="Start a local dask cluster with N workers.")
]
ChunksOpt = Annotated[
    Optional[int], typer.Option("--chunks", metavar="CELLS", show_default=False,
                                help="Chunk size in grid cells along lat and lon.")
]


#: Longest error line the command prints; a longer message is cut at a word boundary.
MAX_ERROR_LINE = 400


def _fail(err: TimesliceError) -> None:
    # always one line: a message quoting a file's own error text may hold line breaks
    typer.echo(f"timeslice: error: {shorten(str(err), MAX_ERROR_LINE)}", err=True)
    raise typer.Exit(code=2)


def _os_failure(err: OSError) -> TimesliceError | None:
    """One line for an operating-system error on a named file (a read-only or full disk met
    where no stage expected it), or None for anything else."""
    if err.filename is None:
        return None
    if err.errno in (errno.ENOSPC, errno.EDQUOT, errno.EROFS):  # only writes meet these
        return write_failure(err.filename, err)
    return InputFileError(f"{err.filename}: {err.strerror or err}; check that it exists and "
                          "that you may read and write there, then run again")


#: The progress line being drawn, ended before a warning is printed.
_ACTIVE: list = []


def _show_warning(message, category, filename, lineno, file=None, line=None):
    """Warnings of the tool are one line on stderr; others keep Python's format."""
    for bar in _ACTIVE:
        bar.finish()  # a warning starts on a line of its own
    if issubclass(category, TimesliceWarning):
        typer.echo(f"timeslice: warning: {message}", err=True)
    else:
        _default_showwarning(message, category, filename, lineno, file, line)


def _guard(func):
    """Turn any TimesliceError, and an OS error on a named file, into one line on stderr and
    exit code 2 (other exceptions are bugs and keep their traceback)."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        saved = warnings.showwarning
        warnings.showwarning = _show_warning
        try:
            return func(*args, **kwargs)
        except TimesliceError as err:
            _fail(err)
        except OSError as err:
            failure = _os_failure(err)
            if failure is None:
                raise
            _fail(failure)
        finally:
            warnings.showwarning = saved

    return wrapper


@contextlib.contextmanager
def _progress(enabled: bool = True) -> Iterator:
    """Yield a progress callback: counts and time left on a terminal (stderr), nothing when
    stderr is piped or redirected (:func:`timeslice.progress.progress_for`)."""
    from timeslice.progress import TerminalProgress, no_progress, progress_for

    progress = progress_for(sys.stderr) if enabled else no_progress
    if not isinstance(progress, TerminalProgress):
        yield progress
        return
    _ACTIVE.append(progress)
    try:
        yield progress
    finally:
        progress.finish()
        _ACTIVE.remove(progress)


def _version(value: bool) -> None:
    if value:
        from timeslice import __version__

        typer.echo(f"timeslice {__version__}")
        raise typer.Exit()


@app.callback()
def main(
    version: Annotated[
        bool, typer.Option("--version", callback=_version, is_eager=True, show_default=False,
                           help="Print the version.")
    ] = False,
) -> None:
    """timeslice command line.

    Parameters
    ----------
    version : bool
        Print the version and stop.

    Returns
    -------
    None
    """


def _apply_overrides(cfg, scheduler, workers, chunks):
    if scheduler is not None:
        cfg.run.scheduler = scheduler
    if workers is not None:
        cfg.run.workers = workers
    if chunks is not None:
        cfg.transfer.chunks = chunks
    return cfg


def _report_done(result, verbose: int) -> None:
    from timeslice.report.narrative import findings

    # the headline numbers, from the same key-results rows as the report's cards
    for line in findings(getattr(result, "key_results", None)):
        typer.echo(line)
    typer.echo(f"outputs in {result.out.resolve()}")
    for name, path in result.paths.items():
        typer.echo(f"  {name:<12} {path}")
    if verbose:
        for stage, secs in result.timings.items():
            typer.echo(f"  {stage:<12} {secs:8.2f} s")


@app.command(
    cls=PlainCommand,
    short_help="Run every stage of CONFIG, from climate files to the report.",
    help="Run every stage of CONFIG: harmonise, fit, transfer, summarise, report.",
)
@_guard
def run(
    config: ConfigArg,
    out: OutOpt = Path("timeslice_out"),
    force: ForceOpt = False,
    scheduler: SchedulerOpt = None,
    workers: WorkersOpt = None,
    chunks: ChunksOpt = None,
    verbose: VerboseOpt = 0,
    data_format: Annotated[
        Optional[str], typer.Option("--format", metavar="FORMAT", show_default=False,
                                    help="Data files: 'netcdf' (series.nc) or 'zarr' (series.zarr).")
    ] = None,
) -> None:
    """``timeslice run CONFIG``: every stage, outputs in `out`.

    Parameters
    ----------
    config : pathlib.Path
        Run configuration (TOML).
    out : pathlib.Path
        Output folder.
    force : bool
        Recompute every stage.
    scheduler, workers, chunks : optional
        Override ``run.scheduler``, ``run.workers`` and ``transfer.chunks``.
    verbose : int
        With 1 or more, print the time of each stage.
    data_format : str, optional
        Override ``output.format`` (``netcdf`` or ``zarr``).

    Returns
    -------
    None
    """
    from timeslice.config import load_config
    from timeslice.commands import run as run_pipeline

    cfg = _apply_overrides(load_config(config), scheduler, workers, chunks)
    if data_format is not None:
        if data_format not in ("netcdf", "zarr"):
            from timeslice.errors import ConfigError

            raise ConfigError(f"--format must be 'netcdf' or 'zarr', got {data_format!r}")
        cfg.output.format = data_format
    with _progress() as progress:
        result = run_pipeline(cfg, out, force=force, progress=progress, command=sys.argv)
    _report_done(result, verbose)


@app.command(
    cls=PlainCommand,
    short_help="Generate the invented demo scenario and run it end to end.",
    help="Generate the invented demo scenario into OUT/demo_data and run it end to end.",
)
@_guard
def demo(
    out: OutOpt = Path("demo_run"),
    resolution: Annotated[
        float, typer.Option("--resolution", metavar="DEGREES",
                            help="Fine-grid cell size of the invented demo, degrees.")
    ] = 0.1,
    force: ForceOpt = False,
    verbose: VerboseOpt = 0,
) -> None:
    """``timeslice demo``: generate the invented scenario and run it.

    Parameters
    ----------
    out : pathlib.Path
        Output folder (the data go to ``out/demo_data``).
    resolution : float
        Fine-grid cell size of the demo, degrees.
    force : bool
        Recompute every stage.
    verbose : int
        With 1 or more, print the time of each stage.

    Returns
    -------
    None
    """
    from timeslice.config import load_config
    from timeslice.demo import generate
    from timeslice.demo_config import write_config
    from timeslice.commands import run as run_pipeline

    data = Path(out) / "demo_data"
    typer.echo(f"generating the invented demo scenario in {data} ...")
    generate(data, resolution=resolution)
    cfg_path = write_config(data / "demo.toml")
    cfg = load_config(cfg_path)
    with _progress() as progress:
        result = run_pipeline(cfg, out, force=force, progress=progress, command=sys.argv)
    _report_done(result, verbose)


@app.command(
    cls=PlainCommand,
    short_help="Put every slice on the common grid; one NetCDF per slice.",
    help="Put every slice on the common grid and variable set; one NetCDF per slice.",
)
@_guard
def harmonise(
    config: ConfigArg,
    out: OutOpt = Path("timeslice_out"),
    force: ForceOpt = False,
    verbose: VerboseOpt = 0,
) -> None:
    """``timeslice harmonise CONFIG``: the harmonised slices in ``out/harmonised``.

    Parameters
    ----------
    config : pathlib.Path
        Run configuration (TOML).
    out : pathlib.Path
        Output folder.
    force : bool
        Recompute, ignoring the cache.
    verbose : int
        With 1 or more, list every file written and the time taken.

    Returns
    -------
    None
    """
    from timeslice.config import load_config
    from timeslice.commands import run_harmonise

    started = time.perf_counter()
    with _progress() as progress:
        paths = run_harmonise(load_config(config), out, force=force, progress=progress)
    typer.echo(f"{len(paths) - 2} harmonised slices in {Path(out).resolve() / 'harmonised'}")
    _list_files(paths, verbose, started)


@app.command(
    cls=PlainCommand,
    short_help="Clean the records and fit the niche; write the model.",
    help="Clean the records and fit the niche on the baseline; write the model and its "
         "evaluation.",
)
@_guard
def fit(
    config: ConfigArg,
    out: OutOpt = Path("timeslice_out"),
    force: ForceOpt = False,
    verbose: VerboseOpt = 0,
) -> None:
    """``timeslice fit CONFIG``: the fitted model and its tables in `out`.

    Parameters
    ----------
    config : pathlib.Path
        Run configuration (TOML).
    out : pathlib.Path
        Output folder.
    force : bool
        Recompute, ignoring the cache.
    verbose : int
        With 1 or more, print the time taken.

    Returns
    -------
    None
    """
    from timeslice.config import load_config
    from timeslice.commands import run_fit

    started = time.perf_counter()
    with _progress() as progress:
        paths = run_fit(load_config(config), out, force=force, progress=progress)
    for name, path in paths.items():
        typer.echo(f"  {name:<12} {path}")
    _list_files({}, verbose, started)


@app.command(
    cls=PlainCommand,
    short_help="Summarise a finished run again with other series options.",
    help="Recompute change, stability, refugia, movement and ensembles of a finished run with "
         "other series options, and refresh its tables, maps, plots, report and manifest "
         "(harmonised slices, the fit and the transfers come from the run's cache).",
)
@_guard
def summarise(
    run_dir: RunDirArg,
    reference: Annotated[
        Optional[str], typer.Option("--reference", metavar="SLICE", show_default=False,
                                    help="Slice label to compare against (default: the run's).")
    ] = None,
    rate: Annotated[Optional[str], typer.Option("--rate", metavar="RATE", show_default=False,
                                                help="Movement rate, e.g. '500 km/kyr'.")] = None,
    window: Annotated[
        Optional[list[str]],
        typer.Option("--window", metavar="SLICE", show_default=False,
                     help="Slice label or period a refugium must be suitable in (repeat)."),
    ] = None,
    dated_records: Annotated[
        Optional[Path], typer.Option("--dated-records", metavar="CSV", show_default=False,
                                     help="CSV of dated records for the hindcast check.")
    ] = None,
    out: Annotated[
        Optional[Path], typer.Option("--out", "-o", metavar="DIR", show_default=False,
                                     help="Write into this folder instead, leaving the run as "
                                          "it is.")
    ] = None,
    verbose: VerboseOpt = 0,
) -> None:
    """``timeslice summarise RUN_DIR``: the series stage and the report again.

    Parameters
    ----------
    run_dir : pathlib.Path
        Output folder of a finished run.
    reference, rate, window, dated_records : optional
        New series options (None keeps the run's own).
    out : pathlib.Path, optional
        Write into this folder instead of `run_dir`.
    verbose : int
        With 1 or more, print the time of each stage.

    Returns
    -------
    None
    """
    from timeslice.commands import run_summarise

    with _progress() as progress:
        result = run_summarise(run_dir, reference=reference, rate=rate, window=window or None,
                               dated_records=dated_records, progress=progress, target=out)
    _report_done(result, verbose)


@app.command(
    cls=PlainCommand,
    short_help="Export the layers of a finished run as GeoTIFF.",
    help="Export the layers of a finished run (one GeoTIFF per layer and slice).",
)
@_guard
def export(
    run_dir: RunDirArg,
    format: Annotated[str, typer.Option("--format", metavar="FORMAT",
                                        help="Export format: geotiff.")] = "geotiff",
    layers: Annotated[
        Optional[str], typer.Option("--layers", metavar="NAMES", show_default=False,
                                    help="Comma-separated layers (default: every layer on the "
                                         "grid).")
    ] = None,
    out: Annotated[
        Optional[Path], typer.Option("--out", "-o", metavar="DIR", show_default=False,
                                     help="Folder for the GeoTIFFs (default: RUN_DIR/geotiff).")
    ] = None,
    verbose: VerboseOpt = 0,
) -> None:
    """``timeslice export RUN_DIR``: one GeoTIFF per layer and slice.

    Parameters
    ----------
    run_dir : pathlib.Path
        Output folder of a finished run.
    format : str
        Export format (``geotiff``).
    layers : str, optional
        Comma-separated layer names (default every layer on the grid).
    out : pathlib.Path, optional
        Folder for the files (default ``run_dir/geotiff``).
    verbose : int
        With 1 or more, list every file written and the time taken.

    Returns
    -------
    None
    """
    from timeslice.commands import run_export

    started = time.perf_counter()
    chosen = [x.strip() for x in layers.split(",") if x.strip()] if layers else None
    if out is not None:
        paths = run_export(run_dir, fmt=format, variables=chosen, target=out)
        typer.echo(f"{len(paths)} files in {Path(out).resolve()}")
        _list_files(dict(enumerate(paths)), verbose, started)
        return
    if (run_dir / "series.nc").is_file() and not os.access(run_dir, os.W_OK):
        # refused before any layer is read: export writes into the run folder
        raise InputFileError(
            f"{run_dir}: the run folder is not writable and `timeslice export` writes its "
            "GeoTIFFs into it (geotiff/); copy the run folder somewhere writable and export the "
            "copy")
    paths = run_export(run_dir, fmt=format, variables=chosen)
    typer.echo(f"{len(paths)} files in {Path(run_dir).resolve() / 'geotiff'}")
    _list_files(dict(enumerate(paths)), verbose, started)


@app.command(
    cls=PlainCommand,
    short_help="Repeat a run from its manifest.",
    help="Repeat a run from its manifest (refused if an input file changed).",
)
@_guard
def rerun(
    manifest: Annotated[Path, typer.Argument(metavar="MANIFEST", show_default=False,
                                             help="manifest.json of an earlier run.")],
    out: Annotated[Optional[Path], typer.Option("--out", "-o", metavar="DIR", show_default=False,
                                                help="Output folder (default: the "
                                                     "manifest's).")] = None,
    verbose: VerboseOpt = 0,
) -> None:
    """``timeslice rerun MANIFEST``: the run again, from the same inputs.

    Parameters
    ----------
    manifest : pathlib.Path
        ``manifest.json`` of an earlier run.
    out : pathlib.Path, optional
        Output folder (default the manifest's).
    verbose : int
        With 1 or more, print the time of each stage.

    Returns
    -------
    None
    """
    from timeslice.commands import rerun as rerun_pipeline

    with _progress() as progress:
        result = rerun_pipeline(manifest, out, progress=progress)
    _report_done(result, verbose)


def _list_files(paths: dict, verbose: int, started: float) -> None:
    """With -v: every file written (when not printed already) and the time taken."""
    if not verbose:
        return
    for name, path in paths.items():
        typer.echo(f"  {name!s:<12} {path}")
    typer.echo(f"  {'time':<12} {time.perf_counter() - started:8.2f} s")


if __name__ == "__main__":  # pragma: no cover
    app()
