"""The interactive HTML report: one self-contained page (plotly.js embedded once, no network request).

Read top to bottom it answers a lead's three questions: which architecture (the verdict, computed from the
front table), at what cost (the trade-off plot with the spec drawn on it), and how sure we are (design cards
with the circuit, its devices, its Bode plot and, once `ampfront check` has run, ngspice beside the model).
"""

from __future__ import annotations

import html
import json
import math
import re

import pandas as pd
import plotly.graph_objects as go
from plotly.offline import get_plotlyjs

from ampfront.optimize.outputs.checked import agreement_html
from ampfront.optimize.outputs import cards, plots
from ampfront.optimize.outputs.knee import KNEE_NAME
from ampfront.optimize.outputs.growth_plot import growth_figure, growths, late_phrase
from ampfront.optimize.outputs.summary import RunSummary
from ampfront.optimize.outputs.spread import corner_spread_html
from ampfront.optimize.outputs.verdict import Verdict, flag, sentence_axes, verdict
from ampfront.optimize.spec.study import Study
from ampfront.topologies.catalog import BOUNDS, M, METRICS, OBJECTIVES, format_spec, spec_label

CAUTION = ("Pre-layout estimates from analytic device models. Confirm every design with the foundry's models, "
           "sign-off simulation across corners and the team's design review before committing to it.")

SHOWN = tuple(name for name, m in METRICS.items() if m.in_report)
# Plotly's own modebar (its camera button writes a PNG in the browser, offline) plus the page's SVG button.
CONFIG = {"displaylogo": False, "responsive": True,
          "toImageButtonOptions": {"format": "png", "scale": 2}}
_SAFE_ID = re.compile(r"[^A-Za-z0-9_-]")


def _fmt(key: str, value: float) -> str:
    return METRICS[key].format(value)


def figure_html(fig: go.Figure, name: str) -> str:
    """A plotly figure as a div (plotly.js is in the page head), with PNG and SVG download buttons."""
    div = "plot-" + _SAFE_ID.sub("_", name)
    body = fig.to_html(full_html=False, include_plotlyjs=False, div_id=div, config=CONFIG)
    buttons = "".join(f"<button type='button' data-plot='{div}' data-format='{f}' data-name='{html.escape(name)}'>"
                      f"{f.upper()}</button>" for f in ("png", "svg"))
    return f"<div class='plot'>{body}<div class='dl'>download {buttons}</div></div>"


def spec_rows(study: Study) -> list[tuple[str, str]]:
    """Every spec value the study set, in the unit of what it bounds (the catalog's own formatting), then
    the catalog's defaults it left standing: they shape the front as much."""
    rows = [(spec_label(key), format_spec(key, value)) for key, value in study.spec.items()]
    rows += [(spec_label(b.key), f"{format_spec(b.key, b.default)} (default)") for b in BOUNDS.values()
             if b.default is not None and b.key not in study.spec]
    rows.append((spec_label("input_cm"), format_spec("input_cm", study.cm_range)))
    rows.append((spec_label("noise_band"), format_spec("noise_band", study.conditions.noise_band)))
    if study.corners or study.supply_tolerance:
        held = ", ".join(dict.fromkeys((study.nominal_corner or "nominal", *study.corners)))
        if study.supply_tolerance:
            held += f" at the supply ± {study.supply_tolerance:.0%}"
        rows.append(("held at corners", held))
    return rows


# Why a topology's search ended (search/engine.py SearchResult.stopped), as the report says it.
STOP_PHRASES = {"converged": "converged", "budget": "stopped at its budget", "generations": "ran its generations"}


def _facts(study: Study, summary) -> list[tuple[str, str]]:
    facts = [("technology", summary.technology), ("seed", str(summary.seed)),
             ("search", study.search_label()),
             ("designs evaluated (all topologies)", f"{summary.evaluations:,}"),
             ("front designs", str(summary.front_designs)), ("wall time", f"{summary.wall_s:.1f} s")]
    if summary.hypervolume:
        facts.append(("hypervolume on the study's window", ", ".join(
            f"{n} {v:.4f}" for n, v in summary.hypervolume.items() if math.isfinite(v))))
    if summary.searched:
        # Why each search ended: a front that stopped on the budget may not have converged.
        curves = growths(summary.searched)
        facts.append(("search per topology", "; ".join(
            f"{n}: {STOP_PHRASES.get(r['stopped'], r['stopped'])} after {int(r['generations']):,} generations "
            f"({int(r['evaluations']):,} designs)" + (f", {late_phrase(curves[n])}" if n in curves else "")
            for n, r in summary.searched.items())))
    facts += [("warning", w) for w in summary.warnings]
    return facts


