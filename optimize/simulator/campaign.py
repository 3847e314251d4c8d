"""Agreement over whole fronts, from the check.csv files `ampfront check --designs all` leaves.

    python -m ampfront.optimize.simulator.campaign RESULT_DIR [RESULT_DIR ...] > table.md

Per topology and figure: how many designs, the median and 95th percentile of the error the check judges
(absolute in dB, degrees and percentage points; relative otherwise; for the swing ends, how far the model
claims beyond the DC sweep), the median signed difference simulation - model (the model's bias), and how
many designs fall outside the check's bound. A campaign over every design is minutes to hours of ngspice,
so it is run by hand and its numbers written down, not run in the test suite.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd

from ampfront.optimize.simulator.ledger import NAME, read
from ampfront.optimize.simulator.verdict import AGREES, DISAGREES, FIGURES
from ampfront.topologies.catalog import AGREEMENT, METRICS

ORDER = [m for figures in FIGURES.values() for m in figures]


def load(folders) -> pd.DataFrame:
    parts = []
    for folder in folders:
        rows = pd.DataFrame(read(Path(folder) / NAME))
        if not rows.empty:
            parts.append(rows.assign(study=Path(folder).name))
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame()


def _signed(rows: pd.DataFrame) -> pd.Series:
    """simulated - model, relative for the figures the check compares relatively."""
    diff = rows["simulated"] - rows["model"]
    metric = rows["metric"].iloc[0]
    rel = metric in AGREEMENT and next(iter(AGREEMENT[metric].values()))[0] == "rel"
    return diff / rows["model"].abs() if rel else diff


def table(rows: pd.DataFrame) -> pd.DataFrame:
    judged = rows[rows["status"].isin([AGREES, DISAGREES])]
    out = []
    for (study, topology, metric), g in judged.groupby(["study", "topology", "metric"], sort=True):
        err = g["error"].to_numpy(float)
        out.append({"study": study, "topology": topology, "metric": metric, "n": len(g),
                    "median": float(np.median(err)), "p95": float(np.percentile(err, 95)),
                    "max": float(np.max(err)), "bias": float(np.median(_signed(g))),
                    "outside": int((g["status"] == DISAGREES).sum()),
                    "misses_spec": int((g["meets_spec"] == "no").sum())})
    t = pd.DataFrame(out)
    t["order"] = t["metric"].map({m: k for k, m in enumerate(ORDER)})
    return t.sort_values(["study", "topology", "order"]).drop(columns="order")


def _fmt(metric: str, value: float) -> str:
    if metric in FIGURES["swing"]:
        return f"{value * 1e3:+.0f} mV"
    mode = next(iter(AGREEMENT[metric].values()))[0]
    return f"{value:.1%}" if mode == "rel" else f"{value:.2f}"


def markdown(t: pd.DataFrame, rows: pd.DataFrame) -> str:
    lines = []
    failed = rows[~rows["status"].isin([AGREES, DISAGREES])].drop_duplicates(["design", "testbench"])
    for study, s in t.groupby("study", sort=False):
        designs = rows[rows["study"] == study]["design"].nunique()
        lines += [f"### {study}: {designs} front designs", "",
                  "| topology | figure | n | median | p95 | max | bias (sim - model) | outside bound | misses spec in sim |",
                  "|---|---|---|---|---|---|---|---|---|"]
        for _, r in s.iterrows():
            m = r["metric"]
            lines.append(f"| {r['topology']} | {METRICS[m].label} | {r['n']} | {_fmt(m, r['median'])} | "
                         f"{_fmt(m, r['p95'])} | {_fmt(m, r['max'])} | {_fmt(m, r['bias'])} | {r['outside']} | "
                         f"{r['misses_spec']} |")
        lost = failed[failed["study"] == study]
        if not lost.empty:
            lines.append("")
            lines.append("Not simulated: " + ", ".join(f"{k}: {n}" for k, n in lost["status"].value_counts().items()))
        lines.append("")
    return "\n".join(lines)


def main(argv: list[str]) -> None:
    rows = load(argv)
    if rows.empty:
        sys.exit("no check.csv rows in " + ", ".join(argv))
    print(markdown(table(rows), rows))


if __name__ == "__main__":
    main(sys.argv[1:])
