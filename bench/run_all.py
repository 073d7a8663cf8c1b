"""Run every benchmark, each in a fresh process, and print the ratios it reports.

Usage (by hand; nothing here is a timed test)::

    python bench/run_all.py               # every bench at its default sizes
    python bench/run_all.py --quick       # a smoke run of each (small sizes)
    python bench/run_all.py --only transfer,report
    python bench/run_all.py --write-docs  # each bench also writes its table into
                                          # docs/performance.md (between its own markers)

Each bench measures its own floor in the same run and prints its ratios to it with the load
average; this script runs them one after another (so they do not compete for the two cores),
records the load average before and after each, and ends with the lines of every bench that
carry a ratio, so the whole picture fits on one screen. The truth benchmark (bench/truth.py)
measures accuracy, not speed, and is run only when asked (``--only truth``).
"""

from __future__ import annotations

import argparse
import os
import re
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
#: bench name -> (script, what it measures); run in this order
BENCHES = {
    "startup": ("startup.py", "import and --help time against python -c pass / import typer"),
    "harmonise": ("harmonise.py", "harmonise against reading + writing once; peak memory by size"),
    "niche": ("niche.py", "forest/ensemble fit and prediction per cell; point process vs ellipsoid"),
    "transfer": ("transfer.py", "transfer (ellipsoid + MESS + ExDet) against the I/O floor"),
    "cluster": ("cluster.py", "LocalCluster of 4 workers against threads; identical values"),
    "report": ("report.py", "report stage CPU s and share of the demo; plain-matplotlib floor"),
}
OPTIONAL = {"truth": ("truth.py", "accuracy against invented worlds with a known answer")}
RATIO = re.compile(r"(ratio|×|x the floor|/ floor|share|%|goal)", re.IGNORECASE)


def _load() -> str:
    try:
        return " ".join(f"{x:.2f}" for x in os.getloadavg())
    except OSError:  # pragma: no cover - not on this platform
        return "n/a"


def main(argv: list[str] | None = None) -> int:
    """Run the benches; returns 0 when every bench ran, 1 otherwise.

    Parameters
    ----------
    argv : list of str, optional
        Command-line arguments (default ``sys.argv[1:]``).

    Returns
    -------
    int
        Exit status.
    """
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small sizes: a smoke run of each")
    ap.add_argument("--only", default="", help="comma-separated bench names")
    ap.add_argument("--write-docs", action="store_true",
                    help="each bench writes its table into docs/performance.md")
    args = ap.parse_args(argv)
    table = {**BENCHES, **OPTIONAL}
    names = [n.strip() for n in args.only.split(",") if n.strip()] or list(BENCHES)
    unknown = [n for n in names if n not in table]
    if unknown:
        ap.error(f"unknown bench {unknown}; choose from {sorted(table)}")
    failed, lines = [], []
    for name in names:
        script, what = table[name]
        path = HERE / script
        if not path.is_file():
            print(f"== {name}: {script} not found, skipped")
            failed.append(name)
            continue
        cmd = [sys.executable, str(path)]
        cmd += ["--quick"] if args.quick else []
        cmd += ["--write-docs"] if args.write_docs else []
        print(f"== {name}: {what}\n   load average before: {_load()}", flush=True)
        t0, c0 = time.perf_counter(), os.times()
        proc = subprocess.run(cmd, capture_output=True, text=True, cwd=HERE.parent)
        c1 = os.times()
        cpu = (c1.children_user - c0.children_user) + (c1.children_system - c0.children_system)
        print(proc.stdout, end="")
        if proc.returncode:
            print(proc.stderr[-2000:], end="")
            failed.append(name)
        print(f"   {name}: exit {proc.returncode}, {time.perf_counter() - t0:.1f} s wall, "
              f"{cpu:.1f} CPU s; load average after: {_load()}", flush=True)
        lines += [f"{name}: {ln.strip()}" for ln in proc.stdout.splitlines()
                  if RATIO.search(ln) and ln.strip()]
    print("\n== ratios reported")
    print("\n".join(lines) if lines else "(none)")
    if failed:
        print(f"\n== failed or missing: {', '.join(failed)}")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
