"""After the genetic search: each objective's end, then epsilon-constraint runs (Haimes) spread over the front,
all finished by the batched trust-region polish (polish.py). Deterministic: the only random numbers are
scipy's differential evolution's, seeded by the study's seed (ends.py).

The ends come first: each objective alone, by differential evolution from the front's best designs at it,
then polished from there and from the front's best. The levels follow: every run minimizes the study's
first objective with the others held at a level. Up to three objectives the levels are a grid over the held
objectives' range (in the searched space: log for GBW, power and area), so the front has no gap the genetic
search left; with more, they are the held values of front designs chosen farthest apart. Each level starts
from the best known answer to its problem, or the design nearest it where none is.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from pymoo.util.nds.non_dominated_sorting import NonDominatedSorting

from ampfront.optimize.search.ends import END_SHARE, FRESH, GENERATIONS, SEEDED, de_end
from ampfront.optimize.search.polish import polish

LEVELS = 64            # epsilon-constraint runs over the front
END_STARTS = 4         # each objective's end is sought from this many of the front's best designs at it


@dataclass
class Refined:
    X: np.ndarray
    F: np.ndarray
    evaluations: int


def spread(F: np.ndarray, count: int) -> np.ndarray:
    """Indices of `count` rows of F chosen farthest apart (normalized), starting from each objective's best."""
    if len(F) <= count:
        return np.arange(len(F))
    scaled = (F - F.min(axis=0)) / np.maximum(np.ptp(F, axis=0), 1e-12)
    chosen = list(dict.fromkeys(int(i) for i in np.argmin(F, axis=0)))
    distance = np.min(np.linalg.norm(scaled[:, None] - scaled[chosen][None], axis=2), axis=1)
    while len(chosen) < count:
        nxt = int(np.argmax(distance))
        chosen.append(nxt)
        distance = np.minimum(distance, np.linalg.norm(scaled - scaled[nxt], axis=1))
    return np.array(chosen)


def moving_variables(problem) -> np.ndarray:
    """Lengths move by whole cells, not by slope: the model snaps them to a grid (5 nm, or SKY130's
    characterized lengths), a staircase no slope describes."""
    variables = getattr(problem, "design_variables", None)
    if variables is None:
        return np.ones(problem.n_var, bool)
    return np.array([v.unit != "m" for v in variables])


