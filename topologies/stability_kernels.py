"""Compiled twins of the loop-gain reading in stability.py (`_phase_reading` with
`_negative_axis_crossings`, and `_Modal.checked`'s two responses).

The return ratio is T(f) = -beta x_out(f) / (1 + j 2 pi f tau) with x_out in modal form (tau = 0: no network
pole). Each design is read in one pass: the grid, its unwrapped phase, the crossover's regula falsi, the
golden-section search for the lowest phase and the bisections of the edge steps, with the arithmetic and
the iteration counts of the numpy reference, so the two agree to rounding. The reference builds
(designs, width) temporaries and a Python loop per edge step; here nothing is allocated per design.
"""

from __future__ import annotations

import math

import numpy as np

from .kernels import compiled
from .loop_kernels import _clip01, _lu_solve, _modal, _modal_grid

TWO_PI = 2.0 * np.pi
GOLDEN = (math.sqrt(5.0) - 1.0) / 2.0
DEGREES = 180.0 / np.pi
CROSSOVER_STEPS = 10     # Illinois steps placing the crossover inside its grid step


def _loop(r0, r1, lam, d, beta, tau, f):
    """T at f for design d."""
    re, im = _modal(r0, r1, lam, d, f)
    re, im = -beta * re, -beta * im
    if tau[d] != 0.0:
        x = TWO_PI * f * tau[d]
        scale = 1.0 / (1.0 + x * x)
        re, im = (re + im * x) * scale, (im - re * x) * scale
    return re, im


_loop = compiled(_loop)


def _phase_turned(r0, r1, lam, d, beta, tau, f, ref, c, s):
    """Phase of T at f on the branch within half a turn of ref, given c, s = cos(ref), sin(ref); also |T|."""
    re, im = _loop(r0, r1, lam, d, beta, tau, f)
    return ref + math.atan2(im * c - re * s, re * c + im * s), math.hypot(re, im)


_phase_turned = compiled(_phase_turned)


def _phase_near(r0, r1, lam, d, beta, tau, f, ref):
    """Phase of T at f on the branch within half a turn of ref (stability._phase_reading.phase_near); also |T|."""
    return _phase_turned(r0, r1, lam, d, beta, tau, f, ref, math.cos(ref), math.sin(ref))


_phase_near = compiled(_phase_near)


def _branch(phase):
    # np.floor, not math.floor: a NaN phase stays a float.
    return np.floor((phase + np.pi) / TWO_PI)


_branch = compiled(_branch)


def _fmin(a, b):
    # np.fmin: a NaN loses to a number.
    if math.isnan(a):
        return b
    if math.isnan(b):
        return a
    return a if a <= b else b


_fmin = compiled(_fmin)


