"""Who wins, at what cost, from the front table alone: one standing per topology and one sentence per study.

Everything here reads columns front.csv holds (metrics, `meets_spec`, `on_merged_front`, `margin_<name>`),
so the same verdict comes from a run in memory and from a results folder read back.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ampfront.optimize.search.outcome import UNSOLVED, Infeasible, Rejections
from ampfront.topologies.catalog import BOUNDS, INPUT_CM, METRICS, OBJECTIVES, RULES, metric

# A constraint "binds" a design whose margin is within this fraction of the constraint's scale.
TIGHT = 0.02
# Levels the winner is read at along the sentence's axis, and the shortest stretch (in levels) worth a word:
# shorter alternations are two topologies trading places inside the search's noise.
LEVELS = 120
SHORTEST = 6


@dataclass(frozen=True)
class Standing:
    name: str
    title: str
    feasible: bool
    designs: int
    merged: int
    best: dict[str, str]          # objective -> its best figure, formatted
    leads: frozenset[str]         # objectives on which this topology has the best figure of all
    binding: str                  # what limits it, in engineering units
    misses: tuple[str, ...] = ()  # for an infeasible topology: every miss, described
    closest: bool = False         # `best` and `designs` are of its closest designs, which miss the spec
    rejected: tuple[str, ...] = ()  # evaluated designs the stability rules refused, described


@dataclass(frozen=True)
class Verdict:
    standings: list[Standing]
    sentence: str
    notes: list[str] = field(default_factory=list)
    axes: tuple[str, str] | None = None    # (level objective, cost objective) the sentence reads


def flag(column: pd.Series) -> np.ndarray:
    """A boolean column as written by pandas, or read back from CSV by anyone."""
    if column.dtype == bool:
        return column.to_numpy()
    return column.astype(str).str.strip().str.lower().isin(("true", "1", "yes")).to_numpy()


def constraint_label(name: str) -> str:
    if name in BOUNDS:
        return BOUNDS[name].label
    for bound in BOUNDS.values():
        for also in bound.also:
            if name == f"{bound.key}_{also}":
                return f"{bound.label} ({metric(also).label.lower()})"
    rules = {**RULES, **{r.key: r for r in INPUT_CM}}
    if name in rules:
        return rules[name].why
    return name.replace("_", " ")


def _noun(label: str) -> str:
    # "GBW" stays an acronym; "Power" reads "power" inside a sentence.
    return label if label[:2].isupper() else label[:1].lower() + label[1:]


def _scales(constraints) -> dict[str, tuple[str, str, float, float]]:
    return {c.name: (c.metric, c.sense, c.bound, c.scale) for c in constraints}


def _binding_feasible(rows: pd.DataFrame, constraints) -> str:
    best = None
    # The always-on rules (stability, KCL) sit at their bound by construction; what a lead asks is which
    # spec line the front presses against.
    for c in (c for c in constraints if c.name not in RULES):
        column = f"margin_{c.name}"
        if column not in rows:
            continue
        margin = pd.to_numeric(rows[column], errors="coerce").to_numpy(float) / (c.scale or 1.0)
        tight = int(np.sum(np.abs(margin) <= TIGHT))
        key = (tight, -np.nanmedian(margin) if np.isfinite(margin).any() else -np.inf)
        if tight and (best is None or key > best[0]):
            best = (key, c, tight)
    if best is None:
        return f"no spec bound within {TIGHT:.0%} on any design: the objectives alone set the trade"
    _, c, tight = best
    shown = metric(c.metric)
    relation = "≥" if c.sense == "min" else "≤"
    return (f"{constraint_label(c.name)} ({relation} {shown.format(c.bound)}) binds on {tight} of {len(rows)} "
            f"designs (within {TIGHT:.0%})")


def miss_text(constraint: str, metric_name: str, sense: str, value: float, bound: float) -> str:
    shown = metric(metric_name) if (metric_name in METRICS or metric_name.startswith("sat_")) else None
    fmt = shown.format if shown else (lambda v: f"{v:.3g}")
    word = "short of" if sense == "min" else "over"
    gap = abs(value - bound) if np.isfinite(value) else float("nan")
    if not np.isfinite(value):
        return f"{constraint_label(constraint)}: not reached at all (bound {fmt(bound)})"
    return f"{constraint_label(constraint)}: {fmt(value)}, {fmt(gap)} {word} {fmt(bound)}"


def _misses(rows: pd.DataFrame, record: Infeasible | None, constraints) -> list[tuple[float, str]]:
    """(normalized shortfall, description) of every constraint the closest design misses, worst first."""
    if record is not None and record.unsolved():
        return [(np.inf, UNSOLVED)]
    scales = _scales(constraints)
    found = []
    for m in record.misses if record is not None else ():
        scale = scales.get(m.constraint, (None, None, None, abs(m.bound) or 1.0))[3] or 1.0
        short = abs(m.value - m.bound) / scale if np.isfinite(m.value) else np.inf
        found.append((short, miss_text(m.constraint, m.metric, m.sense, m.value, m.bound)))
    if not found and len(rows):
        # Read back from a folder: the least-violating row's negative margins say the same.
        violation = np.zeros(len(rows))
        for c in constraints:
            column = f"margin_{c.name}"
            if column in rows:
                violation += np.clip(-pd.to_numeric(rows[column], errors="coerce").fillna(-np.inf).to_numpy(float)
                                     / (c.scale or 1.0), 0, None)
        row = rows.iloc[int(np.argmin(violation))]
        for c in constraints:
            column = f"margin_{c.name}"
            if column in rows and float(row[column]) < 0:
                value = float(row[c.metric]) if c.metric in row else np.nan
                found.append((-float(row[column]) / (c.scale or 1.0),
                              miss_text(c.name, c.metric, c.sense, value, c.bound)))
    return sorted(found, key=lambda t: -t[0])


def _best(rows: pd.DataFrame, objectives) -> dict[str, float]:
    out = {}
    for o in objectives:
        values = pd.to_numeric(rows[OBJECTIVES[o].metric], errors="coerce").to_numpy(float)
        values = values[np.isfinite(values)]
        if len(values):
            out[o] = float(values.max() if OBJECTIVES[o].sense == "max" else values.min())
    return out


def sentence_axes(objectives) -> tuple[str, str]:
    """(level, cost): the first objective one wants more of, read against the first one pays with."""
    more = [o for o in objectives if OBJECTIVES[o].sense == "max"]
    less = [o for o in objectives if OBJECTIVES[o].sense == "min"]
    if more and less:
        return more[0], less[0]
    return objectives[0], objectives[1]


def _front_2d(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Rows no other row beats on both (x and y as quantities to minimize)."""
    order = np.lexsort((y, x))
    keep, best = [], np.inf
    for i in order:
        if y[i] < best:
            keep.append(i)
            best = y[i]
    return np.array(keep, int)