def _verdict_html(v: Verdict, objectives, feasible: bool) -> str:
    heads = "".join(f"<th>Best {html.escape(METRICS[OBJECTIVES[o].metric].label)}</th>" for o in objectives)
    rows = []
    for s in v.standings:
        state = "meets spec" if s.feasible else ("no design meets spec" if feasible or not s.designs
                                                 else "closest designs only")
        mark = " ★" if s.feasible else (" †" if s.closest else "")
        best = "".join(f"<td class='{'lead' if o in s.leads else 'closest' if s.closest else ''}'>"
                       f"{html.escape(s.best.get(o, '–'))}{mark if o in s.leads or s.closest else ''}</td>"
                       for o in objectives)
        count = f"{s.designs} closest †" if s.closest else str(s.designs)
        binds = html.escape(s.binding)
        if len(s.misses) > 1:
            binds += "<details><summary>all misses</summary><ul>" + "".join(
                f"<li>{html.escape(m)}</li>" for m in s.misses) + "</ul></details>"
        refused = "".join(f"<div class='rejected'>{html.escape(r)}</div>" for r in s.rejected)
        rows.append(f"<tr class='{'ok' if s.feasible else 'bad'}'><th>{html.escape(s.title)}</th>"
                    f"<td>{state}{refused}</td><td>{count}</td><td>{s.merged}</td>{best}<td>{binds}</td></tr>")
    notes = "".join(f"<li>{html.escape(n)}</li>" for n in v.notes)
    # Beside a feasible front the plot holds only designs that meet the spec; with none, it holds these.
    drawn = " (in closest.csv, not drawn on the plot)" if feasible else " (drawn hollow on the plot)"
    return (f"<p class='sentence' id='sentence'>{html.escape(v.sentence)}</p>"
            + (f"<ul class='notes'>{notes}</ul>" if notes else "")
            + "<table id='verdict-table'><thead><tr><th>Topology</th><th>Status</th><th>Designs</th>"
              f"<th>On merged front</th>{heads}<th>What binds, by how much</th></tr></thead><tbody>"
            + "".join(rows) + "</tbody></table><p class='fine'>★ best of all topologies on that objective. "
              f"† of the topology's closest designs, which do not meet the spec{drawn}. "
              "“Binds”: for a topology that meets the spec, the spec line most of its front presses against; "
              "for one that does not, what its closest design misses and by how much. Designs the stability "
              "rules refused are counted over every design the search evaluated.</p>")


def _growth_html(summary, titles: dict[str, str], order) -> str:
    fig = growth_figure(summary.searched, summary.hypervolume, titles, order)
    if fig is None:
        return ""
    return ("<section id='growth'><h2>Convergence</h2><p>Each front's hypervolume on the study's window as the "
            "genetic search went on, as a share of the front as written (marked at the end: each objective's end "
            "then searched alone, the front thinned; the hover gives the hypervolume itself). On logarithmic "
            "evaluations a line still climbing where it ends says a larger <code>[search] budget</code> would "
            "raise that front (a steady climb there, about 8 times its last quarter's gain from a run ten times "
            "as long); a flat one, that the model has little more to give.</p>"
            + figure_html(fig, "convergence") + "</section>")


def _markers_text(feasible: bool) -> str:
    ring = f"the ring marks each topology's {html.escape(KNEE_NAME)}."
    if feasible:
        return ("Each marker is a sized design meeting the whole spec: filled when no design of any topology beats "
                "it (the merged Pareto front), hollow when only its own topology's front holds it; " + ring)
    return ("No design meets the spec: each hollow marker is one of a topology's closest designs, the least "
            "violating the search found; " + ring)


