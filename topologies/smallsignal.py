"""One small-signal solver for every topology, vectorized over the population.

A topology states its linearized circuit (conductances, transconductances and capacitances between named
nodes, one value per design); the solver builds the nodal admittance matrix Y(s) = G + sC for the whole
population and solves it on a frequency grid in batch. From the response it finds DC gain, the unity-gain
frequency (GBW), the phase margin and the gain margin.

Matrices are stored as (designs, n, n) and solved by one batched LAPACK call per frequency sweep, never by a
Python loop over designs.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .process.base import OperatingPoint

GROUND_NAMES = ("0", "gnd", "vdd", "vss")  # supplies are AC ground


def solve_batched(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve a[k] x[k] = b[k] for every k: a (M, n, n), b (M, n) -> x (M, n). LAPACK with partial pivoting."""
    return np.linalg.solve(a, b[..., None])[..., 0]


class Circuit:
    """Linear circuit of a population of designs. Values are arrays of shape (designs,) or scalars."""

    def __init__(self, nodes: list[str], designs: int, drive: str = "inp", grounds: tuple = ()):
        self.grounds = GROUND_NAMES + tuple(grounds)
        self.nodes = list(nodes)
        self.designs = designs
        self.drive = drive
        self._index = {name: i for i, name in enumerate(self.nodes)}
        size = len(self.nodes) + 1  # last row/column: the driven input
        self.G = np.zeros((designs, size, size))
        self.C = np.zeros((designs, size, size))

    def _idx(self, name: str) -> int | None:
        if name in self.grounds:
            return None
        if name == self.drive:
            return len(self.nodes)
        return self._index[name]

    def _stamp(self, matrix, rows: tuple, cols: tuple, value) -> None:
        """matrix[r, c] += sign_r * sign_c * value for the four corners of a two-terminal element."""
        for r, sr in zip(rows, (1.0, -1.0)):
            ir = self._idx(r)
            if ir is None:
                continue
            for c, sc in zip(cols, (1.0, -1.0)):
                ic = self._idx(c)
                if ic is not None:
                    matrix[:, ir, ic] += sr * sc * value

    def conductance(self, a: str, b: str, g) -> None:
        self._stamp(self.G, (a, b), (a, b), g)

    def resistor(self, a: str, b: str, r) -> None:
        self.conductance(a, b, 1.0 / np.asarray(r, float))

    def capacitor(self, a: str, b: str, c) -> None:
        self._stamp(self.C, (a, b), (a, b), c)

    def vccs(self, out_p: str, out_n: str, ctrl_p: str, ctrl_n: str, gm) -> None:
        """Current gm*(v(ctrl_p) - v(ctrl_n)) flowing from out_p through the source to out_n."""
        self._stamp(self.G, (out_p, out_n), (ctrl_p, ctrl_n), gm)

    def mosfet(self, d: str, g: str, s: str, b: str, op: OperatingPoint) -> None:
        self.vccs(d, s, g, s, op.gm)
        self.vccs(d, s, b, s, op.gmb)
        self.conductance(d, s, op.gds)
        self.capacitor(g, s, op.cgs)
        self.capacitor(g, d, op.cgd)
        self.capacitor(g, b, op.cgb)
        self.capacitor(d, b, op.cdb)
        self.capacitor(s, b, op.csb)

    def response(self, output: str, freqs: np.ndarray) -> np.ndarray:
        """v(output)/v(drive) for every design (rows) at every frequency (columns) in Hz.

        freqs is (F,) shared by all designs or (designs, F) per design.
        """
        n = len(self.nodes)
        out = self._index[output]
        w = 2 * np.pi * np.broadcast_to(np.asarray(freqs, float), (self.designs, np.shape(freqs)[-1]))
        # Real and imaginary parts written separately: Y = G + jwC without complex temporaries.
        a = np.empty((self.designs, w.shape[1], n, n), complex)
        a.real[...] = self.G[:, None, :n, :n]
        np.multiply(self.C[:, None, :n, :n], w[:, :, None, None], out=a.imag)
        rhs = np.empty((self.designs, w.shape[1], n), complex)
        rhs.real[...] = -self.G[:, None, :n, n]
        np.multiply(-self.C[:, None, :n, n], w[:, :, None], out=rhs.imag)
        return solve_batched(a, rhs)[..., out]

    def dc_gain(self, output: str) -> np.ndarray:
        n = len(self.nodes)
        return solve_batched(self.G[:, :n, :n], -self.G[:, :n, n])[:, self._index[output]]


