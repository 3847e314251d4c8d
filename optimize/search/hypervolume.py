"""Hypervolume on a window the study fixes, so two runs of one study (other seeds, other budgets) compare by
one number: 1.0 would be a front holding the window's ideal corner.

Each objective's window runs from its reference end to an ideal end a fixed span better. The reference end
is the study's own bound on that objective's metric (max_power for power, min_gbw for GBW, ...; the catalog's
default area bound counts), or, for an objective the spec leaves open, a fixed level of ours (OPEN,
common practice, lenient on purpose). Designs better than the ideal end are counted at it.
"""

from __future__ import annotations

from dataclasses import dataclass

import moocore
import numpy as np
from pymoo.indicators.hv import HV

from ampfront.optimize.search.problem import objective_matrix
from ampfront.topologies.catalog import M, OBJECTIVES

# How far the ideal end sits from the reference end, in the searched space: decades for log objectives.
DECADES = 3.0
SPAN = {M.gain_db: 40.0, M.phase_margin_deg: 30.0}
# Most objectives whose hypervolume contributions the front's thinning computes exactly.
EXACT_CONTRIBUTIONS = 3
# Reference levels for an objective the study does not bound (SI; power scales with the supply).
OPEN = {M.power_w: lambda vdd: vdd * 10e-3, M.gbw_hz: lambda vdd: 1e6, M.gain_db: lambda vdd: 40.0,
        M.phase_margin_deg: lambda vdd: 45.0, M.area_m2: lambda vdd: 0.1e-6}


@dataclass(frozen=True)
class Window:
    objectives: tuple[str, ...]
    reference: np.ndarray   # searched space (minimized; log10 for log objectives, negated for maxima)
    ideal: np.ndarray
    levels: dict            # objective -> reference level in SI, and whether the study set it

    def hypervolume(self, F: np.ndarray) -> float:
        F = np.atleast_2d(F)
        if not len(F):
            return 0.0
        scaled = np.maximum((F - self.ideal) / (self.reference - self.ideal), 0.0)
        inside = (scaled < 1.0).all(axis=1)
        if not inside.any():
            return 0.0
        return float(HV(ref_point=np.ones(F.shape[1]))(scaled[inside]))

    def contributions(self, F: np.ndarray) -> np.ndarray:
        """Each row's exclusive hypervolume up to the window's reference corner: what the front loses without
        it. Not clipped at the ideal end, so designs past it (a cascode's 120 dB against a 110 dB end) keep
        their worth among themselves instead of all reading zero."""
        scaled = np.minimum((F - self.ideal) / (self.reference - self.ideal), 1.0)
        return moocore.hv_contributions(scaled, ref=np.ones(F.shape[1]))

    @property
    def thinning(self):
        """`contributions` where the exact figures are cheap, else None (the front is thinned by crowding):
        measured on 1,600 designs, 0.7 ms in three objectives, 4.5 s in four, 42 s in five."""
        return self.contributions if len(self.objectives) <= EXACT_CONTRIBUTIONS else None

    def record(self) -> dict:
        return {name: {"reference": self.levels[name][0], "from_spec": self.levels[name][1],
                       "ideal_span": DECADES if OBJECTIVES[name].log else SPAN[OBJECTIVES[name].metric]}
                for name in self.objectives}


def window_for(study) -> Window:
    levels = {}
    for name in study.objectives:
        objective = OBJECTIVES[name]
        # A bound on the side the objective improves away from: a maximum for what is minimized.
        worst_side = "max" if objective.sense == "min" else "min"
        bounds = [c.bound for c in study.constraints if c.metric == objective.metric and c.sense == worst_side]
        if bounds:
            levels[name] = (min(bounds) if worst_side == "max" else max(bounds), True)
        else:
            levels[name] = (float(OPEN[objective.metric](study.conditions.vdd)), False)
    reference = objective_matrix({OBJECTIVES[n].metric: np.array([levels[n][0]]) for n in study.objectives},
                                 study.objectives)[0]
    span = np.array([DECADES if OBJECTIVES[n].log else SPAN[OBJECTIVES[n].metric] for n in study.objectives])
    return Window(tuple(study.objectives), reference, reference - span, levels)
