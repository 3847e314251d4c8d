"""The complementary circuit of a core: every nMOS a pMOS and every pMOS an nMOS, the rails exchanged.

A pMOS input pair is what a designer picks for lower flicker noise, for an input common mode that reaches
ground, or in the folded cascode, where it is the usual choice. Its circuit is the nMOS-input circuit turned
upside down: the same netlist with the device polarities swapped, vdd and vss exchanged and every current
reversed. Because the technology interface speaks in magnitudes (VGS for an nMOS, VSG for a pMOS), the
core's own sizing and DC solution hold unchanged when it is handed a technology whose "n" is the real pMOS
and conditions measured down from the supply; the complement then maps the result back: polarities, rails,
current directions and the figures that are levels rather than magnitudes.

The physics is the technology's own for each real device (pMOS mobility, threshold, body effect and flicker
noise come from the pMOS model), so the complement is a different amplifier, not a relabelled one.
"""

from __future__ import annotations

import re
from dataclasses import replace

import numpy as np

from .base import Build, Conditions, Topology, Variable
from .catalog import M
from .process.base import Technology

_SWAP_POLARITY = {"n": "p", "p": "n"}
_SWAP_RAIL = {"vdd": "vss", "vss": "vdd"}
# Topology figures that are levels measured from vss, in pairs that trade places when the circuit turns
# over (the highest output of the complement is the supply less the lowest output of the turned circuit).
LEVEL_PAIRS = ((M.out_high_v, M.out_low_v), (M.cm_high_v, M.cm_low_v))
# Figures that trade places without changing value: the source current of one is the sink current of the other.
SWAPPED_PAIRS = ((M.peak_source_a, M.peak_sink_a),)
# Signed figures whose sign turns with the circuit: an input offset is a difference of input levels.
NEGATED = (M.offset_sys_v,)
_WORD = re.compile(r"\b([np])MOS\b")


class _TurnedTechnology:
    """The technology seen from the complement's inside: asking for an "n" device gives the real pMOS."""

    def __init__(self, tech: Technology):
        self._tech = tech

    def __getattr__(self, name):
        return getattr(self._tech, name)

    def operating_point(self, polarity, *args):
        return self._tech.operating_point(_SWAP_POLARITY[polarity], *args)

    def current(self, polarity, *args):
        return self._tech.current(_SWAP_POLARITY[polarity], *args)

    def vgs_for_current(self, polarity, *args):
        return self._tech.vgs_for_current(_SWAP_POLARITY[polarity], *args)

    def size(self, polarity, *args):
        return self._tech.size(_SWAP_POLARITY[polarity], *args)

    def flicker(self, polarity, *args):
        return self._tech.flicker(_SWAP_POLARITY[polarity], *args)

    def flicker_exponent(self, polarity):
        return self._tech.flicker_exponent(_SWAP_POLARITY[polarity])

    def avt(self, polarity):
        return self._tech.avt(_SWAP_POLARITY[polarity])


def _turned(cond: Conditions) -> Conditions:
    """The conditions as the turned circuit sees them: levels measured down from the supply, currents reversed."""
    return replace(cond, v_cm=cond.vdd - cond.v_cm, v_out=None if cond.v_out is None else cond.vdd - cond.v_out,
                   i_out=-np.asarray(cond.i_out) if np.ndim(cond.i_out) else -cond.i_out)


def _swap_words(text: str) -> str:
    return _WORD.sub(lambda m: f"{_SWAP_POLARITY[m.group(1)]}MOS", text)


class Complement:
    """`core` built upside down: the pMOS-input variant of an nMOS-input core (and the reverse)."""

    def __init__(self, core: Topology, suffix: str = "pmos", title: str | None = None):
        self.core = core
        self.name = f"{core.name}_{suffix}"
        self.title = title or f"{core.title}, pMOS input"
        self.prefix = f"{core.prefix}p"
        self.single_stage = core.single_stage
        self.reports = frozenset(core.reports)

    def variables(self, tech: Technology) -> tuple[Variable, ...]:
        return tuple(replace(v, doc=_swap_words(v.doc)) for v in self.core.variables(_TurnedTechnology(tech)))

    def build(self, x, tech: Technology, cond: Conditions) -> Build:
        inner = self.core.build(x, _TurnedTechnology(tech), _turned(cond))
        devices = [replace(d, polarity=_SWAP_POLARITY[d.polarity], nodes=tuple(_SWAP_RAIL.get(n, n) for n in d.nodes))
                   for d in inner.devices]
        elements = []
        for e in inner.elements:
            a, b = _SWAP_RAIL.get(e.a, e.a), _SWAP_RAIL.get(e.b, e.b)
            # Every current of the turned circuit runs the other way.
            elements.append(replace(e, a=b, b=a) if e.kind == "I" else replace(e, a=a, b=b))
        return Build(devices, elements, inner.supply_current, _turned_metrics(inner.metrics, cond.vdd))


def _turned_metrics(metrics: dict[str, np.ndarray], vdd: float) -> dict[str, np.ndarray]:
    out = dict(metrics)
    for high, low in LEVEL_PAIRS:
        if high in metrics and low in metrics:
            out[high], out[low] = vdd - metrics[low], vdd - metrics[high]
    for a, b in SWAPPED_PAIRS:
        if a in metrics and b in metrics:
            out[a], out[b] = metrics[b], metrics[a]
    for name in NEGATED:
        if name in metrics:
            out[name] = -metrics[name]
    return out
