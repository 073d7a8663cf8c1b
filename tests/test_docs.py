"""Project documents: README shape, assembled methods file, wording rules."""

from __future__ import annotations

import importlib.util
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_readme_opens_with_the_job_and_two_commands():
    text = (ROOT / "README.md").read_text()
    body = text.split("\n", 1)[1].lstrip()
    first_paragraph = body.split("\n\n", 1)[0]
    assert "niche model" in first_paragraph and "time slices" in first_paragraph
    blocks = re.findall(r"```\n(.*?)\n```", text, flags=re.S)
    commands = [b for b in blocks if "pip install" in b]
    assert len(commands) == 2
    assert any("timeslice demo" in c for c in commands)
    assert any("pytest" in c for c in commands)


def test_ci_runs_the_readme_test_command():
    text = (ROOT / "README.md").read_text()
    test_cmd = [b for b in re.findall(r"```\n(.*?)\n```", text, flags=re.S) if "pytest" in b][0]
    assert test_cmd.strip() in (ROOT / ".ci" / "run").read_text()


def test_methods_doc_is_assembled():
    spec = importlib.util.spec_from_file_location("assemble", ROOT / "docs" / "assemble_methods.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    assert (ROOT / "docs" / "methods.md").read_text() == mod.build(), (
        "docs/methods.md is stale: run python docs/assemble_methods.py"
    )


def test_cautions_in_readme():
    text = (ROOT / "README.md").read_text().lower()
    assert "hypothes" in text and "biotic interactions" in text and "novel" in text
