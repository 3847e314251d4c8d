"""The slewing-then-linear settling of a large step (topologies/stability.py `large_step_settling`) on
closed loops written down as poles and residues, against the textbook two-phase result worked by hand
(from memory of any analog design text: slew for (V - V_lin) / SR, then settle from V_lin).

What ngspice showed and these hold in closed form: a slow pole-zero doublet's tail is excited by the whole
step even when the loop slews (a 1 V slewing step's tail was the same fraction of the step as a 10 mV
step's), and a step whose end lies outside the output's linear swing does not settle there.
"""

import math
from types import SimpleNamespace

import numpy as np
import pytest

from ampfront.topologies.stability import _step, large_step_settling

BAND = 1e-3


def _loop(taus, finals):
    """A closed loop whose unit step response is sum_i finals_i (1 - exp(-t / taus_i)): poles only."""
    lam = np.array([taus], complex)
    r0 = np.array([finals], complex)
    return SimpleNamespace(lam=lam, r0=r0, r1=np.zeros_like(r0))


def _settle(loop, slew, step_v, reach=None):
    finite = np.ones(loop.lam.shape, bool)
    stable = np.ones(1, bool)
    _, _, s_max = _step(loop, finite, stable)
    settle, steepest = large_step_settling(loop, finite, stable, s_max, np.array([slew]), step_v, BAND, reach)
    return settle[0], steepest[0], s_max[0]


def test_a_step_the_loop_follows_linearly_settles_as_the_small_step():
    tau = 10e-9
    settle, steepest, s_max = _settle(_loop([tau], [1.0]), slew=1e9, step_v=0.1)
    assert s_max == pytest.approx(1 / tau, rel=1e-3)
    assert steepest == pytest.approx(0.1 / tau, rel=1e-3)
    assert settle == pytest.approx(tau * math.log(1 / BAND), rel=1e-3)


def test_a_slow_doublet_keeps_the_whole_steps_tail_after_slewing():
    """Loop pole 10 ns, a 1 % doublet at 1 us, a 1 V step at 10 V/us (V_lin 0.1 V): the doublet's tail
    a exp(-t / 1 us) is the whole step's (the slew, 90 ns, is short to it), so it crosses the 0.1 % band
    about 1 us ln(10) after the slew, where the linear remainder alone (a tenth of it) would be inside."""
    a, tau, slow = 0.01, 10e-9, 1e-6
    loop = _loop([tau, slow], [1 - a, a])
    settle, _, s_max = _settle(loop, slew=1e7, step_v=1.0)
    v_lin = 1e7 / s_max
    t_slew = (1.0 - v_lin) / 1e7
    ramp = (1 - math.exp(-t_slew / slow)) / (t_slew / slow)
    assert settle == pytest.approx(t_slew + slow * math.log(a * ramp / BAND), rel=2e-3)
    assert settle > t_slew + 2 * slow


def test_a_step_outside_the_linear_swing_never_settles():
    loop = _loop([10e-9], [1.0])
    settle, _, _ = _settle(loop, slew=1e7, step_v=1.0, reach=np.array([False]))
    assert settle == math.inf
    settle, _, _ = _settle(loop, slew=1e7, step_v=1.0, reach=np.array([True]))
    assert math.isfinite(settle)
