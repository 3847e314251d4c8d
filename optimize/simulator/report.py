"""What `ampfront check` prints: per design every judged figure, model beside simulation, the ones that
disagree marked, and the study's spec held to both; then one summary line and the exit status.
"""

from __future__ import annotations

import math

import pandas as pd

from ampfront.optimize.simulator.verdict import AGREES, DISAGREES
from ampfront.topologies.catalog import AGREEMENT, METRICS

MARK = {AGREES: "  ", DISAGREES: "XX"}


def _value(metric: str, value) -> str:
    return METRICS[metric].format(value) if isinstance(value, float) and math.isfinite(value) else "-"


def _error(row) -> str:
    if not math.isfinite(row["error"]):
        return ""
    if row["testbench"] == "swing":
        return f"model claims {row['error'] * 1e3:+.0f} mV (slack {row['bound'] * 1e3:.0f} mV)"
    mode = AGREEMENT[row["metric"]]
    if next(iter(mode.values()))[0] == "rel":
        return f"off {row['error']:.1%} (bound {row['bound']:.0%})"
    unit = METRICS[row["metric"]].display_unit or METRICS[row["metric"]].unit
    return f"off {row['error']:.2g} {unit} (bound {row['bound']:g})"


def _spec(row) -> str:
    if not row.get("spec"):
        return ""
    sim = row["simulated_margin"]
    return (f"spec {row['spec']} {_value(row['metric'], row['spec_bound'])}: margin model "
            f"{_value(row['metric'], row['model_margin'])}, simulated {_value(row['metric'], sim)}"
            + ("" if not math.isfinite(sim) or sim >= 0 else "  MISSES SPEC"))


def _meets(group: pd.DataFrame) -> str:
    judged = group[group["meets_spec"].isin(["yes", "no"])]
    if judged.empty:
        return "meets spec in simulation: not judged"
    missed = judged[judged["meets_spec"] == "no"]["spec"].tolist()
    return "meets spec in simulation: yes" if not missed else f"meets spec in simulation: NO ({', '.join(missed)})"


def lines(result) -> list[str]:
    out = []
    rows = result.rows.fillna({"spec": "", "meets_spec": "", "reason": ""})
    for (design, _), group in rows.groupby(["design", "corner"], sort=False):
        bad = group[group["status"] != AGREES]
        verdict = "agrees [ok]" if bad.empty else f"DISAGREES [{len(bad)} of {len(group)} figures]"
        out.append(f"{design} ({group['topology'].iloc[0]}, {group['corner'].iloc[0]}): {verdict} · {_meets(group)}")
        for _, r in group.iterrows():
            label = METRICS[r["metric"]].label
            if r["status"] in MARK:
                out.append(f"  {MARK[r['status']]} {label:<24} model {_value(r['metric'], r['model']):>13}   "
                           f"ngspice {_value(r['metric'], r['simulated']):>13}   {_error(r):<34} {_spec(r)}".rstrip())
            else:
                out.append(f"  -- {label:<24} model {_value(r['metric'], r['model']):>13}   "
                           f"{r['testbench']} {r['status']}: {r['reason']}")
    return out


def summary(result) -> tuple[str, int]:
    """The closing line and the exit status: 1 when any figure disagrees or failed, or nothing ran."""
    rows = result.rows
    if rows.empty:
        return "nothing could be verified", 1
    by_design = rows.groupby("design", sort=False)["status"]
    agree = int(by_design.apply(lambda s: (s == AGREES).all()).sum())
    failures = rows[~rows["status"].isin([AGREES, DISAGREES])]
    failed_designs = failures["design"].nunique()
    disagree = int(by_design.ngroups - agree - failed_designs)
    kinds = ", ".join(f"{k}: {n}" for k, n in failures.drop_duplicates(["design", "testbench"])["status"]
                      .value_counts().items())
    missed = rows[rows["meets_spec"] == "no"]["design"].nunique()
    text = (f"{by_design.ngroups} designs: {agree} agree, {disagree} disagree, {failed_designs} not simulated"
            f"{f' ({kinds})' if kinds else ''}; {missed} miss the spec in simulation. "
            f"{result.ran} testbenches run, {result.reused} taken from an earlier check -> {result.path}")
    return text, 0 if agree == by_design.ngroups else 1
