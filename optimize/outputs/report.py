"""The interactive HTML report: one self-contained page (plotly.js embedded, opens with no network)."""

from __future__ import annotations

import html

import pandas as pd
import plotly.graph_objects as go

from ampfront.optimize.spec.study import Study
from ampfront.topologies.catalog import METRICS, OBJECTIVES, format_spec, spec_label

CAUTION = ("Pre-layout estimates from analytic device models. Confirm every design with the foundry's models, "
           "sign-off simulation across corners and the team's design review before committing to it.")

SHOWN = tuple(name for name, m in METRICS.items() if m.in_report)
_PALETTE = ["#0b6e4f", "#c84c09", "#3a5a9b", "#8a2a6b", "#b59a00", "#2a8a8a", "#6b4f2a", "#555555"]


def _fmt(key: str, value: float) -> str:
    return METRICS[key].format(value)


def _values(df: pd.DataFrame, metric_name: str):
    metric = METRICS[metric_name]
    return df[metric_name] * (metric.scale if metric.shown == "fixed" else 1.0)


def _ticks(metric_name: str) -> dict:
    # SI-prefixed ticks ("100µ", "10M") for quantities people read with prefixes.
    return {"tickformat": "~s"} if METRICS[metric_name].shown == "eng" else {}


def _axis(name: str) -> tuple[str, str, bool]:
    objective = OBJECTIVES[name]
    metric = METRICS[objective.metric]
    # Plotted in the unit a person reads (µm², V/µs), so axis ticks are the numbers of the table.
    return objective.metric, metric.axis_title, objective.log


def _hover(df: pd.DataFrame) -> list[str]:
    lines = []
    for _, row in df.iterrows():
        parts = [f"<b>{html.escape(str(row['design']))}</b> ({html.escape(str(row['topology']))})"]
        parts += [f"{METRICS[k].label}: {html.escape(_fmt(k, row[k]))}" for k in SHOWN if k in row]
        lines.append("<br>".join(parts))
    return lines


def front_figure(df: pd.DataFrame, study: Study) -> go.Figure:
    names = list(study.objectives)
    fig = go.Figure()
    for i, (topology, group) in enumerate(df.groupby("topology", sort=False)):
        color = _PALETTE[i % len(_PALETTE)]
        hover = _hover(group)
        if len(names) == 2:
            (mx, lx, logx), (my, ly, logy) = _axis(names[0]), _axis(names[1])
            fig.add_trace(go.Scatter(x=_values(group, mx), y=_values(group, my), mode="markers", name=topology, text=hover,
                                     hoverinfo="text", marker=dict(color=color, size=9, line=dict(width=0.5))))
            fig.update_xaxes(title=lx, type="log" if logx else "linear", **_ticks(mx))
            fig.update_yaxes(title=ly, type="log" if logy else "linear", **_ticks(my))
        else:
            dims = [dict(label=_axis(n)[1], values=_values(group, _axis(n)[0])) for n in names]
            fig.add_trace(go.Splom(dimensions=dims, name=topology, text=hover, hoverinfo="text",
                                   diagonal_visible=False, showupperhalf=False,
                                   marker=dict(color=color, size=6, line=dict(width=0.3, color="white"))))
    if len(names) > 2:
        # Splom axes are numbered by dimension; quantities spanning decades read best on log axes.
        for k, name in enumerate(names, start=1):
            metric, _, log = _axis(name)
            suffix = "" if k == 1 else str(k)
            axis = dict(type="log" if log else "linear", **_ticks(metric))
            fig.layout[f"xaxis{suffix}"] = axis
            fig.layout[f"yaxis{suffix}"] = axis
    fig.update_layout(height=560 if len(names) == 2 else 220 * len(names), template="plotly_white",
                      margin=dict(l=70, r=20, t=30, b=60), legend_title_text="Topology", hovermode="closest")
    return fig


