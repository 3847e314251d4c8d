"""Running ngspice on exported testbenches and reading back what they measured."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

from .netlist import RESULT_TAG

# What a testbench prints, in the units it prints them, and the front.csv column each checks.
MEASURED = {"gain_db": ("gain_db", 1.0), "gbw_hz": ("gbw_hz", 1.0),
            "phase_margin_deg": ("phase_margin_deg", 1.0), "supply_current_ua": ("supply_current_a", 1e-6),
            "noise_1hz_nv_rthz": ("noise_1hz_v_rthz", 1e-9), "noise_100hz_nv_rthz": ("noise_100hz_v_rthz", 1e-9),
            "cm_gain_db": ("cm_gain_db", 1.0),
            "supply_gain_db": ("supply_gain_db", 1.0)}


class SpiceError(Exception):
    """ngspice is missing, failed, or did not print the measurements."""


def ngspice() -> str:
    found = shutil.which("ngspice")
    if not found:
        raise SpiceError("ngspice is not installed (Debian/Ubuntu: apt-get install ngspice)")
    return found


def simulate(testbench: Path, timeout: float = 120.0) -> dict[str, float]:
    """Run one testbench in its own folder; return the values it printed, SI units."""
    proc = subprocess.run([ngspice(), "-b", testbench.name], cwd=testbench.parent, capture_output=True,
                          text=True, timeout=timeout)
    values: dict[str, float] = {}
    for line in proc.stdout.splitlines():
        if line.startswith(RESULT_TAG):
            parts = line.split()
            try:
                values[parts[1]] = float(parts[2])
            except (IndexError, ValueError):
                continue
    missing = [k for k in MEASURED if k not in values]
    if proc.returncode != 0 or missing:
        tail = (proc.stderr or proc.stdout).strip().splitlines()[-3:]
        raise SpiceError(f"{testbench}: ngspice exit {proc.returncode}, missing {missing}: {' | '.join(tail)}")
    out = {column: values[key] * scale for key, (column, scale) in MEASURED.items()}
    out["cmrr_db"] = out["gain_db"] - out.pop("cm_gain_db")
    out["psrr_db"] = out["gain_db"] - out.pop("supply_gain_db")
    return out
