"""Two-stage Miller op-amp: nMOS differential input pair with pMOS mirror load, pMOS common-source second
stage with an nMOS current sink, Miller capacitor with a nulling resistor, and an nMOS diode bias branch
fed by a reference current.

Sizing is by gm/ID per device group; the DC operating point is then solved from the sized widths (mirror
ratios with channel-length modulation, body effect on the input pair), so currents and voltages are what a
simulator will find, not what the sizing assumed.
"""

from __future__ import annotations

import numpy as np

from .catalog import CORE_REPORTS
from .base import Build, Conditions, Element, Variable, length_variable, snap_length
from .insight import gbw_dominant_pole
from .process.base import Technology
from .stages import BiasBranch, MirrorPair, device, pair_variables


class TwoStageMiller:
    name = "two_stage_miller"
    title = "Two-stage Miller"
    prefix = "tsm"
    single_stage = False   # two high-impedance nodes: an output stage would need nested compensation
    reports = CORE_REPORTS | {"gbw_hand_hz"}

    def variables(self, tech: Technology) -> tuple[Variable, ...]:
        return pair_variables(tech) + (
            Variable("i_out", 1e-6, 5e-3, "A", log=True, doc="second-stage current"),
            length_variable("l_drv", tech, "second-stage pMOS driver length"),
            Variable("cc", 50e-15, 20e-12, "F", log=True, doc="Miller capacitor"),
            Variable("rz_gm", 0.5, 4.0, "1", doc="nulling resistor times the driver's gm"),
        )

    def build(self, x, tech: Technology, cond: Conditions) -> Build:
        vdd, vcm, vout = cond.vdd, cond.v_cm, cond.out_level
        zero = np.zeros_like(x["i_tail"])
        bias = BiasBranch.sized(tech, x)
        pair = MirrorPair.sized(tech, x, vdd, vcm)
        l_drv = snap_length(x["l_drv"], tech)
        # Driver width mirrors the load's VSG so the input sees no systematic offset.
        w_drv = tech.quantize_width(x["i_out"] / tech.current("p", 1.0, l_drv, pair.vsg_load, vdd - vcm, zero))

        sink, i_sink = bias.source(tech, "output_sink", "out", x["i_out"], vout + zero)
        # What follows the output (a load current at a step's end) takes its share of the sink's current.
        i_drv = i_sink - cond.i_out
        vsg6 = tech.vgs_for_current("p", w_drv, l_drv, i_drv, vdd - vout + zero, zero)
        first, fig = pair.solve(tech, bias, x["i_tail"], vdd, vcm, vdd - vsg6, inverting_after=True)
        driver = device(tech, "output_driver", "p", ("out", "o1", "vdd", "vdd"), w_drv, l_drv, vsg6,
                        vdd - vout + zero, zero)
        devices = first + [driver, sink, bias.diode(tech)]
        cc = x["cc"]
        elements = [
            Element("R", "nulling_resistor", "o1", "cz", x["rz_gm"] / driver.op.gm),
            Element("C", "miller_cap", "cz", "out", cc),
            Element("I", "bias_reference", "vdd", "nb", bias.i_ref),
        ]
        # Across a stated output step the driver's gate moves too, k volts for each volt of output: the
        # driver's current follows the load and both output devices' drain voltages. The tail current then
        # also charges the gate node, and the Miller capacitor sees (1 + k) of the output's slope (ngspice:
        # a SKY130 two-stage whose gate moved 0.14 V over a 1 V step slewed at 0.79 of i_tail / C_c).
        k = _gate_travel(tech, driver, sink, cond)
        c_gate = driver.op.cgs + first[1].op.cdb + first[3].op.cdb
        metrics = {
            # While slewing the driver's gate swings with the Miller capacitor, so its gate-drain overlap
            # takes part of the tail current with it; the output's own junctions load the sink beside C_L.
            "slew_v_per_s": np.minimum(fig["i_tail"] / ((cc + driver.op.cgd) * (1 + k) + c_gate * k),
                                       i_sink / (cc + driver.op.cgd + cond.c_load + driver.op.cdb + sink.op.cdb)),
            # The driver's gate can fall to where the first stage's output device leaves saturation.
            "peak_source_a": tech.current("p", w_drv, l_drv, vdd - (vcm - fig["vgs_in"] + first[1].op.vdsat),
                                          vdd - vout + zero, zero) - i_sink,
            "peak_sink_a": i_sink,
            "out_high_v": vdd - driver.op.vdsat - tech.saturation_guard,
            "out_low_v": sink.op.vdsat + tech.saturation_guard,
            "cm_low_v": fig["cm_low_v"],
            "cm_high_v": fig["cm_high_v"],
            "offset_sys_v": fig["offset_sys_v"],
            "offset_sigma_v": fig["offset_sigma_v"],
            "gbw_hand_hz": gbw_dominant_pole(first[1].op.gm, cc),
        }
        return Build(devices, elements, bias.i_ref + fig["i_tail"] + i_drv, metrics)


def _gate_travel(tech: Technology, driver, sink, cond: Conditions) -> np.ndarray:
    """Volts the driver's gate moves per volt of output across the stated step (0 without one): the gate
    level that carries the sink's current plus the load's at either end of the step."""
    zero = np.zeros_like(driver.w)
    if not cond.step_v > 0:
        return zero
    g_load = 1.0 / cond.r_load if np.isfinite(cond.r_load) else 0.0
    vdd, level = cond.vdd, cond.out_level
    gate = []
    for v in (level - 0.5 * cond.step_v, level + 0.5 * cond.step_v):
        i_sink = tech.current("n", sink.w, sink.l, sink.vgs, zero + v, zero)
        i_drv = i_sink - cond.i_out + g_load * (v - level)
        gate.append(tech.vgs_for_current("p", driver.w, driver.l, i_drv, zero + vdd - v, zero))
    k = np.abs(gate[1] - gate[0]) / cond.step_v
    # An end the driver cannot hold has no gate level; that step does not settle (evaluate's reach).
    return np.where(np.isfinite(k), k, 0.0)
