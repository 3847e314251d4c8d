"""NSGA-II's pieces as whole-population array operations on the unit box (Deb, Pratap, Agarwal and Meyarivan,
"A fast and elitist multiobjective genetic algorithm: NSGA-II", IEEE TEVC 2002): constrained ranking,
crowding distance, binary tournament, simulated binary crossover (Deb and Agrawal 1995) and polynomial
mutation (Deb and Goyal 1996), half the children bred instead by differential-evolution steps within a
neighbourhood on the objectives (see `offspring`; measured on the demo and textbook fronts in README,
Convergence). No step loops over designs: a generation of any size is a few numpy calls.

Constraint handling is Deb's feasibility rule (Deb 2000): a feasible design beats an infeasible one, two
feasible ones compare by rank and then crowding. Two infeasible designs compare by the non-domination rank of
their constraint violations, each constraint its own objective (constraints handled as objectives, Coello
2000), then by total violation: a design nearly meeting the gain bound and one nearly meeting the swing bound
both survive, where a single sum would keep only compromises between them and lose the thin region where both
hold.
"""

from __future__ import annotations

import numpy as np
from pymoo.util.nds.non_dominated_sorting import NonDominatedSorting

ETA_CROSSOVER = 15.0     # distribution indices and rates as the NSGA-II paper and pymoo's defaults set them
ETA_MUTATION = 20.0
CROSSOVER_RATE = 0.9
SWAP_RATE = 0.5          # each variable of a crossed pair is crossed with this probability
DE_WEIGHT = 0.5          # differential evolution's F, Storn and Price's usual start (common practice)
# Its crossover rate, one of two per child: 0.9 carries most of a difference vector (variables that move
# together, as gm/ID, current and width do), 0.1 one or two variables (problems whose variables act alone;
# a CR pair as composite DE draws them, Wang, Cai and Zhang 2011, from memory). 0.9 alone lost 8 % of
# ZDT1's hypervolume at 10,000 evaluations against pymoo's NSGA-II (every child a DE step, measured).
DE_CROSSOVER = 0.9
DE_CROSSOVER_SEPARABLE = 0.1
NEIGHBOURS = 20
NEIGHBOUR_BLOCK = 256
# The share of children by crossover, the rest by neighbourhood steps. Set by measurement on the demo
# `sensor_readout.toml` (5 seeds, and a 10x run) and the textbook benchmark (README, Convergence): crossover
# alone left the worst seeds' fronts and the least power far apart; steps alone (half of them from anywhere
# on the front) narrowed them but stalled the long run below crossover's (telescopic cascode 0.0049 against
# 0.0143 of hypervolume); steps only within a neighbourhood, all children, lost the telescopic cascode's thin
# feasible band on 2 seeds of 5. Half and half did none of these.
SBX_SHARE = 0.5

_SORT = NonDominatedSorting()


def violations(G: np.ndarray | None, n: int) -> np.ndarray:
    """Each constraint's violation per design (n, q), 0 where it holds."""
    if G is None or G.size == 0:
        return np.zeros((n, 0))
    return np.maximum(G, 0.0)


def ranks(F: np.ndarray, V: np.ndarray) -> np.ndarray:
    """Non-domination rank of each feasible design (0 is the best front); infeasible designs rank after every
    feasible one, by the non-domination rank of their violations V (n, q), a fraction of a rank by total
    violation."""
    cv = V.sum(axis=1)
    feasible = cv <= 0
    rank = np.full(len(F), np.inf)
    ok = np.flatnonzero(feasible)
    if len(ok):
        for r, front in enumerate(_SORT.do(F[ok])):
            rank[ok[front]] = r
    bad = np.flatnonzero(~feasible)
    if len(bad):
        top = 0.0 if not len(ok) else rank[ok].max() + 1
        total = cv[bad]
        tie = np.argsort(np.argsort(total, kind="stable"), kind="stable") / (len(bad) + 1.0)
        level = np.zeros(len(bad))
        violated = V[bad][:, V[bad].max(axis=0) > 0]
        for r, front in enumerate(_SORT.do(violated)):
            level[front] = r
        rank[bad] = top + level + tie
    return rank


def crowding(F: np.ndarray, rank: np.ndarray) -> np.ndarray:
    """Crowding distance of each design within its own rank, every rank at once: per objective, the gap
    between a design's two neighbours along that objective, over the rank's extent; a rank's ends are infinite."""
    n, m = F.shape
    distance = np.zeros(n)
    if n == 0:
        return distance
    for j in range(m):
        order = np.lexsort((F[:, j], rank))
        f, r = F[order, j], rank[order]
        starts = np.flatnonzero(np.r_[True, r[1:] != r[:-1]])
        sizes = np.diff(np.r_[starts, n])
        low, high = f[starts], f[starts + sizes - 1]
        span = np.repeat(high - low, sizes)
        gap = np.full(n, np.inf)
        if n > 2:
            gap[1:-1] = f[2:] - f[:-2]
        end = np.zeros(n, bool)
        end[starts] = True
        end[starts + sizes - 1] = True
        with np.errstate(invalid="ignore", divide="ignore"):
            part = np.where(end, np.inf, np.where(span > 0, gap / np.where(span > 0, span, 1.0), 0.0))
        distance[order] += part
    return distance


