"""Command line: help on every command, one-line errors with exit code 2."""

from __future__ import annotations

import pytest
from typer.testing import CliRunner

from timeslice import __version__
from timeslice.cli import app
from timeslice.demo_config import render_demo_config

runner = CliRunner()


def _one_line_error(result):
    assert result.exit_code == 2, result.output
    text = result.stderr.strip()
    assert text.startswith("timeslice: error: ")
    assert "\n" not in text and "Traceback" not in text
    return text


def test_version():
    result = runner.invoke(app, ["--version"])
    assert result.exit_code == 0
    assert __version__ in result.stdout


@pytest.mark.parametrize("command", ["run", "demo", "harmonise", "fit", "summarise", "export", "rerun"])
def test_help_on_every_command(command):
    result = runner.invoke(app, [command, "--help"])
    assert result.exit_code == 0, result.output
    assert "Usage" in result.stdout


def test_missing_config(tmp_path):
    text = _one_line_error(runner.invoke(app, ["run", str(tmp_path / "none.toml"), "-o", str(tmp_path)]))
    assert "none.toml" in text and "not found" in text


def test_not_toml(tmp_path):
    p = tmp_path / "bad.toml"
    p.write_text("[[[")
    text = _one_line_error(runner.invoke(app, ["run", str(p), "-o", str(tmp_path / "o")]))
    assert "bad.toml" in text and "TOML" in text


def test_misspelled_key(tmp_path):
    p = tmp_path / "run.toml"
    p.write_text(render_demo_config(".").replace("n_background", "n_backgrund"))
    text = _one_line_error(runner.invoke(app, ["run", str(p), "-o", str(tmp_path / "o")]))
    assert "niche.n_backgrund" in text and "n_background" in text


def test_missing_input_file(tmp_path):
    p = tmp_path / "run.toml"
    p.write_text(render_demo_config("."))
    text = _one_line_error(runner.invoke(app, ["run", str(p), "-o", str(tmp_path / "o")]))
    assert "climate.baseline" in text and "baseline.nc" in text


# --- help text, options, start-up ----------------------------------------------------------

COMMANDS = ["run", "demo", "harmonise", "fit", "summarise", "export", "rerun"]

#: Type labels and placeholder noise that must not show in help: typer's ``<bool>``-style
#: labels, click's upper-case type names, braces around required arguments, empty defaults.
NOISE = [r"<\w[\w\[\]|, ]*>", r"\bTEXT\b", r"\bINTEGER\b", r"\bFLOAT\b", r"\bPATH\b",
         r"\bBOOLEAN\b", r"\{[A-Za-z_]+\}", r"\[default: None\]", r"\[default: False\]",
         r"\[default: 0\]", r"--no-force"]


def _help(*args: str) -> str:
    result = runner.invoke(app, [*args, "--help"], env={"COLUMNS": "100"})
    assert result.exit_code == 0, result.output
    return result.stdout


@pytest.mark.parametrize("command", ["", *COMMANDS])
def test_help_has_no_stray_metavars(command):
    import re

    text = _help(command) if command else _help()
    for pattern in NOISE:
        found = re.findall(pattern, text)
        assert not found, f"`timeslice {command} --help` shows {found}:\n{text}"


def test_main_help_lists_every_command_in_full():
    text = _help()
    for command in COMMANDS:
        line = next(l for l in text.splitlines() if l.strip().startswith(command + " "))
        assert not line.rstrip().endswith("..."), line


@pytest.mark.parametrize("command", COMMANDS)
def test_every_command_has_verbose(command):
    text = _help(command)
    assert "-v, --verbose" in text, text


@pytest.mark.parametrize("command, options", [
    ("export", ["--layers NAMES", "-o, --out DIR", "--format FORMAT"]),
    ("summarise", ["-o, --out DIR", "--reference SLICE", "--window SLICE", "--rate RATE"]),
    ("run", ["-o, --out DIR", "--force", "--workers N"]),
])
def test_named_options_exist(command, options):
    text = _help(command)
    for option in options:
        assert option in text, (option, text)


def test_arguments_are_named_plainly():
    assert "Usage: timeslice run [OPTIONS] CONFIG" in _help("run")
    assert "Usage: timeslice export [OPTIONS] RUN_DIR" in _help("export")
    assert "Usage: timeslice rerun [OPTIONS] MANIFEST" in _help("rerun")


def test_plain_help_rewrites_type_labels_and_braces():
    from timeslice.cli import plain_help

    text = "Usage: timeslice run [OPTIONS] {CONFIG}\n\nArguments:\n  CONFIG <path>  Run it.\n"
    assert plain_help(text) == ("Usage: timeslice run [OPTIONS] CONFIG\n\nArguments:\n"
                                "  CONFIG  Run it.\n")
    assert plain_help("  -o, --out DIR  Output folder.") == "  -o, --out DIR  Output folder."


#: Modules the help must not load (each costs tenths of a second to seconds of CPU).
HEAVY = ["scipy", "matplotlib", "sklearn", "xarray", "dask", "cartopy", "pandas", "netCDF4",
         "rasterio", "shapely", "pint", "distributed", "numpy", "rich", "timeslice.config",
         "timeslice.pipeline"]


def test_help_loads_no_heavy_module():
    """`timeslice --help` and every `timeslice COMMAND --help`, in a fresh interpreter: none of
    the scientific stack is imported (not a timed test; bench/startup.py measures the time)."""
    import json
    import subprocess
    import sys

    code = (
        "import json, sys\n"
        "from timeslice.cli import app\n"
        "for args in [['--help']] + [[c, '--help'] for c in %r]:\n"
        "    try:\n"
        "        app(args)\n"
        "    except SystemExit:\n"
        "        pass\n"
        "print(json.dumps(sorted(m for m in %r if m in sys.modules)), file=sys.stderr)\n"
    ) % (COMMANDS, HEAVY)
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 0, proc.stderr
    loaded = json.loads(proc.stderr.strip().splitlines()[-1])
    assert loaded == [], f"help imported {loaded}"
