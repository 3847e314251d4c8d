"""Searching one topology of a study: the search, then its designs re-evaluated into a front table."""

from __future__ import annotations

import numpy as np

from ampfront import topologies
from ampfront.optimize.outputs.tables import front_table
from ampfront.optimize.search.bounds import piles
from ampfront.optimize.search.engine import Progress, run_search
from ampfront.optimize.search.hypervolume import window_for
from ampfront.optimize.search.outcome import STABILITY_RULES, Infeasible, Miss, Outcome, Rejections, TopologyFront
from ampfront.optimize.search.problem import _BAD, DesignProblem
from ampfront.optimize.spec.corners import evaluate_study
from ampfront.optimize.spec.study import Study


class CountingProblem(DesignProblem):
    """The design problem, counting as it evaluates (one vectorized pass over each population) the designs
    each stability rule turns away, and how many of those meet every other constraint."""

    def __init__(self, topology, tech, study: Study):
        super().__init__(topology, tech, study)
        names = [c.name for c in study.constraints]
        self.rules = [r for r in STABILITY_RULES if r in names]
        self._columns = np.array([names.index(r) for r in self.rules], int)
        self._others = np.array([i for i, n in enumerate(names) if n not in STABILITY_RULES], int)
        self.violated = np.zeros(len(self.rules), np.int64)
        self.only = np.zeros(len(self.rules), np.int64)
        self.counted = 0

    def _evaluate(self, X, out, *args, **kwargs):
        super()._evaluate(X, out, *args, **kwargs)
        g = out["G"]
        self.counted += len(g)
        if not len(self._columns):
            return
        # A figure that could not be evaluated reads _BAD: that design failed to bias, it was not judged unstable.
        judged = g[:, self._columns]
        bad = (judged > 0) & (judged < _BAD)
        rest = (g[:, self._others] <= 0).all(axis=1) if len(self._others) else np.ones(len(g), bool)
        self.violated += bad.sum(axis=0)
        self.only += (bad & rest[:, None]).sum(axis=0)

    def rejections(self) -> Rejections:
        return Rejections(self.counted, dict(zip(self.rules, self.violated.tolist())),
                          dict(zip(self.rules, self.only.tolist())))


def misses(problem: DesignProblem, metrics: dict[str, np.ndarray], row: int) -> tuple[Miss, ...]:
    out = []
    for c in problem.study.constraints:
        violation = c.violation(metrics)[row]
        if not violation <= 0:      # NaN counts as missed: the design could not be evaluated there
            out.append(Miss(c.name, c.metric, c.sense, float(metrics[c.metric][row]), c.bound))
    return tuple(out)


def search_topology(study: Study, tech, name: str, progress: Progress | None) -> Outcome:
    topology = topologies.available()[name]
    problem = CountingProblem(topology, tech, study)
    window = window_for(study)
    result = run_search(problem, study.population, study.generations, study.seed, progress, study.refine,
                        budget=study.budget, hypervolume=window.hypervolume, front_designs=study.front_designs,
                        contributions=window.thinning)
    x = problem.decode(result.X)
    metrics, build, corners = evaluate_study(topology, x, tech, study, problem.corners, step=True)
    names = [f"{topology.prefix}_{i + 1:03d}" for i in range(len(result.X))]
    table = front_table(name, names, metrics, build, x, study.constraints, corners)
    if result.feasible:
        return TopologyFront(name, table, build, result.evaluations, result.history, piles(name, problem, result.X),
                             corners, problem.rejections(), window.hypervolume(result.F), result.refined,
                             result.stopped, result.growth)
    # The closest design: least total normalized violation (the search's own measure).
    violations = np.column_stack([np.nan_to_num(np.maximum(c.violation(metrics), 0), nan=1e9)
                                  for c in study.constraints])
    best = int(np.argmin(violations.sum(axis=1)))
    return Infeasible(name, misses(problem, metrics, best), table, build, result.evaluations, result.history,
                      corners, problem.rejections(), result.stopped)
