"""Whether the compiled (numba) kernels evaluate the population, and the decorator that compiles them.

The numpy code beside each kernel stays the reference: it runs when numba is not importable, when the
environment sets AMPFRONT_KERNELS=0, and inside `reference_path()` (tests hold the kernels to it).
"""

from __future__ import annotations

import os
from contextlib import contextmanager

try:
    import numba
except ImportError:          # the numpy path alone is complete, only slower
    numba = None

_state = {"on": numba is not None and os.environ.get("AMPFRONT_KERNELS", "1") != "0"}


def enabled() -> bool:
    return _state["on"]


@contextmanager
def reference_path():
    """Evaluate with the numpy reference code inside the block."""
    before = _state["on"]
    _state["on"] = False
    try:
        yield
    finally:
        _state["on"] = before


def compiled(function):
    """numba-compile `function` (cached on disk, so a new process loads it instead of compiling), or None
    without numba. IEEE semantics: no fastmath, and division by zero gives inf/NaN as numpy does."""
    if numba is None:
        return None
    return numba.njit(cache=True, nogil=True, error_model="numpy")(function)