def phase_reading(r0, r1, lam, beta, tau, t0, grid, logf):
    """(crossover Hz, phase margin deg, lowest phase deg, passes left of -1, gain margin dB) for every design, as
    stability._phase_reading returns them for T(f) = -beta x_out / (1 + j 2 pi f tau)."""
    designs, points = r0.shape[0], grid.shape[0]
    crossover, margin = np.empty(designs), np.empty(designs)
    lowest, passes = np.empty(designs), np.zeros(designs, np.bool_)
    gain_margin = np.empty(designs)
    res, ims = np.empty(points), np.empty(points)
    phase, mag = np.empty(points), np.empty(points)
    above = np.empty(points, np.bool_)
    w = TWO_PI * grid
    for d in range(designs):
        _modal_grid(r0, r1, lam, d, w, res, ims)
        # The DC point T(0) first, then the grid: np.unwrap over the row, shifted so DC reads `start`.
        start = -np.pi if t0[d] < 0 else 0.0
        size = abs(t0[d])
        previous = math.atan2(size * math.sin(start), size * math.cos(start))
        first = previous
        correction = 0.0
        any_above = False
        for k in range(points):
            re, im = -beta * res[k], -beta * ims[k]
            if tau[d] != 0.0:
                x = w[k] * tau[d]
                scale = 1.0 / (1.0 + x * x)
                re, im = (re + im * x) * scale, (im - re * x) * scale
            angle = math.atan2(im, re)
            dd = angle - previous
            if not abs(dd) < np.pi:      # a NaN step carries on as NaN, as in np.unwrap
                ddmod = np.fmod(dd + np.pi, TWO_PI)
                if ddmod != 0.0 and ddmod < 0.0:
                    ddmod += TWO_PI
                ddmod -= np.pi
                if ddmod == -np.pi and dd > 0:
                    ddmod = np.pi
                correction += ddmod - dd
            previous = angle
            phase[k] = angle + correction
            # |T| > 1 is log|T| > 0; the logarithm is taken only where the crossover interpolates.
            mag[k] = math.hypot(re, im)
            above[k] = mag[k] > 1.0
            any_above = any_above or above[k]
        shift = start - first
        for k in range(points):
            phase[k] += shift

        # The last fall through unity.
        last = -1
        for k in range(points - 1):
            if above[k] and not above[k + 1]:
                last = k
        has_cross = last >= 0 and above[0]
        k = (last if has_cross else 0) + 1
        lo_f, hi_f, lo_m, hi_m = logf[k - 1], logf[k], math.log(mag[k - 1]), math.log(mag[k])
        moved = 0.0
        for _ in range(CROSSOVER_STEPS):
            t = _clip01(lo_m / (1.0 if lo_m == hi_m else lo_m - hi_m))
            mid = lo_f + t * (hi_f - lo_f)
            re, im = _loop(r0, r1, lam, d, beta, tau, math.exp(mid))
            mid_m = math.log(math.hypot(re, im))
            if mid_m > 0:
                if moved > 0:
                    hi_m = 0.5 * hi_m
                lo_f, lo_m, moved = mid, mid_m, 1.0
            else:
                if moved < 0:
                    lo_m = 0.5 * lo_m
                hi_f, hi_m, moved = mid, mid_m, -1.0
        t = _clip01(lo_m / (1.0 if lo_m == hi_m else lo_m - hi_m))
        f_c = math.exp(lo_f + t * (hi_f - lo_f))
        phase_c, _ = _phase_near(r0, r1, lam, d, beta, tau, f_c, phase[k - 1])
        m = phase_c * DEGREES + 180.0
        m = (m + 180.0) % 360.0 - 180.0
        crossover[d] = f_c if has_cross else 0.0
        margin[d] = m if has_cross else np.nan

        # The grid's lowest phase above unity (np.argmin: the first minimum, a NaN wins), then refined.
        j, grid_min = 0, np.inf
        for i in range(points):
            value = phase[i] if above[i] else np.inf
            if math.isnan(value):
                j, grid_min = i, value
                break
            if value < grid_min:
                j, grid_min = i, value
        a, b = logf[max(j - 1, 0)], logf[min(j + 1, points - 1)]
        ref = phase[j]
        c, s = math.cos(ref), math.sin(ref)     # one reference for the whole search
        for _ in range(12):
            x1, x2 = b - GOLDEN * (b - a), a + GOLDEN * (b - a)
            p1, _ = _phase_turned(r0, r1, lam, d, beta, tau, math.exp(x1), ref, c, s)
            p2, _ = _phase_turned(r0, r1, lam, d, beta, tau, math.exp(x2), ref, c, s)
            if p1 < p2:
                b = x2
            else:
                a = x1
        refined, size = _phase_turned(r0, r1, lam, d, beta, tau, math.exp(0.5 * (a + b)), ref, c, s)
        dip = size > 1.0 and _branch(refined) < _branch(ref)
        if not size > 1.0:
            refined = np.inf
        low = _fmin(_fmin(grid_min, refined), phase_c if has_cross else np.inf)
        lowest[d] = low * DEGREES if any_above else np.nan

        # Crossings of the negative real axis (stability._negative_axis_crossings): left of -1, and the
        # largest |T| at any of them.
        found, reach = dip, 0.0
        for i in range(points - 1):
            b0, b1 = _branch(phase[i]), _branch(phase[i + 1])
            if b0 == b1 or math.isnan(b0) or math.isnan(b1):
                continue
            if above[i] and above[i + 1]:
                found = True
                continue
            lo, hi, p_lo, p_hi = logf[i], logf[i + 1], phase[i], phase[i + 1]
            level = np.pi * (2 * max(b0, b1) - 1)
            rising = p_hi > p_lo
            for _ in range(30):
                mid = 0.5 * (lo + hi)
                p_mid, _ = _phase_near(r0, r1, lam, d, beta, tau, math.exp(mid), 0.5 * (p_lo + p_hi))
                if (p_mid > level) == rising:
                    hi, p_hi = mid, p_mid
                else:
                    lo, p_lo = mid, p_mid
            re, im = _loop(r0, r1, lam, d, beta, tau, math.exp(0.5 * (lo + hi)))
            at = math.hypot(re, im)
            if at > 1.0:
                found = True
            if at > reach:
                reach = at
        passes[d] = found
        if found:
            gain_margin[d] = -np.inf
        else:
            gain_margin[d] = -20.0 * math.log10(reach) if reach > 0.0 else np.inf
    return crossover, margin, lowest, passes, gain_margin


