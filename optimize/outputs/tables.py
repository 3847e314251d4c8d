"""The front table (one row per design, columns in catalog order), the per-device table, and the manifest."""

from __future__ import annotations

import json
import platform
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

import numpy as np
import pandas as pd

from ampfront.topologies.base import Build
from ampfront.topologies.catalog import METRICS, M, is_headroom

# Written at full precision, so `ampfront check` rebuilds exactly the design the search found.
X_PREFIX = "x_"


# Shown at every corner besides the metrics the study bounds: what a lead asks of each corner first.
CORNER_METRICS = (M.gain_db, M.gbw_hz, M.phase_margin_deg, M.power_w, M.slew_v_per_s, M.swing_v)
CORNER_MARK = "@"   # gain_db@ss: the gain at corner ss; the plain column is the worst corner's


def corner_columns(constraints, corners) -> list[str]:
    """Metrics a study with corners shows per corner, catalog order."""
    wanted = set(CORNER_METRICS) | {c.metric for c in constraints}
    return [name for name in METRICS if name in wanted] + sorted(n for n in wanted if is_headroom(n))


def front_table(topology_name: str, names: list[str], metrics: dict[str, np.ndarray], build: Build,
                x: dict[str, np.ndarray], constraints, corners=None) -> pd.DataFrame:
    """One row per design: metrics (catalog order, then headroom; with corners, the worst corner's, then
    each corner's as `<metric>@<corner>`), constraint margins (positive = met at every corner), design
    variables, device sizes and currents by circuit role (at the sizing corner)."""
    table: dict[str, object] = {"topology": topology_name, "design": names}
    for name in METRICS:
        if name in metrics:
            table[name] = metrics[name]
    for name in sorted(k for k in metrics if is_headroom(k)):
        table[name] = metrics[name]
    if corners is not None:
        for name in corner_columns(constraints, corners):
            for corner, values in corners.by_corner.items():
                if name in values:
                    table[f"{name}{CORNER_MARK}{corner}"] = values[name]
    for c in constraints:
        table[f"margin_{c.name}"] = c.margin(metrics)
    for key, value in x.items():
        table[f"{X_PREFIX}{key}"] = [repr(float(v)) for v in np.asarray(value, float)]
    for d in build.devices:
        table[f"w_{d.role}_um"] = np.asarray(d.w) * 1e6
        table[f"l_{d.role}_um"] = np.asarray(d.l) * 1e6
        table[f"id_{d.role}_a"] = d.op.id
    for e in build.elements:
        table[f"{e.kind.lower()}_{e.role}"] = e.value
    return pd.DataFrame(table).copy()


def design_vectors(table: pd.DataFrame) -> dict[str, np.ndarray]:
    """The design variables of every row, as the search found them."""
    return {c[len(X_PREFIX):]: table[c].astype(float).to_numpy() for c in table.columns if c.startswith(X_PREFIX)}


def device_table(build: Build, i: int) -> pd.DataFrame:
    """Per-device sizes and operating point of design i (rows named by circuit role)."""
    rows = []
    for d in build.devices:
        op = d.op
        rows.append({
            "role": d.role, "type": "nmos" if d.polarity == "n" else "pmos",
            "w_um": d.w[i] * 1e6, "l_um": d.l[i] * 1e6, "id_a": op.id[i], "vgs_v": d.vgs[i], "vds_v": d.vds[i],
            "vdsat_v": op.vdsat[i], "gm_s": op.gm[i], "gds_s": op.gds[i], "gm_id": op.gm[i] / op.id[i],
        })
    return pd.DataFrame(rows)


def versions() -> dict[str, str]:
    out = {"python": platform.python_version()}
    for package in ("ampfront", "numpy", "scipy", "pymoo", "pandas", "plotly", "typer"):
        try:
            out[package] = version(package)
        except PackageNotFoundError:
            out[package] = "not installed"
    return out


def write_json(path: Path, data: dict) -> None:
    path.write_text(json.dumps(data, indent=2, sort_keys=True, default=str) + "\n", encoding="utf-8")
