"""Study outputs: the front table, the manifest, and the all-or-nothing output folder."""

from __future__ import annotations

import json
import os
import platform
import shutil
import tempfile
from contextlib import contextmanager
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

import numpy as np
import pandas as pd

from ampfront.topologies.base import Build

LEAD_COLUMNS = ["topology", "design", "gain_db", "gbw_hz", "phase_margin_deg", "gain_margin_db", "power_w",
                "area_um2", "slew_v_per_us", "swing_v", "supply_current_a"]


def front_table(topology_name: str, names: list[str], metrics: dict[str, np.ndarray], build: Build,
                x: dict[str, np.ndarray], constraints) -> pd.DataFrame:
    """One row per front design: metrics, constraint margins (positive = met), variables, device sizes."""
    table: dict[str, object] = {"topology": topology_name, "design": names}
    for key in LEAD_COLUMNS[2:]:
        table[key] = metrics[key]
    for key, value in metrics.items():
        if key not in table:
            table[key] = value
    for c in constraints:
        table[f"margin_{c.name}"] = c.margin(metrics)
    for key, value in x.items():
        table[f"x_{key}"] = value
    for d in build.devices:
        table[f"w_{d.role}_um"] = np.asarray(d.w) * 1e6
        table[f"l_{d.role}_um"] = np.asarray(d.l) * 1e6
        table[f"id_{d.role}_a"] = d.op.id
    for e in build.elements:
        table[f"{e.kind.lower()}_{e.role}"] = e.value
    return pd.DataFrame(table).copy()


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


@contextmanager
def staged_directory(final: Path):
    """Yield a temporary folder beside `final`; move it into place only if the block succeeds."""
    final = final.resolve()
    final.parent.mkdir(parents=True, exist_ok=True)
    stage = Path(tempfile.mkdtemp(prefix=f".{final.name}.", dir=final.parent))
    try:
        yield stage
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise
    old = None
    if final.exists():
        old = final.with_name(f".{final.name}.old-{os.getpid()}")
        final.rename(old)
    stage.rename(final)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
