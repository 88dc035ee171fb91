"""The report as a reader sees it: headless Chromium loads ``report.html`` of a small run.

Checks: every table header has words, every picture is a PNG that decodes and that the
browser loads (``naturalWidth > 0``), no raw field identifiers reach the prose, and a
full-page screenshot can be taken. The browser part skips cleanly where Chromium is not
installed (``.ci/run`` installs the Debian package when it can).
"""

import base64
import io
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import pytest


class _Page(HTMLParser):
    """Table headers and image sources of an HTML page, and its visible text."""

    def __init__(self):
        super().__init__()
        self.headers, self.images, self.text = [], [], []
        self._th, self._skip = None, 0

    def handle_starttag(self, tag, attrs):
        if tag == "th":
            self._th = []
        elif tag == "img":
            self.images.append(dict(attrs).get("src", ""))
        elif tag in ("style", "script", "code"):
            self._skip += 1

    def handle_endtag(self, tag):
        if tag == "th" and self._th is not None:
            self.headers.append("".join(self._th).strip())
            self._th = None
        elif tag in ("style", "script", "code"):
            self._skip -= 1

    def handle_data(self, data):
        if self._th is not None:
            self._th.append(data)
        if not self._skip:
            self.text.append(data)


def _page(path: Path) -> _Page:
    p = _Page()
    p.feed(path.read_text(encoding="utf-8"))
    return p


def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "/usr/bin/chromium"):
        found = shutil.which(name)
        if found:
            return found
    return None


def test_report_has_worded_headers_and_decodable_pictures(small_mesa_run):
    import matplotlib.image as mpimg

    report = small_mesa_run.out / "report.html"
    page = _page(report)
    assert page.headers and all(page.headers), \
        f"empty table header among {page.headers}"
    assert len(page.images) >= 5
    for src in page.images:
        assert src.startswith("data:image/png;base64,"), src[:40]
        img = mpimg.imread(io.BytesIO(base64.b64decode(src.split(",", 1)[1])), format="png")
        assert img.shape[0] > 50 and img.shape[1] > 50
    text = " ".join(page.text)
    # no raw identifiers in the prose (names from the code, not words)
    for raw in ("delta_x", "stoney_with_fe_film_force", "piezo_", "sigma_", "d rho/rho",
                "traction_jump", "b_SiSi", "acc1990"):
        assert raw not in text, raw
    assert "confirm them by measurement" in text


@pytest.mark.slow
def test_report_loads_in_a_headless_browser(small_mesa_run, tmp_path):
    browser = _chromium()
    if browser is None:
        pytest.skip("chromium is not installed (apt-get install chromium)")
    html = (small_mesa_run.out / "report.html").read_text(encoding="utf-8")
    # a copy that, once loaded, writes what the browser saw into the DOM
    probe = """<script>
window.addEventListener("load", () => {
  const imgs = Array.from(document.images);
  const bad = imgs.filter(i => !(i.complete && i.naturalWidth > 0)).map(i => i.alt);
  const empty = Array.from(document.querySelectorAll("th")).filter(
      t => t.textContent.trim() === "").length;
  document.body.setAttribute("data-probe",
      "images=" + imgs.length + ";broken=" + bad.join("|") + ";emptyth=" + empty);
});
</script>"""
    page = tmp_path / "report.html"
    page.write_text(html.replace("</body>", probe + "</body>"), encoding="utf-8")
    flags = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars",
             "--disable-dev-shm-usage", f"--user-data-dir={tmp_path / 'profile'}",
             "--virtual-time-budget=10000"]
    dom = subprocess.run(flags + ["--dump-dom", page.as_uri()], capture_output=True,
                         text=True, timeout=180)
    assert dom.returncode == 0, dom.stderr[-2000:]
    m = re.search(r'data-probe="images=(\d+);broken=([^;"]*);emptyth=(\d+)"', dom.stdout)
    assert m, "the probe script did not run: " + dom.stdout[:500]
    assert int(m.group(1)) == html.count("<img ") >= 5
    assert m.group(2) == "", f"images the browser could not load: {m.group(2)}"
    assert m.group(3) == "0"
    shot = tmp_path / "report.png"
    s = subprocess.run(flags + ["--window-size=1200,4000", f"--screenshot={shot}",
                                page.as_uri()], capture_output=True, text=True, timeout=180)
    assert s.returncode == 0 and shot.is_file(), s.stderr[-2000:]
    import matplotlib.image as mpimg

    img = mpimg.imread(shot)
    assert img.shape[:2] == (4000, 1200)
    assert img[..., :3].std() > 0.05           # a page with content, not a blank canvas
