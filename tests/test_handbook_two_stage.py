"""A handbook worked two-stage design, reproduced by ampfront's own physics and solver.

Source (from memory): P. E. Allen and D. R. Holberg, "CMOS Analog Circuit Design", 2nd ed., Example 6.3-1,
"Design of a two-stage op amp": K'N = 110 uA/V^2, K'P = 50 uA/V^2, |VT| = 0.7 V, lambda_N = 0.04 V^-1,
lambda_P = 0.05 V^-1; CL = 10 pF, GB = 5 MHz, SR = 10 V/us, VDD = -VSS = 2.5 V. The book arrives at
Cc = 3 pF (the rule Cc > 0.22 CL for 60 deg), I5 = 30 uA, gm1 = 94.25 uS, (W/L)1 = 3 after rounding up,
gm6 = 942.5 uS, I6 = 95 uA, (W/L)6 = 94, a gain of 7,696 V/V and 0.625 mW. "Within the book's own rounding"
is taken as 2 %.
"""

import math

import numpy as np
import pytest

from ampfront.topologies.insight import gbw_dominant_pole
from ampfront.topologies.process import LevelOneDevice, SquareLaw
from ampfront.topologies.smallsignal import Circuit, loop_metrics


def book_process(with_lambda: bool = True) -> SquareLaw:
    common = dict(gamma=0.0, phi=0.7, tox=10e-9, cgso=0, cgdo=0, cgbo=0, cj=0, mj=0.5, cjsw=0, mjsw=0.33, pb=0.8)
    # lambda_l is lambda times L; with L = 1 um the book's lambda holds.
    return SquareLaw(name="book", supply=5.0, temperature=300.15, l_min=1e-6, l_max=1e-5, w_min=1e-6,
                     cap_density=1e-3, diffusion_length=0.0,
                     nmos=LevelOneDevice(kp=110e-6, vto=0.7, lambda_l=0.04e-6 * with_lambda, **common),
                     pmos=LevelOneDevice(kp=50e-6, vto=0.7, lambda_l=0.05e-6 * with_lambda, **common))


def test_input_pair_aspect_ratio_from_gm():
    tech = book_process(with_lambda=False)
    gm1, i1 = 94.25e-6, 15e-6
    w, _ = tech.size("n", gm1 / i1, 1e-6, i1, 0.0, 0.0)
    assert w / 1e-6 == pytest.approx(gm1**2 / (110e-6 * 2 * i1), rel=1e-9)
    assert math.ceil(w / 1e-6) == 3


def test_second_stage_current_from_gm6():
    tech = book_process(with_lambda=False)
    w6 = 94e-6
    vov = 942.5e-6 / (50e-6 * 94)           # gm = K' (W/L) Vov
    i6 = tech.current("p", w6, 1e-6, 0.7 + vov, 1.0, 0.0)
    assert i6 == pytest.approx(95e-6, rel=0.02)


def test_gain_gbw_and_power_with_the_books_small_signal_values():
    gm1, gm6, cc, cl = 94.25e-6, 942.5e-6, 3e-12, 10e-12
    i5, i6 = 30e-6, 95e-6
    g_first = 0.04 * i5 / 2 + 0.05 * i5 / 2
    g_second = 0.05 * i6 + 0.04 * i6
    # Two gm stages with the book's conductances; the Miller capacitor is the only other element.
    circuit = Circuit(["o1", "out"], designs=1)
    circuit.vccs("o1", "0", "inp", "0", np.array([gm1]))
    circuit.conductance("o1", "0", g_first)
    circuit.vccs("out", "0", "o1", "0", np.array([gm6]))
    circuit.conductance("out", "0", g_second)
    circuit.capacitor("o1", "out", cc)
    circuit.capacitor("out", "0", cl)
    loop = loop_metrics(circuit, "out")
    assert abs(loop.gain[0]) == pytest.approx(7696, rel=0.02)
    assert gbw_dominant_pole(gm1, cc) == pytest.approx(5e6, rel=0.001)
    # The book's GB is gm1/Cc; the true unity-gain frequency sits a little lower, pulled by p2 = gm6/CL.
    assert 0.85 * 5e6 < loop.gbw[0] < 5e6
    assert loop.phase_margin[0] >= 60.0
    assert 5.0 * (i5 + i6) == pytest.approx(0.625e-3, rel=0.001)
    assert cc / cl >= 0.22  # the book's rule for 60 deg with the RHP zero 10x beyond GB
    assert math.isfinite(loop.phase_margin[0])
