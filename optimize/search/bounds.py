"""Fronts that pile up against the search box: when most of a front sits at a variable's bound, the box
decides the answer, not physics, and the user should know (terminal, manifest, report)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ampfront.topologies.units import eng

# Within this fraction of the variable's span (in the space it is searched in, log10 for log variables).
NEAR = 0.01
# Said when at least this share of a front of at least MIN_FRONT designs sits there.
SHARE = 0.5
MIN_FRONT = 4


@dataclass(frozen=True)
class Pile:
    topology: str
    variable: str
    side: str          # "lower" or "upper"
    count: int
    total: int
    bound: float       # SI
    unit: str

    def describe(self) -> str:
        shown = f"{self.bound:g}" if self.unit == "1" else eng(self.bound, self.unit)
        return (f"{self.topology}: {self.count} of {self.total} front designs have {self.variable} at its "
                f"{self.side} search bound, {shown}")

    def record(self) -> dict:
        return {"topology": self.topology, "variable": self.variable, "side": self.side, "count": self.count,
                "total": self.total, "bound": self.bound, "unit": self.unit}


def piles(topology: str, problem, X: np.ndarray) -> list[Pile]:
    """The variables at whose bounds at least SHARE of the front X (search space) sits."""
    X = np.atleast_2d(X)
    if len(X) < MIN_FRONT:
        return []
    span = problem.xu - problem.xl
    found = []
    for j, variable in enumerate(problem.design_variables):
        for side, edge, bound in (("lower", problem.xl[j], variable.low), ("upper", problem.xu[j], variable.high)):
            count = int((np.abs(X[:, j] - edge) <= NEAR * span[j]).sum())
            if count >= SHARE * len(X):
                found.append(Pile(topology, variable.name, side, count, len(X), bound, variable.unit))
    return found
