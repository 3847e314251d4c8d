"""Static SVG files of the report's plots, for slide decks: DIR/figures/.

The report page itself is the source: the system's Chromium, driven by Playwright with every network request
refused, opens report.html and asks plotly.js for each plot as SVG (`Plotly.toImage`), the trade-off plot once
per pair of axes its menu offers. The SVGs come out as plotly.js draws them in the browser, so they match
the page; each is one file with no external reference. Kaleido would need a second Chromium download per
machine; Chromium and Playwright are here already for the browser tests.

Every file written is added to the manifest's `files`, which is how a later `--overwrite` tells ours
from a user's; a file already in figures/ that the manifest does not list is never replaced.
"""

from __future__ import annotations

import json
import os
import re
import shutil
from pathlib import Path
from urllib.parse import unquote

from ampfront.optimize.outputs.folder import FIGURES, MANIFEST, write_text_atomic
from ampfront.optimize.outputs.tables import write_json

CHROMIUM_NAMES = ("chromium", "chromium-browser")
SIZE = {"tradeoff": (1100, 650), "bode": (900, 420)}
_WORD = re.compile(r"[^a-z0-9]+")

# In the page: every plot, and for the trade-off plot every view of its menu, as SVG data URLs.
_EXPORT = """
async (size) => {
  const out = [];
  // A slide shows one view: the menu and its caption stay on the page.
  const still = (gd, width, height) => Plotly.toImage({data: gd.data, layout: Object.assign({}, gd.layout, {
    updatemenus: [], annotations: (gd.layout.annotations || []).filter(a => a.text !== 'axes:')})},
    {format: 'svg', width, height});
  for (const gd of document.querySelectorAll('.js-plotly-plot')) {
    const [width, height] = size[gd.id === 'plot-tradeoff' ? 'tradeoff' : 'bode'];
    const menu = (gd.layout.updatemenus || [])[0];
    if (!menu) {
      out.push([gd.id, '', await still(gd, width, height)]);
      continue;
    }
    for (const b of menu.buttons) {
      await Plotly.update(gd, b.args[0], b.args[1]);
      out.push([gd.id, b.label, await still(gd, width, height)]);
    }
    await Plotly.update(gd, menu.buttons[0].args[0], menu.buttons[0].args[1]);
  }
  return out;
}
"""


class FiguresError(Exception):
    """The figures cannot be written here (no Chromium or Playwright, a foreign file in the way)."""


def chromium() -> str:
    found = os.environ.get("AMPFRONT_CHROMIUM") or next(filter(None, map(shutil.which, CHROMIUM_NAMES)), None)
    if not found or not Path(found).exists():
        raise FiguresError("--figures needs Chromium (apt-get install chromium, or AMPFRONT_CHROMIUM=/path)")
    return found


def _file_name(div: str, label: str) -> str:
    stem = div.removeprefix("plot-").replace("-", "_")
    if label:
        stem += "_" + _WORD.sub("_", label.lower()).strip("_")
    return f"{stem}.svg"


def _svg(data_url: str) -> str:
    head, _, body = data_url.partition(",")
    if not head.startswith("data:image/svg+xml"):
        raise FiguresError(f"plotly.js returned {head[:40]!r}, not an SVG")
    return unquote(body)


def render_svgs(report_html: Path) -> dict[str, str]:
    """file name -> SVG text of every plot of the report (the trade-off plot once per menu view)."""
    executable = chromium()
    try:
        from playwright.sync_api import Error as PlaywrightError
        from playwright.sync_api import sync_playwright
    except ImportError:
        raise FiguresError("--figures needs Playwright (pip install playwright; it uses the system Chromium)") from None
    url = report_html.resolve().as_uri()
    try:
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=executable, args=[
                "--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
                "--disable-sync", "--no-first-run"])
            try:
                page = browser.new_page()
                # The page is self-contained: anything else it asked for would be refused.
                page.route("**/*", lambda r: r.continue_() if r.request.url == url else r.abort())
                page.goto(url)
                page.wait_for_function("document.querySelectorAll('.js-plotly-plot .main-svg').length > 0")
                views = page.evaluate(_EXPORT, {k: list(v) for k, v in SIZE.items()})
            finally:
                browser.close()
    except PlaywrightError as error:
        raise FiguresError(f"Chromium could not draw the figures ({str(error).splitlines()[0]})") from None
    return {_file_name(div, label): _svg(data) for div, label, data in views}


def write_figures(folder: Path) -> list[Path]:
    """Write every plot of FOLDER/report.html into FOLDER/figures/ and list them in the manifest."""
    manifest_path = folder / MANIFEST
    manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
    listed = manifest.get("files") if isinstance(manifest.get("files"), list) else []
    svgs = render_svgs(folder / "report.html")
    target = folder / FIGURES
    names = [f"{FIGURES}/{name}" for name in svgs]
    for name in names:
        if (folder / name).exists() and name not in listed:
            raise FiguresError(f"{folder / name}: a file ampfront did not write; move it away first")
    target.mkdir(exist_ok=True)
    written = []
    for name, text in svgs.items():
        write_text_atomic(target / name, text)
        written.append(target / name)
    manifest["files"] = sorted(set(listed) | set(names))
    tmp = manifest_path.with_name(f".{MANIFEST}.tmp-{os.getpid()}")
    write_json(tmp, manifest)
    os.replace(tmp, manifest_path)
    return written
