"""`ampfront report DIR --figures`: every plot of the report as a static SVG in DIR/figures/, listed in the
manifest so that `--overwrite` knows them for ampfront's own and a user's file there is never replaced.

References: Python's xml.etree parsing each file as SVG; plotly.js's own DOM classes for markers and
lines (`point`, `js-line`); the study's objectives (two objectives: two ordered pairs of axes).
"""

import json
import os
import xml.etree.ElementTree as ET

import pytest

from .clirun import TINY_STUDY, ampfront

SVG = "{http://www.w3.org/2000/svg}"


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    folder = tmp_path_factory.mktemp("slides")
    (folder / "study.toml").write_text(TINY_STUDY)
    proc = ampfront("run", folder / "study.toml", "--out", folder / "out", "-q")
    assert proc.returncode == 0, proc.stderr
    return folder


def test_every_plot_is_written_as_a_self_contained_svg_and_listed(result):
    out = result / "out"
    proc = ampfront("report", out, "--figures")
    assert proc.returncode == 0, proc.stderr
    files = sorted(p.name for p in (out / "figures").iterdir())
    # Power vs GBW and GBW vs power, and one Bode plot per design card.
    assert [f for f in files if f.startswith("tradeoff_")] == ["tradeoff_gbw_vs_power.svg", "tradeoff_power_vs_gbw.svg"]
    cards = out.joinpath("report.html").read_text(encoding="utf-8").count("<article class='card'")
    assert len([f for f in files if f.startswith("bode_")]) == cards >= 1
    listed = json.loads((out / "manifest.json").read_text())["files"]
    assert {f"figures/{f}" for f in files} <= set(listed)
    for name in files:
        text = (out / "figures" / name).read_text(encoding="utf-8")
        root = ET.fromstring(text)
        assert root.tag == f"{SVG}svg"
        # Nothing fetched from outside the file: no http(s) or file reference anywhere in it.
        assert "http://" not in text.replace("http://www.w3.org/", "") and "https://" not in text
        assert "file:" not in text
        if name.startswith("tradeoff_"):
            points = [e for e in root.iter() if "point" in (e.get("class") or "").split()]
            assert points, f"{name}: no design drawn"
            assert "updatemenu" not in text      # a slide shows one view, without the page's menu
        else:
            lines = [e for e in root.iter() if "js-line" in (e.get("class") or "").split() and len(e.get("d") or "") > 10]
            assert len(lines) >= 2, f"{name}: no magnitude and phase curves"
    # The figures are ampfront's own: the result can be replaced.
    again = ampfront("run", result / "study.toml", "--out", out, "--overwrite", "-q")
    assert again.returncode == 0, again.stderr


def test_a_users_file_in_figures_is_never_replaced(result, tmp_path):
    out = result / "out"
    mine = out / "figures" / "tradeoff_power_vs_gbw.svg"
    mine.parent.mkdir(exist_ok=True)
    manifest = json.loads((out / "manifest.json").read_text())
    manifest["files"] = [f for f in manifest["files"] if not f.startswith("figures/")]
    (out / "manifest.json").write_text(json.dumps(manifest))
    mine.write_text("<svg>my own slide</svg>")
    proc = ampfront("report", out, "--figures")
    assert proc.returncode == 1 and "Traceback" not in proc.stderr
    # The report itself is written again ("report -> ..."), then one line refuses the figures.
    refused = proc.stderr.strip().splitlines()[-1]
    assert refused.startswith("ampfront: ") and "a file ampfront did not write" in refused, proc.stderr
    assert mine.read_text() == "<svg>my own slide</svg>"
    mine.unlink()


def test_without_chromium_the_command_says_so_in_one_line(result):
    env_before = os.environ.get("AMPFRONT_CHROMIUM")
    os.environ["AMPFRONT_CHROMIUM"] = str(result / "no-such-chromium")
    try:
        proc = ampfront("report", result / "out", "--figures")
    finally:
        if env_before is None:
            del os.environ["AMPFRONT_CHROMIUM"]
        else:
            os.environ["AMPFRONT_CHROMIUM"] = env_before
    assert proc.returncode == 1
    last = proc.stderr.strip().splitlines()
    assert "Traceback" not in proc.stderr and last[-1].startswith("ampfront: --figures needs Chromium"), proc.stderr