def winners(table: pd.DataFrame, level: str, cost: str) -> list[tuple[str, float, float]]:
    """Along `level`, who reaches each level at the best `cost`: [(topology, from, to)], in SI units.

    At a level L of an objective one wants more of, the candidates are the designs reaching at least L; of
    one wants less of, the designs within L (a budget)."""
    lo, co = OBJECTIVES[level], OBJECTIVES[cost]
    x = pd.to_numeric(table[lo.metric], errors="coerce").to_numpy(float)
    y = pd.to_numeric(table[co.metric], errors="coerce").to_numpy(float)
    names = table["topology"].astype(str).to_numpy()
    ok = np.isfinite(x) & np.isfinite(y) & ((x > 0) | (not lo.log))
    x, y, names = x[ok], y[ok], names[ok]
    if not len(x):
        return []
    ys = -y if co.sense == "max" else y
    grid = (np.geomspace(x.min(), x.max(), LEVELS) if lo.log and x.min() > 0 else np.linspace(x.min(), x.max(), LEVELS))
    who = []
    for level_value in grid:
        reach = x >= level_value * (1 - 1e-12) if lo.sense == "max" else x <= level_value * (1 + 1e-12)
        who.append(names[reach][np.argmin(ys[reach])] if reach.any() else "")
    runs: list[list] = []
    for k, name in enumerate(who):
        if runs and runs[-1][0] == name:
            runs[-1][2] = k
        else:
            runs.append([name, k, k])
    # A stretch too short to trust is given to its neighbour; repeated until none is left.
    while len(runs) > 1 and min(r[2] - r[1] + 1 for r in runs) < SHORTEST:
        i = min(range(len(runs)), key=lambda j: runs[j][2] - runs[j][1])
        j = i - 1 if i > 0 else i + 1
        lo_k, hi_k = min(runs[i][1], runs[j][1]), max(runs[i][2], runs[j][2])
        runs[j][1], runs[j][2] = lo_k, hi_k
        del runs[i]
        merged = [runs[0]]
        for r in runs[1:]:
            if r[0] == merged[-1][0]:
                merged[-1][2] = r[2]
            else:
                merged.append(r)
        runs = merged
    return [(name, float(grid[a]), float(grid[b])) for name, a, b in runs if name]


