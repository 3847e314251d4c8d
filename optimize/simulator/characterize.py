"""Characterize MOSFET models in ngspice into gm/ID tables (one .npz per device, corner and temperature).

Each table holds, per unit width and on a grid of L x VGS x VDS x VSB (magnitudes; pMOS as VSG, VSD, VBS):
id, gm, gds, gmb, the charge partials c_ij = dQi/dVj (i, j in gate, drain, source; overlap included), the
junction capacitances cdb and csb, vth and vdsat. The partials come from the model's operating-point
charges; ngspice's BSIM4 leaves the overlap capacitances out of those, so one AC run per length measures
gate-source and gate-drain overlap and adds it back (checked against AC in the tests). Keeping the full,
non-reciprocal matrix (cdg is not cgd in saturation) is what lets phase margins agree with the simulator.
"""

from __future__ import annotations

import json
import math
import os
import re
import subprocess
import tempfile
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ampfront.optimize.simulator.ngspice import SpiceError, run_ngspice
from ampfront.topologies.errors import InputError
from ampfront.topologies.process.libraries import ModelLibrary

QUANTITIES = ("id", "gm", "gds", "gmbs", "cgg", "cgd", "cgs", "cdg", "cdd", "cds", "csg", "csd", "css",
              "capbd", "capbs", "vth", "vdsat")
# BSIM4's intrinsic charge partials c_ij = dQi/dVj for i, j in gate, drain, source; the bulk row and
# column follow from charge conservation and do not need storing.
PARTIALS = ("cgg", "cgd", "cgs", "cdg", "cdd", "cds", "csg", "csd", "css")
TABLE_FORMAT = "ampfront-gmid-table/1"


@dataclass
class Grid:
    lengths: tuple[float, ...] = (0.15, 0.2, 0.3, 0.5, 0.8, 1.2, 2.0, 3.0, 5.0, 8.0)   # um
    vgs: tuple[float, float, float] = (0.15, 1.8, 0.025)                                  # start, stop, step
    # Denser at low VDS, where the saturation knee bends the curves most.
    vds: tuple[float, ...] = (0.05, 0.1, 0.15, 0.2, 0.25) + tuple(round(0.3 + 0.1 * k, 2) for k in range(16))
    # Denser near 0, where the body effect bends most (interpolated on a sqrt scale in the tables).
    vsb: tuple[float, ...] = (0.0, 0.1, 0.2, 0.3, 0.45, 0.6, 0.8, 1.0, 1.2)
    width: float = 1.0      # um: the finger width every device is built from (m parallel fingers)

    def axis(self, spec) -> np.ndarray:
        start, stop, step = spec
        return np.round(np.arange(start, stop + step / 2, step), 6)


def _uniform_runs(values) -> list[tuple[float, float, float]]:
    """Split an increasing grid into evenly spaced runs (start, stop, step)."""
    runs, start = [], 0
    for i in range(1, len(values)):
        step = values[start + 1] - values[start] if start + 1 < len(values) else 0
        if i > start + 1 and abs((values[i] - values[i - 1]) - step) > 1e-9:
            runs.append((values[start], values[i - 1], step))
            start = i - 1
    step = values[start + 1] - values[start] if start + 1 < len(values) else 1.0
    runs.append((values[start], values[-1], step))
    # Runs share their boundary value; drop it from every run but the first.
    out = [runs[0]]
    for a, b, st in runs[1:]:
        out.append((round(a + st, 9), b, st))
    return out


def _instance_param(device: str, quantity: str) -> str:
    return f"@m.xm1.m{device}[{quantity}]"


def _sweep_deck(lib: ModelLibrary, device: str, polarity: str, l: float, grid: Grid, temp: float,
                out: Path) -> str:
    s = -1.0 if polarity == "p" else 1.0
    vgs = grid.vgs
    saved = " ".join(_instance_param(device, q) for q in QUANTITIES)
    lines = ["* ampfront characterization sweep", *lib.preamble(), f".temp {temp:g}",
             "Vd d 0 0", "Vg g 0 0", "Vb b 0 0",
             f"Xm1 d g 0 b {device} W={grid.width:g} L={l:g} nf=1", ".control", f"save {saved}"]
    for k, vsb in enumerate(grid.vsb):
        lines.append(f"alter Vb dc = {-s * vsb:g}")
        # One nested sweep per evenly spaced run of VDS values: far fewer analyses than one per VDS.
        for j, (start, stop, step) in enumerate(_uniform_runs(grid.vds)):
            lines += [f"dc Vg {s * vgs[0]:g} {s * vgs[1]:g} {s * vgs[2]:g} Vd {s * start:g} {s * stop:g} {s * step:g}",
                      f"wrdata {out}.{k}.{j} {saved}"]
    lines += ["quit 0", ".endc", ".end", ""]
    return "\n".join(lines)


