"""The HTML report in a real headless browser (Debian package `chromium`).

Skipped, with the reason, when /usr/bin/chromium is not installed
(`apt-get install -y chromium`).
"""

from __future__ import annotations

import base64
import contextlib
import json
import os
import re
import select
import shutil
import subprocess
import time
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


# ----------------------------------------------------------------------------- A4 print width
#
# The page is laid out with print media emulated (DevTools protocol, Emulation.setEmulatedMedia)
# in a viewport as wide as the content of an A4 page: 210 mm less the report's 12 mm @page
# margins = 186 mm = 703 CSS px (96 px per inch, CSS Values 4: 1in = 96px = 2.54cm). A table,
# image or figure wider than that would be cut on paper. The DevTools protocol runs over the
# browser's own pipe (--remote-debugging-pipe: no port is opened); Runtime.evaluate measures the
# page without putting a script into it.

A4_CONTENT_PX = 703  # (210 - 2 * 12) mm / 25.4 * 96
A4_PT = (595.28, 841.89)  # ISO 216 A4, 210 x 297 mm in PostScript points (1 pt = 1/72 in)

_MEASURE = """JSON.stringify((() => {
  const W = document.documentElement.clientWidth;
  const over = Array.from(document.querySelectorAll('table, img, figure, .key, pre'))
    .map(e => [e.tagName.toLowerCase() + (e.id ? '#' + e.id : ''), e.getBoundingClientRect()])
    .filter(([n, r]) => r.left < -0.5 || r.right > W + 0.5)
    .map(([n, r]) => n + ' ' + Math.round(r.left) + '..' + Math.round(r.right));
  const hidden = Array.from(document.querySelectorAll('.scroll, td, th'))
    .filter(e => e.scrollWidth > e.clientWidth + 1).length;
  const folded = Array.from(document.querySelectorAll('details table'))
    .map(e => e.checkVisibility());
  return {width: W, scroll_width: document.documentElement.scrollWidth, over: over,
          hidden: hidden, folded: folded, tables: document.querySelectorAll('table').length,
          print: matchMedia('print').matches};
})())"""


class _DevTools:
    """A minimal DevTools-protocol client over chromium's --remote-debugging-pipe (fd 3 in,
    fd 4 out, messages separated by NUL)."""

    def __init__(self, tmp_path: Path):
        cmd_r, self._w = os.pipe()
        self._r, out_w = os.pipe()

        def child():  # the pipe ends onto fds 3 and 4 of the browser
            a, b = os.dup2(os.dup(cmd_r), 100), os.dup2(os.dup(out_w), 101)
            os.dup2(a, 3)
            os.dup2(b, 4)
            os.set_inheritable(3, True)
            os.set_inheritable(4, True)

        profile = tmp_path / "chromium-devtools"
        profile.mkdir(exist_ok=True)
        self.proc = subprocess.Popen(
            [str(CHROMIUM), *_FLAGS, "--remote-debugging-pipe", f"--user-data-dir={profile}"],
            preexec_fn=child, close_fds=False, stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL, env=dict(os.environ, HOME=str(tmp_path)))
        os.close(cmd_r)
        os.close(out_w)
        self._buf, self._n, self.session = b"", 0, None

    def _next(self, want, timeout: float = 60.0) -> dict:
        end = time.monotonic() + timeout
        while True:
            while b"\0" in self._buf:
                raw, self._buf = self._buf.split(b"\0", 1)
                msg = json.loads(raw)
                if want(msg):
                    return msg
            left = end - time.monotonic()
            assert left > 0, "chromium did not answer over the DevTools pipe in time"
            if select.select([self._r], [], [], min(left, 0.5))[0]:
                chunk = os.read(self._r, 1 << 20)
                assert chunk, "chromium closed the DevTools pipe"
                self._buf += chunk

    def call(self, method: str, params: dict | None = None, *, page: bool = True) -> dict:
        self._n += 1
        msg = {"id": self._n, "method": method, "params": params or {}}
        if page and self.session:
            msg["sessionId"] = self.session
        os.write(self._w, json.dumps(msg).encode() + b"\0")
        n = self._n
        reply = self._next(lambda m: m.get("id") == n)
        assert "error" not in reply, f"{method}: {reply['error']}"
        return reply["result"]

    def open(self, url: str, *, width: int, media: str = "print") -> None:
        target = self.call("Target.createTarget", {"url": "about:blank"}, page=False)
        self.session = self.call("Target.attachToTarget", {"targetId": target["targetId"],
                                                           "flatten": True},
                                 page=False)["sessionId"]
        self.call("Page.enable")
        self.call("Emulation.setDeviceMetricsOverride", {"width": width, "height": 1123,
                                                         "deviceScaleFactor": 1,
                                                         "mobile": False})
        self.call("Emulation.setEmulatedMedia", {"media": media})
        self.call("Page.navigate", {"url": url})
        session = self.session
        self._next(lambda m: m.get("method") == "Page.loadEventFired"
                   and m.get("sessionId") == session)

    def evaluate(self, expression: str):
        res = self.call("Runtime.evaluate", {"expression": expression, "returnByValue": True})
        return res["result"]["value"]

    def close(self) -> None:
        with contextlib.suppress(Exception):
            self.call("Browser.close", page=False)
        try:
            self.proc.wait(timeout=20)
        except subprocess.TimeoutExpired:  # only the process this test started
            self.proc.kill()
            self.proc.wait(timeout=20)
        os.close(self._w)
        os.close(self._r)


