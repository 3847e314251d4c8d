"""The generic evaluator: from a topology's Build to every metric, vectorized over the population."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from .base import Build, Conditions, Topology
from .catalog import M, is_headroom
from .errors import PluginError
from .process.base import Technology
from . import kernels, quarantine_kernels
from .kcl import node_imbalance
from .noise import noise_metrics
from .smallsignal import Circuit, loop_metrics
from .application import network_noise_resistance
from .geometry import Recording
from .stability import input_coupling, stability_from_circuits
from .step_ends import step_edges


# What the AC source moves in each measurement: the differential (open-loop) gain drives inp with inn held
# at AC ground by the DC feedback path, as the testbench does; common mode drives both inputs; supply
# rejection drives vdd with both inputs still.
DRIVES = {"differential": ("inp", ("inn",)), "common_mode": (("inp", "inn"), ()), "supply": ("vdd", ("inp", "inn"))}


def small_signal(build: Build, cond: Conditions, mode: str = "differential", singular=None) -> Circuit:
    """The Build's small-signal circuit driven as `mode` says. `singular`: the designs whose node block
    (G without the driven column) is exactly singular, from another mode's circuit of the same Build and
    conditions: the drive changes only the last row and column, so the block and its determinant are the
    same (`Circuit.block_singular`)."""
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
    _quarantine(circuit, singular)
    return circuit


MAX_CONDUCTANCE = 1e3   # S
# Share of a design's peak source (sink) current its output may drive into a resistive load before the
# linear range ends. Measured in ngspice over the 80 two-stage front designs of the ladder demo: the DC sweep's
# gain collapses where the load takes about 0.82 of the sink current (the driver starves); 0.75 keeps every
# design inside the check's slack and conservative at the median (DEVELOPERS.md, campaign).
LOAD_LINE_SHARE = 0.75
MAX_CAPACITANCE = 1.0   # F


def _unusable(a: np.ndarray, size: int, limit: float) -> np.ndarray:
    """Designs whose leading size x size block of `a` holds NaN, inf or a magnitude beyond `limit`."""
    if kernels.enabled():
        return quarantine_kernels.unusable_rows(a, size, limit)
    block = a[:, :size, :size]
    with np.errstate(invalid="ignore"):
        # Rows holding NaN or inf are caught by isfinite; on the others the plain maximum decides.
        return ~np.isfinite(block).all(axis=(1, 2)) | (np.abs(block).max(axis=(1, 2)) > limit)


def _quarantine(circuit: Circuit, singular=None) -> None:
    """Designs whose circuit holds NaN or inf (a dead or off-table device) get a harmless identity circuit,
    so one of them cannot stop LAPACK for the whole population; `evaluate` marks them NaN afterwards."""
    # Beyond a kilosiemens or a farad nothing is an integrated amplifier: such values come from design
    # vectors far outside the search box and only make LAPACK see singular matrices.
    n, size = len(circuit.nodes), circuit.G.shape[1]
    bad = _unusable(circuit.G, size, MAX_CONDUCTANCE) | _unusable(circuit.C, size, MAX_CAPACITANCE)
    if singular is None:
        # Judged on the node block alone (identity where the block itself is unusable), so every mode of
        # the same circuit can take it over: a design this mode keeps has a usable block, read as it is.
        block = circuit.G[:, :n, :n]
        unusable = _unusable(circuit.G, n, MAX_CONDUCTANCE)
        sign, _ = np.linalg.slogdet(np.where(unusable[:, None, None], np.eye(n), block))
        singular = sign == 0
    circuit.block_singular = singular
    bad |= singular
    circuit.quarantined = bad
    if bad.any():
        circuit.G[bad] = np.eye(circuit.G.shape[1])
        circuit.C[bad] = 0.0


def evaluate(topology: Topology, x: dict[str, np.ndarray], tech: Technology, cond: Conditions,
             step: bool = False):
    """Return (metrics, build): metrics maps names to arrays of shape (designs,). `step` adds the
    closed loop's small-step overshoot and settling time (the search leaves them out; outputs ask)."""
    # The application's feedback network loads the output (Rf + Rg to the reference, beside the load
    # resistor: in the small-signal circuit, the load line and a class-AB stage's load current) and adds
    # its Thevenin resistance's thermal noise at the inverting input.
    r_noise = network_noise_resistance(cond.r_network, cond.beta)
    # A settling spec or objective needs the step response of every design the search sees; the outputs
    # (step=True) want it wherever the study states an application.
    settles = cond.settling or (step and cond.applied)
    # A stated output step is settled edge by edge, each at the operating point of the level it ends at
    # (topologies.step_ends); a small step (step_v = 0) at the quiescent point.
    by_edge = settles and cond.step_v > 0
    cond = cond.network_loaded()
    # Dead or off-table devices give inf/NaN for their designs only; the search reads those as violations.
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        recording = Recording(tech)
        build = topology.build(x, recording, cond)
        circuit = small_signal(build, cond)
        loop = loop_metrics(circuit, "out")
        noise = noise_metrics(circuit, build, tech, loop.gain, cond.noise_band, cond.noise_spots, r_noise)
        # Open-loop output resistance, inputs at AC ground, without the load resistor.
        unloaded = circuit if not np.isfinite(cond.r_load) else small_signal(build, replace(cond, r_load=np.inf))
        r_out = unloaded.transimpedance("out")("out")
        common = small_signal(build, cond, "common_mode", circuit.block_singular)
        supply = small_signal(build, cond, "supply", circuit.block_singular)
        a_cm, a_dd = common.dc_gain("out"), supply.dc_gain("out")
        unsolved = circuit.quarantined | unloaded.quarantined | common.quarantined | supply.quarantined
        reported = _reported(topology, build)
        peak_source, peak_sink = reported["peak_source_a"], reported["peak_sink_a"]
        out_high, out_low = reported.pop("out_high_v"), reported.pop("out_low_v")
        if np.isfinite(cond.r_load):
            # The load line: the output cannot go further from the common mode than the peak current through
            # the load resistor allows, and less far than all of it: the device that provides the gain is
            # left with the rest, and the gain collapses before it is starved.
            out_high = np.fmin(out_high, cond.v_cm + LOAD_LINE_SHARE * peak_source * cond.r_load)
            out_low = np.fmax(out_low, cond.v_cm - LOAD_LINE_SHARE * peak_sink * cond.r_load)
        # The stated step swings the output by half of it either side of the common mode; an end beyond the
        # linear swing (typically the network's load current outgrowing the output's sink) is never reached
        # with the loop's gain, so that step does not settle there.
        reach = (cond.v_cm - 0.5 * cond.step_v >= out_low) & (cond.v_cm + 0.5 * cond.step_v <= out_high)
        quiescent_step = settles and not by_edge
        settle = (reported.get("slew_v_per_s"), cond.step_v, cond.settle_band, reach) if quiescent_step else None
        # The network's pole at inn sees the input devices' gate row, each capacitance to the node it goes to.
        coupling = input_coupling(build, circuit.nodes) if r_noise > 0 else None
        stability = _stability(circuit, common, loop, cond.beta, step, settle, r_noise, cond.inverting, coupling)
        if by_edge:
            def circuits(built, at):
                differential = small_signal(built, at)
                return (differential, small_signal(built, at, "common_mode", differential.block_singular),
                        input_coupling(built, differential.nodes) if r_noise > 0 else None)

            # Only designs whose open loop works have stability figures (_stability); the rest read NaN. A loop
            # unstable at the quiescent point never settles; only the stable ones are solved at the step's ends.
            stable = stability["cl_stable"] == 1.0
            edges = step_edges(topology, x, tech, cond, build, recording.widths, circuit, reported, circuits,
                               r_noise, reach, np.flatnonzero(stable))
            unstable = stability["cl_stable"] == 0.0
            edges = {k: np.where(unstable, np.inf if k == M.step_settling_s else np.nan, v) for k, v in edges.items()}
            stability.update(edges)
        cmrr = 20 * np.log10(np.abs(loop.gain) / np.maximum(np.abs(a_cm), 1e-30))
        psrr = 20 * np.log10(np.abs(loop.gain) / np.maximum(np.abs(a_dd), 1e-30))
    designs = len(build.supply_current)
    layout = tech.layout
    device_area = sum(layout.device_area(d.w, d.l) for d in build.devices)
    cap_area = sum(e.value for e in build.elements if e.kind == "C") / tech.cap_density
    res_area = sum(layout.resistor_area(e.value) for e in build.elements if e.kind == "R")
    references = [e.value for e in build.elements if e.kind == "I"]
    bias_current = sum(references) if references else np.zeros(designs)
    sat = {f"sat_{d.role}_v": d.vds - d.op.vdsat for d in build.devices}
    # Headroom a topology budgets for parts it draws as ideal sources counts like a device's.
    sat.update({k: reported.pop(k) for k in list(reported) if is_headroom(k)})
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
        "area_m2": device_area + cap_area + res_area,
        "max_device_width_m": np.max([d.w for d in build.devices], axis=0),
        "bias_share": bias_current / build.supply_current,
        "reference_ratio": (np.min(references, axis=0) / layout.min_reference_current if references
                            else np.full(designs, np.inf)),
        "min_width_ratio": np.min([d.w / tech.w_min for d in build.devices], axis=0),
        "sat_min_v": np.min(list(sat.values()), axis=0),
        "dc_residual": node_imbalance(build),
        "out_high_v": out_high,
        "out_low_v": out_low,
        "swing_v": out_high - out_low,
        **reported,
        **noise,
        **stability,
        **sat,
    }
    if unsolved.any():
        # Only what the small-signal solve gives is unknown for them; power, area and headroom still tell
        # the search how far such a design is from a working one.
        small = ("gain_db", "gbw_hz", "phase_margin_deg", "gain_margin_db", "rhp_poles", "cmrr_db", "psrr_db",
                 "output_resistance_ohm", *noise, *stability)
        metrics.update({k: np.where(unsolved, np.nan, metrics[k]) for k in small})
    return metrics, build


