"""`ampfront report DIR` puts what `ampfront check` found beside the model, reading check.csv defensively.

Reference: the check.csv each test writes itself (long form: design, corner, metric, model, simulated,
error, bound, status) and the report's HTML text parsed by Python's html.parser.
"""

from html.parser import HTMLParser

import pandas as pd

from .clirun import TINY_STUDY, ampfront


class _Tables(HTMLParser):
    """Text of every cell of every table of one class (the cards' 'check' tables by default)."""

    def __init__(self, kind: str = "check"):
        super().__init__()
        self.kind = kind
        self.rows, self._in, self._cell = [], 0, None

    def handle_starttag(self, tag, attrs):
        if tag == "table" and ("class", self.kind) in attrs:
            self._in += 1
        elif self._in and tag == "tr":
            self.rows.append([])
        elif self._in and tag == "td":
            self._cell = ""

    def handle_endtag(self, tag):
        if tag == "table" and self._in:
            self._in -= 1
        elif tag == "td" and self._cell is not None:
            self.rows[-1].append(self._cell)
            self._cell = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell += data


def _run(tmp_path):
    study = tmp_path / "study.toml"
    study.write_text(TINY_STUDY)
    out = tmp_path / "out"
    assert ampfront("run", study, "--out", out, "-q").returncode == 0
    return out


def test_check_figures_appear_on_the_design_card(tmp_path):
    out = _run(tmp_path)
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "Not simulated yet" in html
    design = pd.read_csv(out / "front.csv")["design"].iloc[0]
    pd.DataFrame([
        {"design": design, "corner": "tt", "metric": "gain_db", "model": 41.5, "simulated": 41.2,
         "error": 0.3, "bound": 0.5, "status": "ok"},
        {"design": design, "corner": "tt", "metric": "gbw_hz", "model": 2.0e6, "simulated": 2.5e6,
         "error": 0.25, "bound": 0.05, "status": "outside"},
    ]).to_csv(out / "check.csv", index=False)
    proc = ampfront("report", out)
    assert proc.returncode == 0, proc.stderr
    parser = _Tables()
    parser.feed((out / "report.html").read_text(encoding="utf-8"))
    rows = [r for r in parser.rows if r]
    assert ["DC gain", "tt", "41.5 dB", "41.2 dB", "0.3", "0.5", "ok"] in rows
    assert ["GBW", "tt", "2 MHz", "2.5 MHz", "0.25", "0.05", "outside"] in rows


def test_a_check_csv_of_another_shape_leaves_the_report_whole(tmp_path):
    out = _run(tmp_path)
    (out / "check.csv").write_text("who,what\nx,y\n")
    proc = ampfront("report", out)
    assert proc.returncode == 0, proc.stderr
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "Not simulated yet" in html and "id=\"verdict\"" in html


def test_agreement_per_topology_and_figure_is_summarized(tmp_path):
    """The report's model-against-ngspice section: per topology and figure, the designs simulated, the
    median and worst error, the bound and how many disagree, computed from check.csv."""
    from ampfront import topologies
    from ampfront.topologies.catalog import metric

    out = _run(tmp_path)
    designs = pd.read_csv(out / "front.csv")["design"].iloc[:3].tolist()
    errors = [0.1, 0.2, 0.6]
    pd.DataFrame([{"design": d, "corner": "nominal", "metric": "gain_db", "model": 40.0, "simulated": 40.0 + e,
                   "error": e, "bound": 0.5, "status": "agrees" if e <= 0.5 else "disagrees",
                   "topology": "simple_ota"} for d, e in zip(designs, errors)]
                 + [{"design": d, "corner": "nominal", "metric": "out_low_v", "model": 0.2, "simulated": 0.2 + e,
                     "error": -e, "bound": 0.05, "status": "agrees", "topology": "simple_ota"}
                    for d, e in zip(designs, (0.01, 0.03, 0.05))]).to_csv(out / "check.csv", index=False)
    assert ampfront("report", out).returncode == 0
    parser = _Tables("agreement")
    parser.feed((out / "report.html").read_text(encoding="utf-8"))
    rows = [r for r in parser.rows if r]
    title = topologies.available()["simple_ota"].title
    gain = metric("gain_db")
    assert [title, "DC gain", "3", gain.format(0.2), gain.format(0.6), gain.format(0.5), "1"] in rows, rows
    assert [title, "Lowest linear output", "3", "-30 mV", "-10 mV", "50 mV beyond", "0"] in rows, rows
