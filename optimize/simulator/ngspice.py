"""Running ngspice on exported testbenches and reading back what they measured."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import numpy as np

from ampfront.optimize.outputs.netlist import RESULT_TAG

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


# Where the swept gain has fallen this far below mid-scale the output stage has left saturation: the gain
# of a class-AB stage drifts by several dB with load current inside its swing, and collapses outside it.
SWING_GAIN_DROP_DB = 20.0


def simulate_swing(testbench: Path, data_file: str, v_cm: float, timeout: float = 120.0) -> dict[str, float]:
    """Run a swing testbench; return the open-loop gain at mid-scale (dB) read from the sweep, and the
    lowest and highest output levels (V) out to which the gain is still within SWING_GAIN_DROP_DB of it.

    The inverter's feedback network halves the loop gain: with s = dVout/dVset, A = -2 s / (1 + s).
    """
    proc = subprocess.run([ngspice(), "-b", testbench.name], cwd=testbench.parent, capture_output=True,
                          text=True, timeout=timeout)
    data = testbench.parent / data_file
    if proc.returncode != 0 or not data.is_file():
        tail = (proc.stderr or proc.stdout).strip().splitlines()[-3:]
        raise SpiceError(f"{testbench}: ngspice exit {proc.returncode}: {' | '.join(tail)}")
    v_set, v_out = np.loadtxt(data, ndmin=2)[:, :2].T
    slope = np.gradient(v_out, v_set)
    with np.errstate(divide="ignore", invalid="ignore"):
        gain = np.abs(-2 * slope / (1 + slope))
    mid = int(np.argmin(np.abs(v_set - v_cm)))
    linear = gain >= gain[mid] * 10 ** (-SWING_GAIN_DROP_DB / 20)
    # The outermost linear points on either side of mid-scale: a class-AB stage's gain can dip near its
    # quiescent point (both output devices at low current) and rise again as one of them takes the load.
    # The set point rises as the output falls.
    lo = int(np.flatnonzero(linear[:mid + 1])[0])
    hi = mid + int(np.flatnonzero(linear[mid:])[-1])
    return {"gain_db": float(20 * np.log10(gain[mid])), "out_low_v": float(v_out[hi]),
            "out_high_v": float(v_out[lo])}
