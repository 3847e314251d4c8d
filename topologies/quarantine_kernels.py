"""Compiled twin of the evaluator's screen for unusable circuits (evaluate._quarantine).

One pass over each design's matrix instead of numpy's isfinite and abs-max temporaries of the whole
population; the verdict is a comparison per element, so both paths give the same mask exactly.
"""

from __future__ import annotations

import numpy as np

from .kernels import compiled


def unusable_rows(a, size, limit):
    """For each design: True where the leading size x size block of a holds NaN, inf or |value| > limit."""
    out = np.zeros(a.shape[0], np.bool_)
    for d in range(a.shape[0]):
        for i in range(size):
            for j in range(size):
                v = a[d, i, j]
                if not (abs(v) <= limit):      # NaN and inf fail the comparison too
                    out[d] = True
                    break
            if out[d]:
                break
    return out


unusable_rows = compiled(unusable_rows)
