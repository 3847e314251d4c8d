"""ngspice decks of one design with its loop closed, for the stability tests: pole analysis (.pz) and a
small-step transient, the feedback an ideal VCVS so nothing but the spec's load loads the output."""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

import numpy as np

from ampfront.optimize.outputs import netlist
from ampfront.optimize.simulator.ngspice import ngspice

NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"


def _deck(build, i, tech, cond, beta: float, body: list[str], title: str) -> str:
    """Amplifier `amp` in a loop v(inn) - v_cm = beta (v(out) - v_cm): the output sits at the common mode
    the model biased it for, and the small-signal feedback is beta v(out), as the model closes it."""
    load = (f"Rload out term {cond.r_load:.6g}\nVterm term 0 {cond.v_cm:.6g}" if np.isfinite(cond.r_load)
            else "* no load resistance")
    return "\n".join([
        f"* {title}",
        *netlist.model_lines(build, i, tech),
        netlist.subckt(build, i, tech, "amp"),
        f".temp {tech.temperature - 273.15:g}",
        f"Vsupply vdd 0 {cond.vdd:.6g}",
        "Vground vss 0 0",
        f"Vcm cm 0 {cond.v_cm:.6g}",
        *body,
        "Xamp inp inn out vdd vss amp",
        f"Efb inn cm out cm {beta:.12g}",
        f"Cload out 0 {cond.c_load:.6g}",
        load,
        ".end",
        "",
    ])


def _run(folder: Path, name: str, text: str, tech) -> str:
    folder.mkdir(parents=True, exist_ok=True)
    if tech.spice_init:
        (folder / ".spiceinit").write_text("\n".join(tech.spice_init) + "\n")
    (folder / name).write_text(text)
    proc = subprocess.run([ngspice(), "-b", name], cwd=folder, capture_output=True, text=True, timeout=300)
    if proc.returncode != 0:
        raise RuntimeError(f"ngspice failed on {folder / name}: {proc.stderr[-800:]}")
    return proc.stdout + proc.stderr


def spice_poles(build, i, tech, cond, beta: float, folder: Path) -> tuple[np.ndarray, bool]:
    """Closed-loop poles (rad/s) from ngspice's pole-zero analysis of v(out)/v(inp), and whether the
    search finished (ngspice gives up after an iteration limit and prints the poles found so far, or
    prints one unconverged value repeatedly)."""
    body = ["Vin inp cm dc 0 ac 1",
            ".control", "set noaskquit", "op", "pz inp cm out 0 vol pol", "print all", "quit 0", ".endc"]
    out = _run(folder, "pz.sp", _deck(build, i, tech, cond, beta, body, "closed-loop poles"), tech)
    poles = []
    for line in out.splitlines():
        m = re.match(rf"\s*pole\(\s*\d+\s*\)\s*=\s*({NUMBER})\s*,?\s*({NUMBER})", line)
        if m:
            poles.append(complex(float(m.group(1)), float(m.group(2))))
    if not poles:
        raise RuntimeError(f"no poles printed by ngspice in {folder}: {out[-800:]}")
    poles = np.array(poles)
    # A failed root search also shows as one value printed again and again (deflation of a root it did not
    # converge on); distinct devices give no triple pole.
    _, counts = np.unique(poles, return_counts=True)
    return poles, "iteration limit" not in out and counts.max() <= 2


def spice_step(build, i, tech, cond, beta: float, folder: Path, step: float, t_stop: float,
               t_rise: float) -> tuple[np.ndarray, np.ndarray]:
    """v(out) after a step of `step` volts at inp (rise time t_rise, at t = t_rise): times and levels."""
    t0 = t_rise
    body = [f"Vin inp cm dc 0 pwl(0 0 {t0:.6g} 0 {t0 + t_rise:.6g} {step:.6g})",
            ".options reltol=1e-6 abstol=1e-15 vntol=1e-9",
            ".control", "set noaskquit",
            f"tran {t_stop / 4000:.6g} {t_stop + t0:.6g} 0 {t_stop / 4000:.6g}",
            "wrdata step.dat v(out)", "quit 0", ".endc"]
    _run(folder, "step.sp", _deck(build, i, tech, cond, beta, body, "closed-loop small step"), tech)
    t, v = np.loadtxt(folder / "step.dat", ndmin=2)[:, :2].T
    return t - t0, v


def spice_return_ratio(build, i, tech, cond, folder: Path, f_lo: float = 1e-2, f_hi: float = 1e11,
                       per_decade: int = 100) -> tuple[np.ndarray, np.ndarray]:
    """Unity-gain loop broken at inn, the open loop's DC bias kept by a 1 TH inductor from out (as in the
    open-loop testbench): frequencies and T(jf) = -v(out)/v(inn), inp at AC ground."""
    load = (f"Rload out term {cond.r_load:.6g}\nVterm term 0 {cond.v_cm:.6g}" if np.isfinite(cond.r_load)
            else "* no load resistance")
    text = "\n".join([
        "* unity-gain return ratio at inn",
        *netlist.model_lines(build, i, tech),
        netlist.subckt(build, i, tech, "amp"),
        f".temp {tech.temperature - 273.15:g}",
        f"Vsupply vdd 0 {cond.vdd:.6g}",
        "Vground vss 0 0",
        f"Vcm cm 0 {cond.v_cm:.6g}",
        "Vin inp cm dc 0",
        "Xamp inp inn out vdd vss amp",
        "Lloop out fb 1e12",
        "Cloop fb cm 1",
        "Vprobe inn fb dc 0 ac 1",
        f"Cload out 0 {cond.c_load:.6g}",
        load,
        ".control", "set noaskquit",
        f"ac dec {per_decade} {f_lo:.6g} {f_hi:.6g}",
        "let t = -v(out) / v(inn)",
        "wrdata ratio.dat real(t) imag(t)", "quit 0", ".endc", ".end", ""])
    _run(folder, "ratio.sp", text, tech)
    data = np.loadtxt(folder / "ratio.dat", ndmin=2)
    return data[:, 0], data[:, 1] + 1j * data[:, 3]
