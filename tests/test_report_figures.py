"""The trade-off plot says what the data says: read back from plotly's own figure JSON (the structure
plotly.js draws from), against front.csv and the study's spec.
"""

import numpy as np
import pandas as pd
import pytest

from ampfront.optimize.outputs import plots
from ampfront.optimize.outputs.report import SHOWN
from ampfront.optimize.spec.study import Constraint
from ampfront.topologies.catalog import M

OBJECTIVES = ("power", "gbw", "gain")
CONSTRAINTS = (Constraint("max_power", M.power_w, "max", 6e-4, 6e-4), Constraint("min_gbw", M.gbw_hz, "min", 5e6, 5e6))


@pytest.fixture
def figure():
    rng = np.random.default_rng(3)
    rows = []
    for name in ("alpha", "beta"):
        for k in range(12):
            rows.append({"topology": name, "design": f"{name}_{k:02d}", "meets_spec": True,
                         "on_merged_front": bool(k % 3 == 0 and name == "alpha"),
                         M.power_w: 10 ** rng.uniform(-5, -3.3), M.gbw_hz: 10 ** rng.uniform(6.8, 8),
                         M.gain_db: rng.uniform(70, 90)})
    df = pd.DataFrame(rows)
    fig = plots.front_figure(df, OBJECTIVES, CONSTRAINTS, {"alpha": "Alpha", "beta": "Beta"}, ("alpha", "beta"),
                             {"alpha": "alpha_04", "beta": "beta_07"}, first=("gbw", "power"), shown=SHOWN)
    return df, fig.to_plotly_json()


def test_merged_front_designs_filled_the_rest_hollow_and_knees_ringed(figure):
    df, data = figure
    traces = {t["name"]: t for t in data["data"]}
    merged = set(df.loc[df["on_merged_front"], "design"])
    filled = traces["Alpha · on merged front"]
    assert set(filled["customdata"]) == merged and not filled["marker"]["symbol"].endswith("-open")
    for name in ("Alpha · own front only", "Beta · own front only"):
        assert traces[name]["marker"]["symbol"].endswith("-open")
        assert not set(traces[name]["customdata"]) & merged
    assert list(traces["Alpha · knee"]["customdata"]) == ["alpha_04"]
    # Each topology its own colour and its own shape.
    alpha, beta = traces["Alpha · own front only"]["marker"], traces["Beta · own front only"]["marker"]
    assert alpha["color"] != beta["color"] and alpha["symbol"] != beta["symbol"]


def test_spec_limits_drawn_at_the_bounds_and_shaded_on_the_wrong_side(figure):
    _, data = figure
    layout = data["layout"]
    assert layout["xaxis"]["title"]["text"] == "GBW" and layout["yaxis"]["title"]["text"] == "Power"
    lines = [s for s in layout["shapes"] if s["type"] == "line"]
    assert {(s.get("xref"), s.get("x0")) for s in lines if s.get("xref") == "x"} == {("x", 5e6)}
    assert {(s.get("yref"), s.get("y0")) for s in lines if s.get("yref") == "y"} == {("y", 6e-4)}
    rects = [s for s in layout["shapes"] if s["type"] == "rect"]
    gbw_shade = next(s for s in rects if s.get("xref") == "x")
    assert gbw_shade["x1"] == 5e6 and gbw_shade["x0"] < 5e6          # below the minimum GBW
    power_shade = next(s for s in rects if s.get("yref") == "y")
    assert power_shade["y0"] == 6e-4 and power_shade["y1"] > 6e-4    # above the power budget


def test_menu_offers_every_pair_with_engineering_ticks(figure):
    df, data = figure
    buttons = data["layout"]["updatemenus"][0]["buttons"]
    assert len(buttons) == 6 and buttons[0]["label"] == "Power vs GBW"
    for button in buttons:
        restyle, relayout = button["args"]
        # One x and y list per trace, in trace order, each the column the axis names.
        assert len(restyle["x"]) == len(data["data"])
        assert all(t.endswith(("W", "Hz", "dB")) for t in relayout["xaxis"]["ticktext"])
    gain_vs_power = next(b for b in buttons if b["label"] == "DC gain vs Power")
    xs = sorted(v for trace in gain_vs_power["args"][0]["x"] for v in trace)
    assert np.allclose(xs[0], df[M.power_w].min()) and gain_vs_power["args"][1]["xaxis"]["type"] == "log"
    assert any(t.endswith("µW") for t in gain_vs_power["args"][1]["xaxis"]["ticktext"])


def test_markup_in_a_plug_in_title_reaches_plotly_as_text():
    # plotly.js renders <b>, <i>, <a> in trace names and legend; an escaped title shows its brackets instead.
    df = pd.DataFrame({"topology": ["probe"] * 3, "design": ["p1", "p2", "p3"], "meets_spec": True,
                       "on_merged_front": [True, False, False], M.power_w: [1e-5, 2e-5, 3e-5],
                       M.gbw_hz: [1e6, 3e6, 9e6], M.gain_db: [60.0, 61.0, 62.0]})
    title = "<b>Bold</b> <a href='x'>amp</a>"
    fig = plots.front_figure(df, OBJECTIVES, CONSTRAINTS, {"probe": title}, ("probe",), {"probe": "p2"},
                             shown=SHOWN).to_plotly_json()
    names = [t["name"] for t in fig["data"]]
    assert names and all(n.startswith("&lt;b&gt;Bold&lt;/b&gt; &lt;a href=&#x27;x&#x27;&gt;amp&lt;/a&gt; · ")
                         for n in names), names
    assert not any("<" in n for n in names)
    assert all("<b>Bold" not in text for t in fig["data"] for text in t["text"])


def test_closest_designs_of_an_infeasible_study_are_named_so_and_the_verdict_axes_come_first():
    from ampfront.optimize.outputs.verdict import sentence_axes

    df = pd.DataFrame({"topology": ["alpha"] * 3, "design": ["a1", "a2", "a3"], "meets_spec": False,
                       "on_merged_front": False, M.power_w: [1e-5, 2e-5, 3e-5], M.gbw_hz: [1e6, 3e6, 9e6],
                       M.gain_db: [60.0, 61.0, 62.0]})
    fig = plots.front_figure(df, OBJECTIVES, CONSTRAINTS, {"alpha": "Alpha"}, ("alpha",), {"alpha": "a2"},
                             first=sentence_axes(OBJECTIVES), shown=SHOWN).to_plotly_json()
    names = {t["name"] for t in fig["data"]}
    assert "Alpha · closest designs, missing the spec" in names and not any("own front" in n for n in names)
    # The verdict reads GBW (more wanted) against power (paid): the page opens on power vs GBW.
    assert fig["layout"]["updatemenus"][0]["buttons"][0]["label"] == "Power vs GBW"
