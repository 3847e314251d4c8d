"""Flicker-noise coefficients of table technologies, measured by ngspice noise analysis of single devices.

For each length of a device's table and a few gm/ID levels, one device biased at VDS = 0.9 V drives a
noiseless 1 Ohm sense resistor; the input-referred gate noise at 1 Hz (where flicker dominates by orders
of magnitude) gives K = S_vg(1 Hz) * W * L, in V^2 m^2. The model then uses S_id * f = K gm^2 / (W L).
The run at 10 Hz gives the frequency exponent, kept as provenance (the model assumes 1/f).
"""

from __future__ import annotations

import json
import tempfile
from pathlib import Path

import numpy as np

from ampfront.topologies.process.tables import DeviceTable

from ampfront.optimize.simulator.characterize import CharacterizeError, _run
from ampfront.topologies.process.libraries import ModelLibrary

FORMAT = "ampfront-flicker/1"
# Up to weak inversion: K falls there (BSIM4's flicker is not a constant input-referred density), and designs
# bias low-noise pairs at gm/ID 25 and beyond; a grid stopping at 20 read their 1/f noise 15-18 % high in
# ngspice. Short lengths cannot reach the top level; see `measure`.
GM_ID_LEVELS = (5.0, 10.0, 15.0, 20.0, 25.0)
FINGERS = 4          # 4 x 1 um: wide enough that narrow-width effects match what designs draw
VDS = 0.9


def _deck(lib: ModelLibrary, device: str, polarity: str, l_um: float, width_um: float, vgs, temp: float) -> str:
    s = -1.0 if polarity == "p" else 1.0
    lines = ["* ampfront flicker extraction", *lib.preamble(), f".temp {temp:g}",
             f"Vdd top 0 {s * VDS:g}", "Rsense top d 1 noisy=0", "Vg g 0 dc 0 ac 1",
             f"Xm1 d g 0 0 {device} W={width_um:g} L={l_um:g} nf=1 m={FINGERS}", ".control"]
    for k, v in enumerate(vgs):
        lines += [f"alter Vg dc = {s * v:.6g}", "noise v(d) Vg dec 1 1 10", "setplot noise1" if k == 0 else
                  f"setplot noise{1 + 2 * k}",
                  "let s1 = inoise_spectrum[0]", "let s10 = inoise_spectrum[1]",
                  f"echo flicker: {k} $&s1 $&s10", "setplot const"]
    lines += ["quit 0", ".endc", ".end", ""]
    return "\n".join(lines)


def measure(lib: ModelLibrary, table: DeviceTable, temp: float) -> dict:
    """K (V^2 m^2) on the table's lengths x GM_ID_LEVELS, and the frequency exponent between 1 and 10 Hz."""
    device, polarity = table.meta["device"], table.meta["polarity"]
    width_um = float(table.meta["grid"]["width_um"])
    k_grid = np.full((len(table.l), len(GM_ID_LEVELS)), np.nan)
    slope = np.full_like(k_grid, np.nan)
    measured = np.zeros(k_grid.shape, bool)
    for i, l in enumerate(table.l):
        vgs = table.solve_vgs("gmid", np.full(len(GM_ID_LEVELS), l), np.log(GM_ID_LEVELS), VDS, 0.0, from_top=True)
        reached = np.isfinite(vgs)
        # A length may fall short of the top levels (a short pMOS never reaches gm/ID 25); a gap below a
        # reached level, or too few levels, would be simulated as garbage: say so instead.
        if reached.sum() < 2 or not reached[:reached.sum()].all():
            raise CharacterizeError(f"{device} L = {l * 1e6:g} um: the table reaches no bias for gm/ID "
                                    f"{', '.join(f'{g:g}' for g, r in zip(GM_ID_LEVELS, reached) if not r)}")
        with tempfile.TemporaryDirectory(prefix="ampfront-flicker-") as tmp:
            out = _run(_deck(lib, device, polarity, l * 1e6, width_um, vgs[reached], temp), Path(tmp), "flicker",
                       lib, f"{device} flicker at L = {l * 1e6:g} um")
        for line in out.splitlines():
            parts = line.split()
            if line.startswith("flicker:") and len(parts) == 4:
                j, s1, s10 = int(parts[1]), float(parts[2]), float(parts[3])
                area = FINGERS * width_um * 1e-6 * l
                k_grid[i, j] = s1**2 * area
                slope[i, j] = 2 * np.log10(s1 / s10)
        # Levels the length cannot reach keep its highest measured value: the model clips gm/ID there too.
        top = int(reached.sum()) - 1
        k_grid[i, top + 1:], slope[i, top + 1:] = k_grid[i, top], slope[i, top]
        measured[i] = reached
    return {"l_um": (table.l * 1e6).round(6).tolist(), "gm_id": list(GM_ID_LEVELS),
            "k_v2m2": k_grid.tolist(), "exponent": np.round(slope, 3).tolist(), "measured": measured.tolist()}


def write(lib: ModelLibrary, tables: dict[str, DeviceTable], corner: str, temp: float, out: Path,
          provenance: dict) -> Path:
    """Measure both polarities and write one JSON file (staged, then moved into place)."""
    data = {"format": FORMAT, "corner": corner, "temperature_c": temp, "vds_v": VDS, "fingers": FINGERS,
            "method": "ngspice noise analysis, input-referred gate noise at 1 Hz; exponent from 1 and 10 Hz",
            "model": {"name": lib.name, "version": lib.version}, **provenance}
    for polarity, table in tables.items():
        data[polarity] = {"device": table.meta["device"], **measure(lib, table, temp)}
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_name(f".{out.name}.tmp")
    tmp.write_text(json.dumps(data, indent=1) + "\n")
    tmp.replace(out)
    return out
