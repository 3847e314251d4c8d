"""The topology plug-in interface.

A topology declares its design variables and, for a whole population at once, sizes its devices, solves
its DC operating point and lists its circuit: devices by role with their nodes, and passive elements. The
generic evaluator (`topologies.evaluate`) turns that into the small-signal circuit, the loop metrics,
power, area and saturation margins; the netlist writer turns it into SPICE. A topology writes physics
only: no optimizer, no plotting, no file formats.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal, Protocol, runtime_checkable

import numpy as np

from .process.base import OperatingPoint, Polarity, Technology

PORTS = ("inp", "inn", "out", "vdd", "vss")  # the subcircuit contract every topology honours


@dataclass(frozen=True)
class Variable:
    """One design variable: bounds in SI units; `log` variables are searched on a log scale."""

    name: str
    low: float
    high: float
    unit: str
    log: bool = False
    doc: str = ""


@dataclass(frozen=True)
class Conditions:
    """What the spec fixes about the amplifier's surroundings, SI units."""

    vdd: float              # supply across vdd-vss, V
    c_load: float           # F
    r_load: float           # Ohm, terminated at the common-mode level; inf for none
    v_cm: float             # input (and output) common-mode level the amplifier is biased at, V
    # DC level of the output node when something other than the feedback loop sets it (a core driving an
    # output stage sits at that stage's input level, one value per design); None means v_cm.
    v_out: np.ndarray | float | None = None
    i_out: np.ndarray | float = 0.0   # DC current pushed into the output node by what follows it, A
    noise_band: tuple[float, float] = (1.0, 1e6)   # Hz, the band input-referred RMS noise integrates over

    @property
    def out_level(self):
        return self.v_cm if self.v_out is None else self.v_out


@dataclass
class Device:
    """A transistor (or a group of identical ones) of the whole population, named by circuit role."""

    role: str
    polarity: Polarity
    nodes: tuple[str, str, str, str]   # drain, gate, source, bulk
    w: np.ndarray
    l: np.ndarray
    vgs: np.ndarray                     # magnitudes, as in topologies.process.base
    vds: np.ndarray
    vsb: np.ndarray
    op: OperatingPoint


@dataclass
class Element:
    """A passive element or ideal bias source: kind 'R' (Ohm), 'C' (F) or 'I' (A, flowing a -> b)."""

    kind: Literal["R", "C", "I"]
    role: str
    a: str
    b: str
    value: np.ndarray


@dataclass
class Build:
    """Everything a topology knows about a sized, biased population."""

    devices: list[Device]
    elements: list[Element]
    supply_current: np.ndarray          # A drawn from vdd at the operating point
    metrics: dict[str, np.ndarray] = field(default_factory=dict)   # topology-specific, e.g. slew rate


@runtime_checkable
class Topology(Protocol):
    name: str       # registry key, snake_case
    title: str      # human-readable name for reports
    prefix: str     # short prefix of design identifiers
    # Optional: `single_stage = True` marks a core whose only high-impedance node is `out`, so an output
    # stage may follow it (see topologies.compose); such a core must honour `Conditions.out_level`.

    def variables(self, tech: Technology) -> tuple[Variable, ...]: ...

    def build(self, x: dict[str, np.ndarray], tech: Technology, cond: Conditions) -> Build: ...


def snap_length(l, tech: Technology, grid: float = 5e-9):
    """Drawn lengths: the technology's characterized lengths when it has them (tables are exact there and
    interpolate only in bias), otherwise a 5 nm grid within the technology's limits."""
    lengths = getattr(tech, "length_grid", None)
    if lengths is not None:
        logs = np.log(lengths)
        k = np.abs(np.log(np.asarray(l, float))[..., None] - logs).argmin(axis=-1)
        return lengths[k]
    return np.clip(np.round(np.asarray(l) / grid) * grid, tech.l_min, tech.l_max)


def length_variable(name: str, tech: Technology, doc: str, span: float = 20.0) -> Variable:
    return Variable(name, tech.l_min, min(tech.l_max, span * tech.l_min), "m", log=True, doc=doc)


def gm_id_variable(name: str, tech: Technology, doc: str) -> Variable:
    low, high = tech.gm_id_bounds
    return Variable(name, low, high, "S/A", doc=doc)
