"""Building blocks shared by topologies: the nMOS bias branch and the mirror-loaded nMOS input pair.

Each block is sized from gm/ID targets, then solved from its sized widths, so topologies compose them
without repeating the physics.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .base import Device, Variable, gm_id_variable, length_variable, snap_length
from .geometry import kept
from .process.base import Technology, diode_vgs


def pair_variables(tech: Technology) -> tuple[Variable, ...]:
    """Design variables of a bias branch feeding a mirror-loaded input pair."""
    return (
        Variable("i_tail", 0.5e-6, 1e-3, "A", log=True, doc="input-pair tail current"),
        # Designers mirror references up by tens; the reference's own floor is the technology's
        # min_reference_current (an always-on rule), not this box.
        Variable("bias_ratio", 1.0, 50.0, "1", log=True, doc="tail current / reference current"),
        gm_id_variable("gmid_in", tech, "gm/ID of the input pair"),
        length_variable("l_in", tech, "input pair length"),
        gm_id_variable("gmid_load", tech, "gm/ID of the mirror load"),
        length_variable("l_load", tech, "mirror load length"),
        gm_id_variable("gmid_bias", tech, "gm/ID of the nMOS bias group (diode, tail, sink)"),
        length_variable("l_bias", tech, "nMOS bias group length"),
    )


def cascode_variables(tech: Technology, headroom_doc: str) -> tuple[Variable, ...]:
    """Design variables of an nMOS and a pMOS cascode pair, and the headroom they leave the devices below."""
    return (
        gm_id_variable("gmid_casn", tech, "gm/ID of the nMOS cascodes"),
        length_variable("l_casn", tech, "nMOS cascode length"),
        gm_id_variable("gmid_casp", tech, "gm/ID of the pMOS cascodes"),
        length_variable("l_casp", tech, "pMOS cascode length"),
        Variable("headroom", 0.03, 0.3, "V", doc=headroom_doc),
    )


# DC operating points are solved by damped fixed-point iteration over the branch currents, a fixed number
# of steps so a design's result never depends on the population it is evaluated with. The counts settle
# all but about one percent of random designs to 10 ppm of the tail current; the rest fail the
# study's KCL constraint (dc_solved) rather than pass unconverged.
PAIR_ITERATIONS = 12
CASCODE_ITERATIONS = 24


def pair_mismatch(tech: Technology, polarity, w, l):
    """1-sigma threshold difference of a matched pair (Pelgrom, 1989): sqrt(2) avt / sqrt(W L)."""
    return np.sqrt(2) * tech.avt(polarity) / np.sqrt(w * l)


def pair_offset_sigma(tech: Technology, w_in, l_in, w_load, l_load, gm_in, gm_load):
    """Input-referred 1-sigma offset of a mirror-loaded pair from threshold mismatch: the input pair's own,
    and the load pair's divided by the pair's gain gm_in/gm_load."""
    load = pair_mismatch(tech, "p", w_load, l_load) * gm_load / gm_in
    return np.sqrt(pair_mismatch(tech, "n", w_in, l_in) ** 2 + load**2)


def device(tech: Technology, role, polarity, nodes, w, l, vgs, vds, vsb) -> Device:
    return Device(role, polarity, nodes, w, l, vgs, vds, vsb, tech.operating_point(polarity, w, l, vgs, vds, vsb))


@dataclass
class BiasBranch:
    """Reference current into an nMOS diode; its VGS biases every nMOS current source of the group."""

    i_ref: np.ndarray
    w_ref: np.ndarray
    l: np.ndarray
    vgs: np.ndarray

    @classmethod
    def sized(cls, tech: Technology, x) -> "BiasBranch":
        i_ref = x["i_tail"] / x["bias_ratio"]
        l_bias = snap_length(x["l_bias"], tech)
        zero = np.zeros_like(i_ref)
        w_ref, vgs = tech.size("n", x["gmid_bias"], l_bias, i_ref, zero + 0.6, zero)
        w_ref, _ = tech.size("n", x["gmid_bias"], l_bias, i_ref, vgs, zero)
        return cls(i_ref, w_ref, l_bias, diode_vgs(tech, "n", w_ref, l_bias, i_ref))

    def source(self, tech: Technology, role: str, drain: str, i_target, vds) -> tuple[Device, np.ndarray]:
        """An nMOS current source mirroring the branch at i_target, and the current it really carries."""
        w = tech.quantize_width(self.w_ref * i_target / self.i_ref)
        zero = np.zeros_like(w)
        vds = vds + zero
        dev = device(tech, role, "n", (drain, "nb", "vss", "vss"), w, self.l, self.vgs, vds, zero)
        return dev, dev.op.id

    def diode(self, tech: Technology) -> Device:
        zero = np.zeros_like(self.w_ref)
        return device(tech, "bias_diode", "n", ("nb", "nb", "vss", "vss"), self.w_ref, self.l, self.vgs,
                      self.vgs, zero)


@dataclass
class GateGenerator:
    """A diode-connected device that holds a cascode's (or a current source's) gate at its level, fed from a
    copy of the reference current.

    Where the reference current would need a device narrower than the technology draws to land on the level
    at the biased device's own length, the diode is drawn longer: the shortest length, up to the longest the
    technology has, at which a drawable width lands there (the usual long, narrow bias diode, W/L below one).
    Where even the longest minimum-width diode needs more than the reference, its branch is given that
    current (a designer mirrors more into it rather than miss the level), and the study's power pays for it.
    Without this, a gate level well above threshold (the nMOS cascode of a telescopic pair sits about one
    VGS above the input common mode) tied the reference current to the tail's at the low-power end.
    """

    w: np.ndarray
    l: np.ndarray
    i: np.ndarray
    vgs: np.ndarray      # as solved from the drawn device

    @classmethod
    def sized(cls, tech: Technology, polarity, l_device, vgs_target, i_ref) -> "GateGenerator":
        zero = np.zeros_like(np.asarray(i_ref, float) + l_device + vgs_target)
        w_floor = np.maximum(tech.w_min, tech.quantize_width(tech.w_min))
        grid = tech.length_grid
        lengths = grid if grid is not None else snap_length(np.geomspace(tech.l_min, tech.l_max, 12), tech)
        i_ref, l_device, level = (np.broadcast_to(a, zero.shape) for a in (zero + i_ref, zero + l_device,
                                                                          zero + vgs_target))
        w, l, i = zero + np.nan, zero + np.nan, i_ref.copy()
        last_density = zero + np.nan
        open_ = np.arange(zero.size)
        # Each design asks only until its diode is drawable; most are at the device's own length.
        for candidate in np.concatenate([[0.0], lengths[lengths > np.nanmin(l_device, initial=np.inf)]]):
            if open_.size == 0:
                break
            length = np.maximum(l_device[open_], candidate)
            level_o = level[open_]
            density = tech.current(polarity, 1.0, length, level_o, level_o, zero[open_])
            needed = i_ref[open_] / density
            take = ~(needed < w_floor)       # a NaN width is taken as is: the design then fails
            w[open_[take]] = needed[take]
            l[open_], last_density[open_] = length, density     # the still open keep their longest try
            open_ = open_[~take]
        # Still open: even the longest drawable diode needs more than the reference current.
        w[open_] = w_floor
        i[open_] = w_floor * last_density[open_]
        w = tech.quantize_width(w)
        # The length and current are drawn from the model's answers: another corner (or output level)
        # solves the same diode, not one redrawn for it.
        l, i = kept(tech, l, i)
        return cls(w, l, i, diode_vgs(tech, polarity, w, l, i))


@dataclass
class MirrorPair:
    """nMOS differential pair (gates inn/inp, drains mir/o1, common source `tail`) with a pMOS mirror load."""

    w_in: np.ndarray
    l_in: np.ndarray
    w_load: np.ndarray
    l_load: np.ndarray
    vsg_load: np.ndarray        # the mirror's VSG as sized

    @classmethod
    def sized(cls, tech: Technology, x, vdd: float, vcm: float) -> "MirrorPair":
        l_in, l_load = snap_length(x["l_in"], tech), snap_length(x["l_load"], tech)
        half = x["i_tail"] / 2
        zero = np.zeros_like(half)
        w_load, vsg = tech.size("p", x["gmid_load"], l_load, half, zero + 0.6, zero)
        w_load, vsg = tech.size("p", x["gmid_load"], l_load, half, vsg, zero)
        vs = zero + vcm - 0.6
        for _ in range(3):
            w_in, vgs = tech.size("n", x["gmid_in"], l_in, half, vdd - vsg - vs, vs)
            vs = vcm - vgs
        return cls(w_in, l_in, w_load, l_load, vsg)

    def solve(self, tech: Technology, bias: BiasBranch, i_tail_target, vdd: float, vcm: float, v_o1,
              inverting_after: bool, i_load=0.0):
        """DC operating point with node o1 held at v_o1 by whatever follows; returns devices and figures.

        `inverting_after`: an inverting stage follows o1, so inp drives the o1 side of the pair; otherwise
        inp drives the diode side. Either way the amplifier is non-inverting from inp to out. `i_load` is a
        DC current pushed into o1 from outside; the pair's split (an input offset) absorbs it.
        """
        gate_a, gate_b = ("inn", "inp") if inverting_after else ("inp", "inn")
        zero = np.zeros_like(self.w_in)
        vs, i1 = zero + vcm - 0.6, i_tail_target / 2
        vsd_out = vdd - v_o1
        for _ in range(PAIR_ITERATIONS):
            _, i5 = bias.source(tech, "tail_source", "tail", i_tail_target, np.maximum(vs, 1e-3))
            vsg3 = diode_vgs(tech, "p", self.w_load, self.l_load, i1)
            ratio = (tech.current("p", self.w_load, self.l_load, vsg3, vsd_out, zero)
                     / tech.current("p", self.w_load, self.l_load, vsg3, vsg3, zero))
            # Damped: the tail current follows the pair's source voltage, which follows i1.
            i1 = 0.2 * i1 + 0.8 * (i5 - i_load) / (1 + ratio)
            vgs1 = tech.vgs_for_current("n", self.w_in, self.l_in, i1, vdd - vsg3 - vs, vs)
            vs = vcm - vgs1
        i2 = i5 - i1
        vds1, vds2 = vdd - vsg3 - vs, v_o1 - vs
        vgs2 = tech.vgs_for_current("n", self.w_in, self.l_in, i2, vds2, vs)
        tail, _ = bias.source(tech, "tail_source", "tail", i_tail_target, vs)
        devices = [
            device(tech, "input_pair_a", "n", ("mir", gate_a, "tail", "vss"), self.w_in, self.l_in, vgs1, vds1, vs),
            device(tech, "input_pair_b", "n", ("o1", gate_b, "tail", "vss"), self.w_in, self.l_in, vgs2, vds2, vs),
            device(tech, "mirror_diode", "p", ("mir", "mir", "vdd", "vdd"), self.w_load, self.l_load, vsg3, vsg3,
                   zero),
            device(tech, "mirror_out", "p", ("o1", "mir", "vdd", "vdd"), self.w_load, self.l_load, vsg3,
                   vsd_out, zero),
            tail,
        ]
        gm_in, gm_load = devices[1].op.gm, devices[3].op.gm
        figures = {
            "i_tail": i5, "vsg_load": vsg3, "vgs_in": vgs1, "i_supply": i5 - i_load,
            "offset_sigma_v": pair_offset_sigma(tech, self.w_in, self.l_in, self.w_load, self.l_load, gm_in, gm_load),
            "cm_low_v": tail.op.vdsat + vgs1,
            "cm_high_v": vdd - vsg3 + devices[0].op.vth,
            "offset_sys_v": vgs2 - vgs1,
        }
        return devices, figures
