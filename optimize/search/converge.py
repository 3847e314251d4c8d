"""The default search: NSGA-II on whole populations as arrays (operators.py), an archive of every feasible
non-dominated design it meets, stopped when the archive's hypervolume has stopped growing (over the last
PATIENCE generations, and by no more than growth.STILL_GROWING over the last quarter of its evaluations) or the
study's budget of evaluations is spent. Deterministic: every random number comes from one generator seeded by the study.

Why not pymoo's loop: pymoo keeps a Python object per design, which costs more than the model itself
(110-290 µs a design by `ampfront bench`, against 55-70 µs for a SKY130 evaluation), and the model is cheaper
a design in batches of hundreds than of a hundred. Why an archive: NSGA-II's population forgets good designs its
crowding pushes out; the archive keeps every one no other design beats, so the front only ever improves.
Why stop on the hypervolume: a topology whose front settles in a few thousand evaluations stops there, one
that needs more keeps going, up to the budget. A front's first stall starts one fresh population beside the
archive before the search may stop.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from ampfront.optimize.search import operators as op
from ampfront.optimize.search.growth import STILL_GROWING, late_gain

STALL = 0.005        # the archive's hypervolume grew by less than this share ...
PATIENCE = 30        # ... over this many generations: converged
RESTARTS = 3        # a search stalled with no feasible design starts afresh at most this many times ...
NEAR_MISS = 0.05    # ... when its least total violation (normalized to the bounds) is below this: a topology
                    # 20 dB short of the gain bound is not a restart away from it, the demo's telescopic
                    # cascode 1 % short of its swing was (our threshold, set between those two cases)
MIN_GENERATIONS = 40
ARCHIVE = 8          # the archive is thinned (crowding) when it holds more than this many populations


@dataclass
class Converged:
    X: np.ndarray                  # archive (feasible) or the least-violating designs (search space)
    F: np.ndarray
    feasible: bool
    evaluations: int
    generations: int
    history: list[tuple[int, int, float]] = field(default_factory=list)
    stopped: str = ""              # "converged" or "budget"
    spent_at: list[int] = field(default_factory=list)   # evaluations spent when each history entry was taken


def _evaluate(problem, U: np.ndarray):
    X = problem.xl + U * (problem.xu - problem.xl)
    out = problem.evaluate(X, return_as_dictionary=True)
    F = np.asarray(out["F"], float)
    G = out.get("G")
    return F, op.violations(None if G is None else np.asarray(G, float), len(F))


def _generic_hypervolume(F0: np.ndarray) -> Callable[[np.ndarray], float]:
    """For a problem with no study window: hypervolume on the box the first feasible designs span (fixed from
    then on, so the number is comparable generation to generation)."""
    from pymoo.indicators.hv import HV

    low = F0.min(axis=0)
    span = np.maximum(F0.max(axis=0) - low, 1e-9)

    def measure(F):
        scaled = (F - low) / span
        inside = (scaled < 1.1).all(axis=1)
        return float(HV(ref_point=np.full(F.shape[1], 1.1))(scaled[inside])) if inside.any() else 0.0
    return measure


def converge(problem, population: int, budget: int, seed: int,
             hypervolume: Callable[[np.ndarray], float] | None = None,
             progress: Callable[..., None] | None = None, stall: bool = True) -> Converged:
    """Search until the archive's hypervolume has grown by less than STALL over PATIENCE generations (at least
    MIN_GENERATIONS), or `budget` evaluations are spent. With no feasible design yet, the least violation
    stands in for the hypervolume; a near miss that stalls starts afresh (RESTARTS). `hypervolume`: the
    study's measure of a front (minimized objectives), or None for a generic one. stall False: spend the whole
    budget (a reference run to measure convergence against)."""
    rng = np.random.default_rng(seed)
    n = problem.n_var
    U = rng.random((population, n))
    F, V = _evaluate(problem, U)
    cv = V.sum(axis=1)
    spent = len(U)
    rank = op.ranks(F, V)
    distance = op.crowding(F, rank)
    archive_U, archive_F = np.empty((0, n)), np.empty((0, F.shape[1]))
    measure = hypervolume
    history, watch, spent_at, curve = [], [], [], []
    generation, stopped, tries, start = 0, "budget", 0, 0
    explored = False
    while True:
        generation += 1
        # The archive: every feasible design not beaten by another met so far.
        feasible = cv <= 0
        if feasible.any():
            pool_U, pool_F = np.vstack([archive_U, U[feasible]]), np.vstack([archive_F, F[feasible]])
            keep = op.non_dominated(pool_F)
            archive_U, archive_F = pool_U[keep], pool_F[keep]
            if len(archive_F) > ARCHIVE * population:
                keep = op.thin(archive_F, ARCHIVE * population)
                archive_U, archive_F = archive_U[keep], archive_F[keep]
        if len(archive_F):
            # The archive's, even in a generation whose population holds no feasible design (the fresh one
            # after an exploring restart): the front found so far is not lost by it.
            if measure is None:
                measure = _generic_hypervolume(archive_F)
            score = measure(archive_F)
        else:
            score = -float(cv.min())           # below every feasible score
        history.append((generation, int(feasible.sum()), max(score, 0.0)))
        spent_at.append(spent)
        curve.append(history[-1][2])
        if progress:
            progress(*history[-1])
        watch.append((bool(len(archive_F)), score))
        if generation - start >= max(MIN_GENERATIONS, PATIENCE) and len(watch) > PATIENCE and _stalled(watch):
            near_miss = not len(archive_F) and tries < RESTARTS and bool(cv.min() < NEAR_MISS)
            # Stalled short of the spec: start again from fresh random designs beside the best tenth (one basin
            # of near misses is not always next to the thin region that meets the spec; measured on the
            # sensor-readout telescopic cascode, two seeds of four stalled 1 % short of its swing).
            # The first stall with a front: one wholly fresh population, the archive kept. A population can
            # settle in a small pocket of a thin feasible region and stall there (measured on the demo's
            # telescopic cascode, seed 3: hypervolume 0.0005, where the other seeds reach 0.004-0.006, and
            # 0.0059 after this); a second search from scratch finds another pocket or adds to the front, at
            # 10-40 % more evaluations where the first had converged (two-stage, seeds 1-3).
            explore = bool(len(archive_F)) and not explored and spent + MIN_GENERATIONS * population <= budget
            if near_miss or explore:
                tries += near_miss
                explored |= explore
                keep = np.argsort(op.ranks(F, V), kind="stable")[:population // 10] if near_miss else []
                fresh = rng.random((population - len(keep), n))
                Fn, Vn = _evaluate(problem, fresh)
                spent += len(fresh)
                U, F, V = np.vstack([U[keep], fresh]), np.vstack([F[keep], Fn]), np.vstack([V[keep], Vn])
                cv = V.sum(axis=1)
                start = generation
                rank = op.ranks(F, V)
                distance = op.crowding(F, rank)
                watch.clear()
                continue
            # A stall over PATIENCE generations is not the end of a front that still creeps: one that won more
            # than STILL_GROWING over the last quarter of its evaluations keeps going (measured on the demo's
            # telescopic cascode: the short window alone stopped three seeds of five whose last quarters had
            # added 2.6-2.9 %, and a 10x run beat its fronts by 30-60 %).
            if stall and not late_gain(spent_at, curve) > STILL_GROWING:
                stopped = "converged"
                break
        if spent + population > budget:
            break
        children = op.offspring(U, F, rank, distance, population, rng)
        Fc, Vc = _evaluate(problem, children)
        spent += len(children)
        merged_U, merged_F, merged_V = np.vstack([U, children]), np.vstack([F, Fc]), np.vstack([V, Vc])
        merged_cv = merged_V.sum(axis=1)
        chosen, rank, distance = op.survivors(merged_F, merged_V, population)
        U, F, V, cv = merged_U[chosen], merged_F[chosen], merged_V[chosen], merged_cv[chosen]
    if len(archive_F):
        X = problem.xl + archive_U * (problem.xu - problem.xl)
        return Converged(X, archive_F, True, spent, generation, history, stopped, spent_at)
    order = np.argsort(cv, kind="stable")[:10]
    X = problem.xl + U[order] * (problem.xu - problem.xl)
    return Converged(X, F[order], False, spent, generation, history, stopped, spent_at)


def _stalled(watch: list[tuple[bool, float]]) -> bool:
    """watch: (feasible, score) each generation; a score is the hypervolume, or minus the least violation."""
    (was, then), (now_ok, now) = watch[-1 - PATIENCE], watch[-1]
    if was != now_ok:                    # became feasible within the window: keep going
        return False
    return (now - then) <= STALL * abs(now if now_ok else then)
