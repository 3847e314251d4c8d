"""`ampfront check`: rebuild chosen front designs from the results folder's own data, simulate them in
ngspice on Dask workers, and compare with what the model predicts; every judged figure kept in check.csv.

A results folder may come from a colleague: nothing in it is run. The designs are rebuilt from the study
text and design vectors the folder records, their netlists written afresh by ampfront and sent as text to
the workers, and a testbench in the folder that differs from what ampfront would write is refused before
anything runs.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd

from ampfront import topologies
from ampfront.optimize.outputs.folder import MANIFEST, TOOL_MARK
from ampfront.optimize.outputs.netlist import IDENTIFIER, NetlistError, design_files, step_horizon
from ampfront.optimize.outputs.tables import X_PREFIX, design_vectors
from ampfront.optimize.simulator import cluster, verdict
from ampfront.optimize.simulator.ledger import Ledger
from ampfront.optimize.simulator.ngspice import DEFAULT_TIMEOUT_S
from ampfront.optimize.simulator.selection import choose
from ampfront.optimize.simulator.tasks import LOOP, OPEN_LOOP, STEP, SUFFIX, SWING, Task, make_task
from ampfront.optimize.simulator.verdict import AGREES, FIGURES, REJECTION_CEILING_DB
from ampfront.optimize.spec.corners import corner_set, evaluate_study
from ampfront.optimize.spec.study import Study, load_study
from ampfront.topologies.catalog import AGREEMENT, M, METRICS, SWING_SHORTFALL_V, SWING_SLACK_V
from ampfront.topologies.errors import InputError
from ampfront.topologies.process.techfile import file_hash, load

CORNER = "nominal"   # the corner column of a one-corner study; with corners, their labels
NOT_REBUILT = "not rebuildable"
# Netlists print values to 6 significant digits; a rebuilt design may differ from the searched one in the
# last bits, so numbers are compared to this relative tolerance and everything else exactly.
_NUMBER_TOLERANCE = 1e-5


@dataclass(frozen=True)
class Received:
    """A results folder, read and validated: the study it was made from, its technology, its front."""

    folder: Path
    study: Study
    tech: object
    kind: str
    front: pd.DataFrame


def _fail(folder: Path, key: str, expected: str, got=None):
    raise InputError(str(folder), key, expected, got)


def read_result(folder: Path) -> Received:
    if not folder.is_dir():
        _fail(folder, "(folder)", "a folder written by 'ampfront run'")
    try:
        manifest = json.loads((folder / MANIFEST).read_text(encoding="utf-8"))
    except FileNotFoundError:
        _fail(folder, MANIFEST, "a folder written by 'ampfront run' (no manifest.json)")
    except (OSError, ValueError, UnicodeDecodeError):
        _fail(folder, MANIFEST, "the JSON manifest 'ampfront run' writes")
    if not isinstance(manifest, dict) or manifest.get("tool") != TOOL_MARK:
        _fail(folder, MANIFEST, "a manifest written by ampfront")
    study_entry, tech_entry = manifest.get("study"), manifest.get("technology")
    if not (isinstance(study_entry, dict) and isinstance(study_entry.get("text"), str)
            and isinstance(study_entry.get("file"), str) and isinstance(tech_entry, dict)):
        _fail(folder, MANIFEST, "a manifest of this version of ampfront (with the study's text); run the study again")
    study = load_study(Path(study_entry["file"]), topologies.available(), text=study_entry["text"])
    if file_hash(study.technology, study.corner) != tech_entry.get("sha256"):
        _fail(folder, f"{MANIFEST} technology", "the technology the results were made with (its file or tables "
              "have changed since)", str(study.technology))
    tech = load(study.technology, study.corner)
    return Received(folder, study, tech, _kind(tech), _front(folder, study, tech))


def _kind(tech) -> str:
    return tech.kind


def _front(folder: Path, study: Study, tech) -> pd.DataFrame:
    path = folder / "front.csv"
    try:
        front = pd.read_csv(path, dtype={"topology": str, "design": str})
    except FileNotFoundError:
        _fail(folder, "front.csv", "a folder written by 'ampfront run' (no front.csv)")
    except (pd.errors.EmptyDataError, pd.errors.ParserError, UnicodeDecodeError, ValueError):
        _fail(folder, "front.csv", "the table 'ampfront run' writes")
    for column in ("topology", "design"):
        if column not in front.columns:
            _fail(folder, "front.csv", f"a '{column}' column")
    if front.empty:
        _fail(folder, "front.csv", "at least one design")
    known = topologies.available()
    for _, row in front.iterrows():
        if row["topology"] not in study.topologies or row["topology"] not in known:
            _fail(folder, "front.csv topology", f"a topology of the study ({', '.join(study.topologies)})",
                  row["topology"])
        if not isinstance(row["design"], str) or not IDENTIFIER.match(row["design"]):
            _fail(folder, "front.csv design", "a plain design name (letters, digits, _)", row["design"])
    for name in front["topology"].unique():
        needed = [f"{X_PREFIX}{v.name}" for v in known[name].variables(tech)]
        rows = front[front["topology"] == name]
        for column in needed:
            if column not in front.columns:
                _fail(folder, "front.csv", f"the design-variable column '{column}'")
            values = pd.to_numeric(rows[column], errors="coerce").to_numpy(float)
            if not np.isfinite(values).all():
                _fail(folder, f"front.csv {column}", "finite numbers")
    return front


_TOKEN = re.compile(r"^([A-Za-z_]*=)?([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)$")


def same_netlist(ours: str, theirs: str) -> bool:
    """True when two netlists say the same thing: identical but for numbers within the print precision."""
    a, b = ours.splitlines(), theirs.splitlines()
    if len(a) != len(b):
        return False
    for line_a, line_b in zip(a, b):
        if line_a == line_b:
            continue
        ta, tb = line_a.split(), line_b.split()
        if len(ta) != len(tb):
            return False
        for x, y in zip(ta, tb):
            if x == y:
                continue
            mx, my = _TOKEN.match(x), _TOKEN.match(y)
            if not (mx and my) or mx.group(1) != my.group(1):
                return False
            vx, vy = float(mx.group(2)), float(my.group(2))
            if abs(vx - vy) > _NUMBER_TOLERANCE * max(abs(vx), abs(vy), 1e-30):
                return False
    return True



@dataclass(frozen=True)
class Planned:
    task: Task
    topology: str
    model: dict
    vdd: float      # the supply at the task's corner (power from the simulated current)


def plan(received: Received, picks: pd.DataFrame, timeout: float) -> tuple[list[Planned], list[dict]]:
    """Every testbench of every picked design, at every corner of the study, as a task with what the model
    predicts there; designs that cannot be rebuilt as rows saying so. Refuses the whole folder if any
    netlist in it is not what ampfront writes."""
    planned, unbuilt = [], []
    init = tuple(received.tech.spice_init or ())
    study, tech = received.study, received.tech
    corners = corner_set(study, tech)
    for name, group in picks.groupby("topology", sort=False):
        topology = topologies.available()[name]
        metrics, build, result = evaluate_study(topology, design_vectors(group), tech, study, corners, step=True)
        if result is None:
            at = [(CORNER, "", build, tech, study.conditions, metrics)]
        else:
            at = [(label, "" if k == 0 else f"_{label}", result.builds[label], c.tech,
                   replace(study.conditions, vdd=c.vdd), result.by_corner[label])
                  for k, (label, c) in enumerate(result.at.items())]
        for corner, suffix, built, device_model, cond, values in at:
            for j, base in enumerate(group["design"]):
                design = f"{base}{suffix}"
                model = {k: float(v[j]) for k, v in values.items()}
                try:
                    horizon = step_horizon(model[M.gbw_hz], model[M.settling_s])
                    files = design_files(built, j, device_model, cond, design, topology.title, horizon)
                except NetlistError as error:
                    unbuilt += [{"design": base, "corner": corner, "metric": metric, "model": model.get(metric),
                                 "status": NOT_REBUILT, "topology": name, "testbench": bench, "reason": str(error)}
                                for bench, figures in FIGURES.items() for metric in figures
                                if bench != LOOP or study.conditions.applied]
                    continue
                _refuse_changed(received.folder, files)
                sub = f"{design}.sp"
                # The application's testbench only where the study states one (design_files writes it then).
                for bench in (b for b in (OPEN_LOOP, SWING, STEP, LOOP) if f"{design}{SUFFIX[b]}" in files):
                    deck = f"{design}{SUFFIX[bench]}"
                    task = make_task(base, bench, {deck: files[deck], sub: files[sub]}, init,
                                     study.conditions.v_cm, timeout, corner, design)
                    planned.append(Planned(task, name, model, cond.vdd))
    return planned, unbuilt


def _refuse_changed(folder: Path, files: dict[str, str]) -> None:
    for file, text in files.items():
        theirs = folder / "netlists" / file
        if theirs.is_file():
            try:
                same = same_netlist(text, theirs.read_text(encoding="utf-8"))
            except (OSError, UnicodeDecodeError):
                same = False
            if not same:
                raise InputError(str(theirs), "(netlist)", "the netlist ampfront writes for this design; it "
                                 "was changed after the run, so ampfront will not run it")


@dataclass
class Verification:
    """The long rows of every picked design (fresh and from an earlier check.csv), in front order."""

    received: Received
    rows: pd.DataFrame
    ran: int          # tasks simulated this time
    reused: int       # tasks whose rows an earlier check left in check.csv
    path: Path

    def wide(self) -> pd.DataFrame:
        return wide(self.rows)


def verify(folder: Path, designs: str = "5", timeout: float = DEFAULT_TIMEOUT_S, scheduler: str | None = None,
           workers: int | None = None, fresh: bool = False, per_topology: bool = True,
           progress: Callable[[int, int], None] | None = None) -> Verification:
    received = read_result(folder)
    picks = received.front.iloc[choose(received.front, received.study.objectives, designs, per_topology)]
    planned, unbuilt = plan(received, picks, timeout)
    constraints, vdd = received.study.constraints, received.study.conditions.vdd
    rows: list[dict] = list(unbuilt)
    with Ledger(folder, fresh) as ledger:
        if unbuilt:
            ledger.append(unbuilt)
        todo = [p for p in planned if p.task.key not in ledger.done]
        for p in planned:
            rows += ledger.done.get(p.task.key, [])
        if progress:
            progress(0, len(todo))
        if todo:
            by_key = {p.task.key: p for p in todo}
            with cluster.client(scheduler, workers) as dask_client:
                for n, (task, outcome) in enumerate(cluster.run(dask_client, [p.task for p in todo]), 1):
                    p = by_key[task.key]
                    fresh_rows = verdict.rows(task, outcome, p.topology, p.model, received.kind, constraints, p.vdd)
                    ledger.append(fresh_rows)
                    rows += fresh_rows
                    if progress:
                        progress(n, len(todo))
    order = {d: k for k, d in enumerate(picks["design"])}
    table = pd.DataFrame(rows)
    table = table.sort_values("design", key=lambda s: s.map(order), kind="stable").reset_index(drop=True)
    return Verification(received, table, len(todo), len(planned) - len(todo), ledger.path)


def check_folder(folder: Path, count: int = 5, timeout: float = DEFAULT_TIMEOUT_S, **options) -> pd.DataFrame:
    """Simulate `count` designs of each topology (its knee and extremes first, then spread along its
    front); one row per design with `<metric>_model`, `<metric>_spice`, `within_bounds` and `status`
    ("ok", or the first reason it is not)."""
    return verify(folder, str(count), timeout, **options).wide()


def wide(rows: pd.DataFrame) -> pd.DataFrame:
    out = []
    for (design, corner), group in rows.groupby(["design", "corner"], sort=False):
        entry = {"design": design, "corner": corner, "topology": group["topology"].iloc[0]}
        problems = []
        for _, r in group.iterrows():
            entry[f"{r['metric']}_model"] = r["model"]
            entry[f"{r['metric']}_spice"] = r.get("simulated", math.nan)
            entry[f"{r['metric']}_error"] = r.get("error", math.nan)
            if r["status"] != AGREES:
                label = METRICS[r["metric"]].label
                bound = "swing" if r["testbench"] == SWING else "agreement"
                problems.append(f"{label} outside the {bound} bound" if r["status"] == verdict.DISAGREES
                                else f"{r['testbench']} {r['status']}: {r.get('reason', '')}")
        entry["within_bounds"] = not problems
        entry["status"] = problems[0] if problems else "ok"
        out.append(entry)
    return pd.DataFrame(out)
