"""Who wins where: the designs of every topology that no design of any topology dominates."""

from __future__ import annotations

import numpy as np
import pandas as pd
from pymoo.util.nds.non_dominated_sorting import NonDominatedSorting

from ampfront.optimize.search.problem import objective_matrix


def merged_front(table: pd.DataFrame, objectives) -> np.ndarray:
    metrics = {column: table[column].to_numpy() for column in table.columns}
    F = objective_matrix(metrics, objectives)
    mask = np.zeros(len(table), bool)
    if len(table):
        mask[NonDominatedSorting().do(F, only_non_dominated_front=True)] = True
    return mask
