"""A whole study: check where it will write, search every listed topology, then write the report, the
front table, the netlists and the manifest into a staged folder moved into place only when complete."""

from __future__ import annotations

import os
import time
from dataclasses import replace
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from ampfront import topologies
from ampfront.optimize.outputs import netlist, report
from ampfront.optimize.outputs.folder import CLOSEST, TOOL_MARK, check_destination, staged_directory, written_files
from ampfront.optimize.outputs.summary import RunSummary
from ampfront.optimize.outputs.tables import device_table, versions, write_json
from ampfront.optimize.search.engine import Progress
from ampfront.optimize.search.hypervolume import window_for
from ampfront.optimize.search.growth import STILL_GROWING
from ampfront.optimize.search.merge import merged_front
from ampfront.optimize.spec.corners import corner_set
from ampfront.optimize.search.outcome import Infeasible, Outcome, TopologyFront
from ampfront.optimize.search.single import search_topology
from ampfront.optimize.spec.study import Study, load_study
from ampfront.topologies.catalog import M
from ampfront.topologies.process.techfile import file_hash, load

MANIFEST_FORMAT = "ampfront-result/3"   # 3: infeasible topologies as records


def write_netlists(folder: Path, study: Study, tech, name: str, table: pd.DataFrame, build, corners=None) -> None:
    """Every design's netlists at the sizing corner, and with corners the same geometry's testbenches at
    each other corner (`<design>_<corner>*.sp`: that corner's models, temperature and supply)."""
    topology = topologies.available()[name]
    folder.mkdir(exist_ok=True)
    if tech.spice_init:
        # ngspice reads .spiceinit from the folder it starts in: the testbenches run as they are from here.
        (folder / ".spiceinit").write_text("\n".join(tech.spice_init) + "\n")
    at = [("", build, tech, study.conditions, table[M.gbw_hz], table[M.settling_s])]
    if corners is not None:
        at = []   # each corner's own figures (the table's are the worst corner's), the sizing corner first
        for k, (label, corner) in enumerate(corners.at.items()):
            metrics = corners.by_corner[label]
            at.append(("" if k == 0 else f"_{label}", corners.builds[label], corner.tech, replace(study.conditions, vdd=corner.vdd),
                       metrics[M.gbw_hz], metrics[M.settling_s]))
    for suffix, built, device_model, cond, gbws, settlings in at:
        for i, (design, gbw, settling) in enumerate(zip(table["design"], gbws, settlings)):
            horizon = netlist.step_horizon(gbw, settling)
            try:
                files = netlist.design_files(built, i, device_model, cond, f"{design}{suffix}", topology.title,
                                             horizon)
            except netlist.NetlistError:
                continue   # a closest design of an infeasible study that has no finite circuit to write
            for file, text in files.items():
                (folder / file).write_text(text)


def _search(study: Study, tech, progress_factory, workers: int) -> dict[str, Outcome]:
    if workers > 1:
        from ampfront.optimize.search.fanout import search_all

        return search_all(study, progress_factory, workers)
    outcomes = {}
    for name in study.topologies:
        progress = progress_factory(name, study.most_generations) if progress_factory else None
        outcomes[name] = search_topology(study, tech, name, progress)
    return outcomes


def run_study(study_path: Path, out: Path, seed: int | None = None,
              progress_factory: Callable[[str, int], Progress] | None = None, workers: int | None = None,
              overwrite: bool = False) -> RunSummary:
    """Run a study; `workers` processes search topologies side by side (default: one per core).

    Everything that can be refused is refused before the search: the study, the technology and the output
    folder (ampfront replaces only an earlier result of its own, and only when `overwrite`)."""
    started = time.perf_counter()
    study = load_study(study_path, topologies.available())
    if seed is not None:
        study = replace(study, seed=seed)
    final = check_destination(out, overwrite, protect=(study.path, study.technology))
    tech = load(study.technology, study.corner)
    workers = workers or min(len(study.topologies), os.cpu_count() or 1)
    outcomes = _search(study, tech, progress_factory, workers)
    fronts = [o for o in outcomes.values() if isinstance(o, TopologyFront)]
    misses = {n: o for n, o in outcomes.items() if isinstance(o, Infeasible)}
    chosen = fronts or list(misses.values())
    tables = [f.table if isinstance(f, TopologyFront) else f.closest for f in chosen]
    table = pd.concat(tables, ignore_index=True).copy()
    table.insert(2, "meets_spec", bool(fronts))
    table.insert(3, "on_merged_front", merged_front(table, study.objectives) if fronts else False)
    # Beside a feasible front, the topologies that met nothing keep their closest designs in closest.csv
    # (front.csv stays the designs that meet the spec), so the verdict can say how near they came.
    closest = None
    if fronts and misses:
        closest = pd.concat([o.closest for o in misses.values()], ignore_index=True).copy()
        closest.insert(2, "meets_spec", False)
        closest.insert(3, "on_merged_front", False)
    evaluations = sum(o.evaluations for o in outcomes.values())
    summary = RunSummary(final, tech.name, study.seed, evaluations, len(table) if fronts else 0, 0.0, misses)
    summary.rejected = {n: o.rejected for n, o in outcomes.items()}
    summary.hypervolume = {f.name: f.hypervolume for f in fronts}
    summary.searched = {n: _searched(o) for n, o in outcomes.items()}
    summary.warnings += [w for n, o in outcomes.items() if (w := _unsettled(n, o, study.budget))]
    if tech.models_missing:
        summary.warnings.append(f"testbenches cannot run yet: {tech.models_missing}")
    summary.piles = [p for f in fronts for p in f.piles]
    summary.warnings += [p.describe() for p in summary.piles]
    with staged_directory(final) as stage:
        table.to_csv(stage / "front.csv", index=False, float_format="%.9g")
        if closest is not None:
            closest.to_csv(stage / CLOSEST, index=False, float_format="%.9g")
        summary.wall_s = time.perf_counter() - started
        builds = {outcome.name: outcome.build for outcome in chosen}
        (stage / "report.html").write_text(report.render(table, study, tech.name, summary, builds,
                                                        closest=closest), encoding="utf-8")
        for outcome in chosen:
            rows = table[table["topology"] == outcome.name]
            write_netlists(stage / "netlists", study, tech, outcome.name, rows, outcome.build, outcome.corners)
        manifest = _manifest(study, tech, summary, time.perf_counter() - started)
        # What the sub-folders hold, so a later --overwrite can tell a file of the user's among them.
        manifest["files"] = written_files(stage)
        write_json(stage / "manifest.json", manifest)
    summary.wall_s = time.perf_counter() - started
    return summary


