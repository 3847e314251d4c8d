"""Re-simulate chosen front designs in ngspice and compare with what the model predicted."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from .errors import InputError
from .spice import simulate

# Agreement bounds for the square-law technology (level-1 ngspice models): the model's own equations.
BOUNDS = {"gain_db": ("abs", 0.5), "gbw_hz": ("rel", 0.05), "phase_margin_deg": ("abs", 3.0),
          "supply_current_a": ("rel", 0.02)}


def spread_picks(front: pd.DataFrame, count: int) -> list[int]:
    """Designs spread along the front: evenly spaced rows of the table (it is sorted by an objective)."""
    count = max(1, min(count, len(front)))
    return sorted({round(i * (len(front) - 1) / max(count - 1, 1)) for i in range(count)})


def check_folder(folder: Path, count: int) -> pd.DataFrame:
    table = folder / "front.csv"
    if not table.is_file():
        raise InputError(str(folder), "front.csv", "a folder written by 'ampfront run'")
    front = pd.read_csv(table)
    rows = []
    for i in spread_picks(front, count):
        row = front.iloc[i]
        got = simulate(folder / "netlists" / f"{row['design']}_tb.sp")
        entry = {"design": row["design"]}
        ok = True
        for column, (kind, bound) in BOUNDS.items():
            model, spice = float(row[column]), got[column]
            error = abs(spice - model) if kind == "abs" else abs(spice - model) / abs(model)
            entry[f"{column}_model"], entry[f"{column}_spice"] = model, spice
            ok &= error <= bound
        entry["within_bounds"] = ok
        rows.append(entry)
    return pd.DataFrame(rows)
