"""docs/config.md documents every key the config model accepts, and no key it refuses."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from timeslice import config as C

DOC = Path(__file__).resolve().parents[1] / "docs" / "config.md"

#: documented section heading -> the model whose fields it must list
SECTIONS = {
    "[run]": C.RunConfig,
    "[grid]": C.GridConfig,
    "[climate]": C.ClimateConfig,
    "Climate inputs": C.ClimateInput,
    "[[slices]]": C.SliceConfig,
    "[species]": C.SpeciesConfig,
    "[niche]": C.NicheConfig,
    "[transfer]": C.TransferConfig,
    "[series]": C.SeriesConfig,
    "[biotic]": C.BioticConfig,
    "[output]": C.OutputConfig,
}


def _sections() -> dict[str, set[str]]:
    text = DOC.read_text(encoding="utf-8")
    out: dict[str, set[str]] = {}
    current = None
    for line in text.splitlines():
        if line.startswith("#"):
            current = next((name for name in SECTIONS if name in line), None)
            if current is not None:
                out.setdefault(current, set())
            continue
        if current is not None and line.startswith("| `"):
            first = line.split("|")[1]
            out[current].update(re.findall(r"`([A-Za-z_][A-Za-z0-9_]*)`", first))
    return out


@pytest.mark.parametrize("section", list(SECTIONS))
def test_every_key_is_documented(section):
    documented = _sections().get(section)
    assert documented is not None, f"docs/config.md has no section for {section}"
    model = SECTIONS[section]
    keys = {k for k in model.model_fields if k != "source"}
    if section == "[climate]":
        keys -= {"models"}  # its own subsection
    missing = sorted(keys - documented)
    assert not missing, f"{section}: undocumented keys {missing}"
    stale = sorted(documented - set(model.model_fields))
    assert not stale, f"{section}: documented keys the config refuses {stale}"
