"""How a converging search's front grew: the archive's hypervolume on the study's window against the designs
evaluated, each generation. The search does not stop on a front still growing, the report draws the curve
and the terminal prints its late gain, so a user can see whether a larger budget would pay before spending it
(README, Convergence).

The growth that counts is the genetic search's own: the ends searched afterwards and the thinning move the
written front once, at the end, and the report marks that point apart."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

# The late part of a genetic search whose growth is read: its last quarter of evaluations. A front that grows as
# the logarithm of the evaluations (a slow creep, as the demo's telescopic cascode's) wins about ln 10 / ln (4/3),
# some 8 times, its last quarter's share from a run ten times as long; one that has settled, little.
LATE = 0.25
# A front that won more than this share of its hypervolume in that quarter is still growing: the converging
# search does not stop on it (converge.py), so only its budget ends it. Our threshold, set on the demo
# `sensor_readout.toml`, 5 seeds, under the 0.5 % stall rule alone (which had called three of the five
# telescopic fronts converged): the telescopic cascode read 2.6-11.2 % and a 10x run beat seed 1 by 64 %; the
# two-stage 0.6-1.4 %, a 10x run 3-5 % better; the folded cascode 0.8-1.9 % where its search converged, 4.0 and
# 7.1 % where it stopped at the budget.
STILL_GROWING = 0.02
# Most points a curve keeps for the manifest and the report (a search runs up to a few thousand generations).
POINTS = 120


# What a manifest's curve may hold to be drawn: the study window's hypervolume lies in [0, 1]; evaluations are
# counts a run could spend (a manifest is a file a user can edit, and plotly.js takes no integer past 2**53).
_MOST_EVALUATIONS = 10**12


@dataclass(frozen=True)
class Growth:
    evaluations: tuple[int, ...]     # designs evaluated when each point was taken
    hypervolume: tuple[float, ...]   # the archive's, on the study's window
    late_gain: float                 # share of the last point's hypervolume won over the LATE part; NaN: none

    def share(self) -> str:
        """The late gain as the terminal and the report print it ("+3.7 %"; thinning the archive can make it
        slightly negative), or "" when there is none."""
        return "" if math.isnan(self.late_gain) else f"{100 * self.late_gain:+.1f} %"

    def record(self) -> dict:
        return {"evaluations": list(self.evaluations), "hypervolume": [round(v, 6) for v in self.hypervolume],
                "late_gain": None if math.isnan(self.late_gain) else round(self.late_gain, 4)}

    @classmethod
    def from_record(cls, record) -> "Growth | None":
        """A manifest's record read back; None unless it holds what `record` writes: at most POINTS rising
        whole evaluations, hypervolumes in [0, 1], a late gain in [-1, 1] or none."""
        if not isinstance(record, dict):
            return None
        evaluations, values, gain = record.get("evaluations"), record.get("hypervolume"), record.get("late_gain")
        if not (isinstance(evaluations, list) and isinstance(values, list)
                and 1 <= len(evaluations) == len(values) <= POINTS):
            return None
        if not all(_number(e, 1, _MOST_EVALUATIONS, whole=True) for e in evaluations):
            return None
        if any(b <= a for a, b in zip(evaluations, evaluations[1:])):
            return None
        if not all(_number(v, 0.0, 1.0) for v in values) or not (gain is None or _number(gain, -1.0, 1.0)):
            return None
        return cls(tuple(evaluations), tuple(float(v) for v in values), math.nan if gain is None else float(gain))


def _number(value, low, high, whole: bool = False) -> bool:
    """A JSON number (not a boolean) within [low, high]; compared before anything converts it, so a huge
    integer is refused rather than overflowing a float."""
    kinds = (int,) if whole else (int, float)
    return isinstance(value, kinds) and not isinstance(value, bool) and low <= value <= high


def late_gain(evaluations, hypervolume) -> float:
    """(last - at the last point taken with at least LATE of the evaluations still to come) / last: the gain
    over at least the last quarter; NaN while no design is feasible."""
    evaluations, hypervolume = np.asarray(evaluations, float), np.asarray(hypervolume, float)
    if not len(hypervolume) or not hypervolume[-1] > 0:
        return math.nan
    start = max(int(np.searchsorted(evaluations, evaluations[-1] * (1 - LATE), side="right")) - 1, 0)
    return float((hypervolume[-1] - hypervolume[start]) / hypervolume[-1])


def growth(spent_at, history) -> Growth:
    """The genetic search's curve (history: (generation, feasible designs, hypervolume) per generation),
    thinned to about POINTS: half spread evenly over the evaluations, half geometrically (the report draws
    them on a logarithmic axis), the first and last kept."""
    evaluations = np.asarray(spent_at, int)
    values = np.asarray([h[2] for h in history], float)
    gain = late_gain(evaluations, values)
    n = len(values)
    if n <= POINTS:
        keep = np.arange(n)
    else:
        even = np.linspace(0, n - 1, POINTS // 2).round().astype(int)
        geometric = np.searchsorted(evaluations, np.geomspace(evaluations[0], evaluations[-1], POINTS // 2))
        keep = np.unique(np.concatenate([even, np.clip(geometric, 0, n - 1), [0, n - 1]]))
    return Growth(tuple(int(e) for e in evaluations[keep]), tuple(float(v) for v in values[keep]), gain)
