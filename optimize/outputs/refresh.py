"""The report of a results folder written again from what the folder holds, so that what `ampfront check`
found (check.csv) appears beside the model. Designs are rebuilt from the study text and the design vectors
the folder records, exactly as `check` rebuilds them; nothing in the folder is run."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

from ampfront import topologies
from ampfront.optimize.outputs import report
from ampfront.optimize.outputs.checked import read_check
from ampfront.optimize.outputs.folder import CLOSEST, MANIFEST, write_text_atomic
from ampfront.optimize.outputs.summary import RunSummary
from ampfront.optimize.outputs.tables import design_vectors
from ampfront.optimize.search.growth import Growth
from ampfront.optimize.search.outcome import Infeasible, Rejections
from ampfront.topologies.errors import InputError


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
    closest = _closest(folder)
    summary = RunSummary(
        folder, tech.name, study.seed, int(manifest.get("evaluations") or 0), int(manifest.get("front_designs") or 0),
        float(manifest.get("wall_time_s") or 0.0))
    for name, record in (manifest.get("infeasible_topologies") or {}).items():
        # Results of format 2 held only the readable line: the verdict then reads the closest rows' margins.
        if isinstance(record, dict):
            pool = closest if closest is not None else front
            summary.infeasible[name] = Infeasible.from_record(name, record, pool[pool["topology"] == name])
    for name, value in ((manifest.get("convergence") or {}).get("hypervolume") or {}).items():
        # The study window's hypervolume lies in [0, 1]: nothing else (an infinity, a boolean) reaches the plots.
        if isinstance(value, (int, float)) and not isinstance(value, bool) and 0 <= value <= 1:
            summary.hypervolume[name] = float(value)
    for name, record in ((manifest.get("convergence") or {}).get("topologies") or {}).items():
        # A manifest is a file: only whole numbers and a known reason reach the report.
        if (isinstance(record, dict) and _count(record.get("evaluations")) and _count(record.get("generations"))
                and record.get("stopped") in report.STOP_PHRASES):
            summary.searched[name] = {k: record[k] for k in ("evaluations", "generations", "stopped")}
            grown = Growth.from_record(record.get("growth"))
            if grown is not None:
                summary.searched[name]["growth"] = grown.record()
    for name, record in (manifest.get("rejected_by_stability") or {}).items():
        if isinstance(record, dict):
            summary.rejected[name] = Rejections.from_record(record)
    page = report.render(front, study, tech.name, summary, builds, read_check(folder), closest=closest)
    write_text_atomic(folder / "report.html", page)
    return folder / "report.html"


def _count(value) -> bool:
    return isinstance(value, int) and not isinstance(value, bool) and 0 <= value <= 10**12


def _closest(folder: Path) -> pd.DataFrame | None:
    path = folder / CLOSEST
    if not path.is_file():
        return None
    try:
        return pd.read_csv(path, dtype={"topology": str, "design": str})
    except (pd.errors.EmptyDataError, pd.errors.ParserError, UnicodeDecodeError, ValueError):
        raise InputError(str(path), CLOSEST, "the table 'ampfront run' writes") from None
