"""Every public callable documents its parameters (numpydoc; the checks named in
``[tool.numpydoc_validation]`` of pyproject.toml).

The numpydoc docstring standard (numpydoc.readthedocs.io, "Style guide") is the reference; the
checks are numpydoc's own validator (``numpydoc.validate``): GL08 no docstring, PR01 a
parameter not documented, PR02 a documented parameter that does not exist.
"""

from __future__ import annotations

import importlib
import inspect
import pkgutil
import sys
from pathlib import Path

import pytest

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    tomllib = pytest.importorskip("tomli")

validate = pytest.importorskip("numpydoc.validate").validate

import timeslice

ROOT = Path(__file__).resolve().parents[1]


def _checks() -> set[str]:
    conf = tomllib.loads((ROOT / "pyproject.toml").read_text())
    return set(conf["tool"]["numpydoc_validation"]["checks"])


def _public_callables():
    for info in pkgutil.walk_packages(timeslice.__path__, "timeslice."):
        if info.name.endswith(".__main__"):  # running it is what importing it does
            continue
        mod = importlib.import_module(info.name)
        for name in getattr(mod, "__all__", []):
            obj = getattr(mod, name, None)
            if (inspect.isfunction(obj) or inspect.isclass(obj)) and obj.__module__ == mod.__name__:
                yield f"{mod.__name__}.{name}"


#: pydantic models of the TOML file: their fields are the config keys, each documented (with
#: type, default and meaning) in docs/config.md, which tests/test_config_docs.py checks against
#: the models; they need a docstring (GL08) but no Parameters section
CONFIG_MODELS = ("timeslice.config.",)


def test_public_callables_document_their_parameters():
    checks = _checks()
    problems = []
    for name in _public_callables():
        wanted = checks
        obj_is_model = name.startswith(CONFIG_MODELS) and name.rsplit(".", 1)[1][0].isupper()
        if obj_is_model:
            wanted = checks & {"GL08"}
        problems += [f"{name}: {code} {msg}" for code, msg in validate(name)["errors"]
                     if code in wanted]
    assert problems == [], "\n".join(problems)
