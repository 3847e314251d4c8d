"""The multi-objective search, in three phases:

1. each objective's end of the front, found alone (search.extremes: one small differential evolution per
   objective, all in one model call per generation);
2. NSGA-II (NSGA-III for four and five objectives) from those ends and random designs, stopped when its
   hypervolume on the study's fixed window stalls;
3. levels spread over the front, and halfway across its gaps, each carried onto the front by an
   epsilon-constraint run (least of the first objective at no worse a level of the others), three rounds.

The study's population x generations is the unit of budget: the ends take one unit, NSGA-II at most one,
the level runs four, in calls of hundreds of designs where the model is several times cheaper per design
than in NSGA-II's calls of one population (README, Convergence). Every random draw comes from generators
seeded by the study's seed, so a seed gives the same front bit for bit.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from pymoo.algorithms.moo.nsga2 import NSGA2
from pymoo.algorithms.moo.nsga3 import NSGA3
from pymoo.core.problem import Problem
from pymoo.indicators.hv import HV
from pymoo.util.nds.non_dominated_sorting import NonDominatedSorting
from pymoo.util.ref_dirs import get_reference_directions

from ampfront.optimize.search.extremes import best_of, runs

# Das-Dennis partitions giving 84 (4 objectives) and 70 (5 objectives) reference directions.
_PARTITIONS = {4: 6, 5: 4}
# Each end run: half a population for as many generations as END_SHARE of the budget pays.
END_SHARE = 1.0
SEEDS_PER_END = 10          # designs each end run hands to NSGA-II
# NSGA-II stops when the hypervolume has gained less than STALL_GAIN over STALL generations.
STALL, STALL_GAIN = 10, 1e-3
# Level runs: how many levels a round, each run's population, their share of the budget, rounds.
LEVELS_PER_ROUND, RUN_SIZE, REFINE_SHARE, ROUNDS = 50, 8, 4.0, 3
# Where, between a front design and its neighbour, a level may sit (so a wide gap can take several).
GAP_STEPS = (0.5,)
# Runs whose populations lend a level run its difference vectors (itself included).
NEIGHBOURS = 5

Progress = Callable[[int, int, float], None]  # generation, feasible designs, hypervolume


def algorithm_for(n_obj: int, population: int, sampling=None):
    extra = {} if sampling is None else {"sampling": sampling}
    if n_obj <= 3:
        return NSGA2(pop_size=population, **extra)
    ref_dirs = get_reference_directions("das-dennis", n_obj, n_partitions=_PARTITIONS[n_obj])
    return NSGA3(ref_dirs=ref_dirs, pop_size=max(population, len(ref_dirs)), **extra)


def population_for(n_obj: int, population: int) -> int:
    if n_obj <= 3:
        return population
    return max(population, len(get_reference_directions("das-dennis", n_obj, n_partitions=_PARTITIONS[n_obj])))


class _Relative:
    """Hypervolume for a problem with no study (a test problem): normalized by the first feasible
    generation's extent, comparable within one run only."""

    def __init__(self):
        self.low = self.span = None

    def hypervolume(self, F: np.ndarray) -> float:
        if self.low is None:
            # Floor of 0.1 (dB, decade or degree) so one lone feasible design does not blow the scale up.
            self.low = F.min(axis=0)
            self.span = np.maximum(F.max(axis=0) - self.low, 0.1)
        return float(HV(ref_point=np.full(F.shape[1], 1.1))((F - self.low) / self.span))


@dataclass
class SearchResult:
    X: np.ndarray          # front designs in the problem's variable space
    F: np.ndarray
    feasible: bool         # False: no design met every constraint; X holds the least-violating ones
    history: list[tuple[int, int, float]]
    evaluations: int
    hypervolume: float = float("nan")      # of the returned front, on the study's fixed window
    phases: dict = field(default_factory=dict)   # evaluations and generations per phase


