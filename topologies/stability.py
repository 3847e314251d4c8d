"""Stability as a designer judges it: the loop closed at feedback factor beta, from the same small-signal
circuit the open-loop testbench measures, vectorized over the population.

The amplifier is non-inverting from inp to out. Closing the loop at beta means v(inn) = beta * v(out): the
nodal equations of the open loop with both inputs as sources,

    (G + sC) x + (g_p + s c_p) v(inp) + (g_n + s c_n) v(inn) = 0,

become, with v(inn) = beta * x_out, a circuit of the same nodes whose matrices carry beta * (g_n + s c_n) in
the output column: G' = G + beta g_n e_out^T, C' = C + beta c_n e_out^T. Its poles are the closed-loop
poles; its response to v(inp) is the closed-loop transfer whose step response gives overshoot and
settling. By the matrix determinant lemma det(G' + sC') = det(G + sC) (1 + T(s)) with the return ratio
T(s) = -beta * v(out)/v(inn) (inp at AC ground): T is the loop gain whose Nyquist plot decides the closed
loop, and the one read here for conditional stability and phase margin. It equals beta times the open-loop
gain the testbench reads from inp up to the pair's common-mode feedthrough.

The inn column comes from the evaluator's own circuits: the common-mode circuit drives inp and inn
together, the differential one inp alone, over the same nodes, so their last columns differ by exactly
the inn column. No second copy of the circuit stamping exists here.

Metrics (`stability_metrics`), arrays of shape (designs,), NaN for designs whose circuit is not finite:
    cl_rhp_poles           closed-loop poles with Re(s) >= 0 (count; marginal poles count as unstable)
    cl_stable              1 where cl_rhp_poles == 0, else 0
    cl_pole_hz             |s| / 2 pi of the dominant closed-loop pole (the mode carrying the largest part
                           of the step transient; a complex pair counts as one), Hz
    cl_damping             -Re(s) / |s| of that pole (1 for a real pole)
    overshoot_pct          small-step overshoot of v(out) above its final value, % of the final value
                           (inf when closed-loop unstable)
    settling_s             time after which the small-step response stays within SETTLE_BAND of its final
                           value, s (inf when closed-loop unstable)
    loop_crossover_hz      last frequency where |T| falls through 1, Hz (0 when |T(0)| <= 1)
    loop_phase_margin_deg  180 deg + phase of T at that crossover, referred to the nearest odd multiple
                           of -180 deg, so in [-180, 180): a testbench whose continuous phase is a full
                           turn off (a sharp doublet unwrapped the other way round) reads the same margin
    loop_phase_min_deg     lowest net phase of T (unwrapped continuously from DC, where a loop of
                           negative feedback has 0 deg) at any frequency where |T| > 1, deg
    loop_gain_margin_db    -20 log10 of the largest |T| where the phase passes an odd multiple of -180 deg
                           (the Nyquist curve crosses the negative real axis), dB; inf where it never does,
                           -inf where it crosses left of -1. A late resonance that passes -180 deg just
                           inside the unit circle reads near 0
    conditionally_stable   1 where the closed loop is stable although the loop phase passes an odd
                           multiple of -180 deg while |T| > 1 (the Nyquist curve crosses the negative real
                           axis left of -1): it would go unstable if the loop gain dropped there (supply,
                           corner, a lower beta); else 0. A loop that passes -180 deg inside the unit circle
                           and rises above unity again later (a late resonance, phase near -340 deg there)
                           has loop_phase_min_deg below -180 but is not conditionally stable
    gain_error             static gain error 1 - beta A_CL, A_CL the closed loop's own DC gain from inp (so
                           the input pair's common-mode feedthrough counts); 1 / (1 + A0 beta) in the
                           textbook form (topologies/application.py); inverting, 1 / (1 + T(0)) with the
                           return ratio of the inn path the signal takes
    step_settling_s        (with `settle`) settling time of the study's output step to its error band, the
                           slew-limited large-step method below; inf when closed-loop unstable
    step_slope_v_per_s     (with `settle`) that step's steepest output slope: the slew rate where it slews

Large-step settling (`settle`): the two-phase method, slewing then linear settling (from memory of any
analog design text). The linear loop asks for an output slope of at most V_step * s_max, s_max the largest
slope of its unit step response (from the poles and residues); beyond the slew rate SR the output slews.
The largest step the loop follows linearly is V_lin = SR / s_max (SR tau for one pole). A larger step slews
for (V_step - V_lin) / SR, then settles linearly from the remaining V_lin: the loop's own modes carry
V_lin / V_step of the step's excitation into the linear phase, while a mode much slower than the slew (a
pole-zero doublet) carries what a ramp of length t_slew leaves it, nearly the whole step's (ngspice: a
slewing step's slow tail is the same fraction of the step as a small step's); each mode keeps the larger of
the two, and the sum must reach band * V_step. t = t_slew + t_linear. A step whose ends (v_cm +- V_step / 2)
lie outside the output's linear swing (the evaluator's, load line included) never settles (inf). The step is
taken where the configuration's signal enters: at inp (non-inverting), or through the network at inn with
inp at the common mode (inverting: the same poles, other zeros, an inverted output).
"""

from __future__ import annotations

import copy

import numpy as np

from .base import Build, Conditions
from . import kernels, stability_kernels
from .loop_kernels import modal_grid_all
from .slewing import ConstantSlew
from .smallsignal import Circuit, solve_batched

SETTLE_BAND = 0.01          # settling band, fraction of the final value
# A pole whose time constant lam = -1/s is this small relative to the slowest mode of its design is taken
# as infinite: a singular C' (a node without capacitance) leaves exact zeros in G'^-1 C' that LAPACK returns
# as values of order eps * max|lam|; read as poles they would sit at random sides of the imaginary axis.
INFINITE_POLE = 1e-11
# Modes of the step response smaller than this fraction of the final value neither move the overshoot nor
# reach the settling band; the time grid is not stretched to resolve them (they are still summed).
NEGLIGIBLE_MODE = 1e-6
TIME_POINTS = 600           # log-spaced step-response samples per design
SLOPE_POINTS = 64           # log-spaced samples on which a unit step's largest slope alone is read
RING_SAMPLES = 12           # linear samples per period of the fastest ringing mode
# A loop ringing for more cycles than MAX_RING_POINTS / RING_SAMPLES before it settles (damping below about
# 0.002) is sampled more coarsely: its overshoot alone rules it out.
MAX_RING_POINTS = 8000
# Loop-gain grid density: one real pole turns the phase by at most about 7 deg a step, well inside the
# half turn np.unwrap needs; crossings and the phase minimum are refined off the grid.
PER_DECADE = 10
MODAL_TOLERANCE = 1e-6      # modal vs direct solve, relative, at the probe frequencies


