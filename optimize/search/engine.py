"""The multi-objective search. By default (no `generations` in the study) the converging search of
converge.py: array NSGA-II with an archive, stopped on the hypervolume's stall or the evaluation budget. With
`generations` stated, a fixed run of pymoo's NSGA-II (NSGA-III for four and five objectives) for exactly that
many, as studies written for it have always run (same seed, same front)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from pymoo.algorithms.moo.nsga2 import NSGA2
from pymoo.algorithms.moo.nsga3 import NSGA3
from pymoo.core.callback import Callback
from pymoo.core.problem import Problem
from pymoo.indicators.hv import HV
from pymoo.optimize import minimize
from pymoo.util.ref_dirs import get_reference_directions

from ampfront.optimize.search import operators
from ampfront.optimize.search.converge import converge
from ampfront.optimize.search.growth import Growth, growth
from ampfront.optimize.search.refine import refine, search_ends

# The converging search's ends: once the genetic search has stalled, each objective alone by differential
# evolution from the front's best at it (ends.de_end), then trust-region steps polishing from there and from
# the front's best. The ends sit on several constraints at once, where random variation creeps (measured on
# the textbook two-stage: the least power 12-20 % above scipy's DE after the genetic search alone, 0-6.9 %
# after the polish alone, which stops in the local optimum nearest its start; 0.0 % with the DE runs first).
END_STEPS = 40

# Das-Dennis partitions giving 84 (4 objectives) and 70 (5 objectives) reference directions.
_PARTITIONS = {4: 6, 5: 4}

# generation, feasible designs, hypervolume; once more with done=True when the search has ended (a converging
# search ends before its most generations, and a progress bar then shows it complete).
Progress = Callable[..., None]


def algorithm_for(n_obj: int, population: int):
    if n_obj <= 3:
        return NSGA2(pop_size=population)
    ref_dirs = get_reference_directions("das-dennis", n_obj, n_partitions=_PARTITIONS[n_obj])
    return NSGA3(ref_dirs=ref_dirs, pop_size=max(population, len(ref_dirs)))


class _Tracker(Callback):
    """Reports each generation: feasible designs and hypervolume of the feasible front, normalized by the
    first feasible generation's extent so the number is comparable from one generation to the next."""

    def __init__(self, report: Progress | None):
        super().__init__()
        self.report = report
        self.low = self.span = None
        self.history: list[tuple[int, int, float]] = []

    def notify(self, algorithm):
        pop = algorithm.pop
        feasible = pop.get("CV").ravel() <= 0
        hv = 0.0
        if feasible.any():
            f = algorithm.opt.get("F")[algorithm.opt.get("CV").ravel() <= 0]
            if self.low is None and len(f):
                # Floor of 0.1 (dB, decade or degree) so one lone feasible design does not blow the scale up.
                self.low = pop.get("F")[feasible].min(axis=0)
                self.span = np.maximum(pop.get("F")[feasible].max(axis=0) - self.low, 0.1)
            if self.low is not None and len(f):
                hv = float(HV(ref_point=np.full(f.shape[1], 1.1))((f - self.low) / self.span))
        entry = (algorithm.n_gen, int(feasible.sum()), hv)
        self.history.append(entry)
        if self.report:
            self.report(*entry)


@dataclass
class SearchResult:
    X: np.ndarray          # front designs in the problem's variable space
    F: np.ndarray
    feasible: bool         # False: no design met every constraint; X holds the least-violating ones
    history: list[tuple[int, int, float]]
    evaluations: int
    refined: int = 0       # evaluations the refinement spent (included in `evaluations`)
    generations: int = 0   # generations run
    stopped: str = "generations"   # why the search ended: "generations", "converged" or "budget"
    # The converging search's hypervolume on the study's window, generation by generation (None: a fixed run, or
    # no window to measure on).
    growth: Growth | None = None


def run_search(problem: Problem, population: int, generations: int | None, seed: int,
               progress: Progress | None = None, refine_steps: int = 0, budget: int | None = None,
               hypervolume: Callable[[np.ndarray], float] | None = None,
               front_designs: int | None = None, stall: bool = True, contributions=None) -> SearchResult:
    """generations None: the converging search, up to `budget` evaluations, its archive thinned to
    `front_designs` (by hypervolume `contributions` when given, else crowding), each objective's end searched
    alone first (refine.search_ends); otherwise NSGA-II (or III) for `generations`. Then, when refine_steps > 0
    and the front is feasible, the trust-region refinement of its levels (search/refine.py), and of its ends
    after a fixed run. Reproducible by seed."""
    if generations is None:
        found = converge(problem, population, budget, seed, hypervolume, progress, stall)
        X, F, evaluations = found.X, found.F, found.evaluations
        if found.feasible:
            ends = search_ends(problem, X, F, END_STEPS, seed, budget)
            X, F = np.vstack([X, ends.X]), np.vstack([F, ends.F])
            keep = operators.non_dominated(F)
            X, F, evaluations = X[keep], F[keep], evaluations + ends.evaluations
            if front_designs and len(F) > front_designs:
                keep = operators.thin(F, front_designs, contributions)
                X, F = X[keep], F[keep]
        if progress and found.history:
            # The bar ends on the front as written (thinned, ends polished), the figure the run then prints.
            generation, feasible, score = found.history[-1]
            progress(generation, feasible, hypervolume(F) if found.feasible and hypervolume else score, done=True)
        result = _finish(problem, X, F, found.feasible, found.history, evaluations, refine_steps, seed,
                         found.generations, found.stopped, ends_searched=True)
        if hypervolume is not None and found.feasible:
            result.growth = growth(found.spent_at, found.history)
        return result
    tracker = _Tracker(progress)
    res = minimize(problem, algorithm_for(problem.n_obj, population), ("n_gen", generations),
                   seed=seed, callback=tracker, verbose=False)
    if progress and tracker.history:
        progress(*tracker.history[-1], done=True)
    # pymoo leaves `opt` empty when no design was feasible: fall back to the least-violating ones.
    opt = res.opt if res.opt is not None else res.pop[np.argsort(res.pop.get("CV").ravel())[:10]]
    feasible = opt.get("CV").ravel() <= 0
    X, F = opt.get("X"), opt.get("F")
    ok = bool(feasible.any())
    if ok:
        X, F = X[feasible], F[feasible]
    return _finish(problem, X, F, ok, tracker.history, int(res.algorithm.evaluator.n_eval), refine_steps, seed,
                   generations, "generations")


def _finish(problem, X, F, ok, history, evaluations, refine_steps, seed, generations, stopped,
            ends_searched: bool = False) -> SearchResult:
    # A stable order (by the first objective, then the rest) gives stable design names run to run.
    order = np.lexsort(F.T[::-1])
    X, F = X[order], F[order]
    _, unique = np.unique(np.round(X, 12), axis=0, return_index=True)
    keep = np.sort(unique)
    X, F = X[keep], F[keep]
    refined = 0
    if ok and refine_steps > 0:
        better = refine(problem, X, F, refine_steps, seed, ends=not ends_searched)
        order = np.lexsort(better.F.T[::-1])
        X, F = better.X[order], better.F[order]
        _, unique = np.unique(np.round(X, 12), axis=0, return_index=True)
        X, F = X[np.sort(unique)], F[np.sort(unique)]
        refined = better.evaluations
        evaluations += refined
    return SearchResult(X=X, F=F, feasible=ok, history=history, evaluations=evaluations, refined=refined,
                        generations=generations, stopped=stopped)
