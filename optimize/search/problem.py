"""One generic adapter from any topology to a pymoo Problem (minimize F, feasible where G <= 0)."""

from __future__ import annotations

import numpy as np
from pymoo.core.problem import Problem

from ampfront.topologies.base import Topology
from ampfront.topologies.process.base import Technology

from ampfront.optimize.spec.corners import corner_set, evaluate_study
from ampfront.optimize.spec.study import Study
from ampfront.topologies.catalog import OBJECTIVES

_BAD = 1e9  # stands in for a non-finite objective or violation (no crossing, dead device), so it loses


def objective_matrix(metrics: dict[str, np.ndarray], objectives) -> np.ndarray:
    columns = []
    for name in objectives:
        objective = OBJECTIVES[name]
        value = metrics[objective.metric]
        if objective.log:
            value = np.log10(np.maximum(value, 1e-30))
        columns.append(-value if objective.sense == "max" else value)
    return np.nan_to_num(np.column_stack(columns), nan=_BAD, posinf=_BAD, neginf=_BAD)


class DesignProblem(Problem):
    def __init__(self, topology: Topology, tech: Technology, study: Study):
        self.topology, self.tech, self.study = topology, tech, study
        self.design_variables = topology.variables(tech)
        low = [np.log10(v.low) if v.log else v.low for v in self.design_variables]
        high = [np.log10(v.high) if v.log else v.high for v in self.design_variables]
        super().__init__(n_var=len(low), n_obj=len(study.objectives),
                         n_ieq_constr=len(study.constraints), xl=np.array(low), xu=np.array(high))
        self.evaluations = 0
        self.corners = corner_set(study, tech)   # None: the study has one corner

    def decode(self, X: np.ndarray) -> dict[str, np.ndarray]:
        # A coordinate that is no number (NaN, an infinity) decodes to NaN, so its design fails every
        # constraint instead of reading as the limit 10**-inf = 0.
        X = np.where(np.isfinite(X), X, np.nan) if not np.isfinite(X).all() else np.atleast_2d(X)
        X = np.atleast_2d(X)
        return {v.name: 10.0 ** X[:, i] if v.log else X[:, i].copy()
                for i, v in enumerate(self.design_variables)}

    def metrics(self, X: np.ndarray, step: bool = False):
        """(metrics, build): at every corner of the study, each metric at its worst corner."""
        metrics, build, _ = evaluate_study(self.topology, self.decode(X), self.tech, self.study, self.corners, step)
        return metrics, build

    def _evaluate(self, X, out, *args, **kwargs):
        metrics, _ = self.metrics(X)
        self.evaluations += len(X)
        out["F"] = objective_matrix(metrics, self.study.objectives)
        g = np.column_stack([c.violation(metrics) for c in self.study.constraints])
        out["G"] = np.nan_to_num(g, nan=_BAD, posinf=_BAD, neginf=-_BAD)
