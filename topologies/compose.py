"""A core followed by an output stage, as one topology: composition, not a copy of each core.

The output stage sets the DC level the core's output must sit at and the capacitance it slews; the core is
built for those, its output node renamed to the stage's drive node and its inputs swapped (the stage
inverts, so the amplifier stays non-inverting from inp to out). The stage's figures (swing into the load,
peak currents, slew) replace the core's where they describe the new output.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from .base import Build, Conditions, OutputStage, Topology, Variable
from .errors import PluginError
from .process.base import Technology

# Figures that describe the core's own output node, which the stage's figures replace.
_REPLACED = frozenset({"gbw_hand_hz"})


class CompositionError(PluginError):
    """A core and an output stage that cannot be joined (shared variable or node names)."""


class WithOutputStage:
    single_stage = False

    def __init__(self, core: Topology, stage: OutputStage, title: str | None = None):
        self.core, self.stage = core, stage
        self.name = f"{core.name}_{stage.suffix}"
        self.title = title or f"{core.title} + {stage.title}"
        self.prefix = f"{core.prefix}{stage.suffix}"
        self.reports = (frozenset(core.reports) - _REPLACED) | frozenset(stage.reports)

    def variables(self, tech: Technology) -> tuple[Variable, ...]:
        core, stage = self.core.variables(tech), self.stage.variables(tech)
        shared = {v.name for v in core} & {v.name for v in stage}
        if shared:
            raise CompositionError(f"{self.name}: core and output stage share variables {sorted(shared)}")
        return core + stage

    def build(self, x, tech: Technology, cond: Conditions) -> Build:
        stage = self.stage.build(x, tech, cond)
        core_cond = replace(cond, c_load=stage.input_load, r_load=np.inf, v_out=stage.input_level,
                            i_out=stage.input_current)
        core = self.core.build(x, tech, core_cond)
        rename = {"out": self.stage.drive, "inp": "inn", "inn": "inp"}
        used = {n for d in core.devices for n in d.nodes} | {n for e in core.elements for n in (e.a, e.b)}
        clash = used & set(self.stage.nodes)
        if clash:
            raise CompositionError(f"{self.name}: the core already uses node names {sorted(clash)}")
        devices = [replace(d, nodes=tuple(rename.get(n, n) for n in d.nodes)) for d in core.devices]
        elements = [replace(e, a=rename.get(e.a, e.a), b=rename.get(e.b, e.b)) for e in core.elements]
        metrics = {k: v for k, v in core.metrics.items() if k not in _REPLACED}
        metrics.update(self.stage.metrics(stage, core.metrics, tech, cond))
        return Build(devices + stage.devices, elements + stage.elements,
                     core.supply_current + stage.supply_current, metrics)
