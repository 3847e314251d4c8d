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


@dataclass(frozen=True)
class Growth:
    evaluations: tuple[int, ...]     # designs evaluated when each point was taken
    hypervolume: tuple[float, ...]   # the archive's, on the study's window
    late_gain: float                 # share of the last point's hypervolume won over the LATE part; NaN: none

    def record(self) -> dict:
        return {"evaluations": list(self.evaluations), "hypervolume": [round(v, 6) for v in self.hypervolume],
                "late_gain": None if math.isnan(self.late_gain) else round(self.late_gain, 4)}

    @classmethod
    def from_record(cls, record) -> "Growth | None":
        """A manifest's record read back; None unless it holds what `record` writes (a manifest is a file)."""
        if not isinstance(record, dict):
            return None
        evaluations, values, gain = record.get("evaluations"), record.get("hypervolume"), record.get("late_gain")
        numbers = isinstance(evaluations, list) and isinstance(values, list) and len(evaluations) == len(values)
        if not numbers or not all(isinstance(e, int) and not isinstance(e, bool) for e in evaluations):
            return None
        if not all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) for v in values):
            return None
        if gain is not None and not (isinstance(gain, (int, float)) and math.isfinite(gain)):
            return None
        return cls(tuple(evaluations), tuple(float(v) for v in values), math.nan if gain is None else float(gain))


def late_gain(evaluations, hypervolume) -> float:
    """(last - where LATE of the evaluations remained) / last; NaN while no design is feasible."""
    evaluations, hypervolume = np.asarray(evaluations, float), np.asarray(hypervolume, float)
    if not len(hypervolume) or not hypervolume[-1] > 0:
        return math.nan
    start = int(np.searchsorted(evaluations, evaluations[-1] * (1 - LATE)))
    return float((hypervolume[-1] - hypervolume[start]) / hypervolume[-1])


def growth(spent_at, history) -> Growth:
    """The genetic search's curve (history: (generation, feasible designs, hypervolume) per generation),
    thinned to POINTS evenly spread over its generations, the first and last kept."""
    evaluations = np.asarray(spent_at, int)
    values = np.asarray([h[2] for h in history], float)
    gain = late_gain(evaluations, values)
    keep = np.unique(np.linspace(0, len(values) - 1, min(POINTS, len(values))).round().astype(int))
    return Growth(tuple(int(e) for e in evaluations[keep]), tuple(float(v) for v in values[keep]), gain)