def _overlap_deck(lib: ModelLibrary, device: str, polarity: str, l: float, grid: Grid, temp: float) -> str:
    """AC at mid bias in saturation: gate driven, then drain driven; imaginary currents give the caps."""
    s = -1.0 if polarity == "p" else 1.0
    return "\n".join([
        "* ampfront overlap extraction", *lib.preamble(), f".temp {temp:g}",
        f"Vd d 0 {s * 1.2:g}", f"Vg g 0 {s * 0.9:g}", "Vb b 0 0",
        f"Xm1 d g 0 b {device} W={grid.width:g} L={l:g} nf=1", ".control",
        f"save all {_instance_param(device, 'cgg')} {_instance_param(device, 'cgd')}",
        "op",
        f"let cgg_op = {_instance_param(device, 'cgg')}",
        f"let cgd_op = {_instance_param(device, 'cgd')}",
        "echo overlap: cgg_op $&cgg_op", "echo overlap: cgd_op $&cgd_op",
        "alter Vg ac = 1", "ac lin 1 1e6 1e6",
        "let cgg_ac = -imag(i(vg)) / (2 * pi * 1e6)", "echo overlap: cgg_ac $&cgg_ac",
        "alter Vg ac = 0", "alter Vd ac = 1", "ac lin 1 1e6 1e6",
        "let cgd_ac = imag(i(vg)) / (2 * pi * 1e6)", "echo overlap: cgd_ac $&cgd_ac",
        "quit 0", ".endc", ".end", ""])


class CharacterizeError(Exception):
    """ngspice could not load the library, find the device, or converge."""


def _run(deck: str, folder: Path, name: str, lib: ModelLibrary, what: str) -> str:
    path = folder / f"{name}.sp"
    path.write_text(deck)
    (folder / ".spiceinit").write_text("\n".join(lib.init) + "\n")
    try:
        returncode, stdout, stderr = run_ngspice(path, timeout=600)
    except SpiceError as error:
        raise CharacterizeError(f"{what}: {error}") from None
    text = stdout + stderr
    for marker, cause in (("could not find a valid modelname", "device name not in the library"),
                          ("unknown subckt", "device name not in the library"),
                          ("no such file", "a model file failed to load"),
                          ("could not be found", "a model file failed to load"),
                          ("timestep too small", "the sweep did not converge"),
                          ("gmin stepping failed", "the sweep did not converge"),
                          ("simulation(s) aborted", "the sweep did not converge")):
        if marker in text.lower():
            raise CharacterizeError(f"{what}: {cause} ({marker!r} in ngspice output)")
    if returncode != 0:
        tail = " | ".join(text.strip().splitlines()[-3:])
        raise CharacterizeError(f"{what}: ngspice exit {returncode}: {tail}")
    return stdout


