"""Five-transistor OTA: nMOS differential pair, pMOS mirror load, nMOS tail source, plus the nMOS diode
bias branch. The load capacitance compensates it: one high-impedance node, the output."""

from __future__ import annotations

import numpy as np

from .catalog import CORE_REPORTS
from .base import Build, Conditions, Element, Variable
from .process.base import Technology
from .stages import BiasBranch, MirrorPair, pair_variables


class SimpleOTA:
    name = "simple_ota"
    title = "Five-transistor OTA"
    prefix = "ota"
    single_stage = True
    reports = CORE_REPORTS

    def variables(self, tech: Technology) -> tuple[Variable, ...]:
        return pair_variables(tech)

    def build(self, x, tech: Technology, cond: Conditions) -> Build:
        vdd, vcm = cond.vdd, cond.v_cm
        bias = BiasBranch.sized(tech, x)
        pair = MirrorPair.sized(tech, x, vdd, vcm)
        # The output is node o1; at DC the follower loop (or the stage it drives) sets its level.
        devices, fig = pair.solve(tech, bias, x["i_tail"], vdd, vcm, np.zeros_like(x["i_tail"]) + cond.out_level,
                                 inverting_after=False, i_load=cond.i_out)
        devices = [_rename_output(d) for d in devices] + [bias.diode(tech)]
        out_pair, load_out = devices[1], devices[3]
        # Slewing moves the output node with both drain junctions and the mirror output's gate-drain overlap
        # (its gate, the diode's node, barely moves); the input device's overlap is left out, its gate
        # follows the input.
        c_out = cond.c_load + out_pair.op.cdb + load_out.op.cdb + load_out.op.cgd
        metrics = {
            "slew_v_per_s": fig["i_tail"] / c_out,
            "peak_source_a": fig["i_tail"],
            "peak_sink_a": fig["i_tail"],
            "out_high_v": vdd - load_out.op.vdsat - tech.saturation_guard,
            # Lowest output keeping the output-side input device saturated, with the tail at its bias.
            "out_low_v": (vcm - fig["vgs_in"]) + out_pair.op.vdsat + tech.saturation_guard,
            "cm_low_v": fig["cm_low_v"],
            "cm_high_v": fig["cm_high_v"],
            "offset_sys_v": fig["offset_sys_v"],
            "offset_sigma_v": fig["offset_sigma_v"],
        }
        elements = [Element("I", "bias_reference", "vdd", "nb", bias.i_ref)]
        return Build(devices, elements, bias.i_ref + fig["i_supply"], metrics)


def _rename_output(d):
    d.nodes = tuple("out" if n == "o1" else n for n in d.nodes)
    return d
