"""The worked example of docs/api.md runs as written."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

DOC = Path(__file__).resolve().parents[1] / "docs" / "api.md"


def test_api_example_runs(tmp_path, monkeypatch, capsys):
    code = re.search(r"```python\n(.*?)```", DOC.read_text(encoding="utf-8"), re.S).group(1)
    monkeypatch.chdir(tmp_path)
    exec(compile(code, str(DOC), "exec"), {})
    out = capsys.readouterr().out
    assert "refugium cells; fitted with" in out
    assert (tmp_path / "demo_out" / "series.nc").is_file()
    assert (tmp_path / "demo_out" / "report.html").is_file()


def test_run_takes_a_mapping(tmp_path, monkeypatch):
    import tomllib

    import timeslice
    from timeslice.errors import ConfigError

    with pytest.raises(ConfigError, match="must be a TOML path, a mapping or a Config"):
        timeslice.run(42, tmp_path)
    with pytest.raises(ConfigError, match="required key 'climate'"):
        timeslice.run(tomllib.loads('[species]\noccurrences = "x.csv"\n'), tmp_path)