def characterize_length(lib: ModelLibrary, device: str, polarity: str, l: float, grid: Grid,
                        temp: float) -> dict[str, np.ndarray]:
    """All quantities for one length, arrays of shape (VGS, VDS, VSB), per unit width (per metre)."""
    vgs = grid.axis(grid.vgs)
    with tempfile.TemporaryDirectory(prefix="ampfront-char-") as tmp:
        folder = Path(tmp)
        what = f"{device} at L = {l:g} um, {lib.name}"
        _run(_sweep_deck(lib, device, polarity, l, grid, temp, folder / "sweep"), folder, "sweep", lib, what)
        stacks = []
        runs = _uniform_runs(grid.vds)
        for k in range(len(grid.vsb)):
            columns = []
            for j, (start, stop, step) in enumerate(runs):
                count = int(round((stop - start) / step)) + 1
                values = np.loadtxt(folder / f"sweep.{k}.{j}", ndmin=2)[:, 1::2]  # (sweep, value) pairs
                if values.shape != (len(vgs) * count, len(QUANTITIES)):
                    raise CharacterizeError(f"{device} L={l}: sweep returned {values.shape[0]} points, "
                                            f"expected {len(vgs) * count} (did it converge?)")
                # ngspice nests the first source innermost: rows run over VGS fastest, then VDS.
                columns.append(values.reshape(count, len(vgs), len(QUANTITIES)).transpose(1, 0, 2))
            stacks.append(np.concatenate(columns, axis=1))   # (VGS, VDS, Q)
        overlap_out = _run(_overlap_deck(lib, device, polarity, l, grid, temp), folder, "overlap", lib, what)
    raw = np.stack(stacks, axis=2)  # (VGS, VDS, VSB, Q)
    found = {ln.split()[1]: float(ln.split()[2]) for ln in overlap_out.splitlines()
             if ln.startswith("overlap:") and len(ln.split()) == 3}
    if len(found) != 4:
        raise CharacterizeError(f"{device} L={l}: overlap extraction printed {sorted(found)}")
    ov_d = found["cgd_ac"] - (-found["cgd_op"])
    ov_s = found["cgg_ac"] - found["cgg_op"] - ov_d
    q = {name: raw[..., i] for i, name in enumerate(QUANTITIES)}
    w = grid.width * 1e-6
    table = {"id": np.abs(q["id"]) / w, "gm": np.abs(q["gm"]) / w, "gds": np.abs(q["gds"]) / w,
             "gmb": np.abs(q["gmbs"]) / w}
    # The overlaps are reciprocal gate-drain and gate-source capacitors: fold them into the partials.
    overlap = {"cgg": ov_s + ov_d, "cgd": -ov_d, "cdg": -ov_d, "cdd": ov_d, "cgs": -ov_s, "csg": -ov_s,
               "css": ov_s, "cds": 0.0, "csd": 0.0}
    for name in PARTIALS:
        table[name] = (q[name] + overlap[name]) / w
    table["cdb"] = np.abs(q["capbd"]) / w
    table["csb"] = np.abs(q["capbs"]) / w
    table["vth"] = np.abs(q["vth"])
    table["vdsat"] = np.abs(q["vdsat"])
    return table


def characterize(lib: ModelLibrary, device: str, polarity: str, corner: str, temp: float, grid: Grid,
                 out: Path, ngspice_version: str, tool_version: str, workers: int | None = None,
                 progress=None) -> Path:
    workers = workers or max(1, min(len(grid.lengths), os.cpu_count() or 1))
    results = {}
    with ThreadPoolExecutor(max_workers=workers) as pool:
        futures = {l: pool.submit(characterize_length, lib, device, polarity, l, grid, temp) for l in grid.lengths}
        for l, future in futures.items():
            results[l] = future.result()
            if progress:
                progress()
    # Exponential quantities keep float32 (their logs are interpolated); capacitances and voltages need
    # only 3 significant digits, so they are stored as float16 in fF/um and V (meta "scale" gives SI).
    scale = {name: (1e-9 if name.startswith("c") else 1.0) for name in results[grid.lengths[0]]}
    arrays = {name: (np.stack([results[l][name] for l in grid.lengths]) / scale[name]).astype(
        np.float32 if name in ("id", "gm", "gds", "gmb") else np.float16) for name in scale}
    meta = {
        "format": TABLE_FORMAT, "device": device, "polarity": polarity, "corner": corner,
        "temperature_c": temp, "model": {"name": lib.name, "version": lib.version,
                                         "files": [p.name for p in lib.files]},
        "grid": {"l_um": list(grid.lengths), "vgs_v": grid.axis(grid.vgs).tolist(),
                 "vds_v": list(grid.vds), "vsb_v": list(grid.vsb), "width_um": grid.width},
        "units": "per metre of width: A, S, F; V for vth and vdsat; voltages are magnitudes",
        "scale": scale,
        "ngspice": ngspice_version, "ampfront": tool_version,
    }
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_name(f".{out.name}.tmp.npz")
    np.savez_compressed(tmp, meta=np.array(json.dumps(meta)), **arrays)
    tmp.replace(out)
    return out


def ngspice_version() -> str:
    proc = subprocess.run(["ngspice", "--version"], capture_output=True, text=True, timeout=30)
    return next((ln.strip("* ").strip() for ln in proc.stdout.splitlines() if "ngspice-" in ln), "unknown")