def inverting_column(differential: Circuit, common_mode: Circuit) -> tuple[np.ndarray, np.ndarray]:
    """The inn column (G part, C part) of the nodal equations: common-mode drive minus differential drive."""
    if differential.nodes != common_mode.nodes:
        raise ValueError("differential and common-mode circuits must share their nodes")
    n = len(differential.nodes)
    return (common_mode.G[:, :n, n] - differential.G[:, :n, n],
            common_mode.C[:, :n, n] - differential.C[:, :n, n])


class _Modal:
    """x_out(s) = sum_i (r0_i + s r1_i) / (1 + s lam_i) for (G + sC) x = -(b0 + s b1), as in
    smallsignal.Modal but for any pair of input columns (and kept here so its residues are at hand)."""

    def __init__(self, g, c, b0, b1, out: int, eigen=None):
        """`eigen`: (lam, vectors) of G^-1 C when the caller already has them for the same G and C (the
        open loop shares the evaluator's, only its input column differs), saving the eigendecomposition."""
        n = g.shape[1]
        if eigen is None:
            rhs = np.concatenate([c, -b0[:, :, None], -b1[:, :, None]], axis=2)
            sol = np.linalg.solve(g, rhs)
            self.lam, vectors = np.linalg.eig(sol[:, :, :n])
            sol = sol[:, :, n:]
        else:
            self.lam, vectors = eigen
            sol = np.linalg.solve(g, np.concatenate([-b0[:, :, None], -b1[:, :, None]], axis=2))
        coef = np.linalg.solve(vectors, sol.astype(complex))
        self.vectors, self.coef = vectors, coef
        row = vectors[:, out, :]
        self.r0, self.r1 = row * coef[:, :, 0], row * coef[:, :, 1]
        self.dc = sol[:, out, 0]
        self.g, self.c, self.b0, self.b1, self.out = g, c, b0, b1, out

    def weighted(self, weights) -> "_Modal":
        """The same modal form read at sum_j weights_j x_j (weights (designs, n)) instead of at `out`."""
        other = copy.copy(self)
        row = np.einsum("dj,dji->di", weights, self.vectors)
        other.r0, other.r1 = row * self.coef[:, :, 0], row * self.coef[:, :, 1]
        return other

    def response(self, freqs) -> np.ndarray:
        freqs = np.asarray(freqs, float)
        if freqs.ndim == 1 and kernels.enabled():
            return modal_grid_all(self.r0, self.r1, self.lam, freqs)
        s = 2j * np.pi * freqs
        s = np.broadcast_to(s, (len(self.lam), s.shape[-1]))[:, :, None]
        return ((self.r0[:, None, :] + s * self.r1[:, None, :]) / (1.0 + s * self.lam[:, None, :])).sum(axis=2)

    def direct(self, freqs) -> np.ndarray:
        """The same response by complex solves, frequency by frequency (all designs at once)."""
        freqs = np.broadcast_to(np.asarray(freqs, float), (len(self.lam), np.shape(freqs)[-1]))
        out = np.empty(freqs.shape, complex)
        for k in range(freqs.shape[1]):
            s = 2j * np.pi * freqs[:, k]
            a = self.g + s[:, None, None] * self.c
            out[:, k] = solve_batched(a, -(self.b0 + s[:, None] * self.b1))[:, self.out]
        return out

    def checked(self, freqs) -> np.ndarray:
        """Designs whose modal response misses the direct one at `freqs` (near-defective eigenvectors)."""
        with np.errstate(all="ignore"):
            if kernels.enabled():
                # Rounding differs from LAPACK's far below MODAL_TOLERANCE, so the same designs fail.
                freqs = np.ascontiguousarray(np.broadcast_to(np.asarray(freqs, float),
                                                             (len(self.lam), np.shape(freqs)[-1])))
                fast = stability_kernels.modal_at(self.r0, self.r1, self.lam, freqs)
                slow = stability_kernels.direct_columns(self.g, self.c, self.b0, self.b1, self.out, freqs)
            else:
                fast, slow = self.response(freqs), self.direct(freqs)
            return ~(np.abs(fast - slow) <= MODAL_TOLERANCE * np.abs(slow)).all(axis=1)


def _finite_poles(lam: np.ndarray) -> np.ndarray:
    """Mask of modes that are finite poles (see INFINITE_POLE)."""
    scale = np.abs(lam).max(axis=1, keepdims=True)
    return np.abs(lam) > INFINITE_POLE * scale


def _loop_gain(differential: Circuit, g_n, c_n, beta: float, eigen=None, tau=None, coupling=None):
    """Return ratio T(jw) of the loop broken at inn, as a function of frequency (designs, F) -> complex;
    `tau` (s, per design): the feedback network's pole with the input capacitance (network_pole).
    `coupling` (r_source, c_total, c_row; input_coupling): the network's resistance into the amplifier's
    input admittance s (c_total - sum_j c_row_j x_j / v(inn)), every node's own response to v(inn) read
    from the same modal form (the pair's Cgs to a tail that follows the input, its Cgd to a drain that
    moves against it), in place of the lumped tau."""
    n = len(differential.nodes)
    out = differential.nodes.index("out")
    modal = _Modal(differential.G[:, :n, :n], differential.C[:, :n, :n], g_n, c_n, out, eigen)
    if coupling is not None:
        r_source, c_total, c_row = coupling
        inner = modal.weighted(c_row)

        def loop(f):
            s = 2j * np.pi * np.asarray(f, float)
            return -beta * modal.response(f) / (1.0 + s * r_source * (c_total[:, None] - inner.response(f)))
        return modal, loop
    if tau is None:
        return modal, lambda f: -beta * modal.response(f)
    return modal, lambda f: -beta * modal.response(f) * network_pole(f, tau)


