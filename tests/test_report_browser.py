"""The report as a lead opens it: Chromium (Debian's /usr/bin/chromium) driven by Playwright loads the
report's file:// page with every network request intercepted.

Reference: the browser itself — its console, its network layer, the pixels it paints and the DOM it builds.
"""

import io
import shutil
from pathlib import Path

import pytest

from ampfront.optimize.run import run_study

CHROMIUM = "/usr/bin/chromium"
XSS = "<img src=x onerror=alert(1)>"
TITLES = "(() => { const l = document.getElementById('plot-tradeoff').layout; " \
         "return [l.xaxis.title.text, l.yaxis.title.text]; })()"

TINY = """
title = {title!r}
topologies = ["simple_ota", "two_stage_miller"]
objectives = ["power", "gbw"]
technology = "generic180"

[spec]
supply = "1.8 V"
load_capacitance = "2 pF"
min_gain = "{gain}"

[search]
population = 12
generations = 3
"""


def _browser():
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        pytest.fail("the browser tests need Playwright (pip install playwright; no 'playwright install': they "
                    "use Debian's chromium)")
    if not Path(CHROMIUM).exists() or shutil.which("chromium") is None:
        pytest.fail("the browser tests need Debian's chromium (apt-get install chromium)")
    return sync_playwright


@pytest.fixture(scope="module")
def browser():
    sync_playwright = _browser()
    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, args=[
            "--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
            "--disable-sync", "--no-first-run"])
        yield b
        b.close()


def _study(folder: Path, title: str, gain: str) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "study.toml"
    # TOML basic strings escape like Python's repr for this text (no quotes or backslashes in it).
    path.write_text(TINY.format(title=title, gain=gain).replace("'", '"'))
    return path


@pytest.fixture(scope="module")
def infeasible_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("infeasible")
    summary = run_study(_study(folder, "Impossible gain", "200 dB"), folder / "out")
    assert not summary.feasible
    return folder / "out"


@pytest.fixture(scope="module")
def hostile_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("hostile")
    run_study(_study(folder, XSS, "30 dB"), folder / "out")
    return folder / "out"


class Opened:
    def __init__(self, browser, folder: Path):
        self.url = (folder / "report.html").resolve().as_uri()
        self.context = browser.new_context(viewport={"width": 1300, "height": 900}, accept_downloads=True)
        self.page = self.context.new_page()
        self.errors, self.outside, self.dialogs = [], [], []
        self.page.on("console", lambda m: self.errors.append(m.text) if m.type == "error" else None)
        self.page.on("pageerror", lambda e: self.errors.append(str(e)))
        self.page.on("dialog", lambda d: (self.dialogs.append(d.message), d.dismiss()))

        def route(r):
            if r.request.url == self.url:
                r.continue_()
            else:
                self.outside.append(r.request.url)
                r.abort()
        self.page.route("**/*", route)
        self.page.goto(self.url)
        self.page.wait_for_function("document.querySelectorAll('.js-plotly-plot .main-svg').length > 0")
        self.page.wait_for_timeout(300)

    def close(self):
        self.context.close()


def _painted(png: bytes) -> float:
    """Share of pixels that differ from the page's white background."""
    from PIL import Image

    image = Image.open(io.BytesIO(png)).convert("L")
    hist = image.histogram()
    return 1 - sum(hist[245:]) / (image.width * image.height)


# What plotly.js drew, read from the DOM it built: markers are `path.point` inside a scatter layer (shading
# and spec lines are layout shapes, elsewhere), lines are `path.js-line` with a non-empty outline.
POINTS = "(id) => document.querySelectorAll('#' + id + ' .scatterlayer .point').length"
LINES = ("(id) => Array.from(document.querySelectorAll('#' + id + ' .scatterlayer path.js-line'))"
         ".filter(p => (p.getAttribute('d') || '').length > 10).length")


def _assert_drawn(page):
    """The trade-off plot has markers, every Bode plot has lines (spec shading alone would not pass)."""
    assert page.evaluate(POINTS, "plot-tradeoff") > 0, "no design drawn on the trade-off plot"
    bodes = page.evaluate("Array.from(document.querySelectorAll('.js-plotly-plot'))"
                             ".map(e => e.id).filter(i => i.startsWith('plot-bode'))")
    for div in bodes:
        assert page.evaluate(LINES, div) >= 2, f"{div}: no magnitude and phase curves"
    return len(bodes)


def _check_page(opened: Opened):
    page = opened.page
    assert not opened.errors, opened.errors
    assert not opened.outside, opened.outside
    plots = page.locator(".js-plotly-plot")
    assert plots.count() >= 1
    for k in range(plots.count()):
        plot = plots.nth(k)
        plot.scroll_into_view_if_needed()
        assert _painted(plot.screenshot()) > 0.02, f"plot {k} is blank"
    _assert_drawn(page)
    assert page.locator("#verdict-table tbody tr").count() == 2
    assert page.locator("#caution").inner_text().startswith("Pre-layout estimates")


def test_demo_report_opens_offline_and_every_plot_is_drawn(browser, demo_run):
    opened = Opened(browser, demo_run)
    try:
        page = opened.page
        assert not opened.errors and not opened.outside
        plots = page.locator(".js-plotly-plot")
        assert plots.count() >= 4            # the trade-off plot and a Bode plot per card
        for k in range(plots.count()):
            plot = plots.nth(k)
            plot.scroll_into_view_if_needed()
            assert _painted(plot.screenshot()) > 0.02, f"plot {k} is blank"
        assert _assert_drawn(page) >= 3      # a card, with its Bode plot, per topology at least
        rows = page.locator("#verdict-table tbody tr")
        assert rows.count() == 4
        assert page.locator("#sentence").inner_text().strip()
        assert page.locator("svg.schematic").count() >= 3
        assert not opened.errors, opened.errors
    finally:
        opened.close()