def _stability(circuit: Circuit, common: Circuit, loop, beta: float, step: bool,
               settle=None, r_source: float = 0.0, inverting: bool = False,
               coupling=None) -> dict[str, np.ndarray]:
    """Stability figures for the designs whose open loop is a working amplifier (finite gain, crossover and
    margin, no right-half-plane pole); the rest fail those constraints already and read NaN here. Each
    design's figures depend on its own circuit only, so the split changes no result."""
    rows = np.flatnonzero(np.isfinite(loop.gain) & np.isfinite(loop.gbw) & np.isfinite(loop.phase_margin)
                          & (loop.rhp_poles == 0))
    if loop.modal is None or len(rows) == len(loop.gain):
        eigen = (loop.modal.lam, loop.modal.vectors) if loop.modal is not None else None
        return stability_from_circuits(circuit, common, beta, step=step, eigen=eigen, settle=settle,
                                       r_source=r_source, inverting=inverting, coupling=coupling)
    if settle is not None:
        settle = (np.asarray(settle[0], float)[rows], *settle[1:3], np.asarray(settle[3])[rows])
    part = stability_from_circuits(circuit.subset(rows), common.subset(rows), beta, step=step,
                                   eigen=(loop.modal.lam[rows], loop.modal.vectors[rows]), settle=settle,
                                   r_source=r_source, inverting=inverting,
                                   coupling=None if coupling is None else tuple(v[rows] for v in coupling))
    full = {}
    for name, values in part.items():
        full[name] = np.full(len(loop.gain), np.nan)
        full[name][rows] = values
    return full


def _reported(topology: Topology, build: Build) -> dict[str, np.ndarray]:
    """The topology's own figures, held to what it declared: a plug-in that drops one is named, not a KeyError
    three modules later."""
    got = dict(build.metrics)
    declared = set(topology.reports)
    missing = sorted(name for name in declared if name not in got)
    if missing:
        raise PluginError(f"topology '{topology.name}' declares but did not report the metric '{missing[0]}'")
    extra = sorted(name for name in got if name not in declared and not is_headroom(name))
    if extra:
        raise PluginError(f"topology '{topology.name}' reported '{extra[0]}', which it does not declare in 'reports'")
    return got