def network_pole(f, tau):
    """1 / (1 + j 2 pi f tau) for frequencies f (F,) or (designs, F) and time constants tau (designs,)."""
    return 1.0 / (1.0 + 2j * np.pi * np.asarray(f, float) * tau[:, None])


def input_capacitance(g_n, c_n) -> np.ndarray:
    """Capacitance from inn to the amplifier's internal nodes (F, per design), lumped to ground: minus the
    sum of the inn column's C part (the stand-in where no device's gate is at inn, see input_coupling)."""
    return np.maximum(-c_n.sum(axis=1), 0.0)


def input_coupling(build: Build, nodes) -> tuple[np.ndarray, np.ndarray] | None:
    """(c_total, c_row): the gate row of every device whose gate is at inn, the current into inn being
    s (c_total v(inn) - sum_j c_row_j x_j) over the circuit's `nodes` (F; the supplies and the bulk at AC
    ground count in c_total only). The gate row is exact for both device models: the tables' cgs, cgd,
    cgb are the gate charge's own derivatives (process/tables.py), the square law's are Meyer's. None when
    no gate sits at inn."""
    index = {name: k for k, name in enumerate(nodes)}
    gated = [d for d in build.devices if d.nodes[1] == "inn"]
    if not gated:
        return None
    designs = len(np.atleast_1d(gated[0].w))
    c_total, c_row = np.zeros(designs), np.zeros((designs, len(nodes)))
    for d in gated:
        for terminal, cap in ((d.nodes[2], d.op.cgs), (d.nodes[0], d.op.cgd), (d.nodes[3], d.op.cgb)):
            cap = np.broadcast_to(np.asarray(cap, float), (designs,))
            c_total = c_total + cap
            if terminal in index:
                c_row[:, index[terminal]] += cap
    return c_total, c_row


def _phase_reading(response, t0: np.ndarray, f_lo: float, f_hi: float):
    """Crossover, phase margin, lowest phase above unity gain, crossing left of -1 and gain margin (dB)
    of the loop gain T.

    The phase is unwrapped along a log grid from DC, where T(0) is real: 0 deg for negative feedback
    (T(0) > 0), -180 deg when the loop feeds back positively at DC. The grid's lowest phase where |T| > 1 is
    refined by golden-section search around it, and the phase at the refined crossover joins it, so a dip
    narrower than a grid step is not lost.
    """
    designs = len(t0)
    grid = np.logspace(np.log10(f_lo), np.log10(f_hi), int(round(np.log10(f_hi / f_lo) * PER_DECADE)) + 1)
    h = response(grid)
    start = np.where(t0 < 0, -np.pi, 0.0)
    h = np.concatenate([np.abs(t0)[:, None] * np.exp(1j * start)[:, None], h], axis=1)
    phase = np.unwrap(np.angle(h), axis=1)
    phase += (start - phase[:, 0])[:, None]
    phase, h = phase[:, 1:], h[:, 1:]
    mag = np.log(np.abs(h))
    logf = np.log(grid)
    rows = np.arange(designs)

    def phase_near(f, ref):
        """Phase of T at f (designs,), on the branch within half a turn of ref."""
        value = response(f[:, None])[:, 0]
        return ref + np.angle(value * np.exp(-1j * ref))

    above = mag > 0.0
    # The last fall through unity: beyond it the loop gain stays below one on the grid.
    falls = above[:, :-1] & ~above[:, 1:]
    has_cross = falls.any(axis=1) & above[:, 0]
    k = np.where(has_cross, falls.shape[1] - 1 - np.argmax(falls[:, ::-1], axis=1), 0) + 1
    lo_f, hi_f, lo_m, hi_m = logf[k - 1], logf[k], mag[rows, k - 1], mag[rows, k]
    moved = np.zeros(designs)       # +1: the low end moved last step, -1: the high end
    for _ in range(stability_kernels.CROSSOVER_STEPS):   # regula falsi (Illinois) on log|T| against log f
        t = np.clip(lo_m / np.where(lo_m == hi_m, 1.0, lo_m - hi_m), 0.0, 1.0)
        mid = lo_f + t * (hi_f - lo_f)
        mid_m = np.log(np.abs(response(np.exp(mid)[:, None])[:, 0]))
        up = mid_m > 0
        # An end kept twice running has its value halved: plain false position stalls on one side of a
        # curved log|T| (5e-5 of the frequency after 8 steps on a SKY130 telescopic near a doublet).
        hi_m = np.where(up & (moved > 0), 0.5 * hi_m, hi_m)
        lo_m = np.where(~up & (moved < 0), 0.5 * lo_m, lo_m)
        lo_f, lo_m = np.where(up, mid, lo_f), np.where(up, mid_m, lo_m)
        hi_f, hi_m = np.where(up, hi_f, mid), np.where(up, hi_m, mid_m)
        moved = np.where(up, 1.0, -1.0)
    t = np.clip(lo_m / np.where(lo_m == hi_m, 1.0, lo_m - hi_m), 0.0, 1.0)
    f_c = np.exp(lo_f + t * (hi_f - lo_f))
    phase_c = phase_near(f_c, phase[rows, k - 1])
    margin = np.degrees(phase_c) + 180.0
    margin = (margin + 180.0) % 360.0 - 180.0

    masked = np.where(above, phase, np.inf)
    j = np.argmin(masked, axis=1)
    grid_min = masked[rows, j]
    # Golden-section search for the phase minimum between the grid neighbours of the lowest point.
    a, b = logf[np.maximum(j - 1, 0)], logf[np.minimum(j + 1, len(grid) - 1)]
    ref = phase[rows, j]
    ratio = (np.sqrt(5.0) - 1.0) / 2.0
    for _ in range(12):   # narrows the bracket to 3e-3 of a grid step; the phase is flat at its minimum
        x1, x2 = b - ratio * (b - a), a + ratio * (b - a)
        p1, p2 = phase_near(np.exp(x1), ref), phase_near(np.exp(x2), ref)
        lower = p1 < p2
        a, b = np.where(lower, a, x1), np.where(lower, x2, b)
    f_min = np.exp(0.5 * (a + b))
    value = response(f_min[:, None])[:, 0]
    refined = ref + np.angle(value * np.exp(-1j * ref))
    # A dip narrower than a grid step that reaches a lower branch than the grid point it was found from
    # passes an odd multiple of -180 deg while |T| > 1 (the refinement only looks where |T| > 1).
    dip = (np.abs(value) > 1.0) & (_branch(refined) < _branch(ref))
    refined = np.where(np.abs(value) > 1.0, refined, np.inf)
    lowest = np.fmin(np.fmin(grid_min, refined), np.where(has_cross, phase_c, np.inf))
    lowest = np.where(above.any(axis=1), np.degrees(lowest), np.nan)
    crossing, reach = _negative_axis_crossings(response, phase, above, logf, phase_near)
    passes = dip | crossing
    # A curve already left of -1 somewhere has no margin to state (-inf): where it passes there, |T| is as
    # ill-defined as the instant (a resonance inside one grid step, a dip too flat to place a crossing).
    with np.errstate(divide="ignore"):     # no crossing of the negative real axis: an infinite margin
        gain_margin = np.where(passes, -np.inf, -20.0 * np.log10(reach))
    return np.where(has_cross, f_c, 0.0), np.where(has_cross, margin, np.nan), lowest, passes, gain_margin


