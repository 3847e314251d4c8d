"""Batched single-objective runs: many small differential evolutions side by side, all their designs in one
model call per generation.

Each run minimizes one objective under the study's constraints and, optionally, under levels on the other
objectives (the epsilon-constraint method): 'least power at no less GBW and gain than this design'. They
serve twice: before NSGA-II, to find each objective's end of the front (NSGA-II approaches the ends slowest);
after it, to carry chosen front designs onto the front. The operator is JADE's current-to-pbest/1 with
binomial crossover (Zhang and Sanderson, 2009); selection follows Deb's feasibility rules (a feasible design
beats an infeasible one; two infeasible ones compare by total violation). Runs have no per-design Python
loop: arrays are (run, design, variable).
"""

from __future__ import annotations

import numpy as np

# JADE's defaults: the best 20 % guide, crossover rate near 0.9, scale factor near 0.5.
P_BEST = 0.2
CROSSOVER = 0.9


def violation(G: np.ndarray) -> np.ndarray:
    """Total normalized violation, pymoo's CV: zero for a design that meets every constraint."""
    return np.maximum(G, 0.0).sum(axis=1)


def evaluate(problem, U: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Objectives and total violation of unit-cube designs U (one row each)."""
    out = problem.evaluate(problem.xl + U * (problem.xu - problem.xl), return_as_dictionary=True)
    G = out.get("G")
    cv = violation(G) if G is not None and G.size else np.zeros(len(U))
    return out["F"], cv


def _score(F, cv, objective, levels, span):
    """The objective each run minimizes, and its violation with the levels on the other objectives added."""
    f = np.take_along_axis(F, objective[:, None, None], axis=-1)[..., 0]
    over = np.maximum(F - levels[:, None, :], 0.0) / span
    return f, cv + over.sum(axis=-1)


def runs(problem, rng: np.random.Generator, U: np.ndarray, objective: np.ndarray, levels: np.ndarray,
         generations: int, span: np.ndarray):
    """Differential evolution of the populations U (runs, size, variables; unit cube). Run r minimizes
    objective[r] subject to F[j] <= levels[r, j] (inf: no level). Returns the final (U, F, cv) per run,
    cv with the levels included; a run's designs are not sorted."""
    n_runs, size, n_var = U.shape
    F, cv = evaluate(problem, U.reshape(-1, n_var))
    F, cv = F.reshape(n_runs, size, -1), cv.reshape(n_runs, size)
    f, c = _score(F, cv, objective, levels, span)
    n_best = max(2, int(round(P_BEST * size)))
    diagonal = np.arange(size)
    for _ in range(generations):
        order = np.lexsort((f, c), axis=-1)
        pbest = np.take_along_axis(order, rng.integers(0, n_best, (n_runs, size)), axis=1)
        # Two partners other than the design itself, drawn by random keys.
        keys = rng.random((n_runs, size, size))
        keys[:, diagonal, diagonal] = 2.0
        partners = np.argsort(keys, axis=-1)[..., :2]
        scale = np.clip(rng.normal(0.5, 0.1, (n_runs, size, 1)), 0.1, 1.0)

        def pick(index):
            return np.take_along_axis(U, index[..., None], axis=1)

        mutant = U + scale * (pick(pbest) - U) + scale * (pick(partners[..., 0]) - pick(partners[..., 1]))
        # Past a bound: halfway between the parent and that bound (keeps the box without piling on its edge).
        mutant = np.where(mutant < 0, U / 2, np.where(mutant > 1, (U + 1) / 2, mutant))
        cross = rng.random((n_runs, size, n_var)) < CROSSOVER
        forced = rng.integers(0, n_var, (n_runs, size))
        cross[np.arange(n_runs)[:, None], diagonal[None, :], forced] = True
        trial = np.where(cross, mutant, U)
        Ft, cvt = evaluate(problem, trial.reshape(-1, n_var))
        Ft, cvt = Ft.reshape(n_runs, size, -1), cvt.reshape(n_runs, size)
        ft, ct = _score(Ft, cvt, objective, levels, span)
        win = (ct < c) | ((ct == 0) & (c == 0) & (ft <= f))
        U = np.where(win[..., None], trial, U)
        F = np.where(win[..., None], Ft, F)
        f, c = np.where(win, ft, f), np.where(win, ct, c)
    return U, F, c


def best_of(U: np.ndarray, F: np.ndarray, c: np.ndarray, objective: np.ndarray, count: int):
    """Each run's `count` best designs by Deb's rules: (runs, count, ...) arrays."""
    f = np.take_along_axis(F, objective[:, None, None], axis=-1)[..., 0]
    order = np.lexsort((f, c), axis=-1)[:, :count]
    return (np.take_along_axis(U, order[..., None], axis=1), np.take_along_axis(F, order[..., None], axis=1),
            np.take_along_axis(c, order, axis=1))
