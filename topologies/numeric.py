"""Vectorized root finding for DC operating points: one bracket per design, no loop over designs."""

from __future__ import annotations

import numpy as np


def bisect_decreasing(f, lo, hi, iterations: int = 32, nan_above=None):
    """Root of f (decreasing in its argument) inside [lo, hi], for every design at once.

    A NaN value of f (a device pushed off its model's range) is read as "past the root" when the probe lies
    above `nan_above` and as "before the root" below it; without `nan_above` NaN always means past.
    """
    lo, hi = np.broadcast_arrays(np.asarray(lo, float), np.asarray(hi, float))
    lo, hi = lo.copy(), hi.copy()
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        value = f(mid)
        before = value > 0
        if nan_above is not None:
            before |= np.isnan(value) & (mid < nan_above)
        lo = np.where(before, mid, lo)
        hi = np.where(before, hi, mid)
    return 0.5 * (lo + hi)