def test_menu_change_redraws_the_trade_off_plot(browser, demo_run):
    opened = Opened(browser, demo_run)
    try:
        page = opened.page
        plot = page.locator("#plot-tradeoff")
        plot.scroll_into_view_if_needed()
        before_title = page.evaluate(TITLES)
        before = plot.screenshot()
        page.locator("#plot-tradeoff .updatemenu-header-group").click()
        options = page.locator("#plot-tradeoff .updatemenu-dropdown-button")
        assert options.count() == 6          # every ordered pair of the three objectives
        options.nth(3).click()
        page.wait_for_timeout(400)
        after_title = page.evaluate(TITLES)
        assert after_title != before_title
        after = plot.screenshot()
        assert after != before and page.evaluate(POINTS, "plot-tradeoff") > 0
        assert not opened.errors, opened.errors
    finally:
        opened.close()


def test_clicking_a_design_fills_the_design_panel(browser, demo_run):
    opened = Opened(browser, demo_run)
    try:
        page = opened.page
        panel = page.locator("#selected")
        assert panel.is_hidden()
        point = page.locator("#plot-tradeoff .scatterlayer .point").first
        point.scroll_into_view_if_needed()
        box = point.bounding_box()
        # A real mouse click at the marker's centre: plotly.js finds the point under it and emits plotly_click.
        page.mouse.click(box["x"] + box["width"] / 2, box["y"] + box["height"] / 2)
        page.wait_for_function("!document.getElementById('selected').hidden", timeout=5000)
        title = page.locator("#sel-title").inner_text()
        design = title.split(" · ")[-1]
        assert design and design in page.locator("#designs").inner_text()
        assert page.locator("#sel-body tr").count() > 5
        assert not opened.errors, opened.errors
    finally:
        opened.close()


def test_plot_downloads_as_svg_offline(browser, demo_run):
    opened = Opened(browser, demo_run)
    try:
        page = opened.page
        with page.expect_download() as got:
            page.locator(".dl button[data-plot='plot-tradeoff'][data-format='svg']").click()
        path = got.value.path()
        assert Path(path).read_text(encoding="utf-8").lstrip().startswith("<svg")
        assert not opened.outside and not opened.errors
    finally:
        opened.close()


def test_infeasible_report_says_what_binds(browser, infeasible_run):
    opened = Opened(browser, infeasible_run)
    try:
        _check_page(opened)
        page = opened.page
        assert page.locator("#infeasible").is_visible()
        sentence = page.locator("#sentence").inner_text()
        assert sentence.startswith("No topology meets the whole spec")
        assert "minimum DC gain" in sentence and "dB short of 200 dB" in sentence
    finally:
        opened.close()


def test_a_hostile_title_renders_as_text(browser, hostile_run):
    opened = Opened(browser, hostile_run)
    try:
        _check_page(opened)
        page = opened.page
        assert page.locator("h1").inner_text() == XSS
        assert page.title().startswith(XSS)
        assert page.locator("img").count() == 0
        assert not opened.dialogs
    finally:
        opened.close()


@pytest.fixture(scope="module")
def converging_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("converging")
    # The same small study, searched by the converging search (no generations) within 4,000 evaluations.
    path = _study(folder, "Converging study", "40 dB")
    path.write_text(path.read_text().replace("population = 12\ngenerations = 3", "population = 40\nbudget = 4000"))
    summary = run_study(path, folder / "out")
    assert summary.feasible
    return folder / "out"


def _convergence_lines(folder: Path, browser) -> int:
    opened = Opened(browser, folder)
    try:
        assert not opened.errors and not opened.outside
        plot = opened.page.locator("#plot-convergence")
        plot.scroll_into_view_if_needed()
        assert _painted(plot.screenshot()) > 0.02, "the convergence plot is blank"
        return opened.page.evaluate(LINES, "plot-convergence")
    finally:
        opened.close()


def test_a_converging_run_draws_how_each_front_grew(browser, converging_run):
    import json

    from ampfront.optimize.outputs.refresh import refresh

    searched = json.loads((converging_run / "manifest.json").read_text())["convergence"]["topologies"]
    curves = [n for n, r in searched.items() if r.get("growth", {}).get("evaluations")]
    assert curves, searched
    # One line a topology whose search met the spec, drawn by plotly.js in the browser.
    assert _convergence_lines(converging_run, browser) == len(curves)
    # Written again from the folder alone, the page still draws them (the curve rides in the manifest).
    refresh(converging_run)
    assert _convergence_lines(converging_run, browser) == len(curves)


@pytest.mark.parametrize("change", ["removed", "tampered"])
def test_a_folder_without_a_curve_or_with_a_tampered_one_draws_none(converging_run, tmp_path, change):
    """An older folder (no curve in its manifest) and a hand-edited one are written again without the section:
    the manifest's curve is read through Growth.from_record, never passed on as it stands."""
    import json

    from ampfront.optimize.outputs.refresh import refresh

    folder = tmp_path / "copy"
    shutil.copytree(converging_run, folder)
    path = folder / "manifest.json"
    manifest = json.loads(path.read_text())
    for record in manifest["convergence"]["topologies"].values():
        if "growth" not in record:
            continue
        if change == "removed":
            del record["growth"]
        else:
            record["growth"]["evaluations"] = [XSS] * len(record["growth"]["evaluations"])
    path.write_text(json.dumps(manifest))
    page = refresh(folder).read_text(encoding="utf-8")
    assert "plot-convergence" not in page and XSS not in page
    assert "search per topology" in page
