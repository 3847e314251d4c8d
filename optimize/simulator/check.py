"""`ampfront check`: rebuild chosen front designs from the results folder's own data, simulate them in
ngspice, and compare with what the model predicts.

A results folder may come from a colleague: nothing in it is run. The designs are rebuilt from the study
text and design vectors the folder records, their netlists written afresh by ampfront into a private
folder, and a testbench in the folder that differs from what ampfront would write is refused.
"""

from __future__ import annotations

import json
import re
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ampfront import topologies
from ampfront.optimize.outputs.folder import MANIFEST, TOOL_MARK
from ampfront.optimize.outputs.netlist import IDENTIFIER, NetlistError, design_files, step_horizon
from ampfront.optimize.outputs.tables import X_PREFIX, design_vectors
from ampfront.optimize.simulator.ngspice import DEFAULT_TIMEOUT_S, SpiceError, simulate, simulate_step, simulate_swing
from ampfront.optimize.spec.study import Study, load_study
from ampfront.topologies.catalog import AGREEMENT, M, METRICS
from ampfront.topologies.errors import InputError
from ampfront.topologies.process.techfile import file_hash, load

# Rejection of an ideal, unmismatched circuit beyond this is set by residual bias asymmetries, not by the
# circuit; real parts are limited by mismatch long before. Both sides are compared clipped here.
REJECTION_CEILING_DB = 100.0
# Swing from the DC sweep into the load (ngspice.simulate_swing): the model's swing keeps every device of
# the signal path saturated, so it may end this much short of where the swept gain collapses, and may claim
# at most SWING_SLACK_V more than the sweep shows.
SWING_SLACK_V = 0.05
SWING_SHORTFALL_V = 0.3
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
    return "gm_id_tables" if getattr(tech, "length_grid", None) is not None else "square_law"


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


def spread_picks(front: pd.DataFrame, count: int) -> list[int]:
    """Designs spread along the front: evenly spaced rows of the table (it is sorted by an objective)."""
    count = max(1, min(count, len(front)))
    return sorted({round(i * (len(front) - 1) / max(count - 1, 1)) for i in range(count)})


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


def _judge(metric: str, kind: str, model: float, simulated: float) -> tuple[float, bool]:
    mode, bound = AGREEMENT[metric][kind]
    if metric in (M.cmrr_db, M.psrr_db):
        model, simulated = min(model, REJECTION_CEILING_DB), min(simulated, REJECTION_CEILING_DB)
    error = abs(simulated - model) if mode == "abs" else abs(simulated - model) / max(abs(model), 1e-30)
    return error, bool(error <= bound)


def check_folder(folder: Path, count: int = 5, timeout: float = DEFAULT_TIMEOUT_S) -> pd.DataFrame:
    """Simulate `count` designs spread along the front; one row per design with `<metric>_model`,
    `<metric>_spice`, `within_bounds` and `status` ("ok", or why the design could not be simulated)."""
    received = read_result(folder)
    picks = received.front.iloc[spread_picks(received.front, count)]
    rows = []
    with tempfile.TemporaryDirectory(prefix="ampfront-check-") as work:
        work = Path(work)
        if received.tech.spice_init:
            (work / ".spiceinit").write_text("\n".join(received.tech.spice_init) + "\n")
        for name, group in picks.groupby("topology", sort=False):
            rows += _check_topology(received, name, group, work, timeout)
    order = {d: k for k, d in enumerate(picks["design"])}
    return pd.DataFrame(rows).sort_values("design", key=lambda s: s.map(order)).reset_index(drop=True)


def _check_topology(received: Received, name: str, group: pd.DataFrame, work: Path, timeout: float) -> list[dict]:
    topology = topologies.available()[name]
    study, tech = received.study, received.tech
    metrics, build = topologies.evaluate(topology, design_vectors(group), tech, study.conditions, step=True)
    rows = []
    for j, design in enumerate(group["design"]):
        try:
            horizon = step_horizon(float(metrics[M.gbw_hz][j]), float(metrics[M.settling_s][j]))
            files = design_files(build, j, tech, study.conditions, design, topology.title, horizon)
        except NetlistError as error:
            rows.append({"design": design, "topology": name, "within_bounds": False,
                         "status": f"not rebuildable: {error}"})
            continue
        for file, text in files.items():
            theirs = received.folder / "netlists" / file
            if theirs.is_file():
                try:
                    same = same_netlist(text, theirs.read_text(encoding="utf-8"))
                except (OSError, UnicodeDecodeError):
                    same = False
                if not same:
                    raise InputError(str(theirs), "(netlist)", "the netlist ampfront writes for this design; it "
                                     "was changed after the run, so ampfront will not run it")
            (work / file).write_text(text)
        rows.append(_simulate_design(received, design, name, {k: float(v[j]) for k, v in metrics.items()},
                                     work, timeout))
    return rows


def _simulate_design(received: Received, design: str, name: str, model: dict, work: Path, timeout: float) -> dict:
    entry: dict = {"design": design, "topology": name}
    ok, status = True, "ok"
    try:
        got = simulate(work / f"{design}_tb.sp", timeout)
    except SpiceError as error:
        return {**entry, "within_bounds": False, "status": f"failed: {error}"}
    try:
        got.update(simulate_step(work / f"{design}_step.sp", timeout))
    except SpiceError as error:
        return {**entry, "within_bounds": False, "status": f"step failed: {error}"}
    for metric in AGREEMENT:
        error, within = _judge(metric, received.kind, model[metric], got[metric])
        entry[f"{metric}_model"], entry[f"{metric}_spice"] = model[metric], got[metric]
        entry[f"{metric}_error"] = error
        ok &= within
        if not within:
            status = f"{METRICS[metric].label} outside the agreement bound"
    try:
        swept = simulate_swing(work / f"{design}_swing.sp", f"{design}_swing.dat", received.study.conditions.v_cm,
                               timeout)
    except SpiceError as error:
        return {**entry, "within_bounds": False, "status": f"swing failed: {error}"}
    for metric, sign in ((M.out_low_v, 1.0), (M.out_high_v, -1.0)):
        entry[f"{metric}_model"], entry[f"{metric}_spice"] = model[metric], swept[metric]
        # Positive when the model is the more conservative of the two.
        short = sign * (model[metric] - swept[metric])
        within = -SWING_SLACK_V <= short <= SWING_SHORTFALL_V
        ok &= within
        if not within:
            status = f"{METRICS[metric].label} outside the swing bound"
    entry["within_bounds"], entry["status"] = bool(ok), status
    return entry
