"""A process described by gm/ID tables characterized from foundry models (see `ampfront characterize`).

Per unit width, on a grid of L x VGS x VDS x VSB, the tables hold currents, conductances and capacitances.
Interpolation is multilinear over (log L, VGS, VDS, VSB), on log values for the exponential quantities
(id, gm, gds, gmb) so weak inversion interpolates as well as strong. Queries outside the table give NaN,
which the search treats as a violated constraint: never a silent extrapolation.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .. import kernels
from . import table_kernels
from .base import Layout, OperatingPoint, Polarity

LOG_QUANTITIES = ("id", "gm", "gds", "gmb")
PARTIALS = ("cgg", "cgd", "cgs", "cdg", "cdd", "cds", "csg", "csd", "css")
LINEAR_QUANTITIES = PARTIALS + ("cdb", "csb", "vth", "vdsat")
_TINY = 1e-30


def _cubic(axis: np.ndarray, x):
    """First index and weights of the four-point Lagrange interpolation along `axis` at each x;
    NaN weights outside the axis."""
    x = np.asarray(x, float)
    i, t = _bracket(axis, x)
    start = np.clip(i - 1, 0, len(axis) - 4)
    nodes = axis[start[:, None] + np.arange(4)]                    # (N, 4)
    weights = np.ones_like(nodes)
    for j in range(4):
        for m in range(4):
            if m != j:
                weights[:, j] *= (x - nodes[:, m]) / (nodes[:, j] - nodes[:, m])
    return start, np.where(np.isnan(t)[:, None], np.nan, weights)


def _body_scale(vsb):
    return np.sqrt(0.8 + vsb)


def _bracket(axis: np.ndarray, x, transform=None):
    """Lower grid index and fraction along `axis` for every x, interpolating in transform(axis);
    NaN fraction outside the axis."""
    x = np.asarray(x, float)
    a = transform(axis) if transform else axis
    with np.errstate(invalid="ignore", divide="ignore"):
        xv = transform(x) if transform else x
    tol = 1e-9 * (a[-1] - a[0])
    inside = (xv >= a[0] - tol) & (xv <= a[-1] + tol)
    xv = np.clip(xv, a[0], a[-1])
    i = np.clip(np.searchsorted(a, xv, side="right") - 1, 0, len(a) - 2)
    t = (xv - a[i]) / (a[i + 1] - a[i])
    return i, np.where(inside, t, np.nan)


class DeviceTable:
    """One device at one corner and temperature."""

    def __init__(self, path: Path):
        with np.load(path) as data:
            self.meta = json.loads(str(data["meta"]))
            scale = self.meta.get("scale", {})
            self.values = {q: data[q].astype(float) * scale.get(q, 1.0) for q in LOG_QUANTITIES + LINEAR_QUANTITIES}
        grid = self.meta["grid"]
        self.l = np.array(grid["l_um"]) * 1e-6
        self.vgs = np.array(grid["vgs_v"])
        self.vds = np.array(grid["vds_v"])
        self.vsb = np.array(grid["vsb_v"])
        for q in LOG_QUANTITIES:
            self.values[q] = np.log(np.maximum(self.values[q], _TINY))
        # log(gm/ID) on the grid, for sizing by gm/ID.
        self.values["gmid"] = self.values["gm"] - self.values["id"]
        # The same data with VGS last, so a whole VGS curve is one contiguous gather.
        self._by_curve = {q: np.ascontiguousarray(v.transpose(0, 2, 3, 1)) for q, v in self.values.items()}
        # Every quantity of an operating point stacked on a last axis: one gather serves them all.
        self.stacked_names = LOG_QUANTITIES + LINEAR_QUANTITIES
        self._stacked = np.ascontiguousarray(np.stack([self._by_curve[q] for q in self.stacked_names], axis=-1))
        # The axes as the interpolation sees them, for the compiled kernels.
        self._axes = (np.log(self.l), self.vds, _body_scale(self.vsb))

    @staticmethod
    def _queries(*arrays):
        """1-D float queries of one length, contiguous for the kernels; already such arrays pass through
        untouched (small populations make many calls, so this path stays cheap)."""
        arrays = [np.asarray(a, float) for a in arrays]
        n = arrays[0].shape[0] if arrays[0].ndim == 1 else -1
        if all(a.ndim == 1 and a.shape[0] == n and a.flags.c_contiguous for a in arrays):
            return arrays
        arrays = np.broadcast_arrays(*(np.atleast_1d(a) for a in arrays))
        return [np.ascontiguousarray(a) for a in arrays]

    def _prepare(self, l, vds, vsb):
        """Interpolation weights over (L, VDS, VSB), shared by every VGS probe of a query.

        Linear in log L and in the body-effect scale of VSB; cubic (Lagrange through four points) in VDS,
        because gds bends through the saturation knee and the DIBL/channel-length-modulation transition
        faster than a straight line between grid points follows.
        """
        il, tl = _bracket(self.l, l, np.log)
        ib, tb = _bracket(self.vsb, vsb, _body_scale)
        vds_start, vds_weights = _cubic(self.vds, vds)
        # All 2 x 4 x 2 corners as (N, 16) index and weight arrays, so each probe is one gather.
        wl = np.stack([1 - tl, tl], axis=1)[:, :, None, None]
        wd = vds_weights[:, None, :, None]
        wb = np.stack([1 - tb, tb], axis=1)[:, None, None, :]
        weights = (wl * wd * wb).reshape(len(il), -1)
        grid = np.indices((2, 4, 2)).reshape(3, -1)
        return ((il[:, None] + grid[0]), (vds_start[:, None] + grid[1]), (ib[:, None] + grid[2]), weights)

    @staticmethod
    def _probe(table, corners, k):
        i, j, m, w = corners
        return (table[i, j, m, np.asarray(k)[:, None]] * w).sum(axis=1)

    def curve(self, name: str, l, vds, vsb) -> np.ndarray:
        """The quantity along the whole VGS axis for each query: shape (N, len(vgs))."""
        if kernels.enabled():
            l, vds, vsb = self._queries(l, vds, vsb)
            return table_kernels.curve(self._by_curve[name], *self._axes, l, vds, vsb)
        l, vds, vsb = np.broadcast_arrays(*(np.atleast_1d(np.asarray(a, float)) for a in (l, vds, vsb)))
        i, j, m, w = self._prepare(l, vds, vsb)
        return (self._by_curve[name][i, j, m] * w[:, :, None]).sum(axis=1)

    def at(self, name: str, l, vgs, vds, vsb) -> np.ndarray:
        if kernels.enabled():
            l, vgs, vds, vsb = self._queries(l, vgs, vds, vsb)
            return table_kernels.at(self._by_curve[name], *self._axes, self.vgs, l, vgs, vds, vsb)
        l, vgs, vds, vsb = np.broadcast_arrays(*(np.atleast_1d(np.asarray(a, float)) for a in (l, vgs, vds, vsb)))
        ig, tg = _bracket(self.vgs, vgs)
        table = self._by_curve[name]
        corners = self._prepare(l, vds, vsb)
        return (1 - tg) * self._probe(table, corners, ig) + tg * self._probe(table, corners, ig + 1)

    def at_all(self, l, vgs, vds, vsb) -> dict[str, np.ndarray]:
        """Every stored quantity at once (logs for the exponential ones), one interpolation."""
        if kernels.enabled():
            l, vgs, vds, vsb = self._queries(l, vgs, vds, vsb)
            values = table_kernels.at_all(self._stacked, *self._axes, self.vgs, l, vgs, vds, vsb)
            return {name: values[:, k] for k, name in enumerate(self.stacked_names)}
        l, vgs, vds, vsb = np.broadcast_arrays(*(np.atleast_1d(np.asarray(a, float)) for a in (l, vgs, vds, vsb)))
        ig, tg = _bracket(self.vgs, vgs)
        corners = self._prepare(l, vds, vsb)
        i, j, m, w = corners
        low = (self._stacked[i, j, m, ig[:, None]] * w[:, :, None]).sum(axis=1)
        high = (self._stacked[i, j, m, ig[:, None] + 1] * w[:, :, None]).sum(axis=1)
        values = (1 - tg)[:, None] * low + tg[:, None] * high
        return {name: values[:, k] for k, name in enumerate(self.stacked_names)}

    def solve_vgs(self, name: str, l, target, vds, vsb, from_top: bool = False) -> np.ndarray:
        """VGS where the (log) quantity reaches `target`, by bisection over the VGS grid, then linear
        interpolation inside the final interval (the inverse of `at`).

        Rising curves (log id) are searched as rising; falling ones (log gm/ID) as falling, the flat
        weak-inversion end counting as above any reachable target. NaN where the table never reaches it.
        """
        if kernels.enabled():
            l, target, vds, vsb = self._queries(l, target, vds, vsb)
            return table_kernels.solve_vgs(self._by_curve[name], *self._axes, self.vgs, l, target, vds, vsb,
                                           -1.0 if from_top else 1.0)
        l, vds, vsb = np.broadcast_arrays(*(np.atleast_1d(np.asarray(a, float)) for a in (l, vds, vsb)))
        target = np.broadcast_to(np.asarray(target, float), l.shape)
        table = self._by_curve[name]
        corners = self._prepare(l, vds, vsb)
        sign = -1.0 if from_top else 1.0          # search sign * curve, which rises
        goal = sign * target
        lo = np.zeros(l.shape, int)
        hi = np.full(l.shape, len(self.vgs) - 1)
        ok = (sign * self._probe(table, corners, lo) < goal) & (sign * self._probe(table, corners, hi) >= goal)
        while np.any(hi - lo > 1):
            mid = (lo + hi) // 2
            below = sign * self._probe(table, corners, mid) < goal
            lo, hi = np.where(below, mid, lo), np.where(below, hi, mid)
        y0, y1 = self._probe(table, corners, lo), self._probe(table, corners, hi)
        t = (target - y0) / np.where(y1 == y0, 1.0, y1 - y0)
        vgs = self.vgs[lo] + np.clip(t, 0.0, 1.0) * (self.vgs[hi] - self.vgs[lo])
        return np.where(ok, vgs, np.nan)


# k/q, V/K.
BOLTZMANN_OVER_Q = 1.380649e-23 / 1.602176634e-19


@dataclass(frozen=True)
class TableProcess:
    """A gm/ID-table technology; implements `topologies.process.base.Technology`."""

    name: str
    supply: float
    temperature: float
    w_min: float
    cap_density: float
    nmos: DeviceTable
    pmos: DeviceTable
    corner: str
    spice_library: tuple[str, ...]      # lines that load the models in a testbench
    spice_init: tuple[str, ...]         # lines for the netlists' .spiceinit
    description: str = ""
    gm_id_bounds: tuple[float, float] = (3.0, 25.0)
    # Measured flicker coefficients per polarity (optimize.flicker): {"l_um", "gm_id", "k_v2m2", "exponent"};
    # None leaves flicker unknown (NaN), never silently zero.
    flicker_n: dict | None = None
    flicker_p: dict | None = None
    avt_n: float = float("nan")         # V*m, Pelgrom coefficients (NaN: unknown)
    avt_p: float = float("nan")
    models_missing: str | None = None   # how to install the model library when it is not installed
    layout: Layout = Layout()

    kind = "gm_id_tables"

    def avt(self, polarity: Polarity) -> float:
        return self.avt_n if polarity == "n" else self.avt_p

    @property
    def saturation_guard(self) -> float:
        """3 U_T: BSIM4's vdsat leaves out the weak-inversion part of the saturation voltage, which the
        charge-based (EKV) form VDSsat = 2 U_T sqrt(IC + 1/4) + 3 U_T carries (Enz, Krummenacher and Vittoz,
        1995; from memory). Measured in ngspice over every front design of both demo studies, output
        levels set by a vdsat claimed up to 69 mV more than the DC sweep showed (DEVELOPERS.md, campaign)."""
        return 3 * BOLTZMANN_OVER_Q * self.temperature

    @property
    def finger_width(self) -> float:
        """Every device is m parallel fingers of the characterized width, so narrow-width effects in the
        tables are the ones the layout will have, and mirror ratios are ratios of finger counts."""
        return float(self.nmos.meta["grid"]["width_um"]) * 1e-6

    def quantize_width(self, w):
        wf = self.finger_width
        return np.maximum(np.round(np.asarray(w) / wf), 1.0) * wf

    @property
    def length_grid(self) -> np.ndarray:
        """Lengths characterized for both polarities, m: designs use these exactly."""
        return np.intersect1d(np.round(self.nmos.l, 12), np.round(self.pmos.l, 12))

    @property
    def l_min(self) -> float:
        return float(self.nmos.l[0])

    @property
    def l_max(self) -> float:
        return float(min(self.nmos.l[-1], self.pmos.l[-1]))

    def _t(self, polarity: Polarity) -> DeviceTable:
        return self.nmos if polarity == "n" else self.pmos

    def current(self, polarity, w, l, vgs, vds, vsb):
        return np.asarray(w) * np.exp(self._t(polarity).at("id", l, vgs, vds, vsb))

    def vgs_for_current(self, polarity, w, l, i_d, vds, vsb):
        return self._t(polarity).solve_vgs("id", l, np.log(np.asarray(i_d) / np.asarray(w)), vds, vsb)

    def size(self, polarity, gm_id, l, i_d, vds, vsb):
        table = self._t(polarity)
        vgs = table.solve_vgs("gmid", l, np.log(gm_id), vds, vsb, from_top=True)
        return self.quantize_width(np.asarray(i_d) / np.exp(table.at("id", l, vgs, vds, vsb))), vgs

    def operating_point(self, polarity, w, l, vgs, vds, vsb) -> OperatingPoint:
        table = self._t(polarity)
        w = np.asarray(w, float)
        values = table.at_all(l, vgs, vds, vsb)
        log = {q: np.exp(values[q]) * w for q in LOG_QUANTITIES}
        lin = {q: values[q] for q in LINEAR_QUANTITIES}
        partials = {q[1:]: lin[q] * w for q in PARTIALS}
        return OperatingPoint(
            id=log["id"], gm=log["gm"], gds=log["gds"], gmb=log["gmb"],
            # Two-terminal views of the gate charge, for reports and hand checks.
            cgs=-partials["gs"], cgd=-partials["gd"], cgb=partials["gg"] + partials["gd"] + partials["gs"],
            cdb=lin["cdb"] * w, csb=lin["csb"] * w, vth=lin["vth"], vdsat=lin["vdsat"], partials=partials,
        )

    def _flicker(self, polarity: Polarity) -> dict | None:
        return self.flicker_n if polarity == "n" else self.flicker_p

    def flicker(self, polarity, w, l, op: OperatingPoint):
        """S_id * f = K gm^2 / (W L), K measured at 1 Hz and interpolated in log L and gm/ID (clipped)."""
        data = self._flicker(polarity)
        if data is None:
            return np.full(np.shape(op.gm), np.nan)
        logl = np.log(np.asarray(data["l_um"]) * 1e-6)
        levels = np.asarray(data["gm_id"])
        k = np.asarray(data["k_v2m2"])
        with np.errstate(divide="ignore", invalid="ignore"):
            x = np.clip(np.log(np.asarray(l, float)), logl[0], logl[-1])
            y = np.clip(op.gm / op.id, levels[0], levels[-1])
        i = np.clip(np.searchsorted(logl, x, side="right") - 1, 0, len(logl) - 2)
        j = np.clip(np.searchsorted(levels, y, side="right") - 1, 0, len(levels) - 2)
        tx = (x - logl[i]) / (logl[i + 1] - logl[i])
        ty = (y - levels[j]) / (levels[j + 1] - levels[j])
        coef = ((1 - tx) * (1 - ty) * k[i, j] + tx * (1 - ty) * k[i + 1, j]
                + (1 - tx) * ty * k[i, j + 1] + tx * ty * k[i + 1, j + 1])
        return coef * op.gm**2 / (np.asarray(w) * np.asarray(l))

    def flicker_exponent(self, polarity) -> float:
        data = self._flicker(polarity)
        return float(np.mean(data["exponent"])) if data is not None else 1.0

    def spice_instance(self, name, polarity, nodes, w, l):
        device = self._t(polarity).meta["device"]
        d, g, s, b = nodes
        fingers = max(int(round(w / self.finger_width)), 1)
        return (f"XM{name} {d} {g} {s} {b} {device} W={self.finger_width * 1e6:.6g} L={l * 1e6:.6g} nf=1 "
                f"m={fingers}")

    def spice_models(self, lengths):
        if self.models_missing:
            # A testbench that cannot run says why, instead of failing on a missing model in ngspice.
            return [f"* {self.name}: model library not installed ({self.models_missing})"]
        return [f"* {self.name}: {self.description}", *self.spice_library]
