"""The trade-off plot: every design of every topology on a chosen pair of objectives, spec limits shaded.

Merged-front designs are filled, the rest hollow; each topology has its own colour and marker shape (the
colours are the Okabe & Ito set, readable under the common colour-vision deficiencies), and its knee is
ringed. A menu picks the pair of objectives; the spec lines and the axes follow it.
"""

from __future__ import annotations

import html
from itertools import permutations

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from ampfront.optimize.outputs.axes import axis, span
from ampfront.optimize.outputs.verdict import flag
from ampfront.topologies.catalog import METRICS, OBJECTIVES

COLOURS = ["#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000", "#F0E442"]
SHAPES = ["circle", "square", "diamond", "triangle-up", "pentagon", "hexagon", "star", "triangle-down",
          "hourglass", "cross"]
INFEASIBLE_FILL = "rgba(120, 120, 120, 0.16)"


def style(index: int) -> tuple[str, str]:
    """Colour and marker shape of the index-th topology of a study (shapes repeat later than colours)."""
    return COLOURS[index % len(COLOURS)], SHAPES[index % len(SHAPES)]


def hover(df: pd.DataFrame, titles: dict[str, str], shown) -> list[str]:
    lines = []
    for _, row in df.iterrows():
        parts = [f"<b>{html.escape(str(row['design']))}</b> · {html.escape(titles.get(row['topology'], str(row['topology'])))}"]
        parts += [f"{html.escape(METRICS[k].label)}: {html.escape(METRICS[k].format(row[k]))}"
                  for k in shown if k in row]
        lines.append("<br>".join(parts))
    return lines


def _limits(constraints, metric_name: str) -> list[tuple[str, float]]:
    return [(c.sense, c.bound) for c in constraints if c.metric == metric_name and np.isfinite(c.bound)]


def _shapes_and_labels(constraints, mx: str, my: str, xr, yr, logx: bool, logy: bool):
    """Shaded infeasible side and a dashed line for every spec bound on either axis."""
    shapes, notes = [], []
    for axis_name, metric_name, (lo, hi), log in (("x", mx, xr, logx), ("y", my, yr, logy)):
        for sense, bound in _limits(constraints, metric_name):
            bad = (lo, bound) if sense == "min" else (bound, hi)
            if bad[1] <= bad[0]:
                continue
            other = {"xref" if axis_name == "y" else "yref": "paper",
                     ("x0" if axis_name == "y" else "y0"): 0, ("x1" if axis_name == "y" else "y1"): 1}
            own = {f"{axis_name}ref": axis_name, f"{axis_name}0": bad[0], f"{axis_name}1": bad[1]}
            shapes.append({"type": "rect", "layer": "below", "line": {"width": 0}, "fillcolor": INFEASIBLE_FILL,
                           **own, **other})
            shapes.append({"type": "line", "line": {"dash": "dash", "color": "#555", "width": 1.2},
                           f"{axis_name}ref": axis_name, f"{axis_name}0": bound, f"{axis_name}1": bound, **other})
            word = "≥" if sense == "min" else "≤"
            notes.append(f"spec {METRICS[metric_name].label} {word} {METRICS[metric_name].format(bound)}")
    return shapes, notes


def _view(df: pd.DataFrame, groups, constraints, x_obj: str, y_obj: str) -> tuple[dict, dict, str]:
    ox, oy = OBJECTIVES[x_obj], OBJECTIVES[y_obj]
    mx, my = ox.metric, oy.metric
    xs = {c.bound for c in constraints if c.metric == mx}
    ys = {c.bound for c in constraints if c.metric == my}
    xr = span(df[mx].to_numpy(float), ox.log, tuple(xs))
    yr = span(df[my].to_numpy(float), oy.log, tuple(ys))
    shapes, notes = _shapes_and_labels(constraints, mx, my, xr, yr, ox.log, oy.log)
    # Plain lists: the menu's arguments go to plotly.js as they are, with no typed-array decoding.
    data = {"x": [_plain(g[mx]) for g in groups], "y": [_plain(g[my]) for g in groups]}
    caption = ("Shaded: outside the spec (" + "; ".join(notes) + ")") if notes else "No spec bound on these axes"
    layout = {"xaxis": axis(mx, *xr, ox.log, METRICS[mx].label), "yaxis": axis(my, *yr, oy.log, METRICS[my].label),
              "shapes": shapes, "title": {"text": html.escape(caption), "x": 0.99, "xanchor": "right",
                                          "font": {"size": 12, "color": "#444"}}}
    return data, layout


