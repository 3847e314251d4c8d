"""Process, supply and temperature corners: one drawn geometry, re-solved at every corner.

A design is sized once, at the nominal corner: widths, lengths, capacitors, resistors and reference
currents. At another corner nothing of that may change; only the devices do (threshold, mobility,
temperature) and the supply. A topology's `build` both sizes and solves, so the corner pass runs it again
with a technology view that answers every sizing question (`size`, `quantize_width`) with the width the
nominal pass drew, in the same order, while every current and voltage comes from the corner's own device
model. The passive elements are then set back to their nominal values (a nulling resistor sized as 1/gm of
the nominal driver stays that resistor). What remains is the topology's own DC solution at the corner, and
the evaluator's small-signal, noise and stability analysis of it.

A study's constraints must hold at every corner and its objectives are taken at their worst: the combined
metrics are, per metric, the worst value over the corners in the metric's own sense of better.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from .base import Build, Conditions, Topology
from .catalog import metric
from .errors import PluginError
from .evaluate import evaluate
from .process.base import Technology


@dataclass(frozen=True)
class Corner:
    """One corner to evaluate at: a name for columns and files, the device model there, the supply there."""

    name: str
    tech: Technology
    vdd: float


class _Recording:
    """The nominal technology, noting every width it draws for a sizing question."""

    def __init__(self, tech: Technology):
        self._tech = tech
        self.widths: list[np.ndarray] = []

    def __getattr__(self, name):
        return getattr(self._tech, name)

    def size(self, polarity, gm_id, l, i_d, vds, vsb):
        w, vgs = self._tech.size(polarity, gm_id, l, i_d, vds, vsb)
        self.widths.append(w)
        return w, vgs

    def quantize_width(self, w):
        drawn = self._tech.quantize_width(w)
        self.widths.append(drawn)
        return drawn


class _Replaying:
    """A corner's technology that answers sizing questions with the nominal widths, in their order."""

    def __init__(self, tech: Technology, widths: list[np.ndarray], topology: str):
        self._tech, self._widths, self._topology = tech, widths, topology
        self._next = 0

    def __getattr__(self, name):
        return getattr(self._tech, name)

    def _drawn(self) -> np.ndarray:
        if self._next >= len(self._widths):
            raise PluginError(f"topology '{self._topology}' sized more devices at a corner than at nominal: its "
                              "build must ask the same sizing questions whatever the device model answers")
        self._next += 1
        return self._widths[self._next - 1]

    def size(self, polarity, gm_id, l, i_d, vds, vsb):
        w = self._drawn()
        # The drawn device at this corner, carrying the current the sizing asked for.
        return w, self._tech.vgs_for_current(polarity, w, l, i_d, vds, vsb)

    def quantize_width(self, w):
        return self._drawn()


class _AtCorner:
    """`topology` built at a corner on the nominal geometry (see the module docstring)."""

    def __init__(self, topology: Topology, widths: list[np.ndarray], nominal: Build):
        self._topology, self._widths, self._nominal = topology, widths, nominal

    def __getattr__(self, name):
        return getattr(self._topology, name)

    def build(self, x, tech: Technology, cond: Conditions) -> Build:
        view = _Replaying(tech, self._widths, self._topology.name)
        built = self._topology.build(x, view, cond)
        if view._next != len(self._widths) or len(built.elements) != len(self._nominal.elements):
            raise PluginError(f"topology '{self._topology.name}' drew a different circuit at a corner than at "
                              "nominal")
        elements = [replace(e, value=n.value) for e, n in zip(built.elements, self._nominal.elements)]
        return replace(built, elements=elements)


@dataclass
class CornerResult:
    """Metrics of one population at every corner, and their worst case."""

    worst: dict[str, np.ndarray]
    by_corner: dict[str, dict[str, np.ndarray]]   # corner name -> metrics
    builds: dict[str, Build]                      # corner name -> its Build (same geometry)
    at: dict[str, Corner]                         # corner name -> the corner (nominal first)


def worst_case(by_corner: dict[str, dict[str, np.ndarray]], nominal: str) -> dict[str, np.ndarray]:
    """Per metric, the worst corner in its sense of better (NaN anywhere stays NaN: a design that does
    not work at one corner does not work); figures with no better side keep their nominal value."""
    out = {}
    for name, value in by_corner[nominal].items():
        better = metric(name).better
        stack = np.array([m[name] for m in by_corner.values()])
        if better == "max":
            out[name] = stack.min(axis=0)
        elif better == "min":
            out[name] = stack.max(axis=0)
        else:
            out[name] = value
    return out


def evaluate_corners(topology: Topology, x: dict[str, np.ndarray], nominal: Corner, others: tuple[Corner, ...],
                     cond: Conditions, step: bool = False) -> CornerResult:
    """Size at `nominal` (its tech and supply), then re-solve that geometry at each of `others`."""
    recording = _Recording(nominal.tech)
    metrics, build = evaluate(topology, x, recording, replace(cond, vdd=nominal.vdd), step=step)
    by_corner, builds = {nominal.name: metrics}, {nominal.name: build}
    at_corner = _AtCorner(topology, recording.widths, build)
    for corner in others:
        by_corner[corner.name], builds[corner.name] = evaluate(at_corner, x, corner.tech,
                                                               replace(cond, vdd=corner.vdd), step=step)
    return CornerResult(worst_case(by_corner, nominal.name), by_corner, builds,
                        {c.name: c for c in (nominal, *others)})