def _phase_reading_compiled(modal: _Modal, beta: float, tau, t0, f_lo: float, f_hi: float):
    """_phase_reading of T = -beta x_out (times the network pole) in one compiled pass (stability_kernels)."""
    grid = np.logspace(np.log10(f_lo), np.log10(f_hi), int(round(np.log10(f_hi / f_lo) * PER_DECADE)) + 1)
    tau = np.zeros(len(t0)) if tau is None else np.ascontiguousarray(tau, float)
    parts = (np.ascontiguousarray(a, complex) for a in (modal.r0, modal.r1, modal.lam))
    return stability_kernels.phase_reading(*parts, float(beta), tau, np.ascontiguousarray(t0, float), grid,
                                           np.log(grid))


def _branch(phase):
    """Which odd multiple of -180 deg a phase (rad) has passed: 0 between -180 and 180 deg, -1 between
    -540 and -180, and so on."""
    return np.floor((phase + np.pi) / (2 * np.pi))


def _negative_axis_crossings(response, phase, above, logf, phase_near):
    """(passes, reach): designs whose Nyquist curve crosses the negative real axis left of -1 (the phase
    passes an odd multiple of -180 deg while |T| > 1), and the largest |T| at any crossing of the negative
    real axis (0 where the phase never gets there): where none is left of -1, the loop's gain margin is
    -20 log10 of it.

    The lowest phase above unity gain alone does not tell: a loop gain that falls below one, passes -180
    deg inside the unit circle and rises above one again on the far side (a late resonance of the
    output, phase near -340 deg) has its lowest phase above unity below -180 deg without any such
    crossing; it is neither unstable nor conditionally stable, and its gain margin is how far inside the
    circle it passed. Grid steps where the branch changes with |T| > 1 at both ends pass as they are; in
    every other step where it changes, the crossing instant is found by bisection on the phase and |T|
    read there."""
    branch = _branch(phase)
    change = (branch[:, 1:] != branch[:, :-1]) & np.isfinite(branch[:, 1:]) & np.isfinite(branch[:, :-1])
    outside = change & above[:, 1:] & above[:, :-1]
    step = change & ~outside
    designs = len(phase)
    count = step.sum(axis=1)
    if not count.any():
        return outside.any(axis=1), np.zeros(designs)
    # Each design's other crossing steps side by side, padded with its first one, so all are refined at once.
    width = int(count.max())
    order = np.argsort(~step, axis=1, kind="stable")[:, :width]
    k = np.where(np.arange(width)[None, :] < count[:, None], order, order[:, :1])
    rows = np.arange(designs)[:, None]
    lo, hi = logf[k], logf[k + 1]
    p_lo, p_hi = phase[rows, k], phase[rows, k + 1]
    # The odd multiple of -180 deg crossed in that step (the one between its two ends).
    level = np.pi * (2 * np.maximum(branch[rows, k], branch[rows, k + 1]) - 1)
    rising = p_hi > p_lo
    for _ in range(30):
        mid = 0.5 * (lo + hi)
        p_mid = np.stack([phase_near(np.exp(mid[:, i]), 0.5 * (p_lo[:, i] + p_hi[:, i])) for i in range(width)],
                         axis=1)
        past = (p_mid > level) == rising
        lo, p_lo = np.where(past, lo, mid), np.where(past, p_lo, p_mid)
        hi, p_hi = np.where(past, mid, hi), np.where(past, p_mid, p_hi)
    at = np.stack([np.abs(response(np.exp(0.5 * (lo[:, i] + hi[:, i]))[:, None])[:, 0]) for i in range(width)],
                  axis=1)
    valid = np.arange(width)[None, :] < count[:, None]
    passes = outside.any(axis=1) | (valid & (at > 1.0)).any(axis=1)
    reach = np.where(valid & (at > 0.0), at, 0.0).max(axis=1)
    return passes, reach


def _step(modal: _Modal, finite: np.ndarray, stable: np.ndarray, band=SETTLE_BAND):
    """Overshoot (%), settling time (s) to `band` (a fraction of the final value, one per design or one
    for all) and the largest slope (1/s, per unit of final value) of the closed loop's response to a unit
    step at inp.

    From the modal form, y(t) = sum_i r0_i + sum_i c_i exp(p_i t) with p_i = -1/lam_i and
    c_i = r1_i / lam_i - r0_i (infinite poles contribute their r0 step and an impulse at t = 0 only).
    Each design is sampled on two grids merged: log-spaced from well before its fastest significant mode to
    where its slowest has decayed to 1e-4 of the final value (fast edges, slow doublet tails), and
    linear with RING_SAMPLES a period of its fastest ringing mode for as long as any ringing mode still
    exceeds a tenth of the band (so the last excursion out of the band is not stepped over). The peak is
    then refined by golden section and the settling instant by bisection, both on the exact sum.
    """
    lam = np.where(finite, modal.lam, 1.0)
    p = np.where(finite, -1.0 / lam, 0.0)
    c = np.where(finite, modal.r1 / lam - modal.r0, 0.0)
    return settle_exponentials(p, c, modal.r0.sum(axis=1).real, finite, stable, band)


