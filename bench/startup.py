"""Benchmark of the command line's start-up against the interpreter's floor (run by hand; not a
test).

Each case runs in a fresh interpreter, several times, alternating between cases so that a
burst of load on the shared machine hits every case alike:

- **floor**: ``python -c pass`` (the interpreter alone) and ``python -c "import typer"`` (the
  command-line library the tool is built on, which any typer tool pays);
- **help**: ``timeslice --help`` and ``timeslice run --help`` (what the console script runs:
  ``timeslice.cli.app`` with those arguments);
- **imports**: ``import timeslice`` (the package: lazy), ``import timeslice.cli`` and, for
  scale, ``import timeslice.commands`` (what a run pays before its first stage).

CPU seconds are the child's user + system time (``resource.getrusage(RUSAGE_CHILDREN)``
deltas), which other load disturbs much less than wall time; both are given as min and median
of the repeats, and as ratios to the two floors. One extra run of ``timeslice --help`` under
``python -X importtime`` lists the modules it loads, largest cumulative first. Goal (issue 15):
``timeslice --help`` under 0.3 s. The machine is shared: quote ratios and CPU seconds with the
load average printed beside them.

    python bench/startup.py [--repeats 9] [--docs docs/performance.md]
"""

from __future__ import annotations

import argparse
import os
import platform
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

BEGIN, END = "<!-- startup-bench:begin -->", "<!-- startup-bench:end -->"

#: What the console script ``timeslice`` runs, with the arguments appended.
_SCRIPT = "import sys; from timeslice.cli import app; sys.argv = ['timeslice', *{args!r}]; app()"

#: name -> Python source run with ``python -c``.
CASES = {
    "python -c pass": "pass",
    "import typer": "import typer",
    "timeslice --help": _SCRIPT.format(args=["--help"]),
    "timeslice run --help": _SCRIPT.format(args=["run", "--help"]),
    "import timeslice": "import timeslice",
    "import timeslice.cli": "import timeslice.cli",
    "import timeslice.commands": "import timeslice.commands",
}
FLOORS = ("python -c pass", "import typer")


