"""The technology interface every process model implements.

Voltages are magnitudes in the device's own sense (VGS, VDS, VSB for an nMOS; VSG, VSD, VBS for a pMOS),
so topologies size both polarities with one set of formulas. All arguments broadcast as numpy arrays; all
values are SI (A, V, S, F, m).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal, Protocol, runtime_checkable

import numpy as np

Polarity = Literal["n", "p"]


@dataclass
class OperatingPoint:
    """Small-signal view of one device group at its bias, one entry per design."""

    id: np.ndarray      # drain current, A
    gm: np.ndarray      # S
    gds: np.ndarray     # S
    gmb: np.ndarray     # S
    cgs: np.ndarray     # F, including overlap
    cgd: np.ndarray     # F, overlap (saturation)
    cgb: np.ndarray     # F
    cdb: np.ndarray     # F, drain junction at its bias
    csb: np.ndarray     # F, source junction at its bias
    vth: np.ndarray     # V, threshold at this VSB
    vdsat: np.ndarray   # V, drain-source voltage at which the device leaves saturation
    # Optional full intrinsic charge matrix, c_ij = dQi/dVj in F for i, j in "g", "d", "s" (keys "gd" etc.;
    # overlaps included, junctions not). When present the solver stamps it instead of cgs/cgd/cgb, which
    # keeps the non-reciprocal transcapacitances of a charge-based model.
    partials: dict[str, np.ndarray] | None = None


@dataclass(frozen=True)
class Layout:
    """The few layout rules a first-cut area and buildability check needs, SI units."""

    diffusion_length: float = 0.5e-6   # m of source/drain diffusion beside each gate (contacted)
    # Drawn area of a device over its W x (L + 2 diffusion): wells, guard rings, spacing and local routing.
    # 2 is common practice for matched analog devices with guard rings, not a foundry figure.
    overhead: float = 2.0
    resistor_sheet: float = 1e3        # Ohm per square of the resistor layer used for nulling resistors
    resistor_width: float = 1e-6       # m, drawn width of those resistors
    # Smallest reference current a bias branch may carry: leakage and mirror matching stop being
    # negligible below it (common practice: 100 nA in 0.18-0.13 um processes at room temperature).
    min_reference_current: float = 100e-9

    def device_area(self, w, l):
        return self.overhead * w * (l + 2.0 * self.diffusion_length)

    def resistor_area(self, r):
        return r / self.resistor_sheet * self.resistor_width**2


@runtime_checkable
class Technology(Protocol):
    """A process as ampfront sees it: device physics, a few limits, and how to write it for SPICE."""

    name: str
    supply: float          # nominal supply, V
    temperature: float     # K
    l_min: float           # m
    l_max: float           # m
    w_min: float           # m
    cap_density: float     # F/m^2 of the compensation capacitor
    gm_id_bounds: tuple[float, float]  # S/A range the model is valid over
    spice_init: tuple[str, ...]        # lines the netlists' .spiceinit needs (ngspice compatibility mode)
    length_grid: np.ndarray | None     # characterized lengths designs snap to (m), or None: any length
    layout: Layout                     # area and buildability rules
    # V beyond a device's vdsat before an output's linear range is judged to end there (see SquareLaw and
    # TableProcess: zero where vdsat is where the model's own gain collapses).
    saturation_guard: float
    kind: str                          # "square_law" or "gm_id_tables": which agreement bounds apply
    models_missing: str | None         # how to install the testbenches' model library, when it is missing

    def operating_point(self, polarity: Polarity, w, l, vgs, vds, vsb) -> OperatingPoint: ...

    def current(self, polarity: Polarity, w, l, vgs, vds, vsb) -> np.ndarray: ...

    def vgs_for_current(self, polarity: Polarity, w, l, i_d, vds, vsb) -> np.ndarray: ...

    def size(self, polarity: Polarity, gm_id, l, i_d, vds, vsb) -> tuple[np.ndarray, np.ndarray]:
        """Width (m) and VGS (V) giving drain current i_d at transconductance efficiency gm_id."""
        ...

    def flicker(self, polarity: Polarity, w, l, op: OperatingPoint) -> np.ndarray:
        """Drain-current flicker noise density at 1 Hz, A^2/Hz, at the operating point (NaN: unknown)."""
        ...

    def flicker_exponent(self, polarity: Polarity) -> float:
        """EF in S_id(f) = S_id(1 Hz) / f^EF."""
        ...

    def avt(self, polarity: Polarity) -> float:
        """Pelgrom threshold-mismatch coefficient, V*m: sigma(VT1 - VT2) / sqrt(2) = avt / sqrt(W L)."""
        ...

    def quantize_width(self, w) -> np.ndarray:
        """The drawable width nearest w (finger multiples for table technologies)."""
        ...

    def spice_instance(self, name: str, polarity: Polarity, nodes: tuple[str, str, str, str],
                       w: float, l: float) -> str: ...

    def spice_models(self, lengths: dict[Polarity, set[float]]) -> list[str]:
        """Lines a testbench needs before the subcircuit can be simulated (model cards or includes)."""
        ...


def diode_vgs(tech: Technology, polarity: Polarity, w, l, i_d, vsb=0.0, iterations: int = 4):
    """VGS of a diode-connected device (VDS = VGS) carrying i_d, by fixed-point iteration."""
    vgs = tech.vgs_for_current(polarity, w, l, i_d, np.full_like(np.asarray(i_d, float), 0.6), vsb)
    for _ in range(iterations):
        vgs = tech.vgs_for_current(polarity, w, l, i_d, vgs, vsb)
    return vgs