def unit_step_slope(modal: _Modal, finite: np.ndarray, stable: np.ndarray) -> np.ndarray:
    """The largest slope (1/s, per unit of final value) of the closed loop's unit step response, read on
    SLOPE_POINTS log-spaced instants from its fastest significant mode's onset to its slowest's decay and no
    finer: what the two-phase method needs to place V_lin, without `_step`'s settling search."""
    lam = np.where(finite, modal.lam, 1.0)
    p = np.where(finite, -1.0 / lam, 0.0)
    c = np.where(finite, modal.r1 / lam - modal.r0, 0.0)
    final = modal.r0.sum(axis=1).real
    scale = np.maximum(np.abs(final), 1e-300)
    significant = finite & (np.abs(c) / scale[:, None] > NEGLIGIBLE_MODE)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        t_start = 1e-3 / np.where(significant, np.abs(p), -np.inf).max(axis=1)
        t_end = 10.0 / np.where(significant, -p.real, np.inf).min(axis=1)
        ok = stable & np.isfinite(t_start) & np.isfinite(t_end) & (t_end > t_start)
        t_start, t_end = np.where(ok, t_start, 1.0), np.where(ok, t_end, 10.0)
        times = t_start[:, None] * (t_end / t_start)[:, None] ** np.linspace(0.0, 1.0, SLOPE_POINTS)[None, :]
        rate = np.zeros(times.shape)
        for j in np.flatnonzero(significant.any(axis=0)):
            amp = np.where(significant[:, j], c[:, j] * p[:, j], 0.0)
            rate += (amp[:, None] * np.exp(p[:, j, None] * times)).real
        slope = (rate * (np.sign(final) / scale)[:, None]).max(axis=1)
    return np.where(ok, slope, np.nan)


def settle_exponentials(p: np.ndarray, c: np.ndarray, final: np.ndarray, finite: np.ndarray, stable: np.ndarray,
                        band=SETTLE_BAND):
    """Overshoot (%), settling time (s) into `band` of |final| and largest slope (1/s, per unit of final
    value) of y(t) = final + sum_i c_i exp(p_i t), t >= 0, for the modes `finite` marks (`_step`'s
    sampling and refinement; inf where not `stable`)."""
    scale = np.maximum(np.abs(final), 1e-300)
    rel = np.abs(c) / scale[:, None]
    significant = finite & (rel > NEGLIGIBLE_MODE)
    decay = np.where(significant, -p.real, 1.0)
    ringing = significant & (np.abs(p.imag) > 1e-9 * np.abs(p))
    band = np.broadcast_to(np.asarray(band, float), final.shape)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        # Decayed to 1e-4 of the final value, or to a tenth of a tighter band.
        floor = np.minimum(1e-4, 0.1 * band)[:, None]
        t_end = np.where(significant, np.log(np.maximum(rel, 1.0) / floor) / decay, -np.inf).max(axis=1)
        t_start = 1e-3 / np.where(significant, np.abs(p), -np.inf).max(axis=1)
        t_ring = np.where(ringing, np.log(np.maximum(rel / (0.1 * band[:, None]), 1.0)) / decay, 0.0).max(axis=1)
        f_ring = np.where(ringing, np.abs(p.imag), 0.0).max(axis=1) / (2 * np.pi)
    ok = stable & np.isfinite(t_end) & np.isfinite(t_start) & (t_end > t_start)
    t_start, t_end = np.where(ok, t_start, 1.0), np.where(ok, t_end, 10.0)
    t_ring = np.where(ok, np.minimum(t_ring, t_end), 0.0)
    cycles = np.where(ok, f_ring * t_ring, 0.0)
    # Designs are taken in groups of like ringing, so one loop that rings long does not lengthen the time
    # axis of the whole population: a power of two of linear samples per group.
    need = np.clip(np.ceil(RING_SAMPLES * cycles), 16, MAX_RING_POINTS)
    group = 2 ** np.ceil(np.log2(need)).astype(int)
    overshoot = np.full(len(final), np.inf)
    settling = np.full(len(final), np.inf)
    slope = np.full(len(final), np.nan)
    for points in np.unique(group):
        rows = np.flatnonzero(group == points)
        o, t, k = _sampled_step(p[rows], c[rows], final[rows], scale[rows], t_start[rows], t_end[rows],
                                t_ring[rows], int(points), band[rows])
        overshoot[rows], settling[rows], slope[rows] = o, t, k
    overshoot = np.where(ok, overshoot, np.inf)
    settling = np.where(ok, settling, np.inf)
    return overshoot, settling, np.where(ok, slope, np.nan)


