"""Running ngspice on testbenches ampfront wrote, and reading back what they measured.

Every run starts with its outputs removed and ends within its timeout: on a hang the whole process group
(ngspice and anything it started) is killed. A run that does not produce what it must is an error with
its reason, never a stale result from an earlier run.
"""

from __future__ import annotations

import math
import os
import re
import shutil
import signal
import subprocess
from pathlib import Path

import numpy as np

from ampfront.optimize.outputs.netlist import (CM_GAIN, LOOP_BAND, LOOP_FALL, LOOP_START, LOOP_STEP, RESULT_TAG,
                                              SUPPLY_GAIN, TESTBENCH_METRICS, ac_data_file)
from ampfront.topologies.catalog import M

DEFAULT_TIMEOUT_S = 120.0


# Why a run failed, as `ampfront check` records it: a reader of check.csv can tell a circuit the simulator
# could not solve from a machine that lacks ngspice.
MISSING, TIMEOUT, NO_CONVERGENCE, UNREADABLE, FAILED = (
    "ngspice missing", "timeout", "no convergence", "unreadable output", "failed")
# What ngspice prints when an analysis gives up; looked for only once a run has failed, since a run that
# recovers (gmin or source stepping after a first failure) prints some of these too.
_GAVE_UP = re.compile(r"timestep too small|singular matrix|no convergence|gmin stepping failed|"
                      r"source stepping failed|dc solution failed|simulation\(s\) aborted|iteration limit",
                      re.IGNORECASE)


class SpiceError(Exception):
    """ngspice is missing, failed, timed out, or did not print the measurements; `kind` says which."""

    def __init__(self, message: str, kind: str = FAILED):
        super().__init__(message)
        self.kind = kind


def ngspice() -> str:
    found = shutil.which("ngspice")
    if not found:
        raise SpiceError("ngspice is not installed (Debian/Ubuntu: apt-get install ngspice)", MISSING)
    return found


def spice_environment() -> dict[str, str]:
    """The environment ngspice runs in. Debian's ngspice evaluates BSIM4 devices on OpenMP threads, which by
    default spin while they wait; beside other busy processes (our own parallel decks, a search on the other
    core) they spin against them. Measured on a SKY130 loop deck with both cores of this machine busy: 17 s
    spinning, 0.65 s with passive waiting (0.35 s on an idle machine); OMP_NUM_THREADS=1 alone did not help.
    A user's own OMP_WAIT_POLICY is kept."""
    return {**os.environ, "OMP_WAIT_POLICY": os.environ.get("OMP_WAIT_POLICY", "passive")}


def run_ngspice(deck: Path, timeout: float = DEFAULT_TIMEOUT_S) -> tuple[int, str, str]:
    """ngspice -b on one deck, started in the deck's folder in a session of its own: exit code, stdout,
    stderr. A run past its timeout (or interrupted) is killed with everything it started."""
    proc = subprocess.Popen([ngspice(), "-b", deck.name], cwd=deck.parent, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, stdin=subprocess.DEVNULL, text=True, errors="replace",
                            start_new_session=True, env=spice_environment())
    try:
        stdout, stderr = proc.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        _kill_group(proc)
        raise SpiceError(f"{deck.name}: ngspice did not finish within {timeout:g} s (killed)", TIMEOUT) from None
    except BaseException:
        _kill_group(proc)
        raise
    return proc.returncode, stdout, stderr


def run_deck(testbench: Path, timeout: float = DEFAULT_TIMEOUT_S, outputs: tuple[str, ...] = ()) -> str:
    """Run one deck in its own folder and return what it printed; `outputs` are files it must write."""
    return _run(testbench, timeout, outputs)[0]


def _run(testbench: Path, timeout: float, outputs: tuple[str, ...] = ()) -> tuple[str, str]:
    for name in outputs:
        (testbench.parent / name).unlink(missing_ok=True)
    returncode, stdout, stderr = run_ngspice(testbench, timeout)
    if returncode != 0:
        tail = (stderr or stdout).strip().splitlines()[-3:]
        raise _failure(f"{testbench.name}: ngspice exit {returncode}: {' | '.join(tail)}", stdout, stderr)
    for name in outputs:
        if not (testbench.parent / name).is_file():
            raise _failure(f"{testbench.name}: ngspice wrote no {name}", stdout, stderr, UNREADABLE)
    return stdout, stderr


