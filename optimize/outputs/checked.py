"""What `ampfront check` found, read from a results folder's check.csv, whatever its exact columns.

The long form has one row per design, corner and metric: design, corner, metric, model, simulated, error,
bound, status. A missing file, an unreadable one or missing columns mean "not checked", never a failure of
the report.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

COLUMNS = ("design", "corner", "metric", "model", "simulated", "error", "bound", "status")
NUMBERS = ("model", "simulated", "error", "bound")


def read_check(folder: Path | None) -> pd.DataFrame | None:
    if folder is None:
        return None
    path = Path(folder) / "check.csv"
    try:
        table = pd.read_csv(path, dtype=str, keep_default_na=False)
    except (OSError, ValueError, UnicodeDecodeError, pd.errors.ParserError, pd.errors.EmptyDataError):
        return None
    return normalize(table)


def normalize(table: pd.DataFrame) -> pd.DataFrame | None:
    """The long form with every column present (blank where check did not say), numbers as floats."""
    table = table.rename(columns={c: c.strip().lower() for c in table.columns})
    if "design" not in table or "metric" not in table or table.empty:
        return None
    out = pd.DataFrame({c: table[c] if c in table else "" for c in COLUMNS})
    for c in NUMBERS:
        out[c] = pd.to_numeric(out[c], errors="coerce")
    for c in ("design", "corner", "metric", "status"):
        out[c] = out[c].astype(str).str.strip()
    return out.reset_index(drop=True)
