"""Facts of the trade the models must honour (common practice: any analog design text states them)."""

import numpy as np
import pytest

from ampfront.topologies.evaluate import evaluate
from ampfront.topologies.insight import closed_loop_gain_error, two_pole_phase_margin
from ampfront.topologies.smallsignal import Circuit, loop_metrics
from ampfront.topologies.two_stage import TwoStageMiller

from .helpers import DEMO_CONDITIONS, generic180, random_designs


def test_gbw_is_gm1_over_cc_for_dominant_pole_designs():
    """Common practice: GBW ~ gm1/(2 pi Cc) when the second pole and the zero sit well beyond it."""
    tech = generic180()
    x = random_designs(TwoStageMiller(), tech, 3000, seed=5)
    metrics, build = evaluate(TwoStageMiller(), x, tech, DEMO_CONDITIONS)
    driver = {d.role: d for d in build.devices}["output_driver"].op
    p2 = driver.gm / (2 * np.pi * DEMO_CONDITIONS.c_load)
    zero = driver.gm / (2 * np.pi * x["cc"] * np.maximum(np.abs(x["rz_gm"] - 1), 1e-9))
    # Dominant-pole designs: second pole and compensation zero 3x beyond gm1/Cc, Cc well above the
    # driver's gate capacitance.
    dominant = ((p2 > 3 * metrics["gbw_hand_hz"]) & (zero > 3 * metrics["gbw_hand_hz"]) & (x["cc"] > 5 * driver.cgs)
                & (metrics["sat_min_v"] > 0.05) & (metrics["gain_db"] > 60))
    assert dominant.sum() > 20
    ratio = metrics["gbw_hz"][dominant] / metrics["gbw_hand_hz"][dominant]
    assert np.median(ratio) == pytest.approx(1.0, abs=0.1)
    # The rest of the spread is the mirror pole and the input pair's own capacitance, which the hand
    # formula leaves out and the solver keeps.
    assert np.mean((ratio > 0.75) & (ratio < 1.1)) > 0.9


def _two_pole(p1: float, p2: float, a0: float) -> Circuit:
    """Two gm-R-C stages with poles p1, p2 (Hz) and total gain a0."""
    circuit = Circuit(["a", "out"], designs=1)
    g = 1e-3
    circuit.vccs("a", "0", "inp", "0", np.array([-a0 * g]))
    circuit.conductance("a", "0", g)
    circuit.capacitor("a", "0", g / (2 * np.pi * p1))
    circuit.vccs("out", "0", "a", "0", np.array([-g]))
    circuit.conductance("out", "0", g)
    circuit.capacitor("out", "0", g / (2 * np.pi * p2))
    return circuit


def test_second_pole_at_unity_gain_gives_45_degrees():
    """Common practice: with the second pole at the unity-gain frequency, the phase margin is about 45 deg."""
    p1, a0 = 100.0, 1e4
    # Place p2 where |A| actually crosses 1: |A(p2)| = a0 / (sqrt(1 + (p2/p1)^2) * sqrt(2)) = 1.
    p2 = p1 * np.sqrt((a0 / np.sqrt(2)) ** 2 - 1)
    loop = loop_metrics(_two_pole(p1, p2, a0), "out")
    assert loop.gbw[0] == pytest.approx(p2, rel=1e-3)
    assert loop.phase_margin[0] == pytest.approx(45.0, abs=0.5)
    assert two_pole_phase_margin(1.0) == pytest.approx(45.0)
    assert two_pole_phase_margin(3.0) == pytest.approx(71.57, abs=0.01)


def test_closed_loop_gain_error_from_finite_open_loop_gain():
    """Common practice: A0 = 1000 with beta = 1/11 leaves a closed-loop gain error of about 1.1 %."""
    assert closed_loop_gain_error(1000, 1 / 11) == pytest.approx(0.0109, abs=0.0002)
    # The same error from the solver: a follower-with-gain loop closed around a 1000 V/V amplifier.
    a0, beta = 1000.0, 1 / 11
    closed = a0 / (1 + a0 * beta)
    assert 1 - closed * beta == pytest.approx(closed_loop_gain_error(a0, beta), rel=1e-12)


def test_white_noise_of_a_mirror_loaded_pair_is_the_hand_formula():
    """Common practice: a five-transistor OTA's input white noise density squared is
    2 * 4kT gamma / gm_in * (1 + gm_load / gm_in); tail and bias noise are common mode and cancel. The
    solver's noise (every source carried to the output) must agree."""
    from ampfront.topologies.insight import pair_thermal_noise
    from ampfront.topologies.simple_ota import SimpleOTA

    tech = generic180()
    x = random_designs(SimpleOTA(), tech, 2000, seed=9)
    metrics, build = evaluate(SimpleOTA(), x, tech, DEMO_CONDITIONS)
    ok = (metrics["sat_min_v"] > 0.05) & (metrics["gain_db"] > 20)
    assert ok.sum() > 50
    roles = {d.role: d.op for d in build.devices}
    hand = pair_thermal_noise(tech.temperature, roles["input_pair_b"].gm, roles["mirror_out"].gm)
    ratio = metrics["noise_thermal_v_rthz"][ok] / hand[ok]
    # Agreement to a few percent: the hand formula takes the two halves as equal and ignores the pair's
    # finite output resistance and the body effect the solver keeps.
    assert np.median(ratio) == pytest.approx(1.0, abs=0.03)
    assert np.mean(np.abs(ratio - 1) < 0.1) > 0.9