def _failure(message: str, stdout: str, stderr: str, otherwise: str = FAILED) -> SpiceError:
    gave_up = _GAVE_UP.search(stderr) or _GAVE_UP.search(stdout)
    if gave_up:
        return SpiceError(f"{message} (ngspice: {gave_up.group(0)})", NO_CONVERGENCE)
    return SpiceError(message, otherwise)


def _kill_group(proc: subprocess.Popen) -> None:
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        pass
    proc.wait()


def simulate(testbench: Path, timeout: float = DEFAULT_TIMEOUT_S) -> dict[str, float]:
    """Run one open-loop testbench (`<design>_tb.sp`); return the values it printed (SI units), rejection
    ratios derived, and the gain margin read from its sweep (`<design>_ac.dat`)."""
    data_file = ac_data_file(testbench.name.removesuffix("_tb.sp"))
    stdout, stderr = _run(testbench, timeout, outputs=(data_file,))
    values = _tagged(stdout)
    wanted = (*TESTBENCH_METRICS, CM_GAIN, SUPPLY_GAIN)
    missing = [k for k in wanted if k not in values or not math.isfinite(values[k])]
    if missing:
        raise _failure(f"{testbench.name}: ngspice did not measure {', '.join(missing)}", stdout, stderr, UNREADABLE)
    out = {k: values[k] for k in TESTBENCH_METRICS}
    out[M.cmrr_db] = out[M.gain_db] - values[CM_GAIN]
    out[M.psrr_db] = out[M.gain_db] - values[SUPPLY_GAIN]
    try:
        data = np.loadtxt(testbench.parent / data_file, ndmin=2)
        out[M.gain_margin_db] = gain_margin(data[:, 0], data[:, 1], data[:, 3])
    except (ValueError, IndexError) as error:
        raise SpiceError(f"{testbench.name}: unreadable sweep {data_file} ({error})", UNREADABLE) from None
    return out


def gain_margin(freq: np.ndarray, gain_db: np.ndarray, phase_deg: np.ndarray) -> float:
    """Gain margin (dB) of a swept open loop: minus its gain where the continuous phase, anchored within
    half a turn of 0 at the sweep's start, first falls through -180 deg (the gain interpolated between the
    two sweep points around it, by phase); inf where it never does. The model reads the same crossing
    (smallsignal._crossings)."""
    phase = phase_deg - 360.0 * np.round(phase_deg[0] / 360.0)
    if not np.isfinite(phase).all():
        return math.nan
    past = np.flatnonzero(phase <= -180.0)
    if not len(past):
        return math.inf
    j = past[0]
    if j == 0:
        return math.nan
    t = (-180.0 - phase[j - 1]) / (phase[j] - phase[j - 1])
    return float(-(gain_db[j - 1] + t * (gain_db[j] - gain_db[j - 1])))


def _tagged(stdout: str) -> dict[str, float]:
    values: dict[str, float] = {}
    for line in stdout.splitlines():
        if line.startswith(RESULT_TAG):
            parts = line.split()
            try:
                values[parts[1]] = float(parts[2])
            except (IndexError, ValueError):
                continue
    return values


def simulate_step(testbench: Path, timeout: float = DEFAULT_TIMEOUT_S) -> dict[str, float]:
    """Run a closed-loop small-step testbench; return the overshoot it measured (%)."""
    stdout, stderr = _run(testbench, timeout)
    values = _tagged(stdout)
    if M.overshoot_pct not in values or not math.isfinite(values[M.overshoot_pct]):
        raise _failure(f"{testbench.name}: ngspice did not measure the overshoot", stdout, stderr, UNREADABLE)
    return {M.overshoot_pct: values[M.overshoot_pct]}


# Where the swept gain has fallen this far below mid-scale the output stage has left saturation: the gain
# of a class-AB stage drifts by several dB with load current inside its swing, and collapses outside it.
SWING_GAIN_DROP_DB = 20.0