def _once(code: str, *flags: str) -> tuple[float, float, str]:
    """Run `code` in a fresh interpreter: wall s, CPU s (user + system), stderr."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, *flags, "-c", code], stdout=subprocess.DEVNULL,
                          stderr=subprocess.PIPE, text=True, check=False)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if proc.returncode not in (0,):
        sys.exit(f"bench/startup.py: `python -c {code!r}` failed:\n{proc.stderr}")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu, proc.stderr


def measure(repeats: int) -> dict[str, dict[str, float]]:
    """Wall and CPU seconds of every case, min and median of `repeats` alternating runs.

    Parameters
    ----------
    repeats : int
        Runs of each case (one warm-up run of each is made first and not counted).

    Returns
    -------
    dict of str to dict
        Per case: ``wall_min``, ``wall_median``, ``cpu_min``, ``cpu_median`` (s).
    """
    for code in CASES.values():  # warm the page cache and the bytecode caches
        _once(code)
    runs: dict[str, list[tuple[float, float]]] = {name: [] for name in CASES}
    for _ in range(repeats):
        for name, code in CASES.items():
            wall, cpu, _ = _once(code)
            runs[name].append((wall, cpu))
    out = {}
    for name, pairs in runs.items():
        walls, cpus = [w for w, _ in pairs], [c for _, c in pairs]
        out[name] = {"wall_min": min(walls), "wall_median": statistics.median(walls),
                     "cpu_min": min(cpus), "cpu_median": statistics.median(cpus)}
    return out


def import_profile(code: str, top: int = 12) -> list[tuple[str, float, float]]:
    """The modules `code` imports, from ``python -X importtime``, largest cumulative first.

    Parameters
    ----------
    code : str
        Python source run with ``python -X importtime -c``.
    top : int
        Number of rows to keep.

    Returns
    -------
    list of (str, float, float)
        Module, its own import time and its cumulative import time, ms.
    """
    _, _, err = _once(code, "-X", "importtime")
    rows = []
    for line in err.splitlines():
        if not line.startswith("import time:") or "self [us]" in line:
            continue
        self_us, cum_us, name = line[len("import time:"):].split("|", 2)
        rows.append((name.strip(), int(self_us) / 1000.0, int(cum_us) / 1000.0))
    rows.sort(key=lambda r: -r[2])
    return rows[:top]


def table(results: dict[str, dict[str, float]], repeats: int, load: tuple[float, float]) -> str:
    """The Markdown table of `results`, with the run's conditions.

    Parameters
    ----------
    results : dict
        As returned by :func:`measure`.
    repeats : int
        Runs of each case.
    load : tuple of float
        1-minute load average at the start and at the end.

    Returns
    -------
    str
        A paragraph and the table.
    """
    floor0, floor1 = (results[f]["cpu_median"] for f in FLOORS)
    lines = [
        f"Measured {time.strftime('%Y-%m-%d')} on {os.cpu_count()} cores ({platform.machine()}), "
        f"Python {platform.python_version()}, {repeats} alternating repeats per case after one "
        f"warm-up; load average {load[0]:.1f} at the start, {load[1]:.1f} at the end; "
        "`python bench/startup.py`.",
        "",
        "| case | wall s min | wall s median | CPU s min | CPU s median | CPU / `python -c pass` "
        "| CPU / `import typer` |",
        "|---|---|---|---|---|---|---|",
    ]
    for name, r in results.items():
        lines.append(f"| `{name}` | {r['wall_min']:.3f} | {r['wall_median']:.3f} | "
                     f"{r['cpu_min']:.3f} | {r['cpu_median']:.3f} | "
                     f"{r['cpu_median'] / floor0:.1f} | {r['cpu_median'] / floor1:.2f} |")
    return "\n".join(lines)


def _write_docs(path: Path, text: str) -> None:
    doc = path.read_text()
    if BEGIN not in doc or END not in doc:
        sys.exit(f"{path}: no {BEGIN} … {END} markers; add them under the start-up heading")
    head, rest = doc.split(BEGIN, 1)
    _, tail = rest.split(END, 1)
    path.write_text(f"{head}{BEGIN}\n{text}\n{END}{tail}")


def main(argv: list[str] | None = None) -> dict[str, dict[str, float]]:
    """Run the benchmark and print its table.

    Parameters
    ----------
    argv : list of str, optional
        Command-line arguments (default: ``sys.argv[1:]``).

    Returns
    -------
    dict of str to dict
        The measured seconds per case (see :func:`measure`).
    """
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=9, help="runs of each case (default 9)")
    parser.add_argument("--docs", type=Path, default=None,
                        help="write the table between the start-up markers of this file")
    parser.add_argument("--quick", action="store_true",
                        help="3 runs of each case: a smoke run (bench/run_all.py --quick)")
    args = parser.parse_args(argv)
    if args.quick:
        args.repeats = min(args.repeats, 3)
    load0 = os.getloadavg()[0]
    results = measure(args.repeats)
    load1 = os.getloadavg()[0]
    text = table(results, args.repeats, (load0, load1))
    print(text)
    help_cpu = results["timeslice --help"]["cpu_median"]
    help_wall = results["timeslice --help"]["wall_min"]
    # judged on CPU seconds, which other load on the shared machine hardly changes (the wall
    # time of a lone process is its CPU time plus a little I/O); the fastest wall time beside it
    verdict = "met" if help_cpu < 0.3 else "missed"
    summary = (f"Goal `timeslice --help` under 0.3 s: **{verdict}** (median CPU {help_cpu:.3f} s, "
               f"{help_cpu / results['import typer']['cpu_median']:.2f}x `import typer`; "
               f"fastest wall {help_wall:.3f} s at load {max(load0, load1):.1f}).")
    print("\n" + summary)
    print("\nlargest imports of `timeslice --help` (python -X importtime, ms):")
    print(f"  {'module':<40} {'self':>8} {'cumulative':>11}")
    for name, own, cum in import_profile(CASES["timeslice --help"]):
        print(f"  {name:<40} {own:8.1f} {cum:11.1f}")
    if args.docs is not None:
        _write_docs(args.docs, text + "\n\n" + summary)
    return results


if __name__ == "__main__":  # pragma: no cover
    main()
