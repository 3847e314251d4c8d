"""Which designs of a front deserve a close look: the extremes (best on each objective) and the knee.

The knee is the design farthest from the hyperplane through the front's extreme designs, in objective space
normalized to [0, 1] per objective (Das, "On characterizing the 'knee' of the Pareto curve based on
Normal-Boundary Intersection", Structural Optimization 18, 1999): where giving up a little of one objective
buys the most of the others.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ampfront.optimize.search.problem import objective_matrix
from ampfront.topologies.catalog import OBJECTIVES

KNEE_NAME = "knee (farthest from the plane through the extreme designs, normalized objectives; Das 1999)"


def normalized(table: pd.DataFrame, objectives) -> np.ndarray:
    """Objectives as minimized quantities (log10 where the catalog says so), scaled to [0, 1] per column."""
    columns = {OBJECTIVES[o].metric for o in objectives}
    F = objective_matrix({c: table[c].to_numpy(float) for c in columns}, objectives)
    low, high = F.min(axis=0), F.max(axis=0)
    span = np.where(high > low, high - low, 1.0)
    return (F - low) / span


def extremes(table: pd.DataFrame, objectives) -> dict[str, int]:
    """Row position of the best design on each objective."""
    F = normalized(table, objectives)
    return {name: int(np.argmin(F[:, k])) for k, name in enumerate(objectives)}


def knee(table: pd.DataFrame, objectives) -> int:
    """Row position of the knee design (see the module's docstring)."""
    F = normalized(table, objectives)
    if len(F) <= 2:
        return int(np.argmin(F.sum(axis=1)))
    ends = F[[int(np.argmin(F[:, k])) for k in range(F.shape[1])]]
    # The plane n . f = 1 through the extreme designs; when they do not span one (two extremes coincide),
    # the plane of equal weights stands in for it.
    normal, *_ = np.linalg.lstsq(ends, np.ones(len(ends)), rcond=None)
    if not np.all(np.isfinite(normal)) or np.linalg.norm(normal) < 1e-12 or \
            not np.allclose(ends @ normal, 1.0, atol=1e-6):
        normal = np.ones(F.shape[1])
        distance = (F.sum(axis=1).max() - F.sum(axis=1))
    else:
        # Positive on the side of the ideal point (smaller objectives): how far the front bulges past the plane.
        distance = (1.0 - F @ normal) / np.linalg.norm(normal) * np.sign(normal.sum() or 1.0)
    return int(np.argmax(distance))
