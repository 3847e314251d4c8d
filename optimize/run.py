"""A whole study: search every listed topology, then write report, front table, netlists and manifest."""

from __future__ import annotations

import os
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from ampfront import topologies

from ampfront.optimize.outputs import netlist, report
from ampfront.optimize.outputs.tables import device_table, front_table, staged_directory, versions, write_json
from ampfront.optimize.search.problem import DesignProblem, objective_matrix
from ampfront.optimize.search.engine import Progress, run_search
from ampfront.optimize.spec.study import Study, load_study
from ampfront.topologies.process.techfile import file_hash, load


class NoFeasibleDesign(Exception):
    """The search found no design meeting the spec; the message says which constraints bind, by how much."""


@dataclass
class TopologyFront:
    name: str
    table: pd.DataFrame
    build: object           # the front designs' Build, reused for the netlists
    evaluations: int
    history: list


def diagnose(problem: DesignProblem, X: np.ndarray) -> str:
    metrics, _ = problem.metrics(X)
    violations = np.column_stack([np.maximum(c.violation(metrics), 0) for c in problem.study.constraints])
    best = int(np.argmin(violations.sum(axis=1)))
    missed = []
    for j, c in enumerate(problem.study.constraints):
        if violations[best, j] > 0:
            value = metrics[c.metric][best]
            relation = "<" if c.sense == "min" else ">"
            missed.append(f"{c.name} ({c.metric} {value:.4g} {relation} {c.bound:.4g} {c.unit})")
    return (f"{problem.topology.name}: no design met the spec; the closest one misses "
            + "; ".join(missed))


def merged_front(table: pd.DataFrame, objectives) -> np.ndarray:
    """True for designs no design of any topology dominates: who wins where."""
    from pymoo.util.nds.non_dominated_sorting import NonDominatedSorting

    metrics = {column: table[column].to_numpy() for column in table.columns}
    F = objective_matrix(metrics, objectives)
    mask = np.zeros(len(table), bool)
    mask[NonDominatedSorting().do(F, only_non_dominated_front=True)] = True
    return mask


def search_topology(study: Study, tech, name: str, progress: Progress | None) -> TopologyFront:
    topology = topologies.available()[name]
    problem = DesignProblem(topology, tech, study)
    result = run_search(problem, study.population, study.generations, study.seed, progress)
    if not result.feasible:
        raise NoFeasibleDesign(diagnose(problem, result.X))
    x = problem.decode(result.X)
    metrics, build = topologies.evaluate(topology, x, tech, study.conditions)
    names = [f"{topology.prefix}_{i + 1:03d}" for i in range(len(result.X))]
    table = front_table(name, names, metrics, build, x, study.constraints)
    return TopologyFront(name, table, build, result.evaluations, result.history)


def write_netlists(folder: Path, study: Study, tech, front: TopologyFront) -> None:
    topology = topologies.available()[front.name]
    build = front.build
    folder.mkdir(exist_ok=True)
    if tech.spice_init:
        # ngspice reads .spiceinit from the folder it starts in: the testbenches run as they are from here.
        (folder / ".spiceinit").write_text("\n".join(tech.spice_init) + "\n")
    for i, design in enumerate(front.table["design"]):
        # The operating point rides along as comments, so the netlist alone says how each device is biased.
        op = "\n".join("* " + line for line in device_table(build, i).to_string(index=False).splitlines())
        (folder / f"{design}.sp").write_text(netlist.subckt(build, i, tech, design, topology.title, op))
        (folder / f"{design}_tb.sp").write_text(
            netlist.testbench(build, i, tech, study.conditions, design, f"{design}.sp"))
        (folder / f"{design}_swing.sp").write_text(netlist.swing_testbench(
            build, i, tech, study.conditions, design, f"{design}.sp", f"{design}_swing.dat"))


def run_study(study_path: Path, out: Path, seed: int | None = None,
              progress_factory: Callable[[str, int], Progress] | None = None, workers: int | None = None) -> dict:
    """Run a study; `workers` processes search topologies side by side (default: one per core)."""
    started = time.perf_counter()
    study = load_study(study_path, topologies.available())
    if seed is not None:
        study = Study(**{**study.__dict__, "seed": seed})
    tech = load(study.technology, study.corner)
    fronts, misses = [], {}
    workers = workers or min(len(study.topologies), os.cpu_count() or 1)
    if workers > 1:
        from ampfront.optimize.search.fanout import search_all

        outcomes = search_all(study, progress_factory, workers)
    else:
        outcomes = {}
        for name in study.topologies:
            progress = progress_factory(name, study.generations) if progress_factory else None
            try:
                outcomes[name] = search_topology(study, tech, name, progress)
            except NoFeasibleDesign as missed:
                outcomes[name] = str(missed)
    for name in study.topologies:
        # One topology that cannot meet the spec is an answer too; the study goes on without it.
        if isinstance(outcomes[name], str):
            misses[name] = outcomes[name]
        else:
            fronts.append(outcomes[name])
    if not fronts:
        raise NoFeasibleDesign("; ".join(misses.values()))
    table = pd.concat([f.table for f in fronts], ignore_index=True).copy()
    table.insert(2, "on_merged_front", merged_front(table, study.objectives))
    evaluations = sum(f.evaluations for f in fronts)
    wall = time.perf_counter() - started
    summary = {"technology": tech.name, "seed": study.seed, "population": study.population,
               "generations": study.generations, "designs evaluated": evaluations,
               "front designs": len(table), "wall time": f"{wall:.1f} s"}
    summary.update({f"{name} (no feasible design)": text.split(": ", 1)[1] for name, text in misses.items()})
    missing_models = [line[2:] for line in getattr(tech, "spice_library", ()) if "not found" in line]
    if missing_models:
        summary["warning"] = f"testbenches cannot run yet: {missing_models[0]}"
    with staged_directory(out) as stage:
        table.to_csv(stage / "front.csv", index=False, float_format="%.9g")
        (stage / "report.html").write_text(report.render(table, study, tech.name, summary), encoding="utf-8")
        for front in fronts:
            write_netlists(stage / "netlists", study, tech, front)
        c = study.conditions
        write_json(stage / "manifest.json", {
            "tool": "ampfront", "versions": versions(), "seed": study.seed,
            "study": {"file": str(study.path), "sha256": study.digest, "title": study.title},
            # The conditions every figure and testbench assumes, SI units.
            "conditions": {"vdd_v": c.vdd, "c_load_f": c.c_load,
                           "r_load_ohm": None if np.isinf(c.r_load) else c.r_load, "v_cm_v": c.v_cm,
                           "noise_band_hz": list(c.noise_band)},
            "technology": {"name": tech.name, "file": str(study.technology), "corner": study.corner,
                           "sha256": file_hash(study.technology, study.corner)},
            "topologies": list(study.topologies), "objectives": list(study.objectives),
            "population": study.population, "generations": study.generations,
            "evaluations": evaluations, "wall_time_s": round(time.perf_counter() - started, 3),
            "front_designs": len(table), "infeasible_topologies": misses,
            "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        })
    return summary
