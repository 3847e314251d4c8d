"""What searching one topology gives: a front of designs that meet the spec, or a typed 'no feasible design'
record naming the constraints the closest design misses, by how much."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import pandas as pd

from ampfront.topologies.catalog import METRICS, RULES, metric

# The rules that judge the closed loop: a design they turn away may meet everything else, and a user asks why
# it is not on the front (issue 15).
STABILITY_RULES = ("closed_loop_stable", "not_conditionally_stable")
UNSOLVED = "no design it evaluated has an operating point the model could solve"
_REASON = {"closed_loop_stable": "unstable in closed loop", "not_conditionally_stable": "conditionally stable"}


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

    def record(self) -> dict:
        # JSON has no NaN: a figure the closest design could not reach is written as null.
        return {"constraint": self.constraint, "metric": self.metric, "sense": self.sense,
                "value": self.value if math.isfinite(self.value) else None, "bound": self.bound}

    @classmethod
    def from_record(cls, r: dict) -> "Miss":
        value = r.get("value")
        return cls(str(r["constraint"]), str(r["metric"]), str(r["sense"]),
                   float("nan") if value is None else float(value), float(r["bound"]))


@dataclass(frozen=True)
class Rejections:
    """Evaluated designs the stability rules turned away, counted as the search evaluated them."""

    evaluated: int = 0
    violated: dict = field(default_factory=dict)   # rule -> designs violating it
    only: dict = field(default_factory=dict)       # rule -> of those, designs meeting every non-stability constraint

    def describe(self) -> list[str]:
        out = []
        for rule in STABILITY_RULES:
            n = int(self.violated.get(rule, 0))
            if n:
                alone = int(self.only.get(rule, 0))
                out.append(f"{n:,} of {self.evaluated:,} evaluated designs rejected as {_REASON[rule]}"
                           + (f" ({alone:,} of them met every other constraint)" if alone else ""))
        return out

    def record(self) -> dict:
        return {"evaluated": self.evaluated, "violated": {k: int(v) for k, v in self.violated.items()},
                "only_reason": {k: int(v) for k, v in self.only.items()},
                "why": {k: RULES[k].why for k in self.violated if k in RULES}}

    @classmethod
    def from_record(cls, r: dict) -> "Rejections":
        return cls(int(r.get("evaluated", 0)), {str(k): int(v) for k, v in (r.get("violated") or {}).items()},
                   {str(k): int(v) for k, v in (r.get("only_reason") or {}).items()})


@dataclass
class TopologyFront:
    name: str
    table: pd.DataFrame
    build: object           # the front designs' Build, reused for the netlists
    evaluations: int
    history: list
    piles: list = field(default_factory=list)   # search.bounds.Pile: where the box, not physics, decides
    corners: object = None  # topologies.corners.CornerResult of the front designs, for a study with corners
    rejected: Rejections = field(default_factory=Rejections)
    hypervolume: float = float("nan")   # on the study's fixed window (search/hypervolume.py)
    refined: int = 0                    # evaluations the refinement spent
    stopped: str = ""                   # why the search ended: converged, budget or generations
    growth: object = None               # search.growth.Growth of a converging search, else None


@dataclass
class Infeasible:
    name: str
    misses: tuple[Miss, ...]
    closest: pd.DataFrame   # the least-violating designs, same columns as a front
    build: object
    evaluations: int
    history: list
    corners: object = None
    rejected: Rejections = field(default_factory=Rejections)
    stopped: str = ""

    def unsolved(self) -> bool:
        """No design the search evaluated had a figure to judge: every miss is unknown."""
        return bool(self.misses) and not any(math.isfinite(m.value) for m in self.misses)

    def describe(self) -> str:
        if self.unsolved():
            # Listing every constraint as unknown says nothing; the cause is the operating point.
            return (f"{self.name}: no design met the spec; {UNSOLVED} ({self.evaluations:,} evaluated; check the "
                    "input common mode and the supply against this topology's headroom)")
        return f"{self.name}: no design met the spec; the closest misses " + "; ".join(m.describe() for m in self.misses)

    def record(self) -> dict:
        """The manifest's entry: the readable line and the misses as data, so a report written later from
        the folder rebuilds this record instead of parsing the line."""
        return {"text": self.describe(), "evaluations": self.evaluations, "misses": [m.record() for m in self.misses]}

    @classmethod
    def from_record(cls, name: str, r: dict, closest: pd.DataFrame) -> "Infeasible":
        return cls(name, tuple(Miss.from_record(m) for m in r.get("misses") or ()), closest, None,
                   int(r.get("evaluations") or 0), [])


Outcome = TopologyFront | Infeasible
