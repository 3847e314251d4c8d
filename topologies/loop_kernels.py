"""Compiled twin of the loop-gain crossing search (smallsignal._crossings on the modal form).

One pass per design over the frequency grid evaluates the modal sum, the log magnitude and the unwrapped
phase point by point, then refines the unity-gain crossing and locates the -180 deg crossing, as the
numpy reference does with (designs, frequencies, modes) temporaries. The arithmetic follows the reference
step for step; the modal sum and complex division round differently, so the two agree to rounding, not
bit for bit.
"""

from __future__ import annotations

import math

import numpy as np

from .kernels import compiled

TWO_PI = 2.0 * np.pi


def _modal(r0, r1, lam, d, f):
    """Sum over modes of (r0 + s r1) / (1 + s lam) at s = j 2 pi f (smallsignal.Modal.response)."""
    w = TWO_PI * f
    re, im = 0.0, 0.0
    for i in range(lam.shape[1]):
        nr, ni = r0[d, i].real - w * r1[d, i].imag, r0[d, i].imag + w * r1[d, i].real
        dr, di = 1.0 - w * lam[d, i].imag, w * lam[d, i].real
        scale = 1.0 / (dr * dr + di * di)
        re += (nr * dr + ni * di) * scale
        im += (ni * dr - nr * di) * scale
    return re, im


_modal = compiled(_modal)


def _clip01(t):
    # NaN passes through, as np.clip lets it.
    return 0.0 if t < 0.0 else (1.0 if t > 1.0 else t)


_clip01 = compiled(_clip01)


def _modal_grid(r0, r1, lam, d, w, res, ims):
    """_modal at every angular frequency of w into res, ims: modes outside, frequencies inside, so the
    inner loop has no dependence between iterations and compiles to vector instructions; each point still
    sums its modes in order."""
    res[:] = 0.0
    ims[:] = 0.0
    for i in range(lam.shape[1]):
        r0r, r0i, r1r, r1i = r0[d, i].real, r0[d, i].imag, r1[d, i].real, r1[d, i].imag
        lr, li = lam[d, i].real, lam[d, i].imag
        for k in range(w.shape[0]):
            nr, ni = r0r - w[k] * r1i, r0i + w[k] * r1r
            dr, di = 1.0 - w[k] * li, w[k] * lr
            scale = 1.0 / (dr * dr + di * di)
            res[k] += (nr * dr + ni * di) * scale
            ims[k] += (ni * dr - nr * di) * scale


_modal_grid = compiled(_modal_grid)


def _modal_grid_all(r0, r1, lam, freqs, res, ims):
    w = TWO_PI * freqs
    row_re, row_im = np.empty(w.shape[0]), np.empty(w.shape[0])
    for d in range(lam.shape[0]):
        _modal_grid(r0, r1, lam, d, w, row_re, row_im)
        res[d, :] = row_re
        ims[d, :] = row_im


_modal_grid_all = compiled(_modal_grid_all)


def modal_grid_all(r0, r1, lam, freqs) -> np.ndarray:
    """Modal responses of every design on one frequency grid, (designs, F) complex."""
    res = np.empty((lam.shape[0], freqs.shape[0]))
    ims = np.empty_like(res)
    _modal_grid_all(np.ascontiguousarray(r0), np.ascontiguousarray(r1), np.ascontiguousarray(lam),
                    np.ascontiguousarray(freqs, dtype=np.float64), res, ims)
    return res + 1j * ims


def _winding(re0, im0, re1, im1):
    """Turns np.unwrap adds between two successive grid points: +1 when the short arc from the first to the
    second crosses the negative real axis counterclockwise (principal phase jumps from +pi to -pi), -1
    clockwise, else 0. Signs and one cross product instead of an arctangent per point."""
    cross = re0 * im1 - im0 * re1
    if im0 >= 0.0 and im1 < 0.0 and cross > 0.0:
        return 1
    if im0 < 0.0 and im1 >= 0.0 and cross < 0.0:
        return -1
    return 0


_winding = compiled(_winding)


def _walk_turns(r0, r1, lam, d, sign, lo, hi, re0, im0, points, w, res, ims):
    """Turns the phase takes from grid point lo (response re0, im0) to hi, walked on `points` log-spaced
    sub-steps (smallsignal._resolve_fast_turns): the way a fast step really went round. The sub-steps'
    responses come from one vectorized _modal_grid pass (the same sums as _modal, point by point) into
    the scratch arrays w, res, ims of length `points`."""
    for i in range(1, points + 1):
        w[i - 1] = TWO_PI * math.exp(lo + (hi - lo) * i / points)
    _modal_grid(r0, r1, lam, d, w, res, ims)
    n = 0
    for i in range(points):
        re, im = res[i] * sign, ims[i] * sign
        n += _winding(re0, im0, re, im)
        re0, im0 = re, im
    return n