def _sampled_step(p, c, final, scale, t_start, t_end, t_ring, lin_points: int, band):
    """Overshoot, settling and largest slope of y(t) = final + sum_i c_i exp(p_i t) on the grids `_step`
    describes."""
    # Only the modes that matter to some design of the group are summed.
    keep = (np.abs(c) > NEGLIGIBLE_MODE * scale[:, None]).any(axis=0)
    p, c = p[:, keep], c[:, keep]
    log_grid = t_start[:, None] * (t_end / t_start)[:, None] ** np.linspace(0.0, 1.0, TIME_POINTS)[None, :]
    lin_grid = t_ring[:, None] * np.linspace(0.0, 1.0, lin_points + 1)[None, 1:]
    times = np.sort(np.concatenate([log_grid, np.maximum(lin_grid, t_start[:, None])], axis=1), axis=1)
    size = times.shape[1]
    if kernels.enabled():
        return stability_kernels.sampled_step(np.ascontiguousarray(p), np.ascontiguousarray(c),
                                              np.ascontiguousarray(final, float), np.ascontiguousarray(scale, float),
                                              times, np.ascontiguousarray(band, float))

    def y(t):
        """Step response at times t (designs, K); mode by mode to keep memory at (designs, K)."""
        total = np.zeros(t.shape)
        for j in range(c.shape[1]):
            total += (c[:, j, None] * np.exp(p[:, j, None] * t)).real
        return final[:, None] + total

    sign = np.where(final < 0, -1.0, 1.0)

    def error(t):
        return (y(t) - final[:, None]) * (sign / scale)[:, None]

    err = error(times)
    rows = np.arange(len(final))
    rate = np.zeros(times.shape)
    for j in range(c.shape[1]):
        rate += (c[:, j, None] * p[:, j, None] * np.exp(p[:, j, None] * times)).real
    # The slope at the first sample stands for t = 0+, where a lone pole's slope is largest.
    slope = (rate * (sign / scale)[:, None]).max(axis=1)
    k = np.argmax(err, axis=1)
    a = times[rows, np.maximum(k - 1, 0)]
    b = times[rows, np.minimum(k + 1, size - 1)]
    ratio = (np.sqrt(5.0) - 1.0) / 2.0
    for _ in range(40):
        x1, x2 = b - ratio * (b - a), a + ratio * (b - a)
        higher = error(x1[:, None])[:, 0] > error(x2[:, None])[:, 0]
        a, b = np.where(higher, a, x1), np.where(higher, x2, b)
    peak = np.fmax(err[rows, k], error((0.5 * (a + b))[:, None])[:, 0])
    overshoot = 100.0 * np.maximum(peak, 0.0)

    outside = np.abs(err) > band[:, None]
    last = size - 1 - np.argmax(outside[:, ::-1], axis=1)
    never = ~outside.any(axis=1)
    lo = times[rows, last]
    hi = times[rows, np.minimum(last + 1, size - 1)]
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        out_band = np.abs(error(mid[:, None])[:, 0]) > band
        lo, hi = np.where(out_band, mid, lo), np.where(out_band, hi, mid)
    settling = np.where(never, 0.0, np.where(last >= size - 1, np.inf, hi))
    return overshoot, settling, slope


def large_step_settling(closed: _Modal, finite: np.ndarray, stable: np.ndarray, slope: np.ndarray, slew,
                        step_v: float, band: float, reach=None) -> np.ndarray:
    """Settling time (s) of an output step `step_v` (V) to `band` (fraction of the step), slewing then
    linear (module doc), and the step's largest slope (V/s: the fastest slew where it slews, else
    step_v s_max; NaN for a small step); `slope` is the unit step's s_max. `slew`: the slew rate (V/s, one
    per design), or a path that knows how the rate changes along the edge (topologies.slewing).
    `reach` (bool per design): both ends of the step lie within the output's linear swing; where not,
    the output never settles at the stated level (inf)."""
    path = slew if hasattr(slew, "entry") else ConstantSlew(slew)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        v_lin = path.entry(slope, step_v)
        slewing = step_v > v_lin
        t_slew = np.where(slewing, path.time(step_v - np.clip(v_lin, 0.0, step_v), step_v), 0.0)
        share = np.where(slewing, v_lin / step_v, 1.0)
        share = np.where(np.isfinite(share) & (share > 0), share, 1.0)
        never = slewing & ~(np.isfinite(t_slew) & (v_lin > 0))
        t_slew = np.where(np.isfinite(t_slew), t_slew, 0.0)
        # What each mode carries into the linear phase, as a fraction of the whole step. The loop's own
        # modes see only the remainder V_lin the slewing leaves (share). A mode much slower than the slew
        # (a pole-zero doublet: a bias or tail node, a mirror) is driven by the whole movement of whatever
        # node drives it, and the slew is a ramp to it: the ramp of length t_slew leaves it
        # (1 - exp(-t_slew / lam)) / (t_slew / lam) of a step's excitation, which tends to 1. The larger of
        # the two is kept (they meet at the onset of slewing, so a small step is unchanged). ngspice shows
        # it: a 1 V slewing step's slow tail is the same fraction of the step as a 10 mV step's.
        lam = np.where(finite, closed.lam, 1.0)
        x = t_slew[:, None] / lam
        tiny = np.abs(x) < 1e-9
        ramp = np.where(tiny, 1.0, -np.expm1(-np.where(tiny, 1.0, x)) / np.where(tiny, 1.0, x))
        weight = np.where(np.abs(ramp) > share[:, None], ramp, share[:, None])
    # The linear phase as a modal form whose final value is the step's and whose modes carry those
    # weights (_step reads c = r1 / lam - r0).
    weighted = copy.copy(closed)
    weighted.r1 = np.where(finite, lam * (weight * (closed.r1 / lam - closed.r0) + closed.r0), closed.r1)
    _, t_linear, _ = _step(weighted, finite, stable, band)
    settle = np.where(np.isfinite(v_lin) | (step_v == 0), t_slew + t_linear, np.nan)
    # A load that takes the driving device's whole current before the edge ends: the level is not reached.
    settle = np.where(never & ~np.isnan(settle), np.inf, settle)
    if reach is not None:
        settle = np.where(np.asarray(reach, bool) | np.isnan(settle), settle, np.inf)
    with np.errstate(invalid="ignore"):
        steepest = (np.fmin(path.steepest(step_v), step_v * slope) if step_v > 0
                    else np.full(len(settle), np.nan))
    return settle, steepest


