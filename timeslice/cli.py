"""Command line: a thin typer layer over :mod:`timeslice.pipeline` (no science here)."""

from __future__ import annotations

import contextlib
import errno
import functools
import os
import sys
import warnings
from collections.abc import Iterator
from pathlib import Path
from typing import Annotated, Optional

import typer

from timeslice import __version__
from timeslice.errors import (
    InputFileError,
    TimesliceError,
    TimesliceWarning,
    shorten,
    write_failure,
)

_default_showwarning = warnings.showwarning

app = typer.Typer(
    name="timeslice",
    help=(
        "Transfer one niche model onto a series of climate time slices: suitability, "
        "reach, refugia and novelty, from one TOML config."
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)

OutOpt = Annotated[Path, typer.Option("--out", "-o", help="Output folder (created if needed).")]
VerboseOpt = Annotated[int, typer.Option("--verbose", "-v", count=True, help="More detail (-v timings).")]
ForceOpt = Annotated[bool, typer.Option("--force", help="Recompute every stage, ignoring finished ones.")]
SchedulerOpt = Annotated[
    Optional[str],
    typer.Option("--scheduler", help="'threads' (default) or the address of a dask.distributed scheduler."),
]
WorkersOpt = Annotated[
    Optional[int], typer.Option("--workers", help="Start a local dask cluster with N workers.")
]
ChunksOpt = Annotated[
    Optional[int], typer.Option("--chunks", help="Chunk size in grid cells along lat and lon.")
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


def _show_warning(message, category, filename, lineno, file=None, line=None):
    """Warnings of the tool are one line on stderr; others keep Python's format."""
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
def _progress(enabled: bool) -> Iterator:
    """Yield a progress callback: rich bars on a terminal, nothing in pipes."""
    if not enabled or not sys.stderr.isatty():
        yield lambda stage, done, total: None
        return
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    with Progress(
        TextColumn("{task.description:<10}"), BarColumn(), MofNCompleteColumn(),
        TimeElapsedColumn(), transient=False,
    ) as bar:
        tasks: dict[str, int] = {}

        def update(stage: str, done: int, total: int) -> None:
            if stage not in tasks:
                tasks[stage] = bar.add_task(stage, total=total)
            bar.update(tasks[stage], completed=done, total=total)

        yield update


def _version(value: bool) -> None:
    if value:
        typer.echo(f"timeslice {__version__}")
        raise typer.Exit()


@app.callback()
def main(
    version: Annotated[
        bool, typer.Option("--version", callback=_version, is_eager=True, help="Print the version.")
    ] = False,
) -> None:
    """timeslice command line."""


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


@app.command()
@_guard
def run(
    config: Annotated[Path, typer.Argument(help="Run configuration (TOML).")],
    out: OutOpt = Path("timeslice_out"),
    force: ForceOpt = False,
    scheduler: SchedulerOpt = None,
    workers: WorkersOpt = None,
    chunks: ChunksOpt = None,
    verbose: VerboseOpt = 0,
    data_format: Annotated[
        Optional[str], typer.Option("--format", help="Data files: 'netcdf' (series.nc) or 'zarr' (series.zarr).")
    ] = None,
) -> None:
    """Run every stage of CONFIG: harmonise, fit, transfer, summarise, report."""
    from timeslice.config import load_config
    from timeslice.commands import run as run_pipeline

    cfg = _apply_overrides(load_config(config), scheduler, workers, chunks)
    if data_format is not None:
        if data_format not in ("netcdf", "zarr"):
            from timeslice.errors import ConfigError

            raise ConfigError(f"--format must be 'netcdf' or 'zarr', got {data_format!r}")
        cfg.output.format = data_format
    with _progress(True) as progress:
        result = run_pipeline(cfg, out, force=force, progress=progress, command=sys.argv)
    _report_done(result, verbose)


@app.command()
@_guard
def demo(
    out: OutOpt = Path("demo_run"),
    resolution: Annotated[
        float, typer.Option("--resolution", help="Fine-grid cell size of the invented demo, degrees.")
    ] = 0.1,
    force: ForceOpt = False,
    verbose: VerboseOpt = 0,
) -> None:
    """Generate the invented demo scenario into OUT/demo_data and run it end to end."""
    from timeslice.config import load_config
    from timeslice.demo import generate
    from timeslice.demo_config import write_config
    from timeslice.commands import run as run_pipeline

    data = Path(out) / "demo_data"
    typer.echo(f"generating the invented demo scenario in {data} ...")
    generate(data, resolution=resolution)
    cfg_path = write_config(data / "demo.toml")
    cfg = load_config(cfg_path)
    with _progress(True) as progress:
        result = run_pipeline(cfg, out, force=force, progress=progress, command=sys.argv)
    _report_done(result, verbose)


@app.command()
@_guard
def harmonise(
    config: Annotated[Path, typer.Argument(help="Run configuration (TOML).")],
    out: OutOpt = Path("timeslice_out"),
    force: ForceOpt = False,
) -> None:
    """Put every slice on the common grid and variable set; one NetCDF per slice."""
    from timeslice.config import load_config
    from timeslice.commands import run_harmonise

    with _progress(True) as progress:
        paths = run_harmonise(load_config(config), out, force=force, progress=progress)
    typer.echo(f"{len(paths) - 2} harmonised slices in {Path(out).resolve() / 'harmonised'}")


@app.command()
@_guard
def fit(
    config: Annotated[Path, typer.Argument(help="Run configuration (TOML).")],
    out: OutOpt = Path("timeslice_out"),
    force: ForceOpt = False,
) -> None:
    """Clean the records and fit the niche on the baseline; write the model and its evaluation."""
    from timeslice.config import load_config
    from timeslice.commands import run_fit

    paths = run_fit(load_config(config), out, force=force)
    for name, path in paths.items():
        typer.echo(f"  {name:<12} {path}")


@app.command()
@_guard
def summarise(
    run_dir: Annotated[Path, typer.Argument(help="Output folder of a finished run.")],
    reference: Annotated[
        Optional[str], typer.Option("--reference", help="Slice label to compare against (default: the run's).")
    ] = None,
    rate: Annotated[Optional[str], typer.Option("--rate", help="Movement rate, e.g. '500 km/kyr'.")] = None,
    window: Annotated[
        Optional[list[str]],
        typer.Option("--window", help="Slice label or period a refugium must be suitable in (repeat)."),
    ] = None,
    dated_records: Annotated[
        Optional[Path], typer.Option("--dated-records", help="CSV of dated records for the hindcast check.")
    ] = None,
    out: Annotated[
        Optional[Path], typer.Option("--out", "-o", help="Write into this folder instead, leaving the run as it is.")
    ] = None,
    verbose: VerboseOpt = 0,
) -> None:
    """Recompute change, stability, refugia, movement and ensembles of a finished run with
    other series options, and refresh its tables, maps, plots, report and manifest (harmonised
    slices, the fit and the transfers come from the run's cache)."""
    from timeslice.commands import run_summarise

    with _progress(True) as progress:
        result = run_summarise(run_dir, reference=reference, rate=rate, window=window or None,
                               dated_records=dated_records, progress=progress, target=out)
    _report_done(result, verbose)


@app.command()
@_guard
def export(
    run_dir: Annotated[Path, typer.Argument(help="Output folder of a finished run.")],
    format: Annotated[str, typer.Option("--format", help="Export format: geotiff.")] = "geotiff",
    layers: Annotated[
        Optional[str], typer.Option("--layers", help="Comma-separated layers (default: every layer on the grid).")
    ] = None,
    out: Annotated[
        Optional[Path], typer.Option("--out", "-o", help="Folder for the GeoTIFFs (default: RUN_DIR/geotiff).")
    ] = None,
) -> None:
    """Export the layers of a finished run (one GeoTIFF per layer and slice)."""
    from timeslice.commands import run_export

    chosen = [x.strip() for x in layers.split(",") if x.strip()] if layers else None
    if out is not None:
        paths = run_export(run_dir, fmt=format, variables=chosen, target=out)
        typer.echo(f"{len(paths)} files in {Path(out).resolve()}")
        return
    if (run_dir / "series.nc").is_file() and not os.access(run_dir, os.W_OK):
        # refused before any layer is read: export writes into the run folder
        raise InputFileError(
            f"{run_dir}: the run folder is not writable and `timeslice export` writes its "
            "GeoTIFFs into it (geotiff/); copy the run folder somewhere writable and export the "
            "copy")
    paths = run_export(run_dir, fmt=format, variables=chosen)
    typer.echo(f"{len(paths)} files in {Path(run_dir).resolve() / 'geotiff'}")


@app.command()
@_guard
def rerun(
    manifest: Annotated[Path, typer.Argument(help="manifest.json of an earlier run.")],
    out: Annotated[Optional[Path], typer.Option("--out", "-o", help="Output folder (default: the manifest's).")] = None,
    verbose: VerboseOpt = 0,
) -> None:
    """Repeat a run from its manifest (refused if an input file changed)."""
    from timeslice.commands import rerun as rerun_pipeline

    with _progress(True) as progress:
        result = rerun_pipeline(manifest, out, progress=progress)
    _report_done(result, verbose)


if __name__ == "__main__":  # pragma: no cover
    app()
