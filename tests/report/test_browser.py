"""The HTML report in a real headless browser (Debian package `chromium`).

Skipped, with the reason, when /usr/bin/chromium is not installed
(`apt-get install -y chromium`).
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from PIL import Image

from timeslice.report import maps, plots
from timeslice.report.html import ReportContext, write_report

CHROMIUM = Path("/usr/bin/chromium")

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(not CHROMIUM.exists(),
                       reason="headless browser test needs /usr/bin/chromium "
                              "(Debian: apt-get install -y chromium)"),
]

# Flags that keep the browser from talking to anything: no background networking, no
# component updates, no sync, no QUIC, and every host name resolving to nothing.
_FLAGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
    "--disable-extensions", "--disable-default-apps", "--hide-scrollbars",
    "--run-all-compositor-stages-before-draw",
    "--host-resolver-rules=MAP * ~NOTFOUND",
]

# Injected into a test copy of the report only (the report itself has no script): records
# every CSP violation (an attempted fetch) and, on load, every image that failed to decode
# and every resource the page fetched, into a data attribute that --dump-dom shows.
_PROBE = """<script>
window.__violations = [];
document.addEventListener('securitypolicyviolation',
  e => window.__violations.push(e.blockedURI + ' ' + e.violatedDirective));
window.addEventListener('load', () => {
  const imgs = Array.from(document.images);
  const broken = imgs.filter(i => !(i.complete && i.naturalWidth > 0 && i.naturalHeight > 0))
                     .map(i => i.alt);
  const fetched = performance.getEntriesByType('resource').map(r => r.name)
                     .filter(n => !n.startsWith('data:'));
  document.documentElement.setAttribute('data-probe', JSON.stringify(
    {n: imgs.length, broken: broken, fetched: fetched, violations: window.__violations,
     sizes: imgs.map(i => [i.naturalWidth, i.naturalHeight])}));
});
</script>"""


def _chromium(args, tmp_path, timeout=120):
    profile = tmp_path / "chromium-profile"
    profile.mkdir(exist_ok=True)
    cmd = [str(CHROMIUM), *_FLAGS, f"--user-data-dir={profile}", *args]
    env = dict(os.environ, HOME=str(tmp_path))
    return subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, env=env,
                          check=False)


@pytest.fixture
def report_file(series_ds, summary_df, tmp_path):
    figs = tmp_path / "figs"
    figures = [
        ("Suitability across the series", maps.series_panel(series_ds.isel(slice=[0, 1]),
                                                              figs / "panel.png", dpi=50)),
        ("Stability and refugia", maps.stability_map(series_ds, figs / "stab.png", dpi=50)),
        ("Suitable area through time", plots.area_through_time(summary_df, figs / "area.png",
                                                               dpi=50)),
        ("Gain & loss <per slice>", plots.gain_loss_bars(summary_df, figs / "bars.png",
                                                         dpi=50)),
    ]
    ctx = ReportContext(
        title="Invented scenario report", species="Nivalia demonstrata <invented>",
        summary=summary_df,
        tables={"Record cleaning": pd.DataFrame({"reason": ["duplicate"], "n_dropped": [3]})},
        figures=figures, methods="Methods text.", run_info={"seed": 1},
    )
    return write_report(ctx, tmp_path / "report.html")


def _probe(html_text: str, tmp_path: Path) -> dict:
    # The probe needs inline script, which the report's own policy forbids; relax it in the
    # copy only, keeping every fetch blocked (default-src 'none', images from data: only).
    probe = html_text.replace("default-src 'none';",
                              "default-src 'none'; script-src 'unsafe-inline';")
    probe = probe.replace("<head>", "<head>" + _PROBE, 1)
    probe_file = tmp_path / "probe.html"
    probe_file.write_text(probe, encoding="utf-8")
    res = _chromium(["--virtual-time-budget=10000", "--dump-dom", probe_file.as_uri()],
                    tmp_path)
    m = re.search(r'data-probe="([^"]*)"', res.stdout)
    assert m, f"the page did not finish loading in chromium: {res.stderr[-2000:]}"
    return json.loads(m.group(1).replace("&quot;", '"').replace("&lt;", "<")
                      .replace("&gt;", ">").replace("&amp;", "&"))


def test_every_image_decodes_and_nothing_is_fetched(report_file, tmp_path):
    text = report_file.read_text(encoding="utf-8")
    # static check: no attribute points off the page
    assert not re.search(r'(?:src|href)\s*=\s*["\']?\s*(?:https?:)?//', text, re.I)
    result = _probe(text, tmp_path)
    assert result["n"] == 4
    assert result["broken"] == []
    assert all(w > 100 and h > 100 for w, h in result["sizes"])
    assert result["fetched"] == []
    assert result["violations"] == []


def test_probe_detects_broken_and_remote_images(report_file, tmp_path):
    # Negative control: the probe must see a corrupt embedded image and a remote one.
    text = report_file.read_text(encoding="utf-8").replace(
        "</main>", '<img src="data:image/png;base64,AAAA" alt="corrupt">'
        '<img src="http://example.invalid/x.png" alt="remote"></main>')
    result = _probe(text, tmp_path)
    assert set(result["broken"]) == {"corrupt", "remote"}
    assert any("example.invalid" in v for v in result["violations"])


def test_screenshot_of_first_screen(report_file, tmp_path):
    shot = tmp_path / "report_screenshot.png"
    for _attempt in range(2):  # a loaded machine can capture before the first full paint
        res = _chromium(["--virtual-time-budget=10000", f"--screenshot={shot}",
                         "--window-size=1280,900", report_file.as_uri()], tmp_path)
        assert shot.exists(), f"no screenshot written: {res.stderr[-2000:]}"
        with Image.open(shot) as im:
            assert im.size == (1280, 900)
            arr = np.asarray(im.convert("RGB")).astype(int)
        if arr[200:, :, :].std() > 10:
            break
    # the dark header band of the report is at the top of the first screen
    assert arr[20:60, :, :].mean() < 100
    # and the page is not blank below it
    assert arr[200:, :, :].std() > 10
    target = os.environ.get("TIMESLICE_SCREENSHOT_TO")
    if target:
        shutil.copyfile(shot, target)
