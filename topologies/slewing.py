"""How fast the output slews along one edge of a large step, and how long the slewing lasts.

A topology reports its slew rate at the quiescent point (`slew_v_per_s`: the slower of its internal
slewing node and its output's peak current into the output capacitance). A load that the step's levels
pull current through (the load resistor and the feedback network, terminated at the common mode) changes
the output's share along the way: moving away from the common mode, the output device that drives the edge
also carries the load's current, so what is left for the capacitance shrinks as the edge goes on.

Each edge is read in its own coordinate u, the distance moved past the common mode in the edge's direction:
from -V/2 to +V/2 for a step of V centred on the common mode, either way. At u the load takes g u of the
driving device's peak current I_peak, and the rate is

    SR(u) = min(SR_q, (I_peak - g u) / C_out)

(C_out the output node's capacitance), so the edge's fastest slope is where it starts and its slowest where
it ends. The time to slew from u_a to u_b is the integral of du / SR(u): at SR_q up to the crossing
u_x = (I_peak - SR_q C_out) / g, then (C_out / g) ln((I_peak - g u) / (I_peak - g u_b)) beyond it, an RC
approach towards the level where the load takes all of I_peak (infinite time at or past it).
"""

from __future__ import annotations

import numpy as np

# Fixed-point steps for where the slewing hands over to linear settling (V_lin = SR(u_end - V_lin) / s_max):
# the rate grows back along the path, so the iterates increase; two bring V_lin within a fraction of a
# percent for any load the output can drive.
ENTRY_STEPS = 2


class ConstantSlew:
    """A slew rate that holds along the whole edge (no load, or a caller that states one rate)."""

    def __init__(self, rate):
        self.rate = np.asarray(rate, float)

    def entry(self, slope: np.ndarray, step_v: float) -> np.ndarray:
        """The largest remainder (V) the loop follows linearly: V_lin = SR / s_max."""
        return self.rate / slope

    def time(self, travel: np.ndarray, step_v: float) -> np.ndarray:
        return travel / self.rate

    def steepest(self, step_v: float) -> np.ndarray:
        return self.rate


class LoadedEdge:
    """One edge of a step of `step_v` centred on the common mode, whose driving device has `peak` (A) and
    whose output node `c_out` (F) and load conductance `g_load` (S, to the common mode); `rate` (V/s) is
    the topology's quiescent slew rate (module docstring)."""

    def __init__(self, rate, peak, c_out, g_load: float):
        self.rate, self.peak = np.asarray(rate, float), np.asarray(peak, float)
        self.c_out, self.g = np.asarray(c_out, float), float(g_load)

    def rate_at(self, u) -> np.ndarray:
        return np.fmin(self.rate, (self.peak - self.g * u) / self.c_out)

    def entry(self, slope: np.ndarray, step_v: float) -> np.ndarray:
        end = 0.5 * step_v
        v_lin = self.rate_at(end) / slope
        for _ in range(ENTRY_STEPS):
            v_lin = self.rate_at(end - np.clip(v_lin, 0.0, step_v)) / slope
        return v_lin

    def time(self, travel: np.ndarray, step_v: float) -> np.ndarray:
        """Seconds to slew `travel` (V) from the edge's start."""
        u_a = -0.5 * step_v
        u_b = u_a + travel
        if self.g <= 0.0:
            return travel / self.rate_at(u_a)
        with np.errstate(divide="ignore", invalid="ignore"):
            u_x = (self.peak - self.rate * self.c_out) / self.g
            knee = np.clip(u_x, u_a, u_b)
            constant = (knee - u_a) / self.rate
            left_a, left_b = self.peak - self.g * knee, self.peak - self.g * u_b
            loaded = np.where(left_b > 0.0, self.c_out / self.g * np.log(left_a / left_b), np.inf)
            # A load that takes the whole peak before the edge's start leaves nothing to slew with.
            loaded = np.where(left_a > 0.0, loaded, np.inf)
        return constant + np.where(u_b > knee, loaded, 0.0)

    def steepest(self, step_v: float) -> np.ndarray:
        return self.rate_at(-0.5 * step_v)
