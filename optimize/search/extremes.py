"""Batched single-objective runs: many small differential evolutions side by side, all their designs in one
model call per generation.

Each run minimizes one objective under the study's constraints and, optionally, under levels on the other
objectives (the epsilon-constraint method): 'least power at no less GBW and gain than this design'. They
serve twice: before NSGA-II, to find each objective's end of the front (NSGA-II approaches the ends slowest);
after it, to carry chosen front designs onto the front. The operator is JADE's current-to-pbest/1 with
binomial crossover and its adaptation of crossover rate and scale factor (Zhang and Sanderson, 2009); selection follows Deb's feasibility rules (a feasible design
beats an infeasible one; two infeasible ones compare by total violation). Runs have no per-design Python
loop: arrays are (run, design, variable).
"""

from __future__ import annotations

import numpy as np

# JADE (Zhang and Sanderson, 2009): the best 5 % guide (its paper tries 5-20 %; the greedier end converged
# faster on the two-stage, README, Convergence); crossover rate and scale factor adapt per run towards the
# values that produced winners, at rate ADAPT, from these starting means.
P_BEST = 0.05
START_CROSSOVER, START_SCALE, ADAPT = 0.9, 0.5, 0.1


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
         generations: int, span: np.ndarray, neighbours: np.ndarray | None = None):
    """Differential evolution of the populations U (runs, size, variables; unit cube). Run r minimizes
    objective[r] subject to F[j] <= levels[r, j] (inf: no level). Its difference vectors come from the
    populations of the runs `neighbours[r]` (default: its own), as in MOEA/D-DE: small populations at
    nearby levels then search like one large one. Returns the final (U, F, cv) per run, cv with the levels
    included; a run's designs are not sorted."""
    n_runs, size, n_var = U.shape
    if neighbours is None:
        neighbours = np.arange(n_runs)[:, None]
    F, cv = evaluate(problem, U.reshape(-1, n_var))
    F, cv = F.reshape(n_runs, size, -1), cv.reshape(n_runs, size)
    f, c = _score(F, cv, objective, levels, span)
    n_best = max(2, int(round(P_BEST * size)))
    diagonal = np.arange(size)
    mean_cross, mean_scale = np.full(n_runs, START_CROSSOVER), np.full(n_runs, START_SCALE)
    for _ in range(generations):
        order = np.lexsort((f, c), axis=-1)
        pbest = np.take_along_axis(order, rng.integers(0, n_best, (n_runs, size)), axis=1)
        # Two distinct partners from the neighbourhood's designs, drawn by random keys.
        hood = U[neighbours].reshape(n_runs, -1, n_var)
        partners = np.argsort(rng.random((n_runs, size, hood.shape[1])), axis=-1)[..., :2]
        # JADE draws the scale factor from a Cauchy law and the crossover rate from a normal one.
        scale = np.clip(mean_scale[:, None] + 0.1 * rng.standard_cauchy((n_runs, size)), 0.05, 1.0)[..., None]
        rate = np.clip(rng.normal(mean_cross[:, None], 0.1, (n_runs, size)), 0.0, 1.0)

        def pick(source, index):
            return np.take_along_axis(source, index[..., None], axis=1)

        mutant = (U + scale * (pick(U, pbest) - U)
                  + scale * (pick(hood, partners[..., 0]) - pick(hood, partners[..., 1])))
        # Past a bound: halfway between the parent and that bound (keeps the box without piling on its edge).
        mutant = np.where(mutant < 0, U / 2, np.where(mutant > 1, (U + 1) / 2, mutant))
        cross = rng.random((n_runs, size, n_var)) < rate[..., None]
        forced = rng.integers(0, n_var, (n_runs, size))
        cross[np.arange(n_runs)[:, None], diagonal[None, :], forced] = True
        trial = np.where(cross, mutant, U)
        Ft, cvt = evaluate(problem, trial.reshape(-1, n_var))
        Ft, cvt = Ft.reshape(n_runs, size, -1), cvt.reshape(n_runs, size)
        ft, ct = _score(Ft, cvt, objective, levels, span)
        win = (ct < c) | ((ct == 0) & (c == 0) & (ft <= f))
        wins = win.sum(axis=1)
        some = wins > 0
        f_win = np.where(win, scale[..., 0], 0.0)
        lehmer = (f_win ** 2).sum(axis=1) / np.maximum(f_win.sum(axis=1), 1e-12)
        mean_cross = np.where(some, (1 - ADAPT) * mean_cross
                              + ADAPT * np.where(win, rate, 0.0).sum(axis=1) / np.maximum(wins, 1), mean_cross)
        mean_scale = np.where(some, (1 - ADAPT) * mean_scale + ADAPT * lehmer, mean_scale)
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
