"""Folded cascode OTA: nMOS input pair folding into pMOS current sources, pMOS cascodes carrying the signal
down to a wide-swing nMOS cascode mirror, nMOS tail source, and a bias network of diode branches for the
source and cascode gates. Input common mode can reach the upper rail; the price is the extra branch
current the folding sources carry.
"""

from __future__ import annotations

import numpy as np

from .catalog import CORE_REPORTS
from .base import Build, Conditions, Element, Variable, gm_id_variable, length_variable, snap_length
from .process.base import Technology
from .stages import (BiasBranch, CASCODE_ITERATIONS, GateGenerator, cascode_variables, device, pair_mismatch,
                     pair_variables)


class FoldedCascode:
    name = "folded_cascode"
    title = "Folded cascode OTA"
    prefix = "fcs"
    single_stage = True
    reports = CORE_REPORTS

    def variables(self, tech: Technology) -> tuple[Variable, ...]:
        return pair_variables(tech) + (
            # Down to a twentieth: a micropower folded cascode starves its output branch to save current
            # (0.3 was a box the fronts piled against).
            Variable("fold_ratio", 0.05, 2.0, "1", log=True, doc="cascode-branch current / half the tail current"),
            gm_id_variable("gmid_src", tech, "gm/ID of the pMOS folding sources"),
            length_variable("l_src", tech, "pMOS folding source length"),
        ) + cascode_variables(tech, "VDS above Vdsat given to the sources and mirror bottom")

    def build(self, x, tech: Technology, cond: Conditions) -> Build:
        vdd, vcm, vout = cond.vdd, cond.v_cm, cond.out_level
        zero = np.zeros_like(x["i_tail"])
        bias = BiasBranch.sized(tech, x)
        half = x["i_tail"] / 2
        i_cas_t = half * x["fold_ratio"]
        i_src_t = half + i_cas_t
        l_in, l_mb = snap_length(x["l_in"], tech), snap_length(x["l_load"], tech)
        l_src, l_cp, l_cn = (snap_length(x[k], tech) for k in ("l_src", "l_casp", "l_casn"))
        margin = x["headroom"]

        # --- sizing ----------------------------------------------------------------------------------
        fa_t = vdd - (2.0 / x["gmid_src"] + margin)
        vs = zero + vcm - 0.6
        for _ in range(3):
            w_in, vgs1 = tech.size("n", x["gmid_in"], l_in, half, np.maximum(fa_t - vs, 0.05), vs)
            vs = vcm - vgs1
        w_src, vsg_src = tech.size("p", x["gmid_src"], l_src, i_src_t, vdd - fa_t, zero)
        w_mb, vgs_mb = tech.size("n", x["gmid_load"], l_mb, i_cas_t, 2.0 / x["gmid_load"] + margin, zero)
        na_t = 2.0 / x["gmid_load"] + margin
        w_cn, vgs_cn = tech.size("n", x["gmid_casn"], l_cn, i_cas_t, np.maximum(vcm - na_t, 0.05), na_t)
        w_cp, vsg_cp = tech.size("p", x["gmid_casp"], l_cp, i_cas_t, np.maximum(fa_t - vgs_mb, 0.05), vdd - fa_t)
        targets = {"vbp1": vdd - vsg_src, "vbp2": fa_t - vsg_cp, "vbn": na_t + vgs_cn}
        gen_1 = GateGenerator.sized(tech, "p", l_src, vdd - targets["vbp1"], bias.i_ref)
        gen_2 = GateGenerator.sized(tech, "p", l_cp, vdd - targets["vbp2"], bias.i_ref)
        gen_n = GateGenerator.sized(tech, "n", l_cn, targets["vbn"], bias.i_ref)

        # --- DC operating point from the sized circuit --------------------------------------------------
        vbp1, vbp2, vbn = vdd - gen_1.vgs, vdd - gen_2.vgs, gen_n.vgs
        fa, na, mirc, vs = fa_t, na_t, vgs_mb, zero + vcm - 0.6
        fb, nb2, i1, i2 = fa, na, half, half
        for _ in range(CASCODE_ITERATIONS):
            _, i5 = bias.source(tech, "tail_source", "tail", x["i_tail"], np.maximum(vs, 1e-3))
            vgs1 = tech.vgs_for_current("n", w_in, l_in, i1, np.maximum(fa - vs, 1e-3), vs)
            vs = vcm - vgs1
            # Mirror side: the folding source minus the input device feeds the diode-connected stack.
            i_src = tech.current("p", w_src, l_src, vdd - vbp1, np.maximum(vdd - fa, 1e-3), zero)
            i_cas = np.maximum(i_src - i1, 1e-12)
            # Damped too: with a short-channel folding source near its edge the branch current swings with
            # fa, and the undamped step oscillates (seen in the pMOS-input complement on SKY130).
            fa = 0.5 * fa + 0.5 * (vbp2 + tech.vgs_for_current("p", w_cp, l_cp, i_cas, np.maximum(fa - mirc, 1e-3),
                                                              vdd - fa))
            mirc = tech.vgs_for_current("n", w_mb, l_mb, i_cas, np.maximum(na, 1e-3), zero)
            na = vbn - tech.vgs_for_current("n", w_cn, l_cn, i_cas, np.maximum(mirc - na, 1e-3), na)
            # Output side, held at its DC level by the loop (or the stage it drives): the mirror copy sets the
            # branch current, and the input pair's split (an input offset) balances the folding source.
            i_out = tech.current("n", w_mb, l_mb, mirc, np.maximum(nb2, 1e-3), zero)
            nb2 = vbn - tech.vgs_for_current("n", w_cn, l_cn, i_out, np.maximum(vout - nb2, 1e-3), nb2)
            i_cas_b = np.maximum(i_out - cond.i_out, 1e-12)
            fb = vbp2 + tech.vgs_for_current("p", w_cp, l_cp, i_cas_b, np.maximum(fb - vout, 1e-3), vdd - fb)
            i_src_b = tech.current("p", w_src, l_src, vdd - vbp1, np.maximum(vdd - fb, 1e-3), zero)
            # Damped: the split feeds back through both folding nodes and overshoots when taken whole.
            i2 = 0.5 * i2 + 0.5 * np.clip(i_src_b - i_cas_b, 1e-3 * i5, (1 - 1e-3) * i5)
            i1 = i5 - i2
        vgs2 = tech.vgs_for_current("n", w_in, l_in, i2, np.maximum(fb - vs, 1e-3), vs)

        def dev(role, pol, nodes, w, l, vgs, vds, vsb):
            return device(tech, role, pol, nodes, w, l, vgs, vds, vsb)

        vsg_cp = fa - vbp2
        vgs_cn = vbn - na
        devices = [
            dev("input_pair_a", "n", ("fa", "inp", "tail", "vss"), w_in, l_in, vgs1, fa - vs, vs),
            dev("input_pair_b", "n", ("fb", "inn", "tail", "vss"), w_in, l_in, vgs2, fb - vs, vs),
            dev("fold_source_a", "p", ("fa", "vbp1", "vdd", "vdd"), w_src, l_src, vdd - vbp1, vdd - fa, zero),
            dev("fold_source_b", "p", ("fb", "vbp1", "vdd", "vdd"), w_src, l_src, vdd - vbp1, vdd - fb, zero),
            dev("cascode_p_a", "p", ("mirc", "vbp2", "fa", "vdd"), w_cp, l_cp, vsg_cp, fa - mirc, vdd - fa),
            dev("cascode_p_b", "p", ("out", "vbp2", "fb", "vdd"), w_cp, l_cp, fb - vbp2, fb - vout, vdd - fb),
            dev("cascode_n_a", "n", ("mirc", "vbn", "na", "vss"), w_cn, l_cn, vgs_cn, mirc - na, na),
            dev("cascode_n_b", "n", ("out", "vbn", "nb2", "vss"), w_cn, l_cn, vbn - nb2, vout - nb2, nb2),
            dev("mirror_bottom_a", "n", ("na", "mirc", "vss", "vss"), w_mb, l_mb, mirc, na, zero),
            dev("mirror_bottom_b", "n", ("nb2", "mirc", "vss", "vss"), w_mb, l_mb, mirc, nb2, zero),
        ]
        tail, _ = bias.source(tech, "tail_source", "tail", x["i_tail"], vs)
        devices += [
            tail,
            bias.diode(tech),
            dev("source_bias", "p", ("vbp1", "vbp1", "vdd", "vdd"), gen_1.w, gen_1.l, vdd - vbp1, vdd - vbp1, zero),
            dev("cascode_bias_p", "p", ("vbp2", "vbp2", "vdd", "vdd"), gen_2.w, gen_2.l, vdd - vbp2, vdd - vbp2,
                zero),
            dev("cascode_bias_n", "n", ("vbn", "vbn", "vss", "vss"), gen_n.w, gen_n.l, vbn, vbn, zero),
        ]
        elements = [
            Element("I", "bias_reference", "vdd", "nb", bias.i_ref),
            Element("I", "source_reference", "vbp1", "vss", gen_1.i),
            Element("I", "cascode_p_reference", "vbp2", "vss", gen_2.i),
            Element("I", "cascode_n_reference", "vdd", "vbn", gen_n.i),
        ]
        op = {d.role: d for d in devices}
        gm_in, gm_src, gm_mb = (op[r].op.gm for r in ("input_pair_a", "fold_source_a", "mirror_bottom_a"))
        offset = np.sqrt(pair_mismatch(tech, "n", w_in, l_in) ** 2
                         + (gm_src / gm_in * pair_mismatch(tech, "p", w_src, l_src)) ** 2
                         + (gm_mb / gm_in * pair_mismatch(tech, "n", w_mb, l_mb)) ** 2)
        # Slewing moves the output node with its own drain junctions and the cascodes' gate-drain overlaps
        # (their gates sit at bias levels), not C_L alone.
        c_out = cond.c_load + sum(op[r].op.cdb + op[r].op.cgd for r in ("cascode_p_b", "cascode_n_b"))
        metrics = {
            "slew_v_per_s": np.minimum(i5, i_src) / c_out,
            # Fully steered, the output branch gets at most the smaller of tail and folding current.
            "peak_source_a": np.minimum(i5, i_src),
            "peak_sink_a": np.minimum(i5, i_src),
            "out_high_v": fb - op["cascode_p_b"].op.vdsat - tech.saturation_guard,
            "out_low_v": nb2 + op["cascode_n_b"].op.vdsat + tech.saturation_guard,
            "cm_low_v": tail.op.vdsat + vgs1,
            "cm_high_v": fa + op["input_pair_a"].op.vth,
            "offset_sys_v": vgs2 - vgs1,
            "offset_sigma_v": offset,
        }
        return Build(devices, elements, bias.i_ref + i_src + i_src_b + gen_1.i + gen_2.i + gen_n.i, metrics)