def run_search(problem: Problem, population: int, generations: int, seed: int,
               progress: Progress | None = None, window=None) -> SearchResult:
    """`window` (search.hypervolume.Window) fixes the hypervolume's scale; without one it is relative."""
    scale = window or _Relative()
    span = window.reference - window.ideal if window is not None else np.ones(problem.n_obj)
    rng = np.random.default_rng([seed, 13])          # our draws; pymoo's own come from `seed`
    box = problem.xu - problem.xl
    n_obj, n_var = problem.n_obj, problem.n_var
    pop_size = population_for(n_obj, population)
    budget = population * generations

    # 1. Each objective's end, alone.
    end_size = max(8, population // 2)
    end_generations = max(1, int(END_SHARE * budget / (n_obj * end_size)) - 1)
    ends = np.arange(n_obj)
    U_end, F_end, c_end = runs(problem, rng, rng.random((n_obj, end_size, n_var)), ends,
                               np.full((n_obj, n_obj), np.inf), end_generations, span)
    spent = {"ends": n_obj * end_size * (end_generations + 1)}
    per_end = min(SEEDS_PER_END, pop_size // n_obj)
    seeds = best_of(U_end, F_end, c_end, ends, per_end)[0].reshape(-1, n_var)
    start = np.vstack([seeds, rng.random((pop_size - len(seeds), n_var))])

    # 2. NSGA-II from the ends and random designs, until its hypervolume stalls.
    algorithm = algorithm_for(n_obj, population, sampling=problem.xl + start * box)
    algorithm.setup(problem, termination=("n_gen", generations), seed=seed, verbose=False)
    history: list[tuple[int, int, float]] = []
    while algorithm.has_next():
        algorithm.next()
        F = _feasible_opt(algorithm)
        entry = (algorithm.n_gen, int((algorithm.pop.get("CV").ravel() <= 0).sum()),
                 scale.hypervolume(F) if len(F) else 0.0)
        history.append(entry)
        if progress:
            progress(*entry)
        if len(history) > STALL and history[-1][2] > 0 and history[-1][2] - history[-1 - STALL][2] < STALL_GAIN:
            break
    spent |= {"nsga": int(algorithm.evaluator.n_eval), "generations": len(history)}

    pop, opt = algorithm.pop, algorithm.opt
    # pymoo leaves `opt` empty when no design was feasible: fall back to the least-violating ones.
    if opt is None or not (opt.get("CV").ravel() <= 0).any():
        chosen = pop[np.argsort(pop.get("CV").ravel(), kind="stable")[:10]]
        return _result(chosen.get("X"), chosen.get("F"), False, history, sum(_counts(spent)), float("nan"), spent)
    feasible = opt.get("CV").ravel() <= 0
    end_ok = (c_end <= 0).reshape(-1)
    X = np.vstack([opt.get("X")[feasible], problem.xl + U_end.reshape(-1, n_var)[end_ok] * box])
    F = np.vstack([opt.get("F")[feasible], F_end.reshape(-1, n_obj)[end_ok]])
    X, F = _non_dominated(X, F)

    # 3. Levels spread over the front, each run carried onto the front: least of the first objective at
    #    no worse a level of the others. A level may sit halfway between two neighbouring front designs,
    #    so a gap NSGA-II left gets filled; each later round splits what the one before left.
    unit = np.where(box > 0, box, 1.0)
    pool = (pop.get("X") - problem.xl) / unit
    spent["levels"] = 0
    for _ in range(ROUNDS):
        levels = _levels(F, span, min(LEVELS_PER_ROUND, 2 * len(F)))
        generations_here = max(1, int(REFINE_SHARE * budget / (ROUNDS * len(levels) * RUN_SIZE)) - 1)
        U0 = _start(levels, X, F, pool, rng, span, box, problem.xl)
        levels[:, 0] = np.inf
        # The first level is the first objective's own end (_levels puts it first): free of the others.
        levels[0] = np.inf
        scaled = np.where(np.isfinite(levels), levels, 0.0) / span
        distance = np.linalg.norm(scaled[:, None, :] - scaled[None, :, :], axis=-1)
        neighbours = np.argsort(distance, axis=1, kind="stable")[:, :min(NEIGHBOURS, len(levels))]
        U_a, F_a, c_a = runs(problem, rng, U0, np.zeros(len(levels), int), levels, generations_here, span,
                             neighbours)
        spent["levels"] += len(levels) * RUN_SIZE * (generations_here + 1)
        ok = (c_a <= 0).reshape(-1)
        X = np.vstack([X, problem.xl + U_a.reshape(-1, n_var)[ok] * box])
        F = np.vstack([F, F_a.reshape(-1, n_obj)[ok]])
        X, F = _non_dominated(X, F)
        pool = np.vstack([pool, (X - problem.xl) / unit])
    X, F = _thinned(X, F, pop_size, span)
    hv = scale.hypervolume(F)
    if progress:
        progress(generations, history[-1][1] if history else 0, hv)   # the whole run is done: bar completes
    return _result(X, F, True, history, sum(_counts(spent)), hv, spent)


def _counts(spent: dict):
    return [v for k, v in spent.items() if k != "generations"]


def _levels(F: np.ndarray, span: np.ndarray, count: int) -> tuple[np.ndarray, np.ndarray]:
    """`count` objective levels spread over the front F: its designs and the midpoints between each and, for
    every objective, its nearest neighbour that is better on that objective (on a two-objective front: both
    neighbours along it, so a midpoint crosses every gap); each objective's best first, then
    farthest-point sampling in the window's scale (one pass per pick, vectorized over the candidates).
    Returns the levels (one row each, in the searched objective space)."""
    scaled = F / span
    gap = np.linalg.norm(scaled[:, None, :] - scaled[None, :, :], axis=-1)
    halves = []
    for k in range(F.shape[1]):
        beyond = np.where(F[None, :, k] < F[:, None, k], gap, np.inf)
        has = np.isfinite(beyond).any(axis=1)
        toward = F[np.argmin(beyond, axis=1)][has]
        halves += [F[has] + t * (toward - F[has]) for t in GAP_STEPS]
    candidates = np.vstack([F] + halves)
    # The front's own designs come first in `candidates`, so each objective's best design leads.
    return candidates[_farthest(candidates / span, count)]


def _start(levels, X, F, pool, rng, span, box, low) -> np.ndarray:
    """Each level run's first population: half the front designs nearest its level (in the window's scale),
    half drawn from the pool (NSGA-II's last population and earlier runs): a run across a gap starts from
    both its edges, and the far half keeps its differences large enough to cross."""
    unit = np.where(box > 0, box, 1.0)
    near = min(RUN_SIZE // 2, len(F))
    distance = np.linalg.norm(levels[:, None, :] / span - F[None, :, :] / span, axis=-1)
    closest = np.argsort(distance, axis=1, kind="stable")[:, :near]
    U0 = (X[closest] - low) / unit
    if near < RUN_SIZE:
        others = np.argsort(rng.random((len(levels), len(pool))), axis=1)[:, :RUN_SIZE - near]
        U0 = np.concatenate([U0, pool[others]], axis=1)
    return U0


def _thinned(X: np.ndarray, F: np.ndarray, count: int, span: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """At most `count` designs of a non-dominated set, evenly spread: the level runs leave clusters that
    NSGA-II's crowding would thin unevenly, so the same farthest-point sampling as for the levels."""
    if len(F) <= count:
        return X, F
    keep = np.sort(_farthest(F / span, count))
    return X[keep], F[keep]


def _farthest(points: np.ndarray, count: int) -> np.ndarray:
    """Each coordinate's lowest point first, then repeatedly the point farthest from those chosen (one
    vectorized pass per pick)."""
    chosen = list(dict.fromkeys(int(i) for i in np.argmin(points, axis=0)))[:count]
    distance = np.min(np.linalg.norm(points[:, None, :] - points[chosen][None, :, :], axis=-1), axis=1)
    while len(chosen) < min(count, len(points)):
        pick = int(np.argmax(distance))
        chosen.append(pick)
        distance = np.minimum(distance, np.linalg.norm(points - points[pick], axis=1))
    return np.array(chosen)


def _feasible_opt(algorithm) -> np.ndarray:
    opt = algorithm.opt
    if opt is None or not len(opt):
        return np.empty((0, algorithm.problem.n_obj))
    return opt.get("F")[opt.get("CV").ravel() <= 0]


def _non_dominated(X: np.ndarray, F: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    front = NonDominatedSorting().do(F, only_non_dominated_front=True)
    front = np.sort(front)
    return X[front], F[front]


def _result(X, F, ok, history, evaluations, hv, phases) -> SearchResult:
    # A stable order (by the first objective, then the rest) gives stable design names run to run.
    order = np.lexsort(F.T[::-1])
    X, F = X[order], F[order]
    _, unique = np.unique(np.round(X, 12), axis=0, return_index=True)
    keep = np.sort(unique)
    return SearchResult(X=X[keep], F=F[keep], feasible=ok, history=history, evaluations=evaluations,
                        hypervolume=hv, phases=phases)
