"""What searching one topology gives: a front of designs that meet the spec, or a typed 'no feasible design'
record naming the constraints the closest design misses, by how much."""

from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd

from ampfront.topologies.catalog import METRICS, metric


@dataclass(frozen=True)
class Miss:
    """One constraint the closest design misses: its metric's value against the bound."""

    constraint: str
    metric: str
    sense: str        # "min": value must be >= bound; "max": <=
    value: float
    bound: float

    def describe(self) -> str:
        shown = metric(self.metric) if (self.metric in METRICS or self.metric.startswith("sat_")) else None
        fmt = shown.format if shown else (lambda v: f"{v:.4g}")
        relation = "below" if self.sense == "min" else "above"
        return f"{self.constraint}: {fmt(self.value)}, {relation} the bound {fmt(self.bound)}"


@dataclass
class TopologyFront:
    name: str
    table: pd.DataFrame
    build: object           # the front designs' Build, reused for the netlists
    evaluations: int
    history: list
    piles: list = field(default_factory=list)   # search.bounds.Pile: where the box, not physics, decides
    corners: object = None  # topologies.corners.CornerResult of the front designs, for a study with corners


@dataclass
class Infeasible:
    name: str
    misses: tuple[Miss, ...]
    closest: pd.DataFrame   # the least-violating designs, same columns as a front
    build: object
    evaluations: int
    history: list
    corners: object = None

    def describe(self) -> str:
        return f"{self.name}: no design met the spec; the closest misses " + "; ".join(m.describe() for m in self.misses)


Outcome = TopologyFront | Infeasible
