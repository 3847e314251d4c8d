"""Each objective's end of the front, found as the single-objective problem it is: scipy's differential
evolution seeded with the genetic search's best designs at it (a general-purpose global method, sure-footed
where a multi-objective search spreads its effort along the whole front)."""

from __future__ import annotations

import numpy as np
from scipy.optimize import differential_evolution
from scipy.stats import qmc

GENERATIONS = 100      # of a population of SEEDED + FRESH designs (at most; a budget may ask for fewer)
SEEDED = 20            # the genetic front's best designs at the objective
FRESH = 108            # scrambled Sobol' points over the whole box
# Most of a converging search's budget its ends' differential evolution may spend, all objectives together: at
# the default budget (100,000) each of up to three objectives gets the full GENERATIONS.
END_SHARE = 0.4
_MISSED = 1e6          # a design that misses a constraint scores this plus its total violation


def de_end(problem, X: np.ndarray, F: np.ndarray, objective: int, seed: int,
           generations: int = GENERATIONS) -> tuple[np.ndarray | None, int]:
    """(the best feasible design found, or None; evaluations spent)."""
    n = problem.n_var
    spent = 0

    def score(Xt: np.ndarray) -> np.ndarray:
        nonlocal spent
        out = problem.evaluate(Xt.T, return_as_dictionary=True)
        spent += Xt.shape[1]
        g = out.get("G")      # a problem without constraints has none
        missed = np.maximum(g, 0).sum(axis=1) if g is not None and g.size else np.zeros(Xt.shape[1])
        return np.where(missed <= 0, out["F"][:, objective], _MISSED + missed)

    best = X[np.argsort(F[:, objective], kind="stable")[:SEEDED]]
    sobol = qmc.Sobol(n, scramble=True, seed=seed + objective).random_base2(int(np.ceil(np.log2(FRESH))))
    fresh = qmc.scale(sobol[:FRESH], problem.xl, problem.xu)
    found = differential_evolution(score, list(zip(problem.xl, problem.xu)), maxiter=generations, tol=0,
                                   atol=0, seed=seed + objective, vectorized=True, updating="deferred",
                                   polish=False, init=np.vstack([best, fresh]), mutation=(0.5, 1.0),
                                   recombination=0.9)
    return (found.x if found.fun < _MISSED else None), spent