_walk_turns = compiled(_walk_turns)


def _reaches_half_turn(re, im, m):
    """atan2(im, re) + 2 pi m <= -pi, the unwrapped phase at or past -180 deg, without the arctangent where
    the turn count decides it: atan2 lies in [-pi, pi], so m <= -1 always reaches and m >= 1 never does;
    m = 0 reaches only at -pi itself (the negative real axis approached from below). NaN never reaches."""
    if math.isnan(re) or math.isnan(im):
        return False
    if m <= -1:
        return True
    if m >= 1:
        return False
    return re < 0.0 and im <= 0.0 and math.atan2(im, re) <= -np.pi


_reaches_half_turn = compiled(_reaches_half_turn)


def crossings(gain, r0, r1, lam, grid, logf, refine, f_probe_default, walk_points):
    """gbw (Hz), phase margin (deg), gain margin (dB) and the modal response at the probe frequency the
    modal check uses (gbw, or f_probe_default without a crossing), for every design.

    The unwrapped phase at grid point k is atan2 there plus 2 pi times the turns counted so far, so an
    arctangent and a logarithm are taken only at the few points the crossings interpolate between."""
    designs, points = r0.shape[0], grid.shape[0]
    gbw, pm, gm = np.empty(designs), np.empty(designs), np.empty(designs)
    probe = np.empty(designs, np.complex128)
    res, ims, turns = np.empty(points), np.empty(points), np.empty(points, np.int64)
    w = TWO_PI * grid
    # Scratch for the sub-step walks; the -180 deg walk goes in chunks, as it usually stops early.
    sub_w, sub_re, sub_im = np.empty(walk_points), np.empty(walk_points), np.empty(walk_points)
    chunk = min(32, walk_points)
    for d in range(designs):
        sign = -1.0 if gain[d] < 0 else 1.0
        first, count, turn = -1, 0, -1
        previous_below, n = False, 0
        _modal_grid(r0, r1, lam, d, w, res, ims)
        for k in range(points):
            re, im = res[k] * sign, ims[k] * sign
            res[k], ims[k] = re, im
            below = re * re + im * im < 1.0
            if k > 0:
                if res[k - 1] * re + ims[k - 1] * im < 0.0:
                    # More than a quarter turn in one step: walk it (smallsignal.FAST_TURN).
                    n += _walk_turns(r0, r1, lam, d, sign, logf[k - 1], logf[k], res[k - 1], ims[k - 1],
                                     walk_points, sub_w, sub_re, sub_im)
                else:
                    n += _winding(res[k - 1], ims[k - 1], re, im)
                if below != previous_below:
                    count += 1
            turns[k] = n
            if below and first < 0:
                first = k
            # Unwrapped phase at or past -180 deg: a clockwise turn taken (the principal value is > -pi).
            if n <= -1 and turn < 0:
                turn = k
            previous_below = below
        if first > 0:
            k = first
            lo_f, hi_f = logf[k - 1], logf[k]
            lo_m, hi_m = math.log(math.hypot(res[k - 1], ims[k - 1])), math.log(math.hypot(res[k], ims[k]))
            for _ in range(refine):
                t = _clip01(lo_m / (1.0 if lo_m - hi_m == 0 else lo_m - hi_m))
                mid_f = lo_f + t * (hi_f - lo_f)
                re, im = _modal(r0, r1, lam, d, math.exp(mid_f))
                mid_m = math.log(math.hypot(re, im))
                if mid_m > 0:
                    lo_f, lo_m = mid_f, mid_m
                else:
                    hi_f, hi_m = mid_f, mid_m
            t = _clip01(lo_m / (1.0 if lo_m - hi_m == 0 else lo_m - hi_m))
            f_u = math.exp(lo_f + t * (hi_f - lo_f))
            re, im = _modal(r0, r1, lam, d, f_u)
            re, im = re * sign, im * sign
            ref = math.atan2(ims[k - 1], res[k - 1]) + TWO_PI * turns[k - 1]
            c, s = math.cos(ref), math.sin(ref)
            # angle(h_u exp(-j ref)): the crossing's phase measured from the grid point before it.
            phase_u = ref + math.atan2(im * c - re * s, re * c + im * s)
            raw = 180.0 + phase_u * (180.0 / np.pi)
            # Referred to the nearest turn, as smallsignal.refer_margin does.
            pm[d] = raw - 360.0 * math.floor((raw + 180.0) / 360.0)
            gbw[d] = f_u
        else:
            pm[d] = -np.inf
            gbw[d] = 0.0
        # Several unity crossings: no single margin to trust.
        if count > 1:
            pm[d] = np.nan
        if turn > 0:
            # The crossing's step walked from its first end (smallsignal._crossings does the same).
            lo, hi = logf[turn - 1], logf[turn]
            re0, im0 = res[turn - 1], ims[turn - 1]
            m = turns[turn - 1]
            m_lo = m
            x_lo, x_hi = lo, hi
            re, im = re0, im0
            done = False
            for start in range(1, walk_points + 1, chunk):
                stop = min(start + chunk, walk_points + 1)
                for i in range(start, stop):
                    sub_w[i - start] = TWO_PI * math.exp(lo + i * (hi - lo) / walk_points)
                _modal_grid(r0, r1, lam, d, sub_w[:stop - start], sub_re[:stop - start], sub_im[:stop - start])
                for i in range(start, stop):
                    x_hi = lo + i * (hi - lo) / walk_points
                    re, im = sub_re[i - start] * sign, sub_im[i - start] * sign
                    m += _winding(re0, im0, re, im)
                    # Not reached by the far end (a whole-turn loop inside the step): the last sub-step
                    # stands for the crossing, as in the reference.
                    if _reaches_half_turn(re, im, m) or i == walk_points:
                        done = True
                        break
                    x_lo, re0, im0, m_lo = x_hi, re, im, m
                if done:
                    break
            # The two phases the crossing is interpolated between, as the walk would have read them.
            p_lo = math.atan2(im0, re0) + TWO_PI * m_lo
            p_hi = math.atan2(im, re) + TWO_PI * m
            t = _clip01((p_lo + np.pi) / (1.0 if p_lo == p_hi else p_lo - p_hi))
            f180 = math.exp(x_lo + t * (x_hi - x_lo))
            re, im = _modal(r0, r1, lam, d, f180)
            gm[d] = -20.0 * math.log10(math.hypot(re, im))
        else:
            gm[d] = np.inf
        re, im = _modal(r0, r1, lam, d, gbw[d] if gbw[d] > 0 else f_probe_default)
        probe[d] = complex(re, im)
    return gbw, pm, gm, probe


