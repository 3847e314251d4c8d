"""What `ampfront check` found, read from a results folder's check.csv, whatever its exact columns.

The long form has one row per design, corner and metric: design, corner, metric, model, simulated, error,
bound, status. A missing file, an unreadable one or missing columns mean "not checked", never a failure of
the report.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

import html

from ampfront.topologies.catalog import AGREEMENT, METRICS, SWING_SLACK_V, M

COLUMNS = ("design", "corner", "metric", "model", "simulated", "error", "bound", "status", "topology")
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
    for c in ("design", "corner", "metric", "status", "topology"):
        out[c] = out[c].astype(str).str.strip()
    return out.reset_index(drop=True)


# Swing rows carry the model's claim beyond the sweep (signed volts), every other row |error| in the mode of
# its bound (relative for GBW, current, power, noise, settling; absolute otherwise).
_SIGNED = frozenset({M.out_low_v, M.out_high_v, M.swing_v})


def agreement_html(check: pd.DataFrame | None, titles: dict[str, str]) -> str:
    """Per topology and figure: designs simulated, median and worst error, bound, disagreements."""
    if check is None:
        return ""
    rows = check[check["simulated"].notna() & check["error"].notna() & check["metric"].isin(METRICS)]
    if rows.empty:
        return ""
    body = []
    for (topology, name), group in rows.groupby(["topology", "metric"], sort=True):
        shown = METRICS[name]
        signed = name in _SIGNED
        errors = group["error"] if signed else group["error"].abs()
        relative = not signed and any(mode == "rel" for mode, _ in AGREEMENT.get(name, {}).values())

        def say(value: float) -> str:
            if relative:
                return f"{100 * value:.2g} %" if value < 0.1 else f"{100 * value:.0f} %"
            if signed:
                return f"{1e3 * value:+.0f} mV"
            return shown.format(value)

        bound = group["bound"].dropna()
        bound_text = (f"{1e3 * SWING_SLACK_V:.0f} mV beyond" if signed else
                      (say(float(bound.iloc[0])) if len(bound) else ""))
        worst = float(errors.max())
        off = int((group["status"] == "disagrees").sum())
        body.append(f"<tr><td>{html.escape(titles.get(topology, topology))}</td><td>{html.escape(shown.label)}</td>"
                    f"<td>{len(group)}</td><td>{html.escape(say(float(errors.median())))}</td>"
                    f"<td>{html.escape(say(worst))}</td><td>{html.escape(bound_text)}</td>"
                    f"<td{' class=misses' if off else ''}>{off}</td></tr>")
    return ("<section id='agreement'><h2>Model against ngspice</h2><p>From <code>check.csv</code>: each figure's "
            "error over the designs simulated (swing ends: how far the model claims beyond the DC sweep, "
            "negative when it is conservative).</p><table class='agreement'><tr><th>topology</th><th>figure</th><th>designs</th>"
            "<th>median error</th><th>worst</th><th>bound</th><th>disagree</th></tr>" + "".join(body)
            + "</table></section>")
