"""Two-stage Miller op-amp: nMOS differential input pair with pMOS mirror load, pMOS common-source second
stage with an nMOS current sink, Miller capacitor with a nulling resistor, and an nMOS diode bias branch
fed by a reference current.

Sizing is by gm/ID per device group; the DC operating point is then solved from the sized widths (mirror
ratios with channel-length modulation, body effect on the input pair), so currents and voltages are what a
simulator will find, not what the sizing assumed.
"""

from __future__ import annotations

import numpy as np

from .insight import gbw_dominant_pole
from .base import Build, Conditions, Device, Element, Variable, gm_id_variable, length_variable, snap_length
from .process.base import Technology, diode_vgs


class TwoStageMiller:
    name = "two_stage_miller"
    title = "Two-stage Miller"
    prefix = "tsm"

    def variables(self, tech: Technology) -> tuple[Variable, ...]:
        return (
            Variable("i_tail", 0.5e-6, 1e-3, "A", log=True, doc="input-pair tail current"),
            Variable("i_out", 1e-6, 5e-3, "A", log=True, doc="second-stage current"),
            Variable("bias_ratio", 1.0, 8.0, "1", doc="tail current / reference current"),
            gm_id_variable("gmid_in", tech, "gm/ID of the input pair"),
            length_variable("l_in", tech, "input pair length"),
            gm_id_variable("gmid_load", tech, "gm/ID of the mirror load"),
            length_variable("l_load", tech, "mirror load length"),
            gm_id_variable("gmid_bias", tech, "gm/ID of the nMOS bias group (diode, tail, sink)"),
            length_variable("l_bias", tech, "nMOS bias group length"),
            length_variable("l_drv", tech, "second-stage pMOS driver length"),
            Variable("cc", 50e-15, 20e-12, "F", log=True, doc="Miller capacitor"),
            Variable("rz_gm", 0.5, 4.0, "1", doc="nulling resistor times the driver's gm"),
        )

    def build(self, x, tech: Technology, cond: Conditions) -> Build:
        vdd, vcm = cond.vdd, cond.v_cm
        zero = np.zeros_like(x["i_tail"])
        l_in, l_load = snap_length(x["l_in"], tech), snap_length(x["l_load"], tech)
        l_bias, l_drv = snap_length(x["l_bias"], tech), snap_length(x["l_drv"], tech)
        i_tail, i_out = x["i_tail"], x["i_out"]
        i_ref = i_tail / x["bias_ratio"]

        # --- sizing: widths from gm/ID at the intended bias ---------------------------------------------
        w_ref, vgs_b = tech.size("n", x["gmid_bias"], l_bias, i_ref, zero + 0.6, zero)
        w_ref, vgs_b = tech.size("n", x["gmid_bias"], l_bias, i_ref, vgs_b, zero)
        w_tail, w_sink = w_ref * i_tail / i_ref, w_ref * i_out / i_ref
        w_load, vsg3 = tech.size("p", x["gmid_load"], l_load, i_tail / 2, zero + 0.6, zero)
        w_load, vsg3 = tech.size("p", x["gmid_load"], l_load, i_tail / 2, vsg3, zero)
        vs = zero + vcm - 0.6
        for _ in range(3):
            w_in, vgs1 = tech.size("n", x["gmid_in"], l_in, i_tail / 2, vdd - vsg3 - vs, vs)
            vs = vcm - vgs1
        # Driver width mirrors the load's VSG so the input sees no systematic offset.
        w_drv = i_out / tech.current("p", 1.0, l_drv, vsg3, vdd - vcm, zero)

        # --- DC operating point from the sized circuit ----------------------------------------------------
        vgs_b = diode_vgs(tech, "n", w_ref, l_bias, i_ref)
        i_sink = tech.current("n", w_sink, l_bias, vgs_b, zero + vcm, zero)
        vsg6 = tech.vgs_for_current("p", w_drv, l_drv, i_sink, vdd - vcm, zero)
        i5, i1 = i_tail, i_tail / 2
        for _ in range(4):
            i5 = tech.current("n", w_tail, l_bias, vgs_b, np.maximum(vs, 1e-3), zero)
            vsg3 = diode_vgs(tech, "p", w_load, l_load, i1)
            ratio = (tech.current("p", w_load, l_load, vsg3, vsg6, zero)
                     / tech.current("p", w_load, l_load, vsg3, vsg3, zero))
            i1 = i5 / (1 + ratio)
            vgs1 = tech.vgs_for_current("n", w_in, l_in, i1, vdd - vsg3 - vs, vs)
            vs = vcm - vgs1
        i2 = i5 - i1
        vds1, vds2 = vdd - vsg3 - vs, vdd - vsg6 - vs
        vgs2 = tech.vgs_for_current("n", w_in, l_in, i2, vds2, vs)

        def dev(role, pol, nodes, w, l, vgs, vds, vsb):
            return Device(role, pol, nodes, w, l, vgs, vds, vsb, tech.operating_point(pol, w, l, vgs, vds, vsb))

        devices = [
            dev("input_pair_a", "n", ("mir", "inn", "tail", "vss"), w_in, l_in, vgs1, vds1, vs),
            dev("input_pair_b", "n", ("o1", "inp", "tail", "vss"), w_in, l_in, vgs2, vds2, vs),
            dev("mirror_diode", "p", ("mir", "mir", "vdd", "vdd"), w_load, l_load, vsg3, vsg3, zero),
            dev("mirror_out", "p", ("o1", "mir", "vdd", "vdd"), w_load, l_load, vsg3, vsg6, zero),
            dev("tail_source", "n", ("tail", "nb", "vss", "vss"), w_tail, l_bias, vgs_b, vs, zero),
            dev("output_driver", "p", ("out", "o1", "vdd", "vdd"), w_drv, l_drv, vsg6, vdd - vcm + zero, zero),
            dev("output_sink", "n", ("out", "nb", "vss", "vss"), w_sink, l_bias, vgs_b, vcm + zero, zero),
            dev("bias_diode", "n", ("nb", "nb", "vss", "vss"), w_ref, l_bias, vgs_b, vgs_b, zero),
        ]
        gm6 = devices[5].op.gm
        cc = x["cc"]
        elements = [
            Element("R", "nulling_resistor", "o1", "cz", x["rz_gm"] / gm6),
            Element("C", "miller_cap", "cz", "out", cc),
            Element("I", "bias_reference", "vdd", "nb", i_ref),
        ]
        op = {d.role: d for d in devices}
        metrics = {
            "slew_v_per_us": np.minimum(i5 / cc, i_sink / (cc + cond.c_load)) * 1e-6,
            "out_high_v": vdd - op["output_driver"].op.vdsat,
            "out_low_v": op["output_sink"].op.vdsat,
            "cm_low_v": op["tail_source"].op.vdsat + vgs1,
            "cm_high_v": vdd - vsg3 + op["input_pair_a"].op.vth,
            "offset_sys_v": vgs2 - vgs1,
            "gbw_hand_hz": gbw_dominant_pole(op["input_pair_b"].op.gm, cc),
        }
        metrics["swing_v"] = metrics["out_high_v"] - metrics["out_low_v"]
        return Build(devices, elements, i_ref + i5 + i_sink, metrics)
