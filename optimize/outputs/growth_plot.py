"""The report's convergence plot: each topology's front hypervolume on the study's window against the designs
its search evaluated (search/growth.py), and the front as written marked at the end. A line still climbing
when it stops says a larger budget would raise that front; a flat one, that it would not."""

from __future__ import annotations

import html

import plotly.graph_objects as go

from ampfront.optimize.outputs.plots import style
from ampfront.optimize.search.growth import Growth


def growths(searched: dict[str, dict]) -> dict[str, Growth]:
    """The topologies whose record holds a curve (a converging search that met the spec)."""
    found = {n: Growth.from_record(r.get("growth")) for n, r in searched.items() if isinstance(r, dict)}
    return {n: g for n, g in found.items() if g is not None and len(g.evaluations)}


def late_phrase(grown: Growth) -> str:
    return f"its last quarter adding {grown.share()} of its hypervolume" if grown.share() else ""


def growth_figure(searched: dict[str, dict], hypervolume: dict[str, float], titles: dict[str, str],
                  order) -> go.Figure | None:
    """`order`: the study's topologies (the trade-off plot's colours and shapes); None when no topology has a
    curve (a fixed run, or nothing met the spec)."""
    curves = growths(searched)
    if not curves:
        return None
    fig = go.Figure()
    for k, name in enumerate(order):
        grown = curves.get(name)
        if grown is None:
            continue
        colour, shape = style(k)
        title = html.escape(titles.get(name, name))
        written = hypervolume.get(name)
        total = searched[name].get("evaluations")
        # Each front against its own final value: a small front creeping reads as plainly as a large one, and
        # on logarithmic evaluations a creep is a straight climbing line, a settled front a flat one.
        final = written if written is not None and written > 0 else grown.hypervolume[-1]
        if not final > 0:
            continue
        hover = "%{x:,} designs: %{customdata:.4f} (%{y:.1f} %)<extra>" + title + "</extra>"
        fig.add_trace(go.Scatter(x=list(grown.evaluations), y=[100 * v / final for v in grown.hypervolume],
                                 customdata=list(grown.hypervolume), mode="lines", name=f"{title} · genetic search",
                                 legendgroup=name, line=dict(color=colour, width=2), hovertemplate=hover))
        if isinstance(total, int) and final == written:
            fig.add_trace(go.Scatter(x=[total], y=[100.0], customdata=[written], mode="markers",
                                     name=f"{title} · front as written", legendgroup=name, hovertemplate=hover,
                                     marker=dict(symbol=shape, color=colour, size=11,
                                                 line=dict(width=1.2, color="white"))))
    fig.update_layout(
        height=420, template="plotly_white", margin=dict(l=80, r=20, t=30, b=60), hovermode="closest",
        xaxis=dict(title_text="designs evaluated", type="log"),
        # Not capped at 100 %: the archive can hold more than the thinned front written from it.
        yaxis=dict(title_text="share of the front's hypervolume (%)", rangemode="tozero"),
        legend=dict(orientation="v"))
    return fig
