"""Which front designs `ampfront check` verifies: all, each topology's knee, its extremes, N spread along
it, or designs by name.

The knee is the design nearest the ideal corner of the topology's front once every objective is scaled to
0..1 over that front (log objectives on a log scale, as the search sees them); an extreme is the best
design on one objective. Chosen per topology by default, so no topology's corners go unverified because
another topology's designs crowd the front.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ampfront.topologies.catalog import OBJECTIVES

CHOICES = ("all", "knee", "extremes")


class SelectionError(ValueError):
    """A --designs value that names nothing in the front."""


def _scaled(front: pd.DataFrame, objectives) -> np.ndarray:
    """Objectives as columns to minimise, each scaled to 0..1 over `front`."""
    columns = []
    for name in objectives:
        o = OBJECTIVES[name]
        v = pd.to_numeric(front[o.metric], errors="coerce").to_numpy(float)
        if o.log:
            v = np.log10(np.where(v > 0, v, np.nan))
        if o.sense == "max":
            v = -v
        low, high = np.nanmin(v), np.nanmax(v)
        columns.append((v - low) / (high - low) if high > low else np.zeros_like(v))
    return np.nan_to_num(np.column_stack(columns), nan=1.0)


def knee(front: pd.DataFrame, objectives) -> list[int]:
    if len(front) == 0:
        return []
    return [int(np.argmin(np.linalg.norm(_scaled(front, objectives), axis=1)))]


def extremes(front: pd.DataFrame, objectives) -> list[int]:
    if len(front) == 0:
        return []
    return sorted({int(np.argmin(column)) for column in _scaled(front, objectives).T})


def spread(n_rows: int, count: int) -> list[int]:
    """Evenly spaced rows (the table is sorted by an objective, so these walk along the front)."""
    count = max(1, min(count, n_rows))
    return sorted({round(i * (n_rows - 1) / max(count - 1, 1)) for i in range(count)})


def _count(front: pd.DataFrame, objectives, count: int) -> list[int]:
    """The knee and the extremes first, then evenly spread designs, `count` in all."""
    chosen: list[int] = []
    for i in knee(front, objectives) + extremes(front, objectives):
        if i not in chosen:
            chosen.append(i)
    chosen = chosen[:count]
    for n in range(count, len(front) + 1):
        if len(chosen) >= count:
            break
        for i in spread(len(front), n):
            if i not in chosen and len(chosen) < count:
                chosen.append(i)
    return sorted(chosen)


def choose(front: pd.DataFrame, objectives, designs: str, per_topology: bool = True) -> list[int]:
    """Row positions of `front` to verify, in front order. `designs`: all | knee | extremes | a count |
    comma-separated design names."""
    designs = designs.strip()
    if designs not in CHOICES and not designs.isdigit():
        names = [d.strip() for d in designs.split(",") if d.strip()]
        known = set(front["design"])
        unknown = [d for d in names if d not in known]
        if not names or unknown:
            raise SelectionError(f"designs of the front, by name (not {', '.join(unknown) or 'empty'})")
        return sorted(np.flatnonzero(front["design"].isin(names).to_numpy()).tolist())
    if designs.isdigit() and int(designs) < 1:
        raise SelectionError("at least one design")
    groups = ([np.flatnonzero((front["topology"] == t).to_numpy()) for t in front["topology"].unique()]
              if per_topology else [np.arange(len(front))])
    chosen: list[int] = []
    for rows in groups:
        part = front.iloc[rows].reset_index(drop=True)
        if designs == "all":
            local = list(range(len(part)))
        elif designs == "knee":
            local = knee(part, objectives)
        elif designs == "extremes":
            local = extremes(part, objectives)
        else:
            local = _count(part, objectives, int(designs))
        chosen += [int(rows[i]) for i in local]
    return sorted(chosen)
