"""The report's corner section: how each topology's front designs move across the study's corners, and
which corner sets each figure's worst case (the one a lead asks about first)."""

from __future__ import annotations

import html

import numpy as np
import pandas as pd

from ampfront.topologies.catalog import metric

from .tables import CORNER_MARK, CORNER_METRICS


def corner_labels(df: pd.DataFrame) -> list[str]:
    """The corners front.csv holds, in the order written (the sizing corner first)."""
    labels = []
    for column in df.columns:
        if CORNER_MARK in column:
            label = column.split(CORNER_MARK, 1)[1]
            if label not in labels:
                labels.append(label)
    return labels


def _worst_corner(rows: pd.DataFrame, name: str, labels: list[str]) -> pd.Series:
    values = rows[[f"{name}{CORNER_MARK}{c}" for c in labels]].to_numpy(float)
    better = metric(name).better
    pick = np.nanargmin if better == "max" else np.nanargmax
    ok = np.isfinite(values).any(axis=1)
    index = np.full(len(rows), -1)
    if ok.any():
        index[ok] = pick(values[ok], axis=1)
    return pd.Series([labels[i] if i >= 0 else "n/a" for i in index])


def corner_spread_html(df: pd.DataFrame, titles: dict[str, str]) -> str:
    """'' for a one-corner study; otherwise per topology a table of each corner's median figures over its
    front designs and, per figure, the corner that is worst on most of them."""
    labels = corner_labels(df)
    if not labels:
        return ""
    shown = [m for m in CORNER_METRICS if f"{m}{CORNER_MARK}{labels[0]}" in df.columns]
    parts = ["<section id='corners'><h2>Corners</h2><p>One geometry per design, sized at "
             f"<b>{html.escape(labels[0])}</b> and re-solved at every corner; the plain figures everywhere else "
             "in this report are each design's worst corner. Medians over each topology's front designs:</p>"]
    for name, rows in df.groupby("topology", sort=False):
        rows = rows.reset_index(drop=True)
        head = "".join(f"<th>{html.escape(metric(m).label)}</th>" for m in shown)
        body = []
        for label in labels:
            cells = "".join(f"<td>{html.escape(metric(m).format(float(np.nanmedian(rows[f'{m}{CORNER_MARK}{label}']))))}"
                            "</td>" for m in shown)
            body.append(f"<tr><th>{html.escape(label)}</th>{cells}</tr>")
        worst = []
        for m in shown:
            counts = _worst_corner(rows, m, labels).value_counts()
            worst.append(f"<td>{html.escape(str(counts.index[0]))} ({counts.iloc[0]}/{len(rows)})</td>")
        body.append(f"<tr class='worst'><th>worst on most designs</th>{''.join(worst)}</tr>")
        parts.append(f"<h3>{html.escape(titles.get(name, name))}</h3><table class='corners'><tr><th>corner</th>"
                     f"{head}</tr>{''.join(body)}</table>")
    parts.append("</section>")
    return "".join(parts)