@dataclass
class LoopMetrics:
    gain: np.ndarray              # DC gain, V/V (signed)
    gbw: np.ndarray               # unity-gain frequency, Hz (0 where |A(0)| <= 1)
    phase_margin: np.ndarray      # deg (-inf where there is no unity-gain crossing)
    gain_margin: np.ndarray       # dB (inf where the phase never reaches -180 deg)


def loop_metrics(circuit: Circuit, output: str, f_lo: float = 10.0, f_hi: float = 1e11,
                 per_decade: int = 3, refine: int = 4) -> LoopMetrics:
    """DC gain, GBW, phase and gain margins of the amplifier used as a unity-gain follower.

    A coarse log grid finds the crossings: at 3 points a decade one real pole turns the phase by at most
    21.4 deg a step, so the unwrap follows up to eight coincident poles. The grid starts at 10 Hz, below
    any non-dominant pole of a practical amplifier, so the phase there is within half a turn of its
    true value. `refine` regula-falsi steps on log|A| vs log f then pin the unity-gain frequency to well
    below 0.1 %.
    """
    gain = circuit.dc_gain(output)
    sign = np.where(gain < 0, -1.0, 1.0)
    grid = np.logspace(np.log10(f_lo), np.log10(f_hi), int(round(np.log10(f_hi / f_lo) * per_decade)) + 1)
    h = circuit.response(output, grid) * sign[:, None]
    mag = np.log(np.abs(h))
    phase = np.unwrap(np.angle(h), axis=1)
    # Anchor the unwrapped phase at 0 at low frequency (it starts within a fraction of a turn of 0).
    phase -= 2 * np.pi * np.round(phase[:, :1] / (2 * np.pi))
    rows = np.arange(circuit.designs)
    logf = np.log(grid)

    below = mag < 0.0
    has_ugf = below.any(axis=1) & ~below[:, 0]
    k = np.where(has_ugf, np.argmax(below, axis=1), 1)
    lo_f, hi_f = logf[k - 1], logf[k]
    lo_m, hi_m = mag[rows, k - 1], mag[rows, k]
    for _ in range(refine):
        t = np.clip(lo_m / np.where(lo_m - hi_m == 0, 1.0, lo_m - hi_m), 0.0, 1.0)
        mid_f = lo_f + t * (hi_f - lo_f)
        mid_m = np.log(np.abs(circuit.response(output, np.exp(mid_f)[:, None])[:, 0]))
        upper = mid_m > 0
        lo_f, lo_m = np.where(upper, mid_f, lo_f), np.where(upper, mid_m, lo_m)
        hi_f, hi_m = np.where(upper, hi_f, mid_f), np.where(upper, hi_m, mid_m)
    t = np.clip(lo_m / np.where(lo_m - hi_m == 0, 1.0, lo_m - hi_m), 0.0, 1.0)
    f_u = np.exp(lo_f + t * (hi_f - lo_f))
    h_u = circuit.response(output, f_u[:, None])[:, 0] * sign
    ref = phase[rows, k - 1]
    phase_u = ref + np.angle(h_u * np.exp(-1j * ref))
    pm = np.where(has_ugf, 180.0 + np.degrees(phase_u), -np.inf)
    gbw = np.where(has_ugf, f_u, 0.0)

    beyond = phase <= -np.pi
    has_180 = beyond.any(axis=1) & ~beyond[:, 0]
    j = np.where(has_180, np.argmax(beyond, axis=1), 1)
    p_lo, p_hi = phase[rows, j - 1], phase[rows, j]
    t = np.clip((p_lo + np.pi) / np.where(p_lo == p_hi, 1.0, p_lo - p_hi), 0.0, 1.0)
    f180 = np.exp(logf[j - 1] + t * (logf[j] - logf[j - 1]))
    h180 = circuit.response(output, f180[:, None])[:, 0]
    gm_db = np.where(has_180, -20.0 * np.log10(np.abs(h180)), np.inf)
    return LoopMetrics(gain=gain, gbw=gbw, phase_margin=pm, gain_margin=gm_db)
