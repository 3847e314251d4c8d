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
    beta: float = 1.0       # feedback factor the loop is closed at for the stability figures (unity gain)
    # Spot-noise limits: ((V/sqrt(Hz), Hz), ...), input-referred density at each frequency.
    noise_spots: tuple[tuple[float, float], ...] = ()
    # The application (topologies/application.py): the feedback network's total resistance (Rf + Rg, from
    # the output to the common-mode reference; inf when the study states no network), whether the signal
    # drives the network (inverting) or inp, and the output step and error band the settling time is
    # stated for (step_v = 0: a small step, no slewing).
    r_network: float = np.inf
    inverting: bool = False
    step_v: float = 0.0
    settle_band: float = 0.01
    settling: bool = False  # the study bounds or maps the settling time: the search works it out

    @property
    def applied(self) -> bool:
        """The study states how the amplifier is used (a loop other than unity, a network, a settling spec):
        its closed-loop testbench and figures exist."""
        return self.beta < 1.0 or bool(np.isfinite(self.r_network)) or self.settling or self.step_v > 0

    @property
    def r_output_load(self) -> float:
        """What loads the output to the common-mode level with the loop closed: the load resistor and the
        network in parallel. Non-inverting, inn follows beta v(out), so Rf + Rg carries v(out) / (Rf + Rg);
        inverting, inn is the virtual ground and the output drives Rf = (1 - beta) (Rf + Rg) alone."""
        if not np.isfinite(self.r_network):
            return self.r_load
        network = (1.0 - self.beta) * self.r_network if self.inverting else self.r_network
        if not np.isfinite(self.r_load):
            return network
        return self.r_load * network / (self.r_load + network)

    def network_loaded(self) -> "Conditions":
        """These surroundings as the open-loop amplifier sees them: the network folded into the load (and
        taken out of `r_network`, so folding twice changes nothing)."""
        from dataclasses import replace

        if not np.isfinite(self.r_network):
            return self
        return replace(self, r_load=self.r_output_load, r_network=np.inf)

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
    """A core amplifier. `reports` names every figure `build` puts in Build.metrics (catalog metric names,
    at least catalog.CORE_REPORTS, plus any `sat_<role>_v` headroom); the registry refuses a topology whose
    declaration falls short, and the evaluator one whose Build does not keep it."""

    name: str       # registry key, snake_case
    title: str      # human-readable name for reports
    prefix: str     # short prefix of design identifiers
    # True for a core whose only high-impedance node is `out` and which honours `Conditions.out_level` and
    # `Conditions.i_out`: an output stage may follow it (see topologies.compose).
    single_stage: bool
    reports: frozenset[str]

    def variables(self, tech: Technology) -> tuple[Variable, ...]: ...

    def build(self, x: dict[str, np.ndarray], tech: Technology, cond: Conditions) -> Build: ...


@dataclass
class StageBuild:
    """What an output stage knows about itself before its core is built, and what it keeps for `metrics`.

    `state` is the stage's own typed record (its solved levels and sized widths); only the stage reads it."""

    devices: list[Device]
    elements: list[Element]
    supply_current: np.ndarray
    input_level: np.ndarray         # DC level the core must hold at the stage's drive node, V
    input_load: np.ndarray          # capacitance the core charges when slewing, F
    input_current: np.ndarray       # DC current the stage pushes into the core's output, A
    state: object


@runtime_checkable
class OutputStage(Protocol):
    """A stage that follows any single-stage core (see topologies.compose). The core's `out` is renamed to
    `drive`; `nodes` are the stage's own node names (a core may not use them). `reports` names the figures
    `metrics` returns (at least catalog.STAGE_REPORTS), which replace the core's."""

    suffix: str     # appended to the core's name: <core>_<suffix>
    title: str
    drive: str
    nodes: tuple[str, ...]
    reports: frozenset[str]

    def variables(self, tech: Technology) -> tuple[Variable, ...]: ...

    def build(self, x: dict[str, np.ndarray], tech: Technology, cond: Conditions) -> StageBuild: ...

    def metrics(self, stage: StageBuild, core: dict[str, np.ndarray], tech: Technology,
                cond: Conditions) -> dict[str, np.ndarray]: ...


def snap_length(l, tech: Technology, grid: float = 5e-9):
    """Drawn lengths: the technology's characterized lengths when it has them (tables are exact there and
    interpolate only in bias), otherwise a 5 nm grid within the technology's limits."""
    l = np.asarray(l, float)
    # A length that is no length (NaN, infinite, zero or negative) stays NaN, so its design is infeasible
    # rather than quietly drawn at the shortest length.
    bad = ~(np.isfinite(l) & (l > 0))
    safe = np.where(bad, tech.l_min, l)
    lengths = tech.length_grid
    if lengths is not None:
        logs = np.log(lengths)
        k = np.abs(np.log(safe)[..., None] - logs).argmin(axis=-1)
        snapped = lengths[k]
    else:
        snapped = np.clip(np.round(safe / grid) * grid, tech.l_min, tech.l_max)
    return np.where(bad, np.nan, snapped)


def length_variable(name: str, tech: Technology, doc: str) -> Variable:
    """Any length the technology draws (or has characterized): the search box is the process, not a guess."""
    return Variable(name, tech.l_min, tech.l_max, "m", log=True, doc=doc)


def gm_id_variable(name: str, tech: Technology, doc: str) -> Variable:
    low, high = tech.gm_id_bounds
    return Variable(name, low, high, "S/A", doc=doc)
