"""One run per output folder: the manifest's status, stale outputs and unfinished runs.

A run writes ``manifest.json`` first with ``status = "incomplete"`` (:func:`begin_run`) and
last with ``"complete"``; :func:`finish_run` lists the files the run wrote and removes what an
earlier run left, so the folder always holds one run. Commands that read a run
(``export``, ``summarise``, ``rerun``) refuse an unfinished one (:func:`require_complete`).
"""

from __future__ import annotations

import contextlib
import json
import sys
import time
from pathlib import Path
from typing import Any

from timeslice.errors import DataError

__all__ = ["RUN_FILES", "RUN_FOLDERS", "begin_run", "finish_run", "make_out", "require_complete",
           "run_outputs"]

#: What a run writes in its folder (files, and folders whose every file is an output). A file
#: there that the current run did not write is left over from an earlier run and is removed
#: when the run completes, so the folder always holds one run.
RUN_FILES = ("series.nc", "ensemble.nc", "summary.csv", "report.html", "assemblage.nc")
RUN_FOLDERS = ("maps", "plots", "tables", "geotiff", "vector", "species", "series.zarr",
               "ensemble.zarr")


def make_out(out: Path) -> None:
    """Create the output folder, or stop with one line if it cannot be written.

    Parameters
    ----------
    out : Path
        The ``--out`` folder.
    """
    from timeslice.io import writable_folder

    writable_folder(out, what="--out")


def run_outputs(out: Path) -> list[Path]:
    """Every output file of a run found in `out` (the run's files and folders).

    Parameters
    ----------
    out : Path
        Run folder.

    Returns
    -------
    list of Path
    """
    files = [out / f for f in RUN_FILES if (out / f).is_file()]
    for d in RUN_FOLDERS:
        if (out / d).is_dir():
            files += sorted(p for p in (out / d).rglob("*") if p.is_file())
    return files


def begin_run(out: Path, config: dict[str, Any], config_path: str, seed: int,
              command: list[str] | None) -> int:
    """Mark the folder as holding an unfinished run; remove temporary files a killed run left.

    Parameters
    ----------
    out : Path
        Run folder.
    config : dict
        The run's configuration (JSON-ready), recorded in the manifest.
    config_path : str
        Where the configuration came from.
    seed : int
        The run's seed.
    command : list of str or None
        The command line (default ``sys.argv``).

    Returns
    -------
    int
        The start time (ns) that tells this run's outputs from older ones.
    """
    from timeslice.report.manifest import write_manifest

    for tmp in out.rglob(".*.part"):
        with contextlib.suppress(OSError):
            tmp.unlink()
    started = time.time_ns()
    write_manifest({"status": "incomplete", "config": config, "config_path": config_path,
                    "inputs": [], "seed": seed, "command": command or sys.argv},
                   out / "manifest.json")
    return started


def finish_run(out: Path, started: int) -> tuple[list[str], list[str]]:
    """List this run's files and remove the stale files of earlier runs.

    Parameters
    ----------
    out : Path
        Run folder.
    started : int
        Start time from :func:`begin_run`.

    Returns
    -------
    tuple of (list of str, list of str)
        Files this run wrote and stale files removed, as paths relative to `out`.
    """
    written, removed = [], []
    for p in run_outputs(out):
        rel = p.relative_to(out).as_posix()
        if p.stat().st_mtime_ns >= started:
            written.append(rel)
        else:
            with contextlib.suppress(OSError):
                p.unlink()
                removed.append(rel)
    for d in RUN_FOLDERS:  # folders emptied by the clean-up go too
        for sub in sorted((out / d).rglob("*"), reverse=True) if (out / d).is_dir() else []:
            if sub.is_dir() and not any(sub.iterdir()):
                sub.rmdir()
        if (out / d).is_dir() and not any((out / d).iterdir()):
            (out / d).rmdir()
    return sorted(written), sorted(removed)


def require_complete(out: Path, what: str) -> None:
    """Refuse to read a run whose manifest says it did not finish.

    Parameters
    ----------
    out : Path
        Run folder.
    what : str
        The command that wants to read it, for the message.

    Raises
    ------
    DataError
        If ``manifest.json`` says the run is unfinished.
    """
    path = out / "manifest.json"
    if not path.is_file():
        return
    try:
        status = json.loads(path.read_text(encoding="utf-8")).get("status", "complete")
    except (ValueError, OSError, AttributeError):  # not a manifest: read_manifest says so
        return
    if status != "complete":
        raise DataError(
            f"{out}: the run in this folder did not finish (manifest.json says {status!r}), so "
            f"its outputs may be of two runs; finish it with `timeslice run CONFIG --out {out}` "
            f"(finished stages are reused) before `{what}`"
        )