def _say(table: pd.DataFrame, objectives, titles: dict[str, str]) -> tuple[str, tuple[str, str]]:
    level, cost = sentence_axes(objectives)
    lm, cm = METRICS[OBJECTIVES[level].metric], METRICS[OBJECTIVES[cost].metric]
    runs = winners(table, level, cost)
    what = (f"needs the least {_noun(cm.label)}" if OBJECTIVES[cost].sense == "min"
            else f"gives the most {_noun(cm.label)}")
    noun = _noun(lm.label)

    def v(value: float) -> str:
        return lm.format(value)

    if not runs:
        return "No design has finite figures to compare.", (level, cost)
    if len(runs) == 1:
        name, a, b = runs[0]
        return f"{titles.get(name, name)} {what} at every {noun} the study reached ({v(a)} to {v(b)}).", (level, cost)
    first = "For a" if OBJECTIVES[level].sense == "max" else "With a"
    # Each stretch is named from where the next one starts, so the boundaries read as one number each.
    parts = [f"{first} {noun} up to {v(runs[1][1])}, {titles.get(runs[0][0], runs[0][0])} {what}"]
    for (name, a, _), after in zip(runs[1:-1], runs[2:]):
        parts.append(f"from {v(a)} to {v(after[1])}, {titles.get(name, name)}")
    name, a, b = runs[-1]
    parts.append(f"above {v(a)} (up to {v(b)}), {titles.get(name, name)}")
    return "; ".join(parts) + ".", (level, cost)


def verdict(table: pd.DataFrame, objectives, constraints, topologies, titles: dict[str, str],
            infeasible: dict[str, Infeasible] | None = None, closest: pd.DataFrame | None = None,
            rejected: dict[str, Rejections] | None = None) -> Verdict:
    """The study's verdict from its front table; `infeasible` holds the typed records of topologies with no
    feasible design; `closest` their closest designs when other topologies do meet the spec (closest.csv);
    `rejected` what the stability rules refused in each topology's search."""
    infeasible, rejected = infeasible or {}, rejected or {}
    meets = flag(table["meets_spec"]) if "meets_spec" in table else np.ones(len(table), bool)
    merged = flag(table["on_merged_front"]) if "on_merged_front" in table else np.zeros(len(table), bool)
    names = table["topology"].astype(str).to_numpy() if len(table) else np.array([], str)
    nearest = closest if closest is not None else table.iloc[0:0]
    nearest_names = nearest["topology"].astype(str).to_numpy() if len(nearest) else np.array([], str)
    feasible_rows = table[meets]
    overall = _best(feasible_rows if len(feasible_rows) else table, objectives)
    standings = []
    for name in topologies:
        mine = names == name
        rows = table[mine]
        ok = bool((meets & mine).any()) and name not in infeasible
        pool = table[mine & meets] if ok else rows
        if not ok and not len(pool):
            pool = rows = nearest[nearest_names == name]
        best = _best(pool, objectives) if len(pool) else {}
        shown = {o: METRICS[OBJECTIVES[o].metric].format(value) for o, value in best.items()}
        leads = frozenset(o for o, value in best.items() if ok and o in overall and value == overall[o])
        if ok:
            binding, misses = _binding_feasible(pool, constraints), ()
        else:
            found = _misses(rows, infeasible.get(name), constraints)
            misses = tuple(text for _, text in found)
            binding = misses[0] if misses else "no design could be evaluated"
        said = tuple(rejected[name].describe()) if name in rejected else ()
        standings.append(Standing(name, titles.get(name, name), ok, int(len(pool)), int((merged & mine).sum()),
                                  shown, leads, binding, misses, closest=not ok and bool(len(pool)), rejected=said))
    notes = []
    if len(feasible_rows):
        sentence, axes = _say(feasible_rows, objectives, titles)
        named = {r[0] for r in winners(feasible_rows, *axes)}
        for s in standings:
            if s.feasible and s.name not in named:
                others = [METRICS[OBJECTIVES[o].metric].label for o in s.leads]
                where = (f"; it leads on {', '.join(others)}" if others else
                         f"; {s.merged} of its designs are on the merged front" if s.merged else
                         "; none of its designs is on the merged front")
                notes.append(f"{s.title} is never the best on that trade{where}.")
            elif not s.feasible:
                notes.append(f"No design of {s.title} meets the spec: {s.binding}.")
    else:
        axes = None
        ranked = sorted(standings, key=lambda s: _shortfall(table[names == s.name], infeasible.get(s.name),
                                                             constraints))
        parts = [f"{s.title} ({s.binding})" for s in ranked]
        sentence = "No topology meets the whole spec; nearest first: " + "; ".join(parts) + "."
    return Verdict(standings, sentence, notes, axes)


def _shortfall(rows, record, constraints) -> float:
    found = _misses(rows, record, constraints)
    return float(sum(min(s, 1e6) for s, _ in found)) if found else np.inf