_DEVICE = re.compile(r"^[A-Za-z][A-Za-z0-9_]{0,79}$")
TEMPERATURE_RANGE_C = (-60.0, 175.0)   # what BSIM4 cards are qualified over, and beyond any product grade
LENGTH_RANGE_UM = (0.01, 100.0)


def _options(library: str, corner: str, temperature: float, nmos: str, pmos: str, lengths: str) -> Grid:
    from ampfront.topologies.process.libraries import shipped_libraries

    where = "characterize"
    if library not in shipped_libraries():
        raise InputError(where, "--library", f"a declared model library ({', '.join(shipped_libraries())})", library)
    low, high = TEMPERATURE_RANGE_C
    if not math.isfinite(temperature) or not low <= temperature <= high:
        raise InputError(where, "--temp", f"a temperature from {low:g} to {high:g} degC", temperature)
    for option, name in (("--nmos", nmos), ("--pmos", pmos)):
        if not _DEVICE.match(name):
            raise InputError(where, option, "a device name of letters, digits and _", name)
    grid = Grid()
    if lengths:
        try:
            grid.lengths = tuple(float(v) for v in lengths.split(","))
        except ValueError:
            raise InputError(where, "--lengths", 'numbers in um such as "0.15,0.5,1"', lengths) from None
        low, high = LENGTH_RANGE_UM
        if not all(math.isfinite(v) and low <= v <= high for v in grid.lengths) or len(set(grid.lengths)) != len(
                grid.lengths):
            raise InputError(where, "--lengths", f"distinct lengths from {low:g} to {high:g} um", lengths)
        grid.lengths = tuple(sorted(grid.lengths))
    return grid


def _writable(out: Path, targets: list[Path], overwrite: bool) -> None:
    where = "characterize"
    if out.exists() and not out.is_dir():
        raise InputError(str(out), "--out", "a folder (this is a file)")
    try:
        out.mkdir(parents=True, exist_ok=True)
        probe = tempfile.NamedTemporaryFile(dir=out, prefix=".ampfront-probe-", delete=True)
        probe.close()
    except OSError as error:
        raise InputError(str(out), "--out", f"a folder ampfront can create and write ({error.strerror or error})") from None
    existing = [t for t in targets if t.exists()]
    if existing and not overwrite:
        raise InputError(where, "--out", f"a folder without {existing[0].name}, or --overwrite to replace it")


def characterize_all(out: Path, library: str, corner: str, temperature: float, nmos: str, pmos: str,
                     lengths: str, flicker: bool, overwrite: bool, bar=None) -> list[Path]:
    """Validate everything, check the destination, then sweep both devices and (optionally) measure flicker.
    Every file is staged and moved into place whole."""
    from importlib.metadata import version

    from ampfront.optimize.simulator import flicker as flicker_noise
    from ampfront.optimize.simulator.ngspice import ngspice
    from ampfront.topologies.process.libraries import model_library
    from ampfront.topologies.process.tables import DeviceTable

    grid = _options(library, corner, temperature, nmos, pmos, lengths)
    if flicker and len(grid.lengths) < 2:
        # Flicker biases are read from the new tables, which interpolate in L between characterized lengths.
        raise InputError("characterize", "--lengths", "at least two lengths with flicker (or --no-flicker)", lengths)
    ngspice()
    lib = model_library(library, corner)
    tables = {p: out / f"{d}__{corner}__{temperature:g}C.npz" for p, d in (("n", nmos), ("p", pmos))}
    flicker_file = out / f"flicker__{corner}__{temperature:g}C.json"
    _writable(out, list(tables.values()) + ([flicker_file] if flicker else []), overwrite)
    spice_version, tool = ngspice_version(), version("ampfront")
    written = []
    for polarity, device in (("n", nmos), ("p", pmos)):
        task = bar.add_task(device, total=len(grid.lengths)) if bar else None
        characterize(lib, device, polarity, corner, temperature, grid, tables[polarity], spice_version, tool,
                     progress=(lambda: bar.advance(task)) if bar else None)
        written.append(tables[polarity])
    if flicker:
        loaded = {"n": DeviceTable(tables["n"]), "p": DeviceTable(tables["p"])}
        written.append(flicker_noise.write(lib, loaded, corner, temperature, flicker_file,
                                           {"ngspice": spice_version, "ampfront": tool}))
    return written
