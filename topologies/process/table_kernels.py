"""Compiled twins of DeviceTable's interpolation (tables.py), one query at a time inside one call.

Each kernel does the arithmetic of its numpy counterpart in the same order (the 16-corner sums follow
numpy's pairwise and axis reductions), so both agree to rounding; the gain is that the corner weights are
made once per query and a VGS bisection touches 16 table entries a probe, with no (designs, 16)
temporaries and no Python between probes. Axes arrive already transformed (log L, the
body-effect scale of VSB); queries arrive raw and are transformed here, where a logarithm may round
its last bit differently from numpy's.
"""

from __future__ import annotations

import numpy as np

from ..kernels import compiled


def _bracket(a, x):
    """Lower index and fraction of x on axis a; NaN fraction outside (tables._bracket)."""
    n = a.shape[0]
    tol = 1e-9 * (a[n - 1] - a[0])
    if not (x >= a[0] - tol and x <= a[n - 1] + tol):
        return 0, np.nan
    xc = min(max(x, a[0]), a[n - 1])
    i = min(max(np.searchsorted(a, xc, side="right") - 1, 0), n - 2)
    return i, (xc - a[i]) / (a[i + 1] - a[i])


_bracket = compiled(_bracket)


def _corners(log_l, vds_axis, body_axis, l, vds, vsb, w):
    """Fill w (16) with the corner weights of one query; return the first L, VDS and VSB indices, or
    il = -1 outside the table (tables.DeviceTable._prepare)."""
    il, tl = _bracket(log_l, np.log(l))
    ib, tb = _bracket(body_axis, np.sqrt(0.8 + vsb))        # tables._body_scale
    iv, tv = _bracket(vds_axis, vds)
    if np.isnan(tl) or np.isnan(tb) or np.isnan(tv):
        return -1, 0, 0
    start = min(max(iv - 1, 0), vds_axis.shape[0] - 4)
    for gd in range(4):
        lagrange = 1.0      # scalar products in the reference's order, no per-query allocation
        for m in range(4):
            if m != gd:
                lagrange *= (vds - vds_axis[start + m]) / (vds_axis[start + gd] - vds_axis[start + m])
        for gb in range(2):
            wb = 1 - tb if gb == 0 else tb
            w[gd * 2 + gb] = (1 - tl) * lagrange * wb
            w[8 + gd * 2 + gb] = tl * lagrange * wb
    return il, start, ib


_corners = compiled(_corners)


def _probe(table, il, iv, ib, w, k):
    """Interpolated table[..., k]: numpy's pairwise order for a 16-term row sum."""
    def pair(c):
        return (table[il, iv + c // 2, ib + c % 2, k] * w[c]) + (table[il + 1, iv + c // 2, ib + c % 2, k] * w[c + 8])
    return ((pair(0) + pair(1)) + (pair(2) + pair(3))) + ((pair(4) + pair(5)) + (pair(6) + pair(7)))


_probe = compiled(_probe)


def at(table, log_l, vds_axis, body_axis, vgs_axis, l, vgs, vds, vsb):
    out = np.empty(l.shape[0])
    w = np.empty(16)
    for n in range(l.shape[0]):
        il, iv, ib = _corners(log_l, vds_axis, body_axis, l[n], vds[n], vsb[n], w)
        ig, tg = _bracket(vgs_axis, vgs[n])
        if il < 0 or np.isnan(tg):
            out[n] = np.nan
            continue
        out[n] = (1 - tg) * _probe(table, il, iv, ib, w, ig) + tg * _probe(table, il, iv, ib, w, ig + 1)
    return out


at = compiled(at)


def at_all(stacked, log_l, vds_axis, body_axis, vgs_axis, l, vgs, vds, vsb):
    """Every quantity of `stacked` (L, VDS, VSB, VGS, quantity): rows are queries."""
    count = stacked.shape[4]
    out = np.empty((l.shape[0], count))
    w = np.empty(16)
    low, high = np.empty(count), np.empty(count)
    for n in range(l.shape[0]):
        il, iv, ib = _corners(log_l, vds_axis, body_axis, l[n], vds[n], vsb[n], w)
        ig, tg = _bracket(vgs_axis, vgs[n])
        if il < 0 or np.isnan(tg):
            out[n, :] = np.nan
            continue
        # Corners summed one after another, as numpy reduces a middle axis.
        for q in range(count):
            low[q] = stacked[il, iv, ib, ig, q] * w[0]
            high[q] = stacked[il, iv, ib, ig + 1, q] * w[0]
        for c in range(1, 16):
            i, j, m = il + c // 8, iv + (c // 2) % 4, ib + c % 2
            for q in range(count):
                low[q] = low[q] + stacked[i, j, m, ig, q] * w[c]
                high[q] = high[q] + stacked[i, j, m, ig + 1, q] * w[c]
        for q in range(count):
            out[n, q] = (1 - tg) * low[q] + tg * high[q]
    return out


at_all = compiled(at_all)


def curve(table, log_l, vds_axis, body_axis, l, vds, vsb):
    """The quantity along the whole VGS axis: rows are queries."""
    points = table.shape[3]
    out = np.empty((l.shape[0], points))
    w = np.empty(16)
    for n in range(l.shape[0]):
        il, iv, ib = _corners(log_l, vds_axis, body_axis, l[n], vds[n], vsb[n], w)
        if il < 0:
            out[n, :] = np.nan
            continue
        for k in range(points):
            total = table[il, iv, ib, k] * w[0]
            for c in range(1, 16):
                total = total + table[il + c // 8, iv + (c // 2) % 4, ib + c % 2, k] * w[c]
            out[n, k] = total
    return out


curve = compiled(curve)


def solve_vgs(table, log_l, vds_axis, body_axis, vgs_axis, l, target, vds, vsb, sign):
    """VGS where sign * quantity rises through sign * target: bisection over the VGS grid, then linear
    interpolation in the last interval (tables.DeviceTable.solve_vgs)."""
    out = np.empty(l.shape[0])
    w = np.empty(16)
    top = vgs_axis.shape[0] - 1
    for n in range(l.shape[0]):
        il, iv, ib = _corners(log_l, vds_axis, body_axis, l[n], vds[n], vsb[n], w)
        goal = sign * target[n]
        if il < 0 or not (sign * _probe(table, il, iv, ib, w, 0) < goal
                          and sign * _probe(table, il, iv, ib, w, top) >= goal):
            out[n] = np.nan
            continue
        lo, hi = 0, top
        while hi - lo > 1:
            mid = (lo + hi) // 2
            if sign * _probe(table, il, iv, ib, w, mid) < goal:
                lo = mid
            else:
                hi = mid
        y0, y1 = _probe(table, il, iv, ib, w, lo), _probe(table, il, iv, ib, w, hi)
        t = (target[n] - y0) / (1.0 if y1 == y0 else y1 - y0)
        out[n] = vgs_axis[lo] + min(max(t, 0.0), 1.0) * (vgs_axis[hi] - vgs_axis[lo])
    return out


solve_vgs = compiled(solve_vgs)
