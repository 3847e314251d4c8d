"""One drawn geometry, solved again under other conditions.

A topology's `build` both sizes and solves. To solve the same drawn circuit elsewhere (another corner, the
output held at one end of a step), `build` runs again with a technology view that answers every sizing
question (`size`, `quantize_width`) with the width the first pass drew, in the same order, while every
current and voltage comes from the device model at hand. The passive elements are then set back to their
first values (a nulling resistor sized as 1/gm of the quiescent driver stays that resistor).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from .base import Build, Conditions, Topology
from .errors import PluginError
from .process.base import Technology


def kept(tech: Technology, *values: np.ndarray) -> tuple[np.ndarray, ...]:
    """Drawn quantities a build decides from the device model itself rather than through `size` or
    `quantize_width` (a bias diode's length, the current its branch is given): the values as decided on a
    first pass, the same values again on a replay at other conditions."""
    keep = getattr(tech, "keep_drawn", None)
    return keep(*values) if keep is not None else values


class Recording:
    """The nominal technology, noting every width it draws for a sizing question (and whatever else a build
    asks it to keep, see `kept`)."""

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

    def keep_drawn(self, *values):
        values = kept(self._tech, *values)      # a view under this one (a replay) may hold them already
        self.widths.extend(values)
        return values


class Replaying:
    """A technology that answers sizing questions with the widths a first pass drew, in their order."""

    def __init__(self, tech: Technology, widths: list[np.ndarray], topology: str):
        self._tech, self._widths, self._topology = tech, widths, topology
        self._next = 0

    def __getattr__(self, name):
        return getattr(self._tech, name)

    def _drawn(self) -> np.ndarray:
        if self._next >= len(self._widths):
            raise PluginError(f"topology '{self._topology}' sized more devices on a second pass than on the first: its "
                              "build must ask the same sizing questions whatever the device model answers")
        self._next += 1
        return self._widths[self._next - 1]

    def size(self, polarity, gm_id, l, i_d, vds, vsb):
        w = self._drawn()
        # The drawn device under these conditions, carrying the current the sizing asked for.
        return w, self._tech.vgs_for_current(polarity, w, l, i_d, vds, vsb)

    def quantize_width(self, w):
        return self._drawn()

    def keep_drawn(self, *values):
        return tuple(self._drawn() for _ in values)


class SameGeometry:
    """`topology` built again on the geometry a first pass drew (see the module docstring)."""

    def __init__(self, topology: Topology, widths: list[np.ndarray], nominal: Build):
        self._topology, self._widths, self._nominal = topology, widths, nominal

    def __getattr__(self, name):
        return getattr(self._topology, name)

    def build(self, x, tech: Technology, cond: Conditions) -> Build:
        view = Replaying(tech, self._widths, self._topology.name)
        built = self._topology.build(x, view, cond)
        if view._next != len(self._widths) or len(built.elements) != len(self._nominal.elements):
            raise PluginError(f"topology '{self._topology.name}' drew a different circuit on a second pass "
                              "than on the first")
        elements = [replace(e, value=n.value) for e, n in zip(built.elements, self._nominal.elements)]
        return replace(built, elements=elements)

    def subset(self, rows: np.ndarray) -> "SameGeometry":
        """The same for the designs at `rows` only (x must then be cut the same way)."""
        designs = len(self._nominal.supply_current)

        def cut(value):
            return np.broadcast_to(value, (designs,))[rows] if np.ndim(value) else value

        inner = self._topology.subset(rows) if isinstance(self._topology, SameGeometry) else self._topology
        nominal = replace(self._nominal, supply_current=self._nominal.supply_current[rows],
                          elements=[replace(e, value=cut(e.value)) for e in self._nominal.elements])
        return SameGeometry(inner, [cut(w) for w in self._widths], nominal)
