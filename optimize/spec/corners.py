"""A study's corners: which device models and supplies every design is evaluated at, and the evaluation
that holds the spec at all of them (topologies.corners does the physics)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ampfront.topologies.base import Build
from ampfront.topologies.corners import Corner, CornerResult, evaluate_corners
from ampfront.topologies.evaluate import evaluate
from ampfront.topologies.process.techfile import load

from .study import Study


def corner_label(corner: str | None, vdd: float, tolerance: float) -> str:
    """A corner's name in columns and file names: the process corner, and its supply when that varies
    ("ss_1v62" is ss at 1.62 V)."""
    name = corner or "nominal"
    return f"{name}_{vdd:.2f}".replace(".", "v") if tolerance else name


@dataclass(frozen=True)
class CornerSet:
    nominal: Corner
    others: tuple[Corner, ...]

    @property
    def names(self) -> tuple[str, ...]:
        return (self.nominal.name, *(c.name for c in self.others))

    @property
    def all(self) -> tuple[Corner, ...]:
        return (self.nominal, *self.others)


def corner_set(study: Study, tech) -> CornerSet | None:
    """None for a one-corner study; otherwise the sizing corner and the rest, technologies loaded once."""
    if not study.corners and not study.supply_tolerance:
        return None
    vdd, tol, nominal = study.conditions.vdd, study.supply_tolerance, study.nominal_corner
    sizing = Corner(corner_label(nominal, vdd, tol), tech, vdd)
    techs = {nominal: tech}
    others = []
    for name in dict.fromkeys((nominal, *study.corners)):
        if name not in techs:
            techs[name] = load(study.technology, name)
        for supply in ((vdd * (1 - tol), vdd * (1 + tol)) if tol else (vdd,)):
            label = corner_label(name, supply, tol)
            if label != sizing.name:
                others.append(Corner(label, techs[name], supply))
    return CornerSet(sizing, tuple(others))


def evaluate_study(topology, x: dict[str, np.ndarray], tech, study: Study, corners: CornerSet | None,
                   step: bool = False) -> tuple[dict[str, np.ndarray], Build, CornerResult | None]:
    """(metrics, build, corners): at one corner the plain evaluation and None; at several, every metric's
    worst corner, the nominal Build (the geometry every corner shares) and each corner's own result."""
    if corners is None:
        metrics, build = evaluate(topology, x, tech, study.conditions, step=step)
        return metrics, build, None
    result = evaluate_corners(topology, x, corners.nominal, corners.others, study.conditions, step=step)
    return result.worst, result.builds[corners.nominal.name], result
