"""What a run tells the report and the terminal beside the front table: one record, built by `run` from the
search and by `refresh` from a folder's manifest."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from ampfront.optimize.search.outcome import Infeasible, Rejections


@dataclass
class RunSummary:
    out: Path
    technology: str
    seed: int
    evaluations: int
    front_designs: int
    wall_s: float
    infeasible: dict[str, Infeasible] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    piles: list = field(default_factory=list)     # search.bounds.Pile
    rejected: dict[str, Rejections] = field(default_factory=dict)   # topology -> designs the stability rules refused
    hypervolume: dict[str, float] = field(default_factory=dict)     # topology -> on the study's fixed window
    searched: dict[str, dict] = field(default_factory=dict)         # topology -> evaluations, generations, why it stopped

    @property
    def feasible(self) -> bool:
        return self.front_designs > 0
