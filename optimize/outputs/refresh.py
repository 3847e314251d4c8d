"""The report of a results folder written again from what the folder holds, so that what `ampfront check`
found (check.csv) appears beside the model. Designs are rebuilt from the study text and the design vectors
the folder records, exactly as `check` rebuilds them; nothing in the folder is run."""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from types import SimpleNamespace

from ampfront import topologies
from ampfront.optimize.outputs import report
from ampfront.optimize.outputs.checked import read_check
from ampfront.optimize.outputs.folder import MANIFEST, write_text_atomic
from ampfront.optimize.outputs.tables import design_vectors
from ampfront.optimize.outputs.verdict import flag


@dataclass(frozen=True)
class Described:
    """A topology the run found no feasible design for, as the manifest words it (no typed misses)."""

    text: str
    misses: tuple = ()

    def describe(self) -> str:
        return self.text


def refresh(folder: Path) -> Path:
    from ampfront.optimize.simulator.check import read_result

    received = read_result(folder)
    manifest = json.loads((folder / MANIFEST).read_text(encoding="utf-8"))
    study, tech, front = received.study, received.tech, received.front
    builds = {}
    for name in front["topology"].unique():
        rows = front[front["topology"] == name]
        _, builds[name] = topologies.evaluate(topologies.available()[name], design_vectors(rows), tech,
                                              study.conditions)
    said = manifest.get("infeasible_topologies") or {}
    summary = SimpleNamespace(
        technology=tech.name, seed=study.seed, evaluations=int(manifest.get("evaluations") or 0),
        front_designs=int(manifest.get("front_designs") or 0), wall_s=float(manifest.get("wall_time_s") or 0.0),
        # The manifest words it "<name>: no design met the spec; the closest misses ..."; the verdict names the
        # topology itself.
        infeasible={n: Described(str(t).split("; the closest misses ", 1)[-1]) for n, t in said.items()
                    if isinstance(n, str)}, warnings=[],
        feasible=bool(flag(front["meets_spec"]).any()) if "meets_spec" in front else bool(manifest.get("feasible")))
    page = report.render(front, study, tech.name, summary, builds, read_check(folder))
    write_text_atomic(folder / "report.html", page)
    return folder / "report.html"
