"""Class-AB output stage: a pull-up pMOS and a pull-down nMOS in common source, their gates tied by a
floating class-AB control (a pMOS and an nMOS in parallel between the two gates, after Monticelli, JSSC
1986), biased by two translinear diode stacks so the quiescent current is set by device ratios rather than
by the supply. When one output device is driven hard the control holds the other at a small minimum
current instead of cutting it off. Both gates are Miller-compensated to the output, each through its own
nulling resistor.

The stage follows any single-stage core (see topologies.compose): the core drives the pull-up gate, the
floating control carries the signal to the pull-down gate.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from .base import Conditions, Element, StageBuild, Variable, gm_id_variable, length_variable, snap_length
from .numeric import bisect_decreasing
from .process.base import Technology, diode_vgs
from .stages import device

# Nodes of the stage; the core's output is renamed to DRIVE.
DRIVE = "ab_gp"
NODES = (DRIVE, "ab_gn", "ab_rp", "ab_vbp", "ab_rn", "ab_vbn", "ab_czp", "ab_czn")


# Table technologies start their VGS axis near 0.15 V and give NaN below; a gate driven that low carries
# nothing worth counting against milliamps of load current.
OFF_GATE = 0.25
# Saturation voltage budgeted for the current sources that feed the bias stacks (common practice).
REFERENCE_HEADROOM = 0.15


def _off_is_zero(current, vgs):
    return np.where(np.isnan(current) & (vgs < OFF_GATE), 0.0, current)


@dataclass(frozen=True)
class ClassABState:
    """The stage as sized and solved at the quiescent point: what `metrics` needs to drive it to its limits."""

    vdd: float
    i_q: np.ndarray         # quiescent current of the output devices, A
    i_src: np.ndarray       # current of the floating control's source into the pull-up gate, A
    gn: np.ndarray          # quiescent pull-down gate level, V
    vbp: np.ndarray         # gate levels of the floating pMOS and nMOS control devices, V
    vbn: np.ndarray
    rn: np.ndarray          # gate level of the floating control's sink, V
    w_up: np.ndarray        # output devices, m
    w_dn: np.ndarray
    l_out: np.ndarray
    w_fp: np.ndarray        # floating control devices, m
    w_fn: np.ndarray
    l_float: np.ndarray
    w_sink: np.ndarray

    def float_balance(self, tech: Technology, gp, gn):
        """Current the floating control passes into the pull-down gate minus what the sink takes."""
        zero = np.zeros_like(self.i_q)
        v = np.maximum(gp - gn, 1e-4)
        return (_off_is_zero(tech.current("p", self.w_fp, self.l_float, gp - self.vbp, v, self.vdd - gp),
                             gp - self.vbp)
                + _off_is_zero(tech.current("n", self.w_fn, self.l_float, self.vbn - gn, v, gn), self.vbn - gn)
                - tech.current("n", self.w_sink, self.l_out, self.rn, gn, zero))


class ClassABOutput:
    suffix = "ab"
    title = "class-AB output"
    drive, nodes = DRIVE, NODES
    reports = frozenset({"sat_ab_up_reference_v", "sat_ab_down_reference_v", "slew_v_per_s", "out_high_v",
                         "out_low_v", "quiescent_out_a", "peak_source_a", "peak_sink_a", "min_device_current_a"})

    def variables(self, tech: Technology) -> tuple[Variable, ...]:
        return (
            Variable("i_quiescent", 2e-6, 5e-3, "A", log=True, doc="quiescent current of the output devices"),
            gm_id_variable("gmid_pull_up", tech, "gm/ID of the pMOS pull-up output device"),
            gm_id_variable("gmid_pull_down", tech, "gm/ID of the nMOS pull-down output device"),
            length_variable("l_out", tech, "output device length (both)"),
            Variable("float_ratio", 0.03, 0.5, "1", doc="current of each floating-control device / quiescent"),
            gm_id_variable("gmid_float", tech, "gm/ID of the floating class-AB control"),
            length_variable("l_float", tech, "floating control length"),
            Variable("cc_ab", 50e-15, 20e-12, "F", log=True, doc="Miller capacitance, half at each output gate"),
            Variable("rz_gm_ab", 0.5, 4.0, "1", doc="each nulling resistor times its output device's gm"),
        )

    def build(self, x, tech: Technology, cond: Conditions) -> StageBuild:
        vdd, vout = cond.vdd, cond.out_level
        iq = x["i_quiescent"]
        zero = np.zeros_like(iq)
        i_ref = iq * x["float_ratio"]
        l_out, l_fl = snap_length(x["l_out"], tech), snap_length(x["l_float"], tech)

        # --- sizing from the gm/ID targets ---------------------------------------------------------------
        w_up, vsg_up = tech.size("p", x["gmid_pull_up"], l_out, iq, zero + vdd - vout, zero)
        w_dn, vgs_dn = tech.size("n", x["gmid_pull_down"], l_out, iq, zero + vout, zero)
        v_float = np.maximum(vdd - vsg_up - vgs_dn, 0.05)
        w_fp, _ = tech.size("p", x["gmid_float"], l_fl, i_ref, v_float, vsg_up)
        w_fn, _ = tech.size("n", x["gmid_float"], l_fl, i_ref, v_float, vgs_dn)
        # Replicas of the output devices carry the reference current; the translinear loops then copy
        # the reference into the output branch scaled by the width ratio.
        w_rp, w_rn = tech.quantize_width(w_up * i_ref / iq), tech.quantize_width(w_dn * i_ref / iq)
        w_src, w_snk = tech.quantize_width(2 * w_up * i_ref / iq), tech.quantize_width(2 * w_dn * i_ref / iq)

        # --- DC operating point from the sized circuit ----------------------------------------------------
        rp = vdd - diode_vgs(tech, "p", w_rp, l_out, i_ref)
        vbp = rp - diode_vgs(tech, "p", w_fp, l_fl, i_ref, vdd - rp)
        rn = diode_vgs(tech, "n", w_rn, l_out, i_ref)
        vbn = rn + diode_vgs(tech, "n", w_fn, l_fl, i_ref, rn)

        state = ClassABState(vdd=vdd, i_q=iq, i_src=zero, gn=zero, vbp=vbp, vbn=vbn, rn=rn, w_up=w_up, w_dn=w_dn,
                             l_out=l_out, w_fp=w_fp, w_fn=w_fn, l_float=l_fl, w_sink=w_snk)

        def float_balance(gp, gn):
            return state.float_balance(tech, gp, gn)

        def gate_up(gn):
            """Pull-up gate level that balances the pull-down's current, less what a load pushes into the
            output, with the output at vout."""
            i_dn = tech.current("n", w_dn, l_out, gn, zero + vout, zero)
            return vdd - tech.vgs_for_current("p", w_up, l_out, i_dn - cond.i_out, zero + vdd - vout, zero)

        gn_est = vbn - tech.vgs_for_current("n", w_fn, l_fl, i_ref, v_float, vgs_dn)
        gn = bisect_decreasing(lambda g: float_balance(gate_up(g), g), zero + 0.02, zero + vdd - 0.02,
                               nan_above=gn_est)
        gp = gate_up(gn)
        # A root the bracket does not hold (the control pushed off the model's range) is no solution.
        gn = np.where(np.abs(float_balance(gp, gn)) <= 1e-4 * i_ref, gn, np.nan)
        i_src = tech.current("p", w_src, l_out, vdd - rp, vdd - gp, zero)
        # Source and sink are ratioed copies that need not match once widths are drawn: the core's output
        # takes the difference.
        i_snk = tech.current("n", w_snk, l_out, rn, gn, zero)

        def dev(role, pol, nodes, w, l, vgs, vds, vsb):
            return device(tech, role, pol, nodes, w, l, vgs, vds + zero, vsb + zero)

        devices = [
            dev("output_pull_up", "p", ("out", DRIVE, "vdd", "vdd"), w_up, l_out, vdd - gp, vdd - vout, 0.0),
            dev("output_pull_down", "n", ("out", "ab_gn", "vss", "vss"), w_dn, l_out, gn, vout, 0.0),
            dev("ab_float_p", "p", ("ab_gn", "ab_vbp", DRIVE, "vdd"), w_fp, l_fl, gp - vbp, gp - gn, vdd - gp),
            dev("ab_float_n", "n", (DRIVE, "ab_vbn", "ab_gn", "vss"), w_fn, l_fl, vbn - gn, gp - gn, gn),
            dev("ab_float_source", "p", (DRIVE, "ab_rp", "vdd", "vdd"), w_src, l_out, vdd - rp, vdd - gp, 0.0),
            dev("ab_float_sink", "n", ("ab_gn", "ab_rn", "vss", "vss"), w_snk, l_out, rn, gn, 0.0),
            dev("ab_replica_up", "p", ("ab_rp", "ab_rp", "vdd", "vdd"), w_rp, l_out, vdd - rp, vdd - rp, 0.0),
            dev("ab_replica_float_p", "p", ("ab_vbp", "ab_vbp", "ab_rp", "vdd"), w_fp, l_fl, rp - vbp, rp - vbp,
                vdd - rp),
            dev("ab_replica_down", "n", ("ab_rn", "ab_rn", "vss", "vss"), w_rn, l_out, rn, rn, 0.0),
            dev("ab_replica_float_n", "n", ("ab_vbn", "ab_vbn", "ab_rn", "vss"), w_fn, l_fl, vbn - rn, vbn - rn, rn),
        ]
        gm_up, gm_dn = devices[0].op.gm, devices[1].op.gm
        half_cc = x["cc_ab"] / 2
        elements = [
            Element("I", "ab_up_reference", "ab_vbp", "vss", i_ref),
            Element("I", "ab_down_reference", "vdd", "ab_vbn", i_ref),
            Element("R", "ab_nulling_up", DRIVE, "ab_czp", x["rz_gm_ab"] / gm_up),
            Element("C", "ab_miller_up", "ab_czp", "out", half_cc),
            Element("R", "ab_nulling_down", "ab_gn", "ab_czn", x["rz_gm_ab"] / gm_dn),
            Element("C", "ab_miller_down", "ab_czn", "out", half_cc),
        ]
        i_q = devices[0].op.id
        state = replace(state, i_q=i_q, i_src=i_src, gn=gn)
        return StageBuild(devices, elements, i_q + i_src + 2 * i_ref, gp, half_cc, i_src - i_snk, state)

    def metrics(self, stage: StageBuild, core: dict[str, np.ndarray], tech: Technology, cond: Conditions):
        """The stage's figures given the range its core can drive the pull-up gate over while saturated."""
        vdd, vcm = cond.vdd, cond.v_cm
        s: ClassABState = stage.state
        zero = np.zeros_like(s.i_q)
        w_up, w_dn, l = s.w_up, s.w_dn, s.l_out
        gp_low, gp_high = core["out_low_v"], core["out_high_v"]
        # Pull-down gate when the core drives the pull-up gate to either end of its range. Past the model's
        # range (control devices below 50 mV or the sink in deep triode) the bounds stay conservative: the
        # pull-down gate cannot rise above the pull-up gate it follows, nor above its quiescent level, when
        # the core pulls down; and the largest balanced level still on the table is a lower bound when the
        # core pulls up.
        gn_low = bisect_decreasing(lambda g: s.float_balance(tech, gp_low, g), zero + 0.02, gp_low, 24)
        gn_low = np.where(np.isfinite(s.float_balance(tech, gp_low, gn_low)), gn_low, np.minimum(gp_low, s.gn))
        gn_high = bisect_decreasing(lambda g: s.float_balance(tech, gp_high, g), zero + 0.02, gp_high, 24)

        def up(vsg, v):
            return _off_is_zero(tech.current("p", w_up, l, vsg, vdd - v, zero), vsg)

        def down(vgs, v):
            return _off_is_zero(tech.current("n", w_dn, l, vgs, v, zero), vgs)

        load = (lambda v: (v - vcm) / cond.r_load) if np.isfinite(cond.r_load) else (lambda v: 0.0 * v)
        vout = zero + vcm
        peak_source = up(vdd - gp_low, vout) - down(gn_low, vout)
        peak_sink = down(gn_high, vout) - up(vdd - gp_high, vout)

        # The conducting device carries the load plus what the other still draws, and never less than the
        # quiescent current: the floating control only raises it from there as the load grows.
        floor = s.i_q

        def high_room(v):
            # The pull-up must carry that current saturated, at a gate drive the core can reach.
            need = np.maximum(load(v) + np.nan_to_num(down(gn_low, v)), floor)
            vsg = tech.vgs_for_current("p", w_up, l, need, vdd - v, zero)
            vdsat = tech.operating_point("p", w_up, l, vsg, vdd - v, zero).vdsat
            return np.minimum(vdd - gp_low - vsg, vdd - v - vdsat - tech.saturation_guard)

        def low_room(v):
            need = np.maximum(-load(v) + np.nan_to_num(up(vdd - gp_high, v)), floor)
            vgs = tech.vgs_for_current("n", w_dn, l, need, v, zero)
            vdsat = tech.operating_point("n", w_dn, l, vgs, v, zero).vdsat
            return np.minimum(gn_high - vgs, v - vdsat - tech.saturation_guard)

        out_high = bisect_decreasing(high_room, vout, zero + vdd, 20)
        out_low = bisect_decreasing(lambda v: -low_room(v), zero, vout, 20, nan_above=vout)
        c_total = cond.c_load + 2 * stage.input_load
        slew = np.minimum.reduce([core["slew_v_per_s"], s.i_src / stage.input_load,
                                  np.minimum(peak_source, peak_sink) / c_total])
        return {
            # The reference sources of the bias stacks need room to be real current sources.
            "sat_ab_up_reference_v": s.vbp - REFERENCE_HEADROOM,
            "sat_ab_down_reference_v": vdd - s.vbn - REFERENCE_HEADROOM,
            "slew_v_per_s": slew,
            "out_high_v": out_high,
            "out_low_v": out_low,
            "quiescent_out_a": s.i_q,
            "peak_source_a": peak_source,
            "peak_sink_a": peak_sink,
            "min_device_current_a": np.minimum(down(gn_low, vout), up(vdd - gp_high, vout)),
        }