def end_generations(budget: int | None, objectives: int) -> int:
    """Differential-evolution generations for each objective's end: ends.GENERATIONS, fewer where the ends
    together would spend more than END_SHARE of a search's `budget` (a study that asks for a quick run). A
    run evaluates its first population too, one generation more than it breeds."""
    if budget is None:
        return GENERATIONS
    return int(max(0, min(GENERATIONS, END_SHARE * budget // (objectives * (SEEDED + FRESH)) - 1)))


def search_ends(problem, X: np.ndarray, F: np.ndarray, steps: int, seed: int, budget: int | None = None) -> Refined:
    """Each objective's end of the front X, F: an end is a single-objective problem with local optima of its
    own, so differential evolution from the front's best at it (as many generations as `end_generations`
    allows; none when the budget leaves not even one), and the front's best themselves, all polished. The
    designs reached, not yet merged with X."""
    found, evaluations = [], 0
    generations = end_generations(budget, F.shape[1])
    for i in range(F.shape[1] if generations >= 1 else 0):
        x, spent = de_end(problem, X, F, i, seed, generations)
        evaluations += spent
        found.append(np.atleast_2d(x) if x is not None else np.empty((0, problem.n_var)))
    ends = polish_ends(problem, X, F, steps, found)
    return Refined(ends.X, ends.F, evaluations + ends.evaluations)


def refine(problem, X: np.ndarray, F: np.ndarray, steps: int, seed: int = 1, ends: bool = True) -> Refined:
    """X, F: the genetic search's feasible front (search space, minimized objectives). `ends` False: the
    front's ends were searched already (the converging search does), only the levels run."""
    m = F.shape[1]
    moving = moving_variables(problem)
    cells = length_cells(problem, moving)
    scale = np.maximum(np.ptp(F, axis=0), 1e-3)
    pool_X, pool_F, evaluations = X, F, 0
    if ends:
        found = search_ends(problem, X, F, steps, seed)
        pool_X, pool_F, evaluations = np.vstack([X, found.X]), np.vstack([F, found.F]), found.evaluations
    if m > 1:
        levels = _levels(pool_F)
        start = _level_starts(pool_F, levels, scale)
        mask = np.zeros((len(levels), m), bool)
        mask[:, 0] = True
        runs = polish(problem, pool_X[start], mask, scale, steps, held=~mask, levels=levels, moving=moving, cells=cells)
        pool_X, pool_F = np.vstack([pool_X, runs.X]), np.vstack([pool_F, runs.F])
        evaluations += runs.evaluations
        if len(runs.started) > 1 and m == 2:
            # Each level once more, from the solution of its cheaper neighbour (levels run from the best held
            # value to the worst, so that is the next one): the genetic design nearest a level may sit in a
            # basin of its own, and the neighbour's solution is a short step away.
            got = runs.started
            again = polish(problem, runs.X[1:], mask[got[:-1]], scale, steps, held=~mask[got[:-1]],
                           levels=levels[got[:-1]], moving=moving, cells=cells)
            pool_X, pool_F = np.vstack([pool_X, again.X]), np.vstack([pool_F, again.F])
            evaluations += again.evaluations
    front = NonDominatedSorting().do(pool_F, only_non_dominated_front=True)
    return Refined(pool_X[front], pool_F[front], evaluations)


def polish_ends(problem, X: np.ndarray, F: np.ndarray, steps: int, extra: list | None = None) -> Refined:
    """Each objective's end polished alone from the END_STARTS designs best at it (and `extra[i]`, more
    starts for objective i): the designs the polish reached, not yet merged with X."""
    m = F.shape[1]
    moving = moving_variables(problem)
    scale = np.maximum(np.ptp(F, axis=0), 1e-3)
    starts = [np.vstack([extra[i] if extra else np.empty((0, problem.n_var)),
                         X[np.argsort(F[:, i], kind="stable")[:END_STARTS]]]) for i in range(m)]
    asked = np.repeat(np.eye(m, dtype=bool), [len(s) for s in starts], axis=0)
    ends = polish(problem, np.vstack(starts), asked, scale, steps, moving=moving,
                  cells=length_cells(problem, moving))
    return Refined(ends.X, ends.F, ends.evaluations)


def length_cells(problem, moving: np.ndarray) -> list[tuple[int, np.ndarray]]:
    """(column, cell centres in the unit box) of each length variable: the technology's characterized
    lengths, or steps of 25 % (and the longest) on a 5 nm-grid technology."""
    tech = getattr(problem, "tech", None)
    variables = getattr(problem, "design_variables", None)
    if tech is None or variables is None:
        return []
    grid = getattr(tech, "length_grid", None)
    cells = []
    for j, (move, v) in enumerate(zip(moving, variables)):
        if move or not v.log:
            continue
        low, high = problem.xl[j], problem.xu[j]
        if grid is not None and len(grid) > 1:
            logs = np.log10(np.asarray(grid, float))
            logs = logs[(logs >= low - 1e-12) & (logs <= high + 1e-12)]
        else:
            logs = np.unique(np.append(np.arange(low, high, np.log10(1.25)), high))
        if len(logs) > 1:
            cells.append((j, (logs - low) / (high - low)))
    return cells


def _level_starts(F: np.ndarray, levels: np.ndarray, scale: np.ndarray) -> np.ndarray:
    """Per level, the best known answer to its problem (the least first objective among designs at least as
    good as the level in every held objective); where no design is, the one nearest the level."""
    meets = (F[None, :, 1:] <= levels[:, None, 1:] + 1e-12).all(axis=2)              # (levels, designs)
    best = np.argmin(np.where(meets, F[None, :, 0], np.inf), axis=1)
    distance = np.linalg.norm((F[None, :, 1:] - levels[:, None, 1:]) / scale[1:], axis=2)
    return np.where(meets.any(axis=1), best, np.argmin(distance, axis=1))


def _levels(F: np.ndarray) -> np.ndarray:
    """(LEVELS, m): the held objectives' levels (column 0, the one minimized, is NaN). F holds the ends."""
    m = F.shape[1]
    front = F[NonDominatedSorting().do(F, only_non_dominated_front=True)]
    if m <= 3:
        # A grid over the held objectives' range: levels where the genetic front is thin get runs too (a run
        # whose level no design reaches returns nothing new).
        per = int(round(LEVELS ** (1.0 / (m - 1))))
        axes = [np.linspace(front[:, j].min(), front[:, j].max(), per) for j in range(1, m)]
        held = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, m - 1)
    else:
        held = F[spread(F, LEVELS), 1:]
    return np.column_stack([np.full(len(held), np.nan), held])
