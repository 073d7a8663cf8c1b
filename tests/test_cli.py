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
