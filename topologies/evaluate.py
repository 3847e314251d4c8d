"""The generic evaluator: from a topology's Build to every metric, vectorized over the population."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from .base import Build, Conditions, Topology
from .process.base import Technology
from .kcl import node_imbalance
from .noise import noise_metrics
from .smallsignal import Circuit, loop_metrics


# What the AC source moves in each measurement: the differential (open-loop) gain drives inp with inn held
# at AC ground by the DC feedback path, as the testbench does; common mode drives both inputs; supply
# rejection drives vdd with both inputs still.
DRIVES = {"differential": ("inp", ("inn",)), "common_mode": (("inp", "inn"), ()), "supply": ("vdd", ("inp", "inn"))}


def small_signal(build: Build, cond: Conditions, mode: str = "differential") -> Circuit:
    nodes = sorted({n for d in build.devices for n in d.nodes}
                   | {n for e in build.elements for n in (e.a, e.b)} | {"out"})
    nodes = [n for n in nodes if n not in ("inp", "inn", "vdd", "vss", "0")]
    designs = len(build.supply_current)
    drive, grounds = DRIVES[mode]
    circuit = Circuit(nodes, designs, drive=drive, grounds=grounds)
    for d in build.devices:
        circuit.mosfet(*d.nodes, d.op)
    for e in build.elements:
        if e.kind == "R":
            circuit.resistor(e.a, e.b, e.value)
        elif e.kind == "C":
            circuit.capacitor(e.a, e.b, e.value)
    # The simulator's gmin: 1 pS from every node to ground keeps a dead device's node from floating.
    for node in nodes:
        circuit.conductance(node, "0", 1e-12)
    circuit.capacitor("out", "0", cond.c_load)
    if np.isfinite(cond.r_load):
        circuit.resistor("out", "0", cond.r_load)
    return circuit


def evaluate(topology: Topology, x: dict[str, np.ndarray], tech: Technology, cond: Conditions):
    """Return (metrics, build): metrics maps names to arrays of shape (designs,)."""
    # Dead or off-table devices give inf/NaN for their designs only; the search reads those as violations.
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        build = topology.build(x, tech, cond)
        circuit = small_signal(build, cond)
        loop = loop_metrics(circuit, "out")
        noise = noise_metrics(circuit, build, tech, loop.gain, cond.noise_band)
        # Open-loop output resistance, inputs at AC ground, without the load resistor.
        unloaded = circuit if not np.isfinite(cond.r_load) else small_signal(build, replace(cond, r_load=np.inf))
        r_out = unloaded.transimpedance("out")("out")
        a_cm = small_signal(build, cond, "common_mode").dc_gain("out")
        a_dd = small_signal(build, cond, "supply").dc_gain("out")
        cmrr = 20 * np.log10(np.abs(loop.gain) / np.maximum(np.abs(a_cm), 1e-30))
        psrr = 20 * np.log10(np.abs(loop.gain) / np.maximum(np.abs(a_dd), 1e-30))
    nan = np.full(len(build.supply_current), np.nan)
    peak_source, peak_sink = build.metrics.get("peak_source_a", nan), build.metrics.get("peak_sink_a", nan)
    if np.isfinite(cond.r_load) and "out_high_v" in build.metrics:
        # The load line: the output cannot go further from the common mode than the peak current through
        # the load resistor allows.
        limits = build.metrics
        limits["out_high_v"] = np.fmin(limits["out_high_v"], cond.v_cm + peak_source * cond.r_load)
        limits["out_low_v"] = np.fmax(limits["out_low_v"], cond.v_cm - peak_sink * cond.r_load)
        limits["swing_v"] = limits["out_high_v"] - limits["out_low_v"]
    gate_area = sum(d.w * d.l for d in build.devices)
    cap_area = sum(e.value for e in build.elements if e.kind == "C") / tech.cap_density
    sat = {f"sat_{d.role}_v": d.vds - d.op.vdsat for d in build.devices}
    # Headroom a topology budgets for parts it draws as ideal sources counts like a device's.
    sat.update({k: v for k, v in build.metrics.items() if k.startswith("sat_")})
    metrics = {
        "gain_db": 20 * np.log10(np.maximum(np.abs(loop.gain), 1e-30)),
        "gbw_hz": loop.gbw,
        "phase_margin_deg": loop.phase_margin,
        "gain_margin_db": loop.gain_margin,
        "rhp_poles": loop.rhp_poles,
        # Low-frequency rejection ratios of the ideal (unmismatched) circuit.
        "cmrr_db": cmrr,
        "psrr_db": psrr,
        "output_resistance_ohm": r_out,
        "peak_out_a": np.minimum(peak_source, peak_sink),
        "power_w": cond.vdd * build.supply_current,
        "supply_current_a": build.supply_current,
        "area_um2": (gate_area + cap_area) * 1e12,
        "min_width_ratio": np.min([d.w / tech.w_min for d in build.devices], axis=0),
        "sat_min_v": np.min(list(sat.values()), axis=0),
        "dc_residual": node_imbalance(build),
        **build.metrics,
        **noise,
        **sat,
    }
    return metrics, build
