"""Telescopic cascode OTA: nMOS input pair under nMOS cascodes, a wide-swing pMOS cascode mirror load,
nMOS tail source, and the bias network: the nMOS diode reference plus two diode branches that set the
cascode gates. One high-impedance node (the output), gain of order (gm ro)^2, and the tightest headroom
of the family: every device of the stack must stay saturated between the rails.
"""

from __future__ import annotations

import numpy as np

from .catalog import CORE_REPORTS
from .base import Build, Conditions, Element, Variable, snap_length
from .process.base import Technology
from .stages import (BiasBranch, CASCODE_ITERATIONS, GateGenerator, cascode_variables, device, pair_offset_sigma,
                     pair_variables)


class TelescopicCascode:
    name = "telescopic_cascode"
    title = "Telescopic cascode OTA"
    prefix = "tel"
    single_stage = True
    reports = CORE_REPORTS

    def variables(self, tech: Technology) -> tuple[Variable, ...]:
        return pair_variables(tech) + cascode_variables(tech, "VDS above Vdsat given to the input pair and mirror top")

    def build(self, x, tech: Technology, cond: Conditions) -> Build:
        vdd, vcm, vout = cond.vdd, cond.v_cm, cond.out_level
        zero = np.zeros_like(x["i_tail"])
        bias = BiasBranch.sized(tech, x)
        half = x["i_tail"] / 2
        l_in, l_top = snap_length(x["l_in"], tech), snap_length(x["l_load"], tech)
        l_cn, l_cp = snap_length(x["l_casn"], tech), snap_length(x["l_casp"], tech)
        margin = x["headroom"]

        # --- sizing ----------------------------------------------------------------------------------
        vs = zero + vcm - 0.6
        for _ in range(3):
            w_in, vgs1 = tech.size("n", x["gmid_in"], l_in, half, zero + 0.3, vs)
            vs = vcm - vgs1
        vd_in = vs + 2.0 / x["gmid_in"] + margin           # input-pair drains: Vdsat ~ 2/(gm/ID) above
        w_cn, vgs_cn = tech.size("n", x["gmid_casn"], l_cn, half, vcm - vd_in, vd_in)
        vbn_target = vd_in + vgs_cn
        w_top, vsg_top = tech.size("p", x["gmid_load"], l_top, half, 2.0 / x["gmid_load"] + margin, zero)
        vp_top = vdd - (2.0 / x["gmid_load"] + margin)       # mirror-top drains
        w_cp, vsg_cp = tech.size("p", x["gmid_casp"], l_cp, half, vp_top - vcm, vdd - vp_top)
        vbp_target = vp_top - vsg_cp
        # Cascode gate generators: diodes fed from the reference, sized to land on the targets.
        gen_n = GateGenerator.sized(tech, "n", l_cn, vbn_target, bias.i_ref)
        gen_p = GateGenerator.sized(tech, "p", l_cp, vdd - vbp_target, bias.i_ref)

        # --- DC operating point from the sized circuit --------------------------------------------------
        vbn, vbp = gen_n.vgs, vdd - gen_p.vgs
        vs, xd, i5 = zero + vcm - 0.6, vd_in, x["i_tail"]
        pa, mirc = vp_top, vdd - vsg_top
        xb, pb, i1, i2 = xd, pa, half, half
        for _ in range(CASCODE_ITERATIONS):
            _, i5 = bias.source(tech, "tail_source", "tail", x["i_tail"], np.maximum(vs, 1e-3))
            vgs1 = tech.vgs_for_current("n", w_in, l_in, i1, np.maximum(xd - vs, 1e-3), vs)
            vs = vcm - vgs1
            xd = vbn - tech.vgs_for_current("n", w_cn, l_cn, i1, np.maximum(mirc - xd, 1e-3), xd)
            vsg_t = tech.vgs_for_current("p", w_top, l_top, i1, np.maximum(vdd - pa, 1e-3), zero)
            mirc = vdd - vsg_t
            pa = vbp + tech.vgs_for_current("p", w_cp, l_cp, i1, np.maximum(pa - mirc, 1e-3), vdd - pa)
            # Output side, held at its DC level by the loop (or by the stage it drives): the mirror copy
            # sets the branch current and the input pair's split (an input offset) follows it.
            i_top_b = tech.current("p", w_top, l_top, vsg_t, np.maximum(vdd - pb, 1e-3), zero)
            pb = vbp + tech.vgs_for_current("p", w_cp, l_cp, i_top_b, np.maximum(pb - vout, 1e-3), vdd - pb)
            xb = vbn - tech.vgs_for_current("n", w_cn, l_cn, i2, np.maximum(vout - xb, 1e-3), xb)
            i2 = 0.5 * i2 + 0.5 * np.clip(i_top_b + cond.i_out, 1e-3 * i5, (1 - 1e-3) * i5)
            i1 = i5 - i2
        vgs2 = tech.vgs_for_current("n", w_in, l_in, i2, np.maximum(xb - vs, 1e-3), vs)
        vsd_right = pb - vout

        def dev(role, pol, nodes, w, l, vgs, vds, vsb):
            return device(tech, role, pol, nodes, w, l, vgs, vds, vsb)

        devices = [
            dev("input_pair_a", "n", ("xa", "inp", "tail", "vss"), w_in, l_in, vgs1, xd - vs, vs),
            dev("input_pair_b", "n", ("xb", "inn", "tail", "vss"), w_in, l_in, vgs2, xb - vs, vs),
            dev("cascode_n_a", "n", ("mirc", "vbn", "xa", "vss"), w_cn, l_cn, vbn - xd, mirc - xd, xd),
            dev("cascode_n_b", "n", ("out", "vbn", "xb", "vss"), w_cn, l_cn, vbn - xb, vout - xb, xb),
            dev("mirror_top_a", "p", ("pa", "mirc", "vdd", "vdd"), w_top, l_top, vsg_t, vdd - pa, zero),
            dev("mirror_top_b", "p", ("pb", "mirc", "vdd", "vdd"), w_top, l_top, vsg_t, vdd - pb, zero),
            dev("cascode_p_a", "p", ("mirc", "vbp", "pa", "vdd"), w_cp, l_cp, pa - vbp, pa - mirc, vdd - pa),
            dev("cascode_p_b", "p", ("out", "vbp", "pb", "vdd"), w_cp, l_cp, pb - vbp, vsd_right, vdd - pb),
        ]
        tail, _ = bias.source(tech, "tail_source", "tail", x["i_tail"], vs)
        devices += [
            tail,
            bias.diode(tech),
            dev("cascode_bias_n", "n", ("vbn", "vbn", "vss", "vss"), gen_n.w, gen_n.l, vbn, vbn, zero),
            dev("cascode_bias_p", "p", ("vbp", "vbp", "vdd", "vdd"), gen_p.w, gen_p.l, vdd - vbp, vdd - vbp, zero),
        ]
        elements = [
            Element("I", "bias_reference", "vdd", "nb", bias.i_ref),
            Element("I", "cascode_n_reference", "vdd", "vbn", gen_n.i),
            Element("I", "cascode_p_reference", "vbp", "vss", gen_p.i),
        ]
        op = {d.role: d for d in devices}
        gm_in, gm_top = op["input_pair_a"].op.gm, op["mirror_top_a"].op.gm
        # Slewing moves the output node with its own drain junctions and the cascodes' gate-drain overlaps
        # (their gates sit at bias levels), not C_L alone.
        c_out = cond.c_load + sum(op[r].op.cdb + op[r].op.cgd for r in ("cascode_p_b", "cascode_n_b"))
        metrics = {
            "slew_v_per_s": i5 / c_out,
            "peak_source_a": i5,
            "peak_sink_a": i5,
            "out_high_v": pb - op["cascode_p_b"].op.vdsat - tech.saturation_guard,
            "out_low_v": xb + op["cascode_n_b"].op.vdsat + tech.saturation_guard,
            "cm_low_v": tail.op.vdsat + vgs1,
            "cm_high_v": xd + op["input_pair_a"].op.vth,
            "offset_sys_v": vgs2 - vgs1,
            "offset_sigma_v": pair_offset_sigma(tech, w_in, l_in, w_top, l_top, gm_in, gm_top),
        }
        # The supply feeds the tail through the mirror, less what the following stage pushes into out.
        return Build(devices, elements, bias.i_ref + i5 - cond.i_out + gen_n.i + gen_p.i, metrics)
