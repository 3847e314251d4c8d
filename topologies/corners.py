"""Process, supply and temperature corners: one drawn geometry, re-solved at every corner.

A design is sized once, at the nominal corner: widths, lengths, capacitors, resistors and reference
currents. At another corner nothing of that may change; only the devices do (threshold, mobility,
temperature) and the supply. The corner pass builds the nominal geometry again with the corner's device
model (topologies.geometry). What remains is the topology's own DC solution at the corner, and
the evaluator's small-signal, noise and stability analysis of it.

A study's constraints must hold at every corner and its objectives are taken at their worst: the combined
metrics are, per metric, the worst value over the corners in the metric's own sense of better.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from .base import Build, Conditions, Topology
from .catalog import metric
from .evaluate import evaluate
from .geometry import Recording, SameGeometry
from .process.base import Technology


@dataclass(frozen=True)
class Corner:
    """One corner to evaluate at: a name for columns and files, the device model there, the supply there."""

    name: str
    tech: Technology
    vdd: float


@dataclass
class CornerResult:
    """Metrics of one population at every corner, and their worst case."""

    worst: dict[str, np.ndarray]
    by_corner: dict[str, dict[str, np.ndarray]]   # corner name -> metrics
    builds: dict[str, Build]                      # corner name -> its Build (same geometry)
    at: dict[str, Corner]                         # corner name -> the corner (nominal first)


def worst_case(by_corner: dict[str, dict[str, np.ndarray]], nominal: str) -> dict[str, np.ndarray]:
    """Per metric, the worst corner in its sense of better (NaN anywhere stays NaN: a design that does
    not work at one corner does not work); figures with no better side keep their nominal value."""
    out = {}
    for name, value in by_corner[nominal].items():
        better = metric(name).better
        stack = np.array([m[name] for m in by_corner.values()])
        if better == "max":
            out[name] = stack.min(axis=0)
        elif better == "min":
            out[name] = stack.max(axis=0)
        else:
            out[name] = value
    return out


def evaluate_corners(topology: Topology, x: dict[str, np.ndarray], nominal: Corner, others: tuple[Corner, ...],
                     cond: Conditions, step: bool = False) -> CornerResult:
    """Size at `nominal` (its tech and supply), then re-solve that geometry at each of `others`."""
    recording = Recording(nominal.tech)
    metrics, build = evaluate(topology, x, recording, replace(cond, vdd=nominal.vdd), step=step)
    by_corner, builds = {nominal.name: metrics}, {nominal.name: build}
    at_corner = SameGeometry(topology, recording.widths, build)
    for corner in others:
        by_corner[corner.name], builds[corner.name] = evaluate(at_corner, x, corner.tech,
                                                               replace(cond, vdd=corner.vdd), step=step)
    return CornerResult(worst_case(by_corner, nominal.name), by_corner, builds,
                        {c.name: c for c in (nominal, *others)})
