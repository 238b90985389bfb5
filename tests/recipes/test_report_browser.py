"""``report.html`` in a real browser: headless Chromium (Debian's package) loads the report of
a recipe run, and a script records that every figure decoded (``naturalWidth > 0``) and that
no table, cell or paragraph is wider than its column.  Skipped where no browser is installed
(``.ci/run`` installs it).  Common practice for checking rendered HTML, no source."""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from sensiv.recipes.bundle import run_files
from sensiv.recipes.parse import parse_recipe
from sensiv.recipes.run import run_recipe

ROOT = Path(__file__).resolve().parents[2]
BROWSERS = ("chromium", "chromium-browser", "google-chrome")
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run",
         "--disable-dev-shm-usage", "--window-size=1280,900", "--virtual-time-budget=10000",
         "--dump-dom")
SLACK_PX = 1   # rounding of layout widths

# Runs after load; writes what it found into a <pre id="sensiv-check"> as JSON.
CHECK = """
<script>
window.addEventListener('load', function () {
  var images = Array.from(document.images).map(function (img) {
    return {alt: img.alt, complete: img.complete, width: img.naturalWidth};
  });
  var wide = [];
  document.querySelectorAll('table, th, td, p, li, h1, h2, h3, figcaption, figure, img')
    .forEach(function (el) {
      var column = el.parentElement.clientWidth;
      var own = el.scrollWidth > el.clientWidth + %(slack)d && el.tagName !== 'IMG';
      var box = el.getBoundingClientRect().width > column + %(slack)d &&
                ['TD', 'TH'].indexOf(el.tagName) < 0;
      if (own || box) wide.push(el.tagName + ': ' + el.textContent.slice(0, 60));
    });
  var page = document.documentElement.scrollWidth > window.innerWidth + %(slack)d;
  var out = document.createElement('pre');
  out.id = 'sensiv-check';
  out.textContent = JSON.stringify({images: images, wide: wide, page: page});
  document.body.appendChild(out);
});
</script>
""" % {"slack": SLACK_PX}


def browser() -> str | None:
    return next((found for name in BROWSERS if (found := shutil.which(name))), None)


def render(executable: str, page: str, folder: Path) -> dict:
    """What the check script found on ``page`` (written into ``folder``) in the browser."""
    assert page.count("</body>") == 1
    path = folder / "page.html"
    path.write_text(page.replace("</body>", CHECK + "</body>"), encoding="utf-8")
    done = subprocess.run([executable, *FLAGS, f"--user-data-dir={folder / 'profile'}",
                           path.as_uri()], capture_output=True, text=True, timeout=300,
                          env={**os.environ, "HOME": str(folder)})
    assert done.returncode == 0, done.stderr[-2000:]
    found = re.search(r'<pre id="sensiv-check">(.*?)</pre>', done.stdout, flags=re.S)
    assert found, "the check script did not run: " + done.stdout[-500:]
    text = found.group(1).replace("&quot;", '"').replace("&lt;", "<").replace(
        "&gt;", ">").replace("&amp;", "&")
    return json.loads(text)


@pytest.fixture(scope="module")
def executable() -> str:
    found = browser()
    if found is None:
        pytest.skip("no Chromium installed (apt-get install chromium); .ci/run installs it")
    return found


@pytest.fixture(scope="module")
def checked(executable, tmp_path_factory) -> dict:
    folder = tmp_path_factory.mktemp("browser")
    for name in ("irrigation.csv", "nudge.csv", "published_table.json", "demo.toml"):
        shutil.copy(ROOT / "examples" / name, folder / name)
    page = run_files(run_recipe(parse_recipe(folder / "demo.toml")))["report.html"]
    return {"report": page, **render(executable, page, folder)}


def test_every_figure_loads(checked):
    assert len(checked["images"]) == checked["report"].count("<img ") > 5
    broken = [image["alt"] for image in checked["images"]
              if not image["complete"] or image["width"] == 0]
    assert not broken


def test_no_text_overflows_its_column(checked):
    assert not checked["wide"]
    assert not checked["page"]


def test_the_check_finds_a_broken_figure_and_overflowing_text(executable, tmp_path):
    # planted faults: an image that does not decode, an unbreakable cell wider than the page,
    # a paragraph whose text is cut by its box
    page = ("<html><head><style>body { max-width: 30rem }</style></head><body>"
            f"<table><tr><td>{'x' * 400}</td></tr></table>"
            '<img alt="broken" src="data:image/png;base64,AAAA">'
            '<p style="width: 10rem; overflow: hidden; white-space: nowrap">'
            f"{'y' * 300}</p></body></html>")
    found = render(executable, page, tmp_path)
    assert [image["width"] for image in found["images"]] == [0]
    assert [entry.split(":")[0] for entry in found["wide"]] == ["TABLE", "P"]
    assert found["page"]