crossings = compiled(crossings)


def _lu_solve(a, x, n):
    """Solves a y = x in place (x holds y on return; a is overwritten) by LU with partial pivoting, pivoting by
    |re| + |im| as LAPACK's izamax does, so the compiled solves pivot as numpy's do."""
    for k in range(n):
        pivot, size = k, abs(a[k, k].real) + abs(a[k, k].imag)
        for i in range(k + 1, n):
            if abs(a[i, k].real) + abs(a[i, k].imag) > size:
                pivot, size = i, abs(a[i, k].real) + abs(a[i, k].imag)
        if pivot != k:
            for j in range(n):
                a[k, j], a[pivot, j] = a[pivot, j], a[k, j]
            x[k], x[pivot] = x[pivot], x[k]
        for i in range(k + 1, n):
            factor = a[i, k] / a[k, k]
            for j in range(k + 1, n):
                a[i, j] -= factor * a[k, j]
            x[i] -= factor * x[k]
    for i in range(n - 1, -1, -1):
        total = x[i]
        for j in range(i + 1, n):
            total -= a[i, j] * x[j]
        x[i] = total / a[i, i]


_lu_solve = compiled(_lu_solve)


def direct(g, c, output, f):
    """v(output)/v(drive) of every design at its own frequency f by LU with partial pivoting of G + sC
    (smallsignal.Circuit.response at one frequency a design, without its (designs, 1, n, n) temporaries).
    The last row and column of g and c belong to the driven input."""
    designs, n = g.shape[0], g.shape[1] - 1
    out = np.empty(designs, np.complex128)
    a = np.empty((n, n), np.complex128)
    x = np.empty(n, np.complex128)
    for d in range(designs):
        w = TWO_PI * f[d]
        for i in range(n):
            for j in range(n):
                a[i, j] = complex(g[d, i, j], w * c[d, i, j])
            x[i] = complex(-g[d, i, n], -w * c[d, i, n])
        _lu_solve(a, x, n)
        out[d] = x[output]
    return out


direct = compiled(direct)