def simulate_swing(testbench: Path, data_file: str, v_cm: float, timeout: float = DEFAULT_TIMEOUT_S) -> dict[str, float]:
    """Run a swing testbench; return the open-loop gain at mid-scale (dB) read from the sweep, and the
    lowest and highest output levels (V) out to which the gain is still within SWING_GAIN_DROP_DB of it.

    The inverter's feedback network halves the loop gain: with s = dVout/dVset, A = -2 s / (1 + s).
    """
    _run(testbench, timeout, outputs=(data_file,))
    try:
        data = np.loadtxt(testbench.parent / data_file, ndmin=2)
        v_set, v_out = data[:, :2].T
    except (ValueError, IndexError) as error:
        raise SpiceError(f"{testbench.name}: unreadable sweep output {data_file} ({error})", UNREADABLE) from None
    if len(v_set) < 3 or not np.isfinite(data[:, :2]).all():
        raise SpiceError(f"{testbench.name}: the sweep output {data_file} is too short or not finite", UNREADABLE)
    slope = np.gradient(v_out, v_set)
    with np.errstate(divide="ignore", invalid="ignore"):
        gain = np.abs(-2 * slope / (1 + slope))
    mid = int(np.argmin(np.abs(v_set - v_cm)))
    linear = gain >= gain[mid] * 10 ** (-SWING_GAIN_DROP_DB / 20)
    # The outermost linear points on either side of mid-scale: a class-AB stage's gain can dip near its
    # quiescent point (both output devices at low current) and rise again as one of them takes the load.
    # The set point rises as the output falls.
    lo = int(np.flatnonzero(linear[:mid + 1])[0]) if linear[:mid + 1].any() else mid
    hi = mid + int(np.flatnonzero(linear[mid:])[-1]) if linear[mid:].any() else mid
    return {M.gain_db: float(20 * np.log10(gain[mid])), M.out_low_v: float(v_out[hi]),
            M.out_high_v: float(v_out[lo])}


# The loop testbench's slope is read over this fraction of an edge's window: long enough to smooth the edge of
# the input ramp (one time step, fed through to the output by the compensation), short beside any slewing.
SLOPE_WINDOW = 2e-3


def _edge(t: np.ndarray, v: np.ndarray, start: float, stop: float, band: float) -> tuple[float, float]:
    """Settling time (s, from `start`) into `band` (V) around the level the edge ends at (mean of the last
    2 % of its window), and its steepest slope (V/s, magnitude, over SLOPE_WINDOW of the window)."""
    inside = (t >= start) & (t <= stop)
    t, v = t[inside], v[inside]
    final = v[t >= stop - 0.02 * (stop - start)].mean()
    outside = np.abs(v - final) > band
    outside[0] = True
    last = int(np.flatnonzero(outside)[-1])
    if last >= len(t) - 1:
        settling = math.inf
    else:
        # Where the error crosses the band between the last sample outside and the first inside.
        e0, e1 = abs(v[last] - final), abs(v[last + 1] - final)
        frac = (e0 - band) / (e0 - e1) if e0 != e1 else 0.0
        settling = float(t[last] + frac * (t[last + 1] - t[last]) - start)
    window = SLOPE_WINDOW * (stop - start)
    grid = np.arange(start, stop, window / 4)
    level = np.interp(grid, t, v)
    slope = float(np.max(np.abs(level[4:] - level[:-4]) / window))
    return max(settling, 0.0), slope


def simulate_loop(testbench: Path, data_file: str, timeout: float = DEFAULT_TIMEOUT_S) -> dict[str, float]:
    """Run a closed-loop application testbench; return the static gain error and the loop phase margin it
    printed, and from its transient the slower edge's figures: the longer settling time (s, from the midpoint
    of the input's edge to the last exit from the band) and the smaller steepest slope (V/s)."""
    stdout, stderr = _run(testbench, timeout, outputs=(data_file,))
    values = _tagged(stdout)
    wanted = (M.gain_error, M.loop_phase_margin_deg, LOOP_STEP, LOOP_BAND, LOOP_START, LOOP_FALL)
    missing = [k for k in wanted if k not in values or not math.isfinite(values[k])]
    if missing:
        raise _failure(f"{testbench.name}: ngspice did not measure {', '.join(missing)}", stdout, stderr, UNREADABLE)
    try:
        data = np.loadtxt(testbench.parent / data_file, ndmin=2)
        t, v = data[:, :2].T
    except (ValueError, IndexError) as error:
        raise SpiceError(f"{testbench.name}: unreadable transient output {data_file} ({error})", UNREADABLE) from None
    if len(t) < 10 or not np.isfinite(data[:, :2]).all():
        raise SpiceError(f"{testbench.name}: the transient output {data_file} is too short or not finite", UNREADABLE)
    t0, fall, band = values[LOOP_START], values[LOOP_FALL], values[LOOP_BAND] * values[LOOP_STEP]
    rise = _edge(t, v, 1.5 * t0, fall, band)
    drop = _edge(t, v, fall + 0.5 * t0, t[-1], band)
    return {M.gain_error: values[M.gain_error], M.loop_phase_margin_deg: values[M.loop_phase_margin_deg],
            M.step_settling_s: max(rise[0], drop[0]), M.step_slope_v_per_s: min(rise[1], drop[1])}
