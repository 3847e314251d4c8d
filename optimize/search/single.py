"""Searching one topology of a study: the search, then its designs re-evaluated into a front table."""

from __future__ import annotations

import numpy as np

from ampfront import topologies
from ampfront.optimize.outputs.tables import front_table
from ampfront.optimize.search.bounds import piles
from ampfront.optimize.search.engine import Progress, run_search
from ampfront.optimize.search.outcome import Infeasible, Miss, Outcome, TopologyFront
from ampfront.optimize.search.problem import DesignProblem
from ampfront.optimize.spec.corners import evaluate_study
from ampfront.optimize.spec.study import Study


def misses(problem: DesignProblem, metrics: dict[str, np.ndarray], row: int) -> tuple[Miss, ...]:
    out = []
    for c in problem.study.constraints:
        violation = c.violation(metrics)[row]
        if not violation <= 0:      # NaN counts as missed: the design could not be evaluated there
            out.append(Miss(c.name, c.metric, c.sense, float(metrics[c.metric][row]), c.bound))
    return tuple(out)


def search_topology(study: Study, tech, name: str, progress: Progress | None) -> Outcome:
    topology = topologies.available()[name]
    problem = DesignProblem(topology, tech, study)
    result = run_search(problem, study.population, study.generations, study.seed, progress)
    x = problem.decode(result.X)
    metrics, build, corners = evaluate_study(topology, x, tech, study, problem.corners, step=True)
    names = [f"{topology.prefix}_{i + 1:03d}" for i in range(len(result.X))]
    table = front_table(name, names, metrics, build, x, study.constraints, corners)
    if result.feasible:
        return TopologyFront(name, table, build, result.evaluations, result.history, piles(name, problem, result.X),
                             corners)
    # The closest design: least total normalized violation (the search's own measure).
    violations = np.column_stack([np.nan_to_num(np.maximum(c.violation(metrics), 0), nan=1e9)
                                  for c in study.constraints])
    best = int(np.argmin(violations.sum(axis=1)))
    return Infeasible(name, misses(problem, metrics, best), table, build, result.evaluations, result.history,
                      corners)