phase_reading = compiled(phase_reading)


def modal_at(r0, r1, lam, freqs):
    """Modal response of each design at its own frequencies (designs, F)."""
    out = np.empty(freqs.shape, np.complex128)
    for d in range(freqs.shape[0]):
        for k in range(freqs.shape[1]):
            re, im = _modal(r0, r1, lam, d, freqs[d, k])
            out[d, k] = complex(re, im)
    return out


modal_at = compiled(modal_at)


def direct_columns(g, c, b0, b1, output, freqs):
    """x_out of (G + sC) x = -(b0 + s b1) at each design's own frequencies by LU with partial pivoting
    (stability._Modal.direct; pivots by |re| + |im| as LAPACK's izamax)."""
    designs, n, points = g.shape[0], g.shape[1], freqs.shape[1]
    out = np.empty((designs, points), np.complex128)
    a = np.empty((n, n), np.complex128)
    x = np.empty(n, np.complex128)
    for d in range(designs):
        for p in range(points):
            w = TWO_PI * freqs[d, p]
            for i in range(n):
                for j in range(n):
                    a[i, j] = complex(g[d, i, j], w * c[d, i, j])
                x[i] = complex(-b0[d, i], -w * b1[d, i])
            _lu_solve(a, x, n)
            out[d, p] = x[output]
    return out


direct_columns = compiled(direct_columns)


def _step_error(p, c, final, gain, d, t):
    """(y(t) - final) x gain for design d, summed mode by mode as stability._sampled_step's y does."""
    total = 0.0
    for j in range(p.shape[1]):
        total += (c[d, j] * np.exp(p[d, j] * t)).real
    return ((final[d] + total) - final[d]) * gain


def sampled_step(p, c, final, scale, times, band):
    """Overshoot (%), settling time (s) and largest slope of each design's step on its own time grid: the
    compiled twin of the sampling, golden-section peak and settling bisection of stability._sampled_step,
    same arithmetic and iteration counts, one design at a time with no (designs, times) temporaries."""
    designs, size = times.shape
    overshoot = np.empty(designs)
    settling = np.empty(designs)
    slope = np.empty(designs)
    err = np.empty(size)
    for d in range(designs):
        gain = (-1.0 if final[d] < 0 else 1.0) / scale[d]
        k, s = 0, 0.0
        for i in range(size):
            # One exponential a mode serves the response and its slope (the reference computes it twice).
            total, rate = 0.0, 0.0
            for j in range(p.shape[1]):
                e = np.exp(p[d, j] * times[d, i])
                total += (c[d, j] * e).real
                rate += ((c[d, j] * p[d, j]) * e).real
            err[i] = ((final[d] + total) - final[d]) * gain
            rate = rate * gain
            # numpy's argmax (the first NaN, else the first largest) and max (NaN wins).
            if i == 0:
                s = rate
            else:
                if not math.isnan(err[k]) and (math.isnan(err[i]) or err[i] > err[k]):
                    k = i
                if not math.isnan(s) and (math.isnan(rate) or rate > s):
                    s = rate
        slope[d] = s
        a = times[d, max(k - 1, 0)]
        b = times[d, min(k + 1, size - 1)]
        for _ in range(40):
            x1, x2 = b - GOLDEN * (b - a), a + GOLDEN * (b - a)
            if _step_error(p, c, final, gain, d, x1) > _step_error(p, c, final, gain, d, x2):
                b = x2
            else:
                a = x1
        mid_peak = _step_error(p, c, final, gain, d, 0.5 * (a + b))
        peak = err[k]                       # numpy's fmax: a NaN loses to a number
        if math.isnan(peak) or (not math.isnan(mid_peak) and mid_peak > peak):
            peak = mid_peak
        overshoot[d] = np.nan if math.isnan(peak) else 100.0 * max(peak, 0.0)
        last = -1
        for i in range(size - 1, -1, -1):
            if abs(err[i]) > band[d]:
                last = i
                break
        if last < 0:
            settling[d] = 0.0
            continue
        if last >= size - 1:
            settling[d] = np.inf
            continue
        lo, hi = times[d, last], times[d, last + 1]
        for _ in range(40):
            mid = 0.5 * (lo + hi)
            if abs(_step_error(p, c, final, gain, d, mid)) > band[d]:
                lo = mid
            else:
                hi = mid
        settling[d] = hi
    return overshoot, settling, slope


_step_error = compiled(_step_error)
sampled_step = compiled(sampled_step)