def _designs_table(df: pd.DataFrame, titles: dict[str, str]) -> str:
    shown = [k for k in SHOWN if k in df]
    head = "<th>Topology</th><th>Design</th><th>Merged front</th>" + "".join(
        f"<th>{html.escape(METRICS[k].label)}</th>" for k in shown)
    merged = flag(df["on_merged_front"]) if "on_merged_front" in df else [False] * len(df)
    body = []
    for (_, row), on in zip(df.iterrows(), merged):
        cells = [titles.get(row["topology"], str(row["topology"])), str(row["design"]), "●" if on else "○"]
        cells += [_fmt(k, row[k]) for k in shown]
        body.append("<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in cells) + "</tr>")
    return (f"<div class='designs'><table id='designs'><thead><tr>{head}</tr></thead><tbody>{''.join(body)}"
            "</tbody></table></div>")


def _selection_data(df: pd.DataFrame, titles: dict[str, str], with_card: set[str]) -> str:
    """Every design's figures, for the panel a click on the plot fills (no card is drawn for most)."""
    data = {}
    for _, row in df.iterrows():
        figures = [[METRICS[k].label, _fmt(k, row[k])] for k in SHOWN if k in row]
        sizes = [[c[2:-3], f"{float(row[c]):.3g} µm / {float(row['l_' + c[2:]]):.3g} µm",
                  METRICS[M.supply_current_a].format(float(row["id_" + c[2:-3] + "_a"]))]
                 for c in df.columns if c.startswith("w_") and c.endswith("_um")
                 and "l_" + c[2:] in row and "id_" + c[2:-3] + "_a" in row and pd.notna(row[c])]
        data[str(row["design"])] = {"title": titles.get(row["topology"], str(row["topology"])), "figures": figures,
                                    "devices": sizes, "card": str(row["design"]) in with_card}
    # Inside <script>, "<" could close the element: every one is written as its JSON escape.
    return json.dumps(data, ensure_ascii=False).replace("<", "\\u003c")


def render(df: pd.DataFrame, study: Study, tech_name: str, summary: RunSummary, builds: dict | None = None,
           check: pd.DataFrame | None = None, closest: pd.DataFrame | None = None) -> str:
    """The page. `builds`: topology -> the Build of its rows of `df` (same order), for the design cards;
    `check`: ampfront check's long-form table (checked.read_check), when it has run; `closest`: beside a
    feasible front, the closest designs of the topologies that met nothing (for the verdict only)."""
    from ampfront import topologies

    builds = builds or {}
    known = topologies.available()
    titles = {n: getattr(known.get(n), "title", n) for n in (*study.topologies, *df["topology"].astype(str).unique())}
    v = verdict(df, study.objectives, study.constraints, study.topologies, titles, summary.infeasible, closest,
                summary.rejected)
    picks = {n: cards.picks(df, n, study.objectives, v.axes) for n in study.topologies}
    knees = {n: p[0].design for n, p in picks.items() if p}
    fig = plots.front_figure(df, study.objectives, study.constraints, titles, study.topologies, knees,
                             first=v.axes or sentence_axes(study.objectives), shown=SHOWN)
    plot = figure_html(fig, "tradeoff")
    card_html = []
    for name in study.topologies:
        if not picks[name]:
            continue
        rows = df[df["topology"] == name].reset_index(drop=True)
        card_html.append(f"<h3 class='topo'>{html.escape(titles[name])}</h3>")
        card_html += [cards.card(p, titles[name], rows, builds.get(name), study.conditions, study.constraints,
                                 check, figure_html) for p in picks[name]]
    with_card = {p.design for ps in picks.values() for p in ps}
    spec = "".join(f"<tr><th>{html.escape(k)}</th><td>{html.escape(v_)}</td></tr>" for k, v_ in spec_rows(study))
    facts = "".join(f"<li>{html.escape(k)}: {html.escape(v_)}</li>" for k, v_ in _facts(study, summary))
    infeasible = ("" if summary.feasible else
                  '<p class="caution" id="infeasible"><b>No design met the whole spec.</b> The plot and the tables '
                  "show the closest designs of each topology (front.csv column meets_spec = False); the verdict "
                  "names what binds each one and by how much.</p>")
    objectives = ", ".join(METRICS[OBJECTIVES[o].metric].label for o in study.objectives)
    checked = "" if check is None else f" · ngspice check: {check['design'].nunique()} designs"
    return f"""<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>{html.escape(study.title)} · ampfront</title>
<meta http-equiv="Content-Security-Policy" content="default-src 'none'; script-src 'unsafe-inline' 'unsafe-eval'; style-src 'unsafe-inline'; img-src data: blob:; font-src data:">
<style>{_STYLE}</style>
<script type="text/javascript">{get_plotlyjs()}</script>
</head><body>
<h1>{html.escape(study.title)}</h1>
<p class="sub">Op-amp topology trade-off on <b>{html.escape(tech_name)}</b> · objectives: {html.escape(objectives)}
{html.escape(checked)}</p>
<p class="caution" id="caution">{html.escape(CAUTION)}</p>
{infeasible}
<section id="verdict"><h2>Verdict</h2>{_verdict_html(v, study.objectives, summary.feasible)}</section>
<section id="trade"><h2>Trade-off</h2>
<p>{_markers_text(summary.feasible)} The menu picks the two objectives
shown. Click a design for its figures.</p>
{plot}
<aside id="selected" class="selected" hidden><h4 id="sel-title"></h4><div id="sel-body"></div></aside>
</section>
<section id="cards"><h2>Design cards</h2>
<p>Each topology's knee and its best design on every objective (one card per design). Netlists are in
<code>netlists/&lt;design&gt;.sp</code>, every figure in <code>front.csv</code>.</p>
{''.join(card_html)}</section>
{corner_spread_html(df, titles)}
{agreement_html(check, titles)}
<div class="cols"><section><h2>Spec</h2><table id="spec">{spec}</table></section>
<section><h2>Search</h2><ul>{facts}</ul></section></div>
{_growth_html(summary, titles, study.topologies)}
<h2>All designs</h2>{_designs_table(df, titles)}
<script type="application/json" id="design-data">{_selection_data(df, titles, with_card)}</script>
<script type="text/javascript">{_SCRIPT}</script>
</body></html>
"""


_STYLE = """
body { font-family: system-ui, sans-serif; margin: 0 auto; max-width: 1240px; padding: 1rem 2rem; color: #222; }
h1 { font-size: 1.5rem; margin-bottom: .2rem; } .sub { color: #555; margin-top: 0; }
h3.topo { margin-top: 2rem; border-bottom: 2px solid #ccc; }
.caution { border-left: 4px solid #b34700; background: #fff6ef; padding: .6rem 1rem; }
.sentence { font-size: 1.15rem; font-weight: 600; }
.cols { display: flex; gap: 2rem; flex-wrap: wrap; }
table { border-collapse: collapse; font-size: .85rem; }
th, td { padding: .2rem .6rem; border-bottom: 1px solid #e4e4e4; text-align: left; vertical-align: top; }
#verdict-table tr.bad th { color: #8a1b1b; } td.lead { font-weight: 700; }
td.closest { color: #8a1b1b; font-style: italic; } .rejected { font-size: .8rem; color: #555; } .fine { font-size: .8rem; color: #555; }
.designs { max-height: 420px; overflow: auto; } .scroll { overflow-x: auto; }
.card { border: 1px solid #ddd; border-radius: 6px; padding: .6rem 1rem; margin: 1rem 0; }
.card h3 { margin: .2rem 0 .6rem; font-size: 1.05rem; } .why { color: #555; font-weight: 400; font-size: .9rem; }
.schem { overflow-x: auto; border: 1px solid #eee; margin-bottom: .5rem; }
.cardgrid { display: grid; grid-template-columns: minmax(300px, 1fr) minmax(380px, 1.4fr); gap: 1rem; }
tr.misses td, tr.misses th { color: #8a1b1b; } .unchecked { color: #555; font-style: italic; }
.dl { font-size: .8rem; color: #555; text-align: right; } .dl button { margin-left: .3rem; }
.selected { border: 1px solid #99b; background: #f6f8ff; padding: .5rem 1rem; margin: .5rem 0; }
"""

_SCRIPT = """
(function () {
  document.querySelectorAll('.dl button').forEach(function (b) {
    b.addEventListener('click', function () {
      var gd = document.getElementById(b.dataset.plot);
      Plotly.downloadImage(gd, {format: b.dataset.format, filename: b.dataset.name, scale: 2});
    });
  });
  var data = JSON.parse(document.getElementById('design-data').textContent);
  var gd = document.getElementById('plot-tradeoff');
  if (!gd || !gd.on) return;
  gd.on('plotly_click', function (ev) {
    if (!ev.points.length) return;
    var name = ev.points[0].customdata;
    var d = data[name];
    if (!d) return;
    var box = document.getElementById('selected');
    document.getElementById('sel-title').textContent = d.title + ' \\u00b7 ' + name;
    var body = document.getElementById('sel-body');
    body.textContent = '';
    var t = document.createElement('table');
    d.figures.concat([['', '']]).concat(d.devices.map(function (r) { return [r[0], r[1] + ', ' + r[2]]; }))
      .forEach(function (r) {
        var tr = t.insertRow(); var th = document.createElement('th'); th.textContent = r[0];
        tr.appendChild(th); tr.insertCell().textContent = r[1];
      });
    body.appendChild(t);
    if (d.card) {
      var a = document.createElement('a'); a.href = '#card-' + name; a.textContent = 'its design card';
      body.appendChild(a);
    }
    box.hidden = false;
  });
})();
"""
