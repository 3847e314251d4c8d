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

from . import kernels, loop_kernels
from .process.base import OperatingPoint

GROUND_NAMES = ("0", "gnd", "vdd", "vss")  # supplies are AC ground


def solve_batched(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve a[k] x[k] = b[k] for every k: a (M, n, n), b (M, n) -> x (M, n). LAPACK with partial pivoting."""
    return np.linalg.solve(a, b[..., None])[..., 0]


class Circuit:
    """Linear circuit of a population of designs. Values are arrays of shape (designs,) or scalars."""

    def __init__(self, nodes: list[str], designs: int, drive: str | tuple[str, ...] = "inp", grounds: tuple = ()):
        # `drive` names the node(s) the AC source moves together (both inputs for common mode, vdd for
        # supply rejection); every other listed node and the supplies are AC ground.
        self.drives = (drive,) if isinstance(drive, str) else tuple(drive)
        self.grounds = tuple(g for g in GROUND_NAMES + tuple(grounds) if g not in self.drives)
        self.nodes = list(nodes)
        self.designs = designs
        self.drive = drive
        self._index = {name: i for i, name in enumerate(self.nodes)}
        size = len(self.nodes) + 1  # last row/column: the driven input
        self.G = np.zeros((designs, size, size))
        self.C = np.zeros((designs, size, size))
        # Adjoint DC solutions by output node: noise and the output resistance ask for the same one.
        # Stamping clears it.
        self._adjoint: dict[str, np.ndarray] = {}

    def _idx(self, name: str) -> int | None:
        if name in self.drives:
            return len(self.nodes)
        if name in self.grounds:
            return None
        return self._index[name]

    def _stamp(self, matrix, rows: tuple, cols: tuple, value) -> None:
        """matrix[r, c] += sign_r * sign_c * value for the four corners of a two-terminal element."""
        self._adjoint.clear()
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
        if op.partials is None:
            self.capacitor(g, s, op.cgs)
            self.capacitor(g, d, op.cgd)
            self.capacitor(g, b, op.cgb)
        else:
            self._charge_matrix({"g": g, "d": d, "s": s, "b": b}, op.partials)
        self.capacitor(d, b, op.cdb)
        self.capacitor(s, b, op.csb)

    def _charge_matrix(self, nodes: dict[str, str], c: dict[str, np.ndarray]) -> None:
        """Stamp dQi/dVj for all four terminals; the bulk row and column follow from charge conservation
        (columns sum to zero) and from invariance to a common shift of all terminals (rows sum to zero)."""
        self._adjoint.clear()
        full = dict(c)
        for i in "gds":
            full[i + "b"] = -(c[i + "g"] + c[i + "d"] + c[i + "s"])
        for j in "gdsb":
            full["b" + j] = -(full["g" + j] + full["d" + j] + full["s" + j])
        for i in "gdsb":
            row = self._idx(nodes[i])
            if row is None:
                continue
            for j in "gdsb":
                col = self._idx(nodes[j])
                if col is not None:
                    self.C[:, row, col] += full[i + j]

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

    def subset(self, rows: np.ndarray) -> "Circuit":
        """The same circuit for the designs at `rows` only."""
        part = Circuit(self.nodes, len(rows), self.drive, self.grounds)
        part.G, part.C = self.G[rows], self.C[rows]      # fancy indexing already copies
        return part

    def transimpedance(self, output: str):
        """At DC: v(output) per ampere injected into each node, for every design, by one adjoint solve
        (G^T z = e_out). Returns a function of a node name; ground and driven nodes give 0."""
        n = len(self.nodes)
        z = self._adjoint.get(output)
        if z is None:
            unit = np.zeros((self.designs, n))
            unit[:, self._index[output]] = 1.0
            g = self.G[:, :n, :n]
            broken = ~np.isfinite(g).all(axis=(1, 2))
            if broken.any():
                g = np.where(broken[:, None, None], np.eye(n), g)
            z = solve_batched(np.swapaxes(g, 1, 2), unit)
            z[broken] = np.nan
            self._adjoint[output] = z

        def at(node: str) -> np.ndarray:
            i = self._idx(node)
            return z[:, i] if i is not None and i < n else np.zeros(self.designs)
        return at

    def dc_gain(self, output: str) -> np.ndarray:
        n = len(self.nodes)
        return solve_batched(self.G[:, :n, :n], -self.G[:, :n, n])[:, self._index[output]]


@dataclass
class LoopMetrics:
    gain: np.ndarray              # DC gain, V/V (signed)
    gbw: np.ndarray               # unity-gain frequency, Hz (0 where |A(0)| <= 1)
    phase_margin: np.ndarray      # deg (-inf where there is no unity-gain crossing)
    gain_margin: np.ndarray       # dB (inf where the phase never reaches -180 deg)
    rhp_poles: np.ndarray | None = None   # open-loop poles in the right half plane (an unstable amplifier)
    modal: "Modal | None" = None          # the modal form the figures came from, for reuse


class Modal:
    """The population's responses in modal form, for evaluation at any frequency in O(n) per design.

    With M = G^-1 C = V diag(lam) V^-1, (G + sC) x = b0 + s b1 becomes
    x_out(s) = sum_i (r0_i + s r1_i) / (1 + s lam_i), poles at s = -1/lam_i (lam_i = 0: a pole at infinity,
    which is how a singular C shows up). One real solve, one eigendecomposition and one complex solve per
    design replace a complex solve per frequency.
    """

    def __init__(self, circuit: Circuit, output: str):
        n = len(circuit.nodes)
        g = circuit.G[:, :n, :n]
        rhs = np.concatenate([circuit.C[:, :n, :n], -circuit.G[:, :n, n:n + 1], -circuit.C[:, :n, n:n + 1]],
                             axis=2)
        sol = np.linalg.solve(g, rhs)
        self.lam, vectors = np.linalg.eig(sol[:, :, :n])
        self.vectors = vectors   # kept: another input column of the same circuit needs only new residues
        coef = np.linalg.solve(vectors, sol[:, :, n:].astype(complex))
        row = vectors[:, circuit.nodes.index(output), :]
        self.r0, self.r1 = row * coef[:, :, 0], row * coef[:, :, 1]
        self.dc = sol[:, circuit.nodes.index(output), n]

    def response(self, freqs) -> np.ndarray:
        s = 2j * np.pi * np.broadcast_to(np.asarray(freqs, float), (len(self.lam), np.shape(freqs)[-1]))
        s = s[:, :, None]
        return ((self.r0[:, None, :] + s * self.r1[:, None, :]) / (1.0 + s * self.lam[:, None, :])).sum(axis=2)


# Designs whose modal response differs from a direct solve by more than this at the unity-gain frequency
# (near-defective eigenvectors) are recomputed by direct solves over the whole grid.
MODAL_TOLERANCE = 1e-7


def loop_metrics(circuit: Circuit, output: str, f_lo: float = 1e-3, f_hi: float = 1e11,
                 per_decade: int = 8, refine: int = 6) -> LoopMetrics:
    """DC gain, GBW, phase and gain margins of the amplifier used as a unity-gain follower.

    Fast path: the modal form, checked design by design against one direct solve at the unity-gain
    frequency; designs that fail the check (or a population whose matrices LAPACK cannot factor) take
    the direct path, a complex solve at every grid frequency. With numba the grid pass and the check's
    solve run compiled (loop_kernels); the numpy code stays the reference they are tested against.
    """
    args = (f_lo, f_hi, per_decade, refine)
    # Designs with non-finite elements (outside a table, dead devices) get a harmless stand-in circuit so
    # the batched LAPACK calls run, and NaN results.
    broken = ~(np.isfinite(circuit.G).all(axis=(1, 2)) & np.isfinite(circuit.C).all(axis=(1, 2)))
    if broken.any():
        circuit = circuit.subset(np.arange(circuit.designs))
        size = circuit.G.shape[1]
        circuit.G[broken] = np.eye(size)
        circuit.C[broken] = 0.0
    try:
        modal = Modal(circuit, output)
    except np.linalg.LinAlgError:
        modal = None
    if modal is None:
        result = _crossings(circuit.dc_gain(output), lambda f: circuit.response(output, f), *args)
        return _blank(result, broken)
    compiled = kernels.enabled()
    with np.errstate(all="ignore"):
        if compiled:
            result, fast = _crossings_compiled(modal, *args)
        else:
            result = _crossings(modal.dc.real, modal.response, *args)
        # Pole s = -1/lam lies in the right half plane when Re(lam) < 0 (lam = 0: a pole at infinity).
        result.rhp_poles = (modal.lam.real < -1e-9 * np.abs(modal.lam)).sum(axis=1).astype(float)
        result.modal = modal
        probe = np.where(result.gbw > 0, result.gbw, f_lo)[:, None]
        if compiled:
            # Its rounding differs from LAPACK's far below MODAL_TOLERANCE, so the check picks the same designs.
            direct = loop_kernels.direct(circuit.G, circuit.C, circuit.nodes.index(output), probe[:, 0])
        else:
            direct = circuit.response(output, probe)[:, 0]
            fast = modal.response(probe)[:, 0]
        bad = ~(np.abs(fast - direct) <= MODAL_TOLERANCE * np.abs(direct))
    if bad.any():
        sub = circuit.subset(np.flatnonzero(bad))
        redo = _crossings(sub.dc_gain(output), lambda f: sub.response(output, f), *args)
        for field in ("gain", "gbw", "phase_margin", "gain_margin"):
            getattr(result, field)[bad] = getattr(redo, field)
    return _blank(result, broken)


def _blank(result: LoopMetrics, rows: np.ndarray) -> LoopMetrics:
    if result.rhp_poles is None:
        result.rhp_poles = np.zeros(len(result.gain))
    for field in ("gain", "gbw", "phase_margin", "gain_margin", "rhp_poles"):
        getattr(result, field)[rows] = np.nan
    return result


def refer_margin(raw):
    """Phase margin (deg) referred to the nearest turn, in [-180, 180): only the phase at the crossover
    modulo a turn is a property of the loop. A continuous phase carried through a sharp doublet can come
    out a full turn off either way, depending on where the grid falls: read raw, a turn too far fails a
    sound design (margin near -290 deg) and a turn too few lifts a failing one above 180 deg. The testbench
    (optimize/outputs/netlist.py) and the closed-loop reading (stability._phase_reading) refer it the same
    way. The compiled twin (loop_kernels.crossings) writes the same formula."""
    raw = np.asarray(raw, float)
    return raw - 360.0 * np.floor((raw + 180.0) / 360.0)


def _grid(f_lo: float, f_hi: float, per_decade: int) -> np.ndarray:
    return np.logspace(np.log10(f_lo), np.log10(f_hi), int(round(np.log10(f_hi / f_lo) * per_decade)) + 1)


def _crossings_compiled(modal: Modal, f_lo: float, f_hi: float, per_decade: int, refine: int):
    """_crossings on the modal form in one compiled pass; also the modal response at the check's probe."""
    grid = _grid(f_lo, f_hi, per_decade)
    gain = np.ascontiguousarray(modal.dc.real)
    parts = (np.ascontiguousarray(a, complex) for a in (modal.r0, modal.r1, modal.lam))
    gbw, pm, gm_db, probe = loop_kernels.crossings(gain, *parts, grid, np.log(grid), refine, f_lo,
                                                   FAST_TURN_POINTS)
    return LoopMetrics(gain=gain, gbw=gbw, phase_margin=pm, gain_margin=gm_db), probe


# A grid step over which the principal phase moves by more than a quarter turn may have gone the long way
# round (a sharp doublet or resonance between two points): np.unwrap takes the short way. Such steps are
# walked on FAST_TURN_POINTS sub-steps, log-spaced, to learn the way the phase really went; the -180 deg
# crossing (gain margin) then comes from the phase as it is, not a full turn off.
FAST_TURN = 0.5 * np.pi
FAST_TURN_POINTS = 256


def _resolve_fast_turns(phase, logf, response):
    """The grid's unwrapped phase (designs, F) with each fast step's turn read on a finer walk."""
    step = np.diff(phase, axis=1)
    fast = np.abs(step) > FAST_TURN
    count = fast.sum(axis=1)
    if not count.any():
        return phase
    width = int(count.max())
    order = np.argsort(~fast, axis=1, kind="stable")[:, :width]
    valid = np.arange(width)[None, :] < count[:, None]
    rows = np.arange(len(phase))[:, None]
    # Sub-walks of every fast step side by side, (designs, width, points), both grid ends included.
    u = np.linspace(0.0, 1.0, FAST_TURN_POINTS + 1)
    lo, hi = logf[order], logf[order + 1]
    f = np.exp(lo[:, :, None] + u[None, None, :] * (hi - lo)[:, :, None])
    h = response(f.reshape(len(phase), -1)).reshape(f.shape)
    walked = np.unwrap(np.angle(h), axis=2)
    turn = walked[:, :, -1] - walked[:, :, 0]
    # The grid's step and the walk's differ by whole turns only: the ends are the same two values.
    extra = 2 * np.pi * np.round((turn - step[rows, order]) / (2 * np.pi))
    correction = np.zeros(phase.shape)
    np.add.at(correction, (np.broadcast_to(rows, order.shape)[valid], order[valid] + 1), extra[valid])
    return phase + np.cumsum(correction, axis=1)


def _crossings(gain, response, f_lo: float, f_hi: float, per_decade: int, refine: int) -> LoopMetrics:
    """DC gain, GBW, phase and gain margins of the amplifier used as a unity-gain follower.

    A log grid finds the crossings: at 8 points a decade one real pole turns the phase by at most 8 deg a
    step, so the unwrap follows clusters of poles; a step turning more than a quarter turn (a sharp
    resonance or doublet) is walked on a fine sub-grid to learn which way it went, and the -180 deg
    crossing's step is walked too, so the gain margin reads the phase as it is (_resolve_fast_turns). The grid starts at 1 mHz, below
    the second pole of any amplifier worth reporting, so the phase there is within half a turn of its
    true value. `refine` regula-falsi steps on log|A| vs log f then pin the unity-gain frequency to well
    below 0.1 %.
    """
    designs = len(gain)
    sign = np.where(gain < 0, -1.0, 1.0)
    grid = _grid(f_lo, f_hi, per_decade)
    h = response(grid) * sign[:, None]
    mag = np.log(np.abs(h))
    phase = np.unwrap(np.angle(h), axis=1)
    # Anchor the unwrapped phase at 0 at low frequency (it starts within a fraction of a turn of 0).
    phase -= 2 * np.pi * np.round(phase[:, :1] / (2 * np.pi))
    rows = np.arange(designs)
    logf = np.log(grid)
    phase = _resolve_fast_turns(phase, logf, lambda f: response(f) * sign[:, None])

    below = mag < 0.0
    has_ugf = below.any(axis=1) & ~below[:, 0]
    k = np.where(has_ugf, np.argmax(below, axis=1), 1)
    lo_f, hi_f = logf[k - 1], logf[k]
    lo_m, hi_m = mag[rows, k - 1], mag[rows, k]
    for _ in range(refine):
        t = np.clip(lo_m / np.where(lo_m - hi_m == 0, 1.0, lo_m - hi_m), 0.0, 1.0)
        mid_f = lo_f + t * (hi_f - lo_f)
        mid_m = np.log(np.abs(response(np.exp(mid_f)[:, None])[:, 0]))
        upper = mid_m > 0
        lo_f, lo_m = np.where(upper, mid_f, lo_f), np.where(upper, mid_m, lo_m)
        hi_f, hi_m = np.where(upper, hi_f, mid_f), np.where(upper, hi_m, mid_m)
    t = np.clip(lo_m / np.where(lo_m - hi_m == 0, 1.0, lo_m - hi_m), 0.0, 1.0)
    f_u = np.exp(lo_f + t * (hi_f - lo_f))
    h_u = response(f_u[:, None])[:, 0] * sign
    ref = phase[rows, k - 1]
    phase_u = ref + np.angle(h_u * np.exp(-1j * ref))
    pm = np.where(has_ugf, refer_margin(180.0 + np.degrees(phase_u)), -np.inf)
    gbw = np.where(has_ugf, f_u, 0.0)
    # A loop gain that crosses unity more than once has no single phase margin a designer can trust: it
    # reads NaN and fails the constraint.
    crossings = (np.diff(below.astype(np.int8), axis=1) != 0).sum(axis=1)
    pm = np.where(crossings > 1, np.nan, pm)

    beyond = phase <= -np.pi
    has_180 = beyond.any(axis=1) & ~beyond[:, 0]
    j = np.where(has_180, np.argmax(beyond, axis=1), 1)
    # The crossing's step walked on the fine sub-grid from its first end: in a fast step the phase is far
    # from linear in log f.
    u = np.linspace(0.0, 1.0, FAST_TURN_POINTS + 1)
    sub = logf[j - 1][:, None] + u[None, :] * (logf[j] - logf[j - 1])[:, None]
    walked = np.unwrap(np.angle(response(np.exp(sub)) * sign[:, None]), axis=1)
    walked += 2 * np.pi * np.round((phase[rows, j - 1] - walked[:, 0]) / (2 * np.pi))[:, None]
    # The walk normally ends on the grid's phase at j and so reaches -180 deg. A doublet that loops a whole
    # turn inside one step with both ends near the same angle is not seen as a fast step; its walk may
    # not reach -180 deg, and the step's far end stands for the crossing (the compiled twin does the same).
    reached = walked <= -np.pi
    i = np.where(reached.any(axis=1), np.maximum(np.argmax(reached, axis=1), 1), FAST_TURN_POINTS)
    p_lo, p_hi = walked[rows, i - 1], walked[rows, i]
    t = np.clip((p_lo + np.pi) / np.where(p_lo == p_hi, 1.0, p_lo - p_hi), 0.0, 1.0)
    f180 = np.exp(sub[rows, i - 1] + t * (sub[rows, i] - sub[rows, i - 1]))
    h180 = response(f180[:, None])[:, 0]
    gm_db = np.where(has_180, -20.0 * np.log10(np.abs(h180)), np.inf)
    return LoopMetrics(gain=gain, gbw=gbw, phase_margin=pm, gain_margin=gm_db)