def survivors(F: np.ndarray, V: np.ndarray, count: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(indices of the `count` survivors, their rank, their crowding): whole ranks in order, the last one cut
    by crowding distance (most isolated first)."""
    rank = ranks(F, V)
    distance = crowding(F, rank)
    order = np.lexsort((-distance, rank))[:count]
    return order, rank[order], distance[order]


def tournament(rank: np.ndarray, distance: np.ndarray, count: int, rng: np.random.Generator) -> np.ndarray:
    """`count` parents by binary tournament: the lower rank wins (feasibility and violation are folded into the
    rank), then the larger crowding distance, then a coin."""
    a = rng.integers(0, len(rank), count)
    b = rng.integers(0, len(rank), count)
    coin = rng.random(count) < 0.5
    a_wins = (rank[a] < rank[b]) | ((rank[a] == rank[b]) & ((distance[a] > distance[b])
                                                            | ((distance[a] == distance[b]) & coin)))
    return np.where(a_wins, a, b)


def crossover(P1: np.ndarray, P2: np.ndarray, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Simulated binary crossover of parent pairs (rows of P1, P2) in the unit box, bounded form."""
    k, n = P1.shape
    u = rng.random((k, n))
    crossed = (rng.random((k, 1)) < CROSSOVER_RATE) & (rng.random((k, n)) < SWAP_RATE)
    y1, y2 = np.minimum(P1, P2), np.maximum(P1, P2)
    delta = y2 - y1
    crossed &= delta > 1e-14
    safe = np.where(crossed, delta, 1.0)
    e = ETA_CROSSOVER + 1.0

    def spread(beta):
        alpha = 2.0 - beta ** -e
        return np.where(u <= 1.0 / alpha, (u * alpha) ** (1.0 / e), (1.0 / (2.0 - u * alpha)) ** (1.0 / e))

    c1 = 0.5 * (y1 + y2 - spread(1.0 + 2.0 * y1 / safe) * delta)
    c2 = 0.5 * (y1 + y2 + spread(1.0 + 2.0 * (1.0 - y2) / safe) * delta)
    c1, c2 = np.clip(c1, 0.0, 1.0), np.clip(c2, 0.0, 1.0)
    flip = rng.random((k, n)) < 0.5
    c1, c2 = np.where(flip, c2, c1), np.where(flip, c1, c2)
    return np.where(crossed, c1, P1), np.where(crossed, c2, P2)


def mutate(U: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Polynomial mutation in the unit box, each variable with probability 1/n; a child no operator touched
    (a copy of its parent) has one variable mutated, so few children repeat a design already evaluated."""
    k, n = U.shape
    chosen = rng.random((k, n)) < 1.0 / n
    chosen[np.arange(k), rng.integers(0, n, k)] |= ~chosen.any(axis=1)
    u = rng.random((k, n))
    e = ETA_MUTATION + 1.0
    low_side = u < 0.5
    xy = np.where(low_side, 1.0 - U, U)      # 1 - distance to the bound the step heads for
    value = np.where(low_side, 2.0 * u + (1.0 - 2.0 * u) * xy ** e, 2.0 * (1.0 - u) + 2.0 * (u - 0.5) * xy ** e)
    step = np.where(low_side, value ** (1.0 / e) - 1.0, 1.0 - value ** (1.0 / e))
    return np.clip(np.where(chosen, U + step, U), 0.0, 1.0)


def offspring(U: np.ndarray, F: np.ndarray, rank: np.ndarray, distance: np.ndarray, count: int,
              rng: np.random.Generator) -> np.ndarray:
    """`count` children: SBX_SHARE of them by simulated binary crossover of two tournament winners, the rest by
    a differential-evolution step within the base's neighbourhood on the objectives (`neighbourhood_steps`);
    every child then polynomially mutated. The crossover ranges over the whole population and keeps finding
    other regions late in a long search; the neighbourhood steps fill the front's middle and its thin bands."""
    crossed = int(round(count * SBX_SHARE))
    pairs = (crossed + 1) // 2
    parents = tournament(rank, distance, 2 * pairs, rng)
    c1, c2 = crossover(U[parents[:pairs]], U[parents[pairs:]], rng)
    stepped = neighbourhood_steps(U, F, rank, distance, count - crossed, rng)
    children = np.vstack([np.vstack([c1, c2])[:crossed], stepped])
    return mutate(children, rng)


def neighbourhood_steps(U: np.ndarray, F: np.ndarray, rank: np.ndarray, distance: np.ndarray, count: int,
                        rng: np.random.Generator) -> np.ndarray:
    """Differential evolution's rand/1/bin step (Storn and Price 1997) inside the NSGA-II loop (NSDE, Iorio and
    Li 2004; from memory) with mating restricted to a neighbourhood, as MOEA/D-DE does (Li and Zhang 2009):
    the base is a tournament winner, the difference is between two of its NEIGHBOURS nearest designs on the
    objectives, and the base is the crossover's other parent. Small steps along the front, shaped by how its
    designs differ there."""
    n, d = U.shape
    if count <= 0:
        return np.empty((0, d))
    base = tournament(rank, distance, count, rng)
    # Neighbourhoods of the bases alone: a base's neighbours are the same whoever else is asked about.
    bases, slot = np.unique(base, return_inverse=True)
    near = _neighbours(F, min(NEIGHBOURS, n - 1), bases) if n > 1 else np.zeros((n, 1), int)
    pick = rng.integers(0, near.shape[1], (count, 2))
    trial = U[base] + DE_WEIGHT * (U[near[slot, pick[:, 0]]] - U[near[slot, pick[:, 1]]])
    rate = np.where(rng.random((count, 1)) < 0.5, DE_CROSSOVER, DE_CROSSOVER_SEPARABLE)
    take = rng.random((count, d)) < rate
    take[np.arange(count), rng.integers(0, d, count)] = True      # at least one variable from the trial
    # Clipped, not reflected: a front often lies on the box's face (a shortest length, an optimum at x = 0 as
    # in ZDT), which reflection never lets a child reach (measured, every child a DE step: ZDT1's
    # hypervolume 0.71 against 0.83).
    return np.clip(np.where(take, trial, U[base]), 0.0, 1.0)


def _neighbours(F: np.ndarray, k: int, rows: np.ndarray | None = None) -> np.ndarray:
    """(len(rows), k) indices of each row's k nearest other designs on the objectives (every design's when
    `rows` is None), each objective scaled to the population's extent; a design whose objectives are not
    finite (a failed evaluation) sits far from every other."""
    finite = np.isfinite(F)
    low = np.where(finite, F, np.inf).min(axis=0)
    high = np.where(finite, F, -np.inf).max(axis=0)
    span = np.where(high > low, high - low, 1.0)
    Z = np.where(finite, (F - np.where(np.isfinite(low), low, 0.0)) / span, 1e3)
    rows = np.arange(len(Z)) if rows is None else np.asarray(rows, int)
    near = np.empty((len(rows), k), int)
    # In blocks of rows, so a population of tens of thousands needs no (n, n, objectives) array.
    for start in range(0, len(rows), NEIGHBOUR_BLOCK):
        block = rows[start:start + NEIGHBOUR_BLOCK]
        D = np.zeros((len(block), len(Z)))
        for j in range(Z.shape[1]):
            D += (Z[block, None, j] - Z[None, :, j]) ** 2
        D[np.arange(len(block)), block] = np.inf
        near[start:start + len(block)] = np.argsort(D, axis=1, kind="stable")[:, :k]
    return near


def non_dominated(F: np.ndarray) -> np.ndarray:
    """Indices of the non-dominated rows of F (duplicates kept once)."""
    if not len(F):
        return np.zeros(0, int)
    front = np.asarray(_SORT.do(F, only_non_dominated_front=True), int)
    _, first = np.unique(np.round(F[front], 12), axis=0, return_index=True)
    return np.sort(front[first])


# Hypervolume thinning removes 1/THIN_STEPS of the surplus a step.
THIN_STEPS = 16


def thin(F: np.ndarray, count: int, contributions=None) -> np.ndarray:
    """Indices of `count` rows of a non-dominated set F, each objective's ends always kept. Without
    `contributions`, the most crowded go a few at a time (crowding recomputed between removals). With it (a
    function of F giving each row's exclusive hypervolume), the least contributing go, crowding breaking
    ties (designs beyond the window's reference corner add nothing): the kept front then holds as much of the
    hypervolume as thinning can, where crowding alone spends its designs on flat stretches."""
    keep = np.arange(len(F))
    while len(keep) > count:
        distance = crowding(F[keep], np.zeros(len(keep)))
        if contributions is None:
            drop = max(1, (len(keep) - count) // 4)
            gone = np.argsort(distance, kind="stable")[:drop]
        else:
            # A design's share grows when its neighbour goes: few at a time, so two neighbours that each
            # look small beside the other are not both dropped in one step.
            drop = max(1, (len(keep) - count) // THIN_STEPS)
            worth = np.where(np.isinf(distance), np.inf, contributions(F[keep]))
            gone = np.lexsort((distance, worth))[:drop]
        keep = np.delete(keep, gone)
    return keep