@contextlib.contextmanager
def _devtools(tmp_path):
    tools = _DevTools(tmp_path)
    try:
        yield tools
    finally:
        tools.close()


@pytest.fixture
def wide_report(series_ds, summary_df, tmp_path):
    """A report with the widest things a run puts in it: the compact change table, a
    45-column detail table with long file paths, the long key results folded, a figure drawn
    far wider than the page and two headline figures side by side."""
    from timeslice.report.tables import change_table
    from timeslice.series.analysis import change_rows

    figs = tmp_path / "figs"
    keys = pd.DataFrame(change_rows(summary_df, reference="baseline"))
    detail = pd.DataFrame({f"column_number_{i}_km2": summary_df["suitable_area_km2"] * (i + 1)
                           for i in range(43)})
    detail.insert(0, "files", "/a/very/long/folder/name/without/spaces/that/must/wrap/"
                              "climate_model_scenario_period_variable.nc")
    detail.insert(0, "slice", summary_df["slice"])
    wide_png = plots.gain_loss_bars(summary_df, figs / "bars.png", dpi=300)
    with Image.open(wide_png) as im:
        assert im.size[0] > 2 * A4_CONTENT_PX  # the image alone would overflow
    ctx = ReportContext(
        title="Invented scenario report", species="Nivalia demonstrata",
        summary=summary_df, change=change_table(keys, summary_df),
        tables={"series_detail": detail, "key_results": keys},
        headline_figures=[("Stability", maps.stability_map(series_ds, figs / "stab.png",
                                                           dpi=120)),
                          ("Bars", wide_png)],
        figures=[("Gain and loss", wide_png)],
        run_info={"seed": 20240917, "warnings": "none",
                  "configuration": "/home/someone/projects/invented-species/configs/"
                                   "transfer_all_slices_with_three_models.toml"},
    )
    return write_report(ctx, tmp_path / "wide_report.html")


def test_nothing_overflows_an_a4_page(wide_report, tmp_path):
    with _devtools(tmp_path) as tools:
        tools.open(wide_report.as_uri(), width=A4_CONTENT_PX)
        got = json.loads(tools.evaluate(_MEASURE))
        pdf = base64.b64decode(tools.call("Page.printToPDF", {"preferCSSPageSize": True})["data"])
    assert got["print"] and got["width"] == A4_CONTENT_PX
    assert got["tables"] >= 4
    assert got["over"] == [], "wider than the A4 content width"
    assert got["hidden"] == 0, "content cut inside a scroll box or cell"
    assert got["scroll_width"] <= A4_CONTENT_PX
    assert got["folded"] and all(got["folded"]), "a folded table is not printed"
    # the page size of the printed file is A4 (the style sheet's @page size)
    assert pdf.startswith(b"%PDF")
    boxes = re.findall(rb"/MediaBox\s*\[\s*0 0 ([\d.]+) ([\d.]+)\s*\]", pdf)
    assert boxes
    for w, h in boxes:
        assert abs(float(w) - A4_PT[0]) < 1.5 and abs(float(h) - A4_PT[1]) < 1.5


def test_the_overflow_check_sees_a_page_without_the_print_rules(wide_report, tmp_path):
    # Negative control: the same page with its print rules switched off overflows, and the
    # measurement says so (the wide table and the folded key results).
    text = wide_report.read_text(encoding="utf-8").replace("@media print", "@media speech")
    plain = tmp_path / "no_print_rules.html"
    plain.write_text(text, encoding="utf-8")
    with _devtools(tmp_path) as tools:
        tools.open(plain.as_uri(), width=A4_CONTENT_PX)
        got = json.loads(tools.evaluate(_MEASURE))
    assert any(name.startswith("table") for name in got["over"])
    assert got["hidden"] > 0
    assert got["folded"] and not any(got["folded"])  # folded on screen