def _plain(column: pd.Series) -> list:
    return [float(v) if np.isfinite(v) else None for v in pd.to_numeric(column, errors="coerce").to_numpy(float)]


def front_figure(df: pd.DataFrame, objectives, constraints, titles: dict[str, str], order, knees: dict[str, str],
                 first: tuple[str, str] | None = None, shown=()) -> go.Figure:
    """`order`: the study's topologies (fixes colours); `knees`: topology -> knee design name."""
    merged = flag(df["on_merged_front"]) if "on_merged_front" in df else np.zeros(len(df), bool)
    meets = flag(df["meets_spec"]) if "meets_spec" in df else np.ones(len(df), bool)
    pairs = list(permutations(objectives, 2))
    if first in pairs:
        pairs.remove(first)
        pairs.insert(0, first)
    traces, groups = [], []
    for k, name in enumerate(order):
        mine = (df["topology"] == name).to_numpy()
        if not mine.any():
            continue
        colour, shape = style(k)
        # plotly.js reads trace names, legend and menu text as its own subset of HTML: a plug-in's title
        # is escaped so that markup in it shows as text.
        title = html.escape(titles.get(name, name))
        for on, suffix in ((True, ""), (False, "-open")):
            group = df[mine & (merged == on)]
            if not len(group):
                continue
            role = ("on merged front" if on else "own front only" if meets[mine & (merged == on)].all()
                    else "closest designs, missing the spec")
            label = f"{title} · {role}"
            traces.append(go.Scatter(
                mode="markers", name=label, legendgroup=name, text=hover(group, titles, shown), hoverinfo="text",
                customdata=group["design"].astype(str).tolist(),
                marker=dict(symbol=shape + suffix, color=colour, size=10 if on else 8,
                            line=dict(width=1.2 if on else 1.6, color="white" if on else colour))))
            groups.append(group)
        knee = df[mine & (df["design"] == knees.get(name)).to_numpy()]
        if len(knee):
            traces.append(go.Scatter(mode="markers", name=f"{title} · knee", legendgroup=name,
                                     text=hover(knee, titles, shown), hoverinfo="text",
                                     customdata=knee["design"].astype(str).tolist(),
                                     marker=dict(symbol="circle-open", size=22, color="#111",
                                                 line=dict(width=2.2, color="#111"))))
            groups.append(knee)
    fig = go.Figure(traces)
    buttons = []
    for x_obj, y_obj in pairs:
        data, layout = _view(df, groups, constraints, x_obj, y_obj)
        label = html.escape(f"{METRICS[OBJECTIVES[y_obj].metric].label} vs {METRICS[OBJECTIVES[x_obj].metric].label}")
        buttons.append(dict(label=label, method="update", args=[data, layout]))
    data, layout = _view(df, groups, constraints, *pairs[0])
    for trace, x, y in zip(fig.data, data["x"], data["y"]):
        trace.x, trace.y = x, y
    fig.update_layout(**layout)
    fig.update_layout(
        height=600, template="plotly_white", margin=dict(l=80, r=20, t=60, b=70), hovermode="closest",
        legend=dict(title_text="Topology · role (filled: on the merged front)", orientation="v"),
        updatemenus=[dict(buttons=buttons, direction="down", x=0, xanchor="left", y=1.13, yanchor="top",
                          showactive=True, bgcolor="#f4f4f4")],
        annotations=[dict(text="axes:", x=0, xref="paper", y=1.13, yref="paper", xanchor="right", yanchor="top",
                          showarrow=False)])
    return fig
