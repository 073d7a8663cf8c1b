"""Assemble docs/methods.md from the per-stage files in docs/methods/ (run after editing them).

``python docs/assemble_methods.py`` rewrites docs/methods.md; tests/test_docs.py checks that
the assembled file is current.
"""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
ORDER = ["harmonise", "niche", "transfer", "series", "report", "demo"]

HEADER = """# Methods: every formula, convention and source

This file is assembled from `docs/methods/*.md` (one per stage) by
`python docs/assemble_methods.py`; edit those, not this.

**Caution.** A transferred niche model is a hypothesis about where the climate of a time slice
resembles the climate the species occupies today. Biotic interactions, dispersal limits, land use
and adaptation are outside the climate niche; areas of novel climate (MESS < 0, NT1 < 0, NT2 > 1)
are extrapolations and are flagged in every output, not trusted. Use the results as one line of
evidence beside local expertise and field data.

Geometry used throughout: cell areas on the authalic sphere, `A = R² Δλ (sin φ₂ − sin φ₁)` with
R = 6371.0072 km (GRS80/WGS84 authalic radius; Moritz 2000, J. Geodesy 74:128; Snyder 1987, USGS
Prof. Paper 1395); distances are great-circle (haversine; Sinnott 1984) on the same sphere.

"""


def build() -> str:
    parts = [HEADER]
    for name in ORDER:
        text = (ROOT / "docs" / "methods" / f"{name}.md").read_text(encoding="utf-8").strip()
        if text.startswith("# "):  # a stage file with a top-level title: demote every heading
            text = re.sub(r"^(#+) ", r"#\1 ", text, flags=re.M)
        parts.append(text)
        parts.append("\n\n")
    return "\n".join(parts).rstrip() + "\n"


if __name__ == "__main__":
    (ROOT / "docs" / "methods.md").write_text(build(), encoding="utf-8")
    print("wrote docs/methods.md")