def closed_loop_matrices(differential: Circuit, common_mode: Circuit, beta: float = 1.0, r_source: float = 0.0,
                         coupling=None):
    """(G', C', g_p, c_p, out): the closed loop's nodal matrices (designs, n, n), the inp column it is
    driven through, and the index of the output node.

    `r_source` (Ohm): the feedback network's Thevenin resistance at inn (Rf || Rg). The feedback then
    reaches inn through the pole of that resistance with the input capacitance, v(inn) (1 + s tau) =
    beta v(out), tau = r_source C_in: one more unknown v(inn) with that row, and the inn column where the
    amplifier sees it ((n + 1) x (n + 1) matrices; tau = 0 leaves an infinite pole). `coupling` (c_total,
    c_row; input_coupling): the current into inn is s (c_total v(inn) - c_row . x), so the row reads
    v(inn) (1 + s R c_total) - s R c_row . x = beta v(out) (without it, C_in lumped to ground)."""
    if not 0.0 < beta <= 1.0:
        raise ValueError(f"feedback factor beta must lie in (0, 1], got {beta}")
    n = len(differential.nodes)
    out = differential.nodes.index("out")
    g_n, c_n = inverting_column(differential, common_mode)
    g_p, c_p = differential.G[:, :n, n].copy(), differential.C[:, :n, n].copy()
    if r_source > 0:
        designs = differential.designs
        g, c = np.zeros((designs, n + 1, n + 1)), np.zeros((designs, n + 1, n + 1))
        g[:, :n, :n], c[:, :n, :n] = differential.G[:, :n, :n], differential.C[:, :n, :n]
        g[:, :n, n], c[:, :n, n] = g_n, c_n
        g[:, n, n], g[:, n, out] = 1.0, -beta
        if coupling is None:
            c[:, n, n] = r_source * input_capacitance(g_n, c_n)
        else:
            c[:, n, n], c[:, n, :n] = r_source * coupling[0], -r_source * coupling[1]
        pad = np.zeros((designs, 1))
        return g, c, np.concatenate([g_p, pad], axis=1), np.concatenate([c_p, pad], axis=1), out
    g, c = differential.G[:, :n, :n].copy(), differential.C[:, :n, :n].copy()
    g[:, :, out] += beta * g_n
    c[:, :, out] += beta * c_n
    return g, c, g_p, c_p, out


def _sanitized(differential: Circuit, common_mode: Circuit):
    """The two circuits with a harmless stand-in (every node 1 S to ground, no capacitance) for designs
    whose elements are not finite, so batched LAPACK calls run; those rows (returned mask) read NaN."""
    broken = ~(np.isfinite(differential.G).all(axis=(1, 2)) & np.isfinite(differential.C).all(axis=(1, 2))
               & np.isfinite(common_mode.G).all(axis=(1, 2)) & np.isfinite(common_mode.C).all(axis=(1, 2)))
    # Designs the evaluator quarantined carry identity matrices in place of circuits that could not be solved.
    broken = broken | getattr(differential, "quarantined", False) | getattr(common_mode, "quarantined", False)
    if broken.any():
        size = differential.G.shape[1]
        differential = differential.subset(np.arange(differential.designs))
        common_mode = common_mode.subset(np.arange(common_mode.designs))
        for circuit in (differential, common_mode):
            circuit.G[broken], circuit.C[broken] = np.eye(size), 0.0
    return differential, common_mode, broken