def _searched(outcome) -> dict:
    """The manifest's record of one topology's search: its size, why it ended, and how its front grew."""
    record = {"evaluations": outcome.evaluations, "generations": len(outcome.history), "stopped": outcome.stopped}
    grown = getattr(outcome, "growth", None)
    if grown is not None:
        record["growth"] = grown.record()
    return record


def _unsettled(name: str, outcome, budget: int | None) -> str | None:
    """The warning for a search its budget ended: with its late gain, which says whether the front was still
    growing (a converging search does not stop while that exceeds growth.STILL_GROWING) or nearly settled."""
    if outcome.stopped != "budget":
        return None
    grown = getattr(outcome, "growth", None)
    head = f"{name}: the search reached its budget ({budget:,} evaluations)"
    if grown is None or not grown.share():
        return f"{head} before its front settled; a larger [search] budget may improve it"
    late = f"the last quarter of its evaluations added {grown.share()} of its hypervolume"
    if grown.late_gain > STILL_GROWING:
        return f"{head} with its front still growing ({late}); a larger [search] budget may improve it"
    return f"{head} before its stop rule was met; {late}, so a larger budget would change that front little"


def _manifest(study: Study, tech, summary: RunSummary, wall: float) -> dict:
    corners = corner_set(study, tech)
    c = study.conditions
    return {
        "tool": TOOL_MARK, "format": MANIFEST_FORMAT, "complete": True, "feasible": summary.feasible,
        "versions": versions(), "seed": study.seed,
        # The study's own text rides along, so `ampfront check` can rebuild every design and testbench
        # itself instead of running what the folder holds.
        "study": {"file": str(study.path), "sha256": study.digest, "title": study.title, "text": study.text},
        # The conditions every figure and testbench assumes, SI units.
        "conditions": {"vdd_v": c.vdd, "c_load_f": c.c_load,
                       "r_load_ohm": None if np.isinf(c.r_load) else c.r_load, "v_cm_v": c.v_cm,
                       "noise_band_hz": list(c.noise_band)},
        "technology": {"name": tech.name, "file": str(study.technology), "corner": study.corner,
                       "sha256": file_hash(study.technology, study.corner)},
        # Every corner the spec was held at (the first is the one the designs were sized at).
        "corners": [{"name": c.name, "technology": c.tech.name, "vdd_v": c.vdd} for c in corners.all] if corners else [],
        "topologies": list(study.topologies), "objectives": list(study.objectives),
        "population": study.population, "generations": study.generations,
        "evaluations": summary.evaluations, "wall_time_s": round(wall, 3),
        "front_designs": summary.front_designs,
        # Each as data (constraint, metric, sense, value, bound) beside its readable line.
        "infeasible_topologies": {n: o.record() for n, o in summary.infeasible.items()},
        # Per topology, the evaluated designs each stability rule refused (issue 15: why a design is absent).
        "rejected_by_stability": {n: r.record() for n, r in summary.rejected.items()},
        # Variables at whose search bound most of a front sits: the box, not physics, limits it there.
        "at_search_bounds": [p.record() for p in summary.piles],
        # Hypervolume of each front on a window the study fixes (its own bounds), so runs of one study at
        # other seeds and budgets compare by one number; and what the refinement spent.
        "convergence": {"window": window_for(study).record(), "refine_steps": study.refine,
                        "search": study.search_label(),
                        "topologies": summary.searched,
                        "hypervolume": {n: (round(v, 6) if np.isfinite(v) else None)
                                        for n, v in summary.hypervolume.items()}},
        "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
    }
