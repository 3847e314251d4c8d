"""Long-channel square-law process, equation for equation the ngspice level-1 MOSFET (Shichman-Hodges
drain current, Meyer gate capacitances, depletion junction capacitances), so that an exported netlist
simulates to what the model predicts.

Channel-length modulation scales as 1/L (lambda = lambda_l / L), which level 1 cannot express in one
card, so the netlist carries one model card per polarity and drawn length.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .base import Layout, OperatingPoint, Polarity

EPS_OX = 3.9 * 8.854214871e-12  # F/m, the value ngspice uses for SiO2


@dataclass(frozen=True)
class LevelOneDevice:
    """Parameters of one polarity, SI units, magnitudes (vto > 0 for both polarities)."""

    kp: float        # A/V^2
    vto: float       # V
    lambda_l: float  # m/V; lambda = lambda_l / L
    gamma: float     # V^0.5
    phi: float       # V
    tox: float       # m
    cgso: float      # F/m
    cgdo: float      # F/m
    cgbo: float      # F/m
    cj: float        # F/m^2
    mj: float
    cjsw: float      # F/m
    mjsw: float
    pb: float        # V
    avt: float = float("nan")  # V*m, Pelgrom threshold-mismatch coefficient: sigma(dVT) = avt / sqrt(W L)
    kf: float = 0.0            # ngspice level-1 flicker coefficient (AF = 1), see SquareLaw.flicker


@dataclass(frozen=True)
class SquareLaw:
    """A square-law technology; implements `topologies.process.base.Technology`."""

    name: str
    supply: float
    temperature: float
    l_min: float
    l_max: float
    w_min: float
    cap_density: float
    diffusion_length: float
    nmos: LevelOneDevice
    pmos: LevelOneDevice
    description: str = ""
    spice_init: tuple[str, ...] = ()
    # Square law is a strong-inversion model; below ~0.1 V overdrive it overstates gm (common practice).
    gm_id_bounds: tuple[float, float] = (4.0, 20.0)
    layout: Layout = Layout()
    # Any length within the limits is drawn (on a 5 nm grid): no characterized set to snap to.
    length_grid = None
    # Level 1's output conductance is constant up to VDS = VGS - VT and its gain collapses exactly there.
    saturation_guard = 0.0
    kind = "square_law"
    # Level-1 models are written into every netlist: nothing to install.
    models_missing = None

    def quantize_width(self, w):
        return np.asarray(w, float)

    def avt(self, polarity: Polarity) -> float:
        return self._dev(polarity).avt

    def _dev(self, polarity: Polarity) -> LevelOneDevice:
        return self.nmos if polarity == "n" else self.pmos

    def vth(self, polarity: Polarity, vsb):
        d = self._dev(polarity)
        vsb = np.maximum(vsb, 0.0)
        return d.vto + d.gamma * (np.sqrt(d.phi + vsb) - np.sqrt(d.phi))

    def _beta(self, polarity: Polarity, w, l):
        return self._dev(polarity).kp * w / l

    def current(self, polarity: Polarity, w, l, vgs, vds, vsb):
        d = self._dev(polarity)
        vov = np.maximum(vgs - self.vth(polarity, vsb), 0.0)
        lam = d.lambda_l / l
        beta = self._beta(polarity, w, l)
        sat = 0.5 * beta * vov**2
        triode = beta * (vov - 0.5 * vds) * vds
        return np.where(vds >= vov, sat, triode) * (1.0 + lam * vds)

    def vgs_for_current(self, polarity: Polarity, w, l, i_d, vds, vsb):
        d = self._dev(polarity)
        lam = d.lambda_l / l
        vov = np.sqrt(2.0 * i_d / (self._beta(polarity, w, l) * (1.0 + lam * vds)))
        return self.vth(polarity, vsb) + vov

    def size(self, polarity: Polarity, gm_id, l, i_d, vds, vsb):
        d = self._dev(polarity)
        vov = 2.0 / gm_id
        lam = d.lambda_l / l
        w = 2.0 * i_d * l / (d.kp * vov**2 * (1.0 + lam * vds))
        return w, self.vth(polarity, vsb) + vov

    def flicker(self, polarity: Polarity, w, l, op: OperatingPoint):
        """Drain-current flicker density times frequency, A^2: ngspice's level-1 form with AF = 1,
        KF ID / (Cox^2 W L) (checked against ngspice's noise analysis in tests/test_noise.py)."""
        d = self._dev(polarity)
        return d.kf * op.id / ((EPS_OX / d.tox) ** 2 * w * l)

    def flicker_exponent(self, polarity: Polarity) -> float:
        return 1.0   # level-1 EF default

    def junction_area(self, w):
        """Drain (or source) diffusion area and perimeter for a device of width w."""
        return w * self.diffusion_length, w + 2.0 * self.diffusion_length

    def _junction(self, d: LevelOneDevice, w, reverse):
        area, perim = self.junction_area(w)
        reverse = np.maximum(reverse, 0.0)
        return (d.cj * area * (1.0 + reverse / d.pb) ** (-d.mj)
                + d.cjsw * perim * (1.0 + reverse / d.pb) ** (-d.mjsw))

    def operating_point(self, polarity: Polarity, w, l, vgs, vds, vsb) -> OperatingPoint:
        d = self._dev(polarity)
        w, l, vgs, vds, vsb = np.broadcast_arrays(*(np.asarray(a, float) for a in (w, l, vgs, vds, vsb)))
        vth = self.vth(polarity, vsb)
        vov = np.maximum(vgs - vth, 0.0)
        lam = d.lambda_l / l
        beta = self._beta(polarity, w, l)
        sat = vds >= vov
        i_d = self.current(polarity, w, l, vgs, vds, vsb)
        gm = np.where(sat, beta * vov * (1 + lam * vds), beta * vds * (1 + lam * vds))
        gds = np.where(sat, lam * 0.5 * beta * vov**2,
                       beta * (vov - vds) * (1 + lam * vds) + lam * beta * (vov - 0.5 * vds) * vds)
        gmb = gm * d.gamma / (2.0 * np.sqrt(d.phi + np.maximum(vsb, 0.0)))
        cox = EPS_OX / d.tox * w * l
        cgs = np.where(sat, 2.0 / 3.0 * cox, 0.5 * cox) + d.cgso * w
        cgd = np.where(sat, 0.0, 0.5 * cox) + d.cgdo * w
        cgb = d.cgbo * l + np.zeros_like(w)
        return OperatingPoint(
            id=i_d, gm=gm, gds=gds, gmb=gmb, cgs=cgs, cgd=cgd, cgb=cgb,
            cdb=self._junction(d, w, vds + vsb), csb=self._junction(d, w, vsb), vth=vth, vdsat=vov,
        )

    # ---- SPICE side -------------------------------------------------------------------------------
    @staticmethod
    def model_name(polarity: Polarity, l: float) -> str:
        return f"{polarity}sq_l{round(l * 1e9):d}n"

    def spice_instance(self, name, polarity, nodes, w, l):
        area, perim = self.junction_area(w)
        d, g, s, b = nodes
        return (f"M{name} {d} {g} {s} {b} {self.model_name(polarity, l)} W={w:.6g} L={l:.6g} "
                f"AD={area:.6g} AS={area:.6g} PD={perim:.6g} PS={perim:.6g}")

    def spice_models(self, lengths):
        lines = [f"* {self.name}: ngspice level-1 cards, one per polarity and drawn length (lambda ~ 1/L)"]
        for polarity, kind in (("n", "nmos"), ("p", "pmos")):
            d = self._dev(polarity)
            sign = 1.0 if polarity == "n" else -1.0
            for l in sorted(lengths.get(polarity, ())):
                lines.append(
                    f".model {self.model_name(polarity, l)} {kind} level=1 vto={sign * d.vto:.6g} "
                    f"kp={d.kp:.6g} gamma={d.gamma:.6g} phi={d.phi:.6g} lambda={d.lambda_l / l:.6g} "
                    f"tox={d.tox:.6g} cgso={d.cgso:.6g} cgdo={d.cgdo:.6g} cgbo={d.cgbo:.6g} "
                    f"cj={d.cj:.6g} mj={d.mj:.6g} cjsw={d.cjsw:.6g} mjsw={d.mjsw:.6g} pb={d.pb:.6g} "
                    f"ld=0 kf={d.kf:.6g} af=1 tnom={self.temperature - 273.15:.6g}"
                )
        return lines