def closed_loop_poles(differential: Circuit, common_mode: Circuit, beta: float = 1.0,
                      r_source: float = 0.0) -> np.ndarray:
    """Finite closed-loop poles in rad/s, (designs, n) complex; NaN for poles at infinity and for designs
    whose circuit is not finite."""
    differential, common_mode, broken = _sanitized(differential, common_mode)
    g, c, _, _, _ = closed_loop_matrices(differential, common_mode, beta, r_source)
    lam = np.linalg.eigvals(np.linalg.solve(g, c))
    finite = _finite_poles(lam) & ~broken[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(finite, -1.0 / np.where(finite, lam, 1.0), np.nan + 0j)


def _closed_loop(differential: Circuit, common_mode: Circuit, beta: float, r_source: float, inverting: bool,
                 coupling, guarded: bool = False):
    """(closed-loop modal form driven where the configuration's signal enters, g_n, c_n, tau, singular) of circuits
    already sanitized; tau is the network pole's time constant per design (None without a network).
    `guarded`: designs whose closed-loop G' is singular get a harmless stand-in (marked in the fifth item,
    a mask, all False unguarded) instead of stopping LAPACK for all; the search's own circuits were
    screened before."""
    g, c, g_p, c_p, out = closed_loop_matrices(differential, common_mode, beta, r_source, coupling)
    singular = np.zeros(len(g), bool)
    if guarded:
        with np.errstate(all="ignore"):
            sign, logdet = np.linalg.slogdet(g)
        singular = (sign == 0) | ~np.isfinite(logdet) | ~np.isfinite(c).all(axis=(1, 2))
        g[singular], c[singular] = np.eye(g.shape[1]), 0.0
    g_n, c_n = inverting_column(differential, common_mode)
    tau = None
    if r_source > 0:
        tau = r_source * (input_capacitance(g_n, c_n) if coupling is None else coupling[0])
    if inverting:
        # The signal enters through the network at inn, the amplifier's inp held at the common mode:
        # v(inn) = beta v(out) + (1 - beta) v(sig), so the drive is (1 - beta) times the inn column, or,
        # behind the network's pole, the extra row's (1 - beta) (closed_loop_matrices). The poles are the
        # same; the zeros (no feedforward through the input pair from inp) and the sign are not.
        if r_source > 0:
            g_p, c_p = np.zeros_like(g_p), np.zeros_like(c_p)
            g_p[:, -1] = -(1.0 - beta)
        else:
            g_p, c_p = (1.0 - beta) * g_n, (1.0 - beta) * c_n
    if guarded:
        g_p, c_p = np.where(singular[:, None], 0.0, g_p), np.where(singular[:, None], 0.0, c_p)
    with np.errstate(all="ignore"):
        closed = _Modal(g, c, g_p, c_p, out)
    return closed, g_n, c_n, tau, singular


def _closed_figures(closed: _Modal):
    """(finite, rhp count, stable, dominant pole in rad/s, probe frequencies) of a closed loop's modal form:
    the dominant pole is the mode carrying the largest part of the step transient, and the modal form is
    checked against direct solves about its frequency."""
    finite = _finite_poles(closed.lam)
    lam = np.where(finite, closed.lam, 1.0)
    poles = np.where(finite, -1.0 / lam, 0.0)
    # Re(lam) <= 0 is Re(s) >= 0: the marginal case counts against the design.
    rhp = (finite & (closed.lam.real <= 1e-12 * np.abs(closed.lam))).sum(axis=1).astype(float)
    weight = np.where(finite, np.abs(closed.r1 / lam - closed.r0), -1.0)
    dominant = poles[np.arange(len(lam)), np.argmax(weight, axis=1)]
    pole_hz = np.abs(dominant) / (2 * np.pi)
    probe = np.where(pole_hz > 0, pole_hz, 1.0)[:, None] * np.array([0.5, 1.0, 2.0])
    return finite, rhp, rhp == 0, dominant, probe


def edge_settling(differential: Circuit, common_mode: Circuit, beta: float, path, step_v: float, band: float,
                  reach=None, r_source: float = 0.0, inverting: bool = False, coupling=None):
    """(settling time s, steepest slope V/s) of one edge of a large step: slewing along `path`
    (topologies.slewing), then settling linearly in the closed loop of these circuits, the operating point
    at the level the edge ends at. NaN where the circuits are not finite or the modal form misses the
    direct solve; inf where the closed loop is unstable or the level is out of reach."""
    differential, common_mode, broken = _sanitized(differential, common_mode)
    if r_source <= 0:
        coupling = None
    closed, _, _, _, singular = _closed_loop(differential, common_mode, beta, r_source, inverting, coupling,
                                             guarded=True)
    broken |= singular
    with np.errstate(all="ignore"):
        finite, _, stable, _, probe = _closed_figures(closed)
        bad = closed.checked(probe)
        slope = unit_step_slope(closed, finite, stable)
        settle, steepest = large_step_settling(closed, finite, stable, slope, path, step_v, band, reach)
    settle[bad | broken] = np.nan
    steepest[broken] = np.nan
    return settle, steepest


def stability_from_circuits(differential: Circuit, common_mode: Circuit, beta: float = 1.0,
                            f_lo: float = 1e-3, f_hi: float = 1e11, step: bool = True,
                            eigen=None, settle=None, r_source: float = 0.0,
                            inverting: bool = False, coupling=None) -> dict[str, np.ndarray]:
    """The stability metrics from the evaluator's differential and common-mode circuits (see module doc).

    `step=False` skips the small-step response (overshoot and settling read NaN): the search judges
    stability on every design, the step response is worked out for the designs it keeps. `settle`:
    (slew rates V/s per design, output step V, band) adds step_settling_s (and implies the step response).
    `r_source`: the feedback network's Thevenin resistance at inn (closed_loop_matrices). `inverting`: the
    signal reaches the loop through the network at inn, so the static gain error is 1 / (1 + T(0)) of the
    inn path rather than the inp path's closed-loop gain. `coupling`: the gate row at inn (input_coupling),
    for the network's pole with the amplifier's input admittance; without it C_in is lumped to ground."""
    designs = differential.designs
    differential, common_mode, broken = _sanitized(differential, common_mode)
    if r_source <= 0:
        coupling = None
    closed, g_n, c_n, tau, _ = _closed_loop(differential, common_mode, beta, r_source, inverting, coupling)
    out = closed.out
    with np.errstate(all="ignore"):
        finite, rhp, stable, dominant, probe = _closed_figures(closed)
        pole_hz = np.abs(dominant) / (2 * np.pi)
        damping = -dominant.real / np.abs(dominant)
        # Only the step response reads the closed loop's modal form away from its poles; the search's
        # figures (poles, residue weights, DC gain) do not need the check.
        wants_step = step or settle is not None
        bad_closed = closed.checked(probe) if wants_step else np.zeros(designs, bool)
        if wants_step:
            overshoot, settling, slope = _step(closed, finite, stable)
        else:
            overshoot, settling = np.full(designs, np.nan), np.full(designs, np.nan)
        if settle is not None:
            slew, step_v, band, *reach = settle
            large, steepest = large_step_settling(closed, finite, stable, slope, slew, step_v, band, *reach)
            large[bad_closed] = np.nan
        gain_error = 1.0 - beta * closed.dc.real if not inverting else None

        opened, loop = _loop_gain(differential, g_n, c_n, beta, eigen, tau,
                                  None if coupling is None else (r_source, *coupling))
        bad_open = opened.checked(probe)
        t0 = -beta * opened.dc.real
        if inverting:
            gain_error = 1.0 / (1.0 + t0)
        # The compiled reading knows the lumped network pole only; the input devices' gate-row coupling
        # (every network with a gate at inn) is read on the numpy path.
        if kernels.enabled() and coupling is None:
            reading = _phase_reading_compiled(opened, beta, tau, t0, f_lo, f_hi)
        else:
            reading = _phase_reading(loop, t0, f_lo, f_hi)
        crossover, margin, lowest, passes, loop_gain_margin = reading
        if bad_open.any():
            rows = np.flatnonzero(bad_open)
            sub = _Modal(g=opened.g[rows], c=opened.c[rows], b0=opened.b0[rows], b1=opened.b1[rows], out=out)
            pole = (lambda f: 1.0) if tau is None else (lambda f: network_pole(f, tau[rows]))
            redo = _phase_reading(lambda f: -beta * sub.direct(f) * pole(f), t0[rows], f_lo, f_hi)
            for target, value in zip(reading, redo):
                target[rows] = value
    # The step response has no direct-solve fallback: a near-defective closed loop (coincident poles to
    # within the modal tolerance) reads NaN rather than a number that may be wrong.
    overshoot[bad_closed] = np.nan
    settling[bad_closed] = np.nan
    conditional = (stable & passes).astype(float)
    metrics = {
        "cl_rhp_poles": rhp,
        "cl_stable": stable.astype(float),
        "cl_pole_hz": pole_hz,
        "cl_damping": damping,
        "overshoot_pct": overshoot,
        "settling_s": settling,
        "loop_crossover_hz": crossover,
        "loop_phase_margin_deg": margin,
        "loop_phase_min_deg": lowest,
        "loop_gain_margin_db": loop_gain_margin,
        "conditionally_stable": conditional,
        "gain_error": gain_error,
        **({"step_settling_s": large, "step_slope_v_per_s": steepest} if settle is not None else {}),
    }
    for value in metrics.values():
        value[broken] = np.nan
    return metrics


def stability_metrics(build: Build, cond: Conditions, beta: float = 1.0) -> dict[str, np.ndarray]:
    """Closed-loop stability, conditional stability and small-step response at feedback factor beta."""
    from .evaluate import small_signal   # evaluate may import this module to add the metrics

    return stability_from_circuits(small_signal(build, cond, "differential"),
                                   small_signal(build, cond, "common_mode"), beta)