def spec_rows(study: Study) -> list[tuple[str, str]]:
    """Every spec value the study set, in the unit of what it bounds (the catalog's own formatting)."""
    rows = [(spec_label(key), format_spec(key, value)) for key, value in study.spec.items()]
    rows.append((spec_label("input_cm"), format_spec("input_cm", study.cm_range)))
    rows.append((spec_label("noise_band"), format_spec("noise_band", study.conditions.noise_band)))
    return rows


def _facts(study: Study, summary) -> list[tuple[str, str]]:
    facts = [("technology", summary.technology), ("seed", str(summary.seed)),
             ("population x generations", f"{study.population} x {study.generations}"),
             ("designs evaluated (all topologies)", f"{summary.evaluations:,}"),
             ("front designs", str(summary.front_designs)), ("wall time", f"{summary.wall_s:.1f} s")]
    facts += [(f"{name}: no feasible design", outcome.describe().split("; the closest misses ", 1)[-1])
              for name, outcome in summary.infeasible.items()]
    facts += [("warning", w) for w in summary.warnings]
    return facts


def render(df: pd.DataFrame, study: Study, tech_name: str, summary) -> str:
    fig = front_figure(df, study).to_html(full_html=False, include_plotlyjs=True,
                                          config={"displaylogo": False, "responsive": True})
    spec = "".join(f"<tr><th>{html.escape(k)}</th><td>{html.escape(v)}</td></tr>" for k, v in spec_rows(study))
    shown = ["topology", "design"] + [k for k in SHOWN if k in df]
    head = "".join(f"<th>{html.escape(METRICS[k].label if k in METRICS else k)}</th>" for k in shown)
    body = "".join(
        "<tr>" + "".join(f"<td>{html.escape(_fmt(k, row[k]) if k in SHOWN else str(row[k]))}</td>" for k in shown)
        + "</tr>" for _, row in df.iterrows())
    facts = "".join(f"<li>{html.escape(k)}: {html.escape(v)}</li>" for k, v in _facts(study, summary))
    verdict = ("" if summary.feasible else
               '<p class="caution" id="infeasible"><b>No design met the whole spec.</b> The plot and table show '
               "the closest designs of each topology (front.csv column meets_spec = False); the Search panel "
               "names what each one misses.</p>")
    objectives = ", ".join(study.objectives)
    return f"""<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>{html.escape(study.title)} · ampfront</title>
<style>
body {{ font-family: system-ui, sans-serif; margin: 0 auto; max-width: 1200px; padding: 1rem 2rem; color: #222; }}
h1 {{ font-size: 1.5rem; margin-bottom: .2rem; }} .sub {{ color: #555; margin-top: 0; }}
.caution {{ border-left: 4px solid #c84c09; background: #fff6ef; padding: .6rem 1rem; }}
.cols {{ display: flex; gap: 2rem; flex-wrap: wrap; }} table {{ border-collapse: collapse; font-size: .85rem; }}
th, td {{ padding: .2rem .6rem; border-bottom: 1px solid #e4e4e4; text-align: left; }}
.designs {{ max-height: 420px; overflow: auto; }}
</style></head><body>
<h1>{html.escape(study.title)}</h1>
<p class="sub">Trade-off map on <b>{html.escape(tech_name)}</b> · objectives: {html.escape(objectives)}</p>
<p class="caution" id="caution">{html.escape(CAUTION)}</p>
{verdict}
<div class="cols"><section><h2>Spec</h2><table id="spec">{spec}</table></section>
<section><h2>Search</h2><ul>{facts}</ul></section></div>
<h2>Pareto front</h2>
<p>Every point is a sized design meeting the whole spec; hover for its figures. Its netlist is in
<code>netlists/&lt;design&gt;.sp</code> and its full row in <code>front.csv</code>.</p>
{fig}
<h2>Front designs</h2><div class="designs"><table id="designs"><thead><tr>{head}</tr></thead>
<tbody>{body}</tbody></table></div>
</body></html>
"""
