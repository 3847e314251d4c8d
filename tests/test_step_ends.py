"""A stated output step settled edge by edge (topologies/step_ends.py, slewing.py, geometry.py).

References: Kirchhoff's current law at the output (the device currents the technology gives at the
reported terminal voltages, and the load's current); scipy.integrate.quad for the slewing time along a
loaded edge against the closed form; the closed-loop relations of any analog design text (from memory: the
non-inverting inputs sit at v_cm + beta (v_out - v_cm), the inverting ones at the virtual ground). The
agreement with ngspice's transient is tests/test_application_spice.py's.
"""

from dataclasses import replace

import numpy as np
import pytest
from scipy.integrate import quad

from ampfront import topologies
from ampfront.topologies.base import Conditions
from ampfront.topologies.catalog import M
from ampfront.topologies.geometry import Recording, SameGeometry
from ampfront.topologies.kcl import node_imbalance
from ampfront.topologies.slewing import ConstantSlew, LoadedEdge
from ampfront.topologies.step_ends import end_conditions
from tests.helpers import generic180, random_designs

APPLIED = Conditions(vdd=1.8, c_load=2e-12, r_load=np.inf, v_cm=0.9, beta=0.5, r_network=20e3, step_v=0.6,
                     settle_band=1e-3, settling=True)


def _current_into(build, node: str) -> np.ndarray:
    """Sum of the device currents flowing into `node` (nMOS drain to source, pMOS source to drain)."""
    total = np.zeros_like(build.supply_current)
    for d in build.devices:
        drain, _, source, _ = d.nodes
        sign = 1.0 if d.polarity == "n" else -1.0
        if drain == node:
            total = total - sign * d.op.id
        if source == node:
            total = total + sign * d.op.id
    return total


def test_end_conditions_follow_the_loop():
    loaded = APPLIED.network_loaded()
    high, low = end_conditions(loaded, +1.0), end_conditions(loaded, -1.0)
    assert high.out_level == pytest.approx(1.2) and low.out_level == pytest.approx(0.6)
    # The network (20 kOhm to the common mode) draws (v - v_cm) / R from the output: i_out pushes in.
    assert high.i_out == pytest.approx(-0.3 / 20e3) and low.i_out == pytest.approx(0.3 / 20e3)
    assert high.v_cm == pytest.approx(0.9 + 0.5 * 0.3) and low.v_cm == pytest.approx(0.9 - 0.5 * 0.3)
    inverting = replace(APPLIED, inverting=True, beta=0.25).network_loaded()
    assert end_conditions(inverting, +1.0).v_cm == pytest.approx(0.9)
    # Inverting, the output drives Rf = (1 - beta) R alone into the virtual ground.
    assert end_conditions(inverting, +1.0).i_out == pytest.approx(-0.3 / (0.75 * 20e3))
    assert high.step_v == 0.0


@pytest.mark.parametrize("name", ["two_stage_miller", "simple_ota", "folded_cascode", "simple_ota_ab",
                                  "folded_cascode_pmos_ab"])
def test_the_drawn_circuit_holds_its_output_at_a_steps_end_with_the_loads_current(name):
    tech = generic180()
    topology = topologies.available()[name]
    x = random_designs(topology, tech, 64, seed=4)
    cond = APPLIED.network_loaded()
    recording = Recording(tech)
    with np.errstate(all="ignore"):
        build = topology.build(x, recording, cond)
        end = end_conditions(cond, -1.0)
        built = SameGeometry(topology, recording.widths, build).build(x, tech, end)
    # Kirchhoff at the output: the devices' net current into it plus what the load pushes in is zero.
    # Where the topology's solver closed the end's DC point (step_ends reads no other); most designs that
    # can carry the load's current do.
    net = _current_into(built, "out") + end.i_out
    peak = np.minimum(build.metrics[M.peak_source_a], build.metrics[M.peak_sink_a])
    carry = (np.isfinite(net) & np.isfinite(built.supply_current) & (abs(end.i_out) < 0.5 * peak)
             & (build.metrics[M.out_low_v] < 0.6))
    solved = carry & (node_imbalance(built, {"out": end.i_out}) <= 1e-3)
    assert solved.sum() >= 8 and solved.sum() >= 0.6 * carry.sum()
    np.testing.assert_array_less(np.abs(net[solved]), 2e-3 * built.supply_current[solved] + 1e-9)
    # The drawn geometry is the quiescent one: same widths, same passives.
    for before, after in zip(build.devices, built.devices):
        np.testing.assert_array_equal(np.broadcast_to(before.w, after.w.shape), after.w)
    for before, after in zip(build.elements, built.elements):
        np.testing.assert_array_equal(before.value, after.value)
    # The output devices tied to a rail see the end's level.
    at_out = [d for d in built.devices if d.nodes[0] == "out" and d.nodes[2] in ("vss", "vdd")]
    for d in at_out:
        level = np.where(d.polarity == "n", d.vds, cond.vdd - d.vds)
        np.testing.assert_allclose(level[solved], 0.6, atol=1e-9)


def test_a_loaded_edge_slews_as_long_as_the_integral_of_its_rate():
    rate, peak, c_out, g = 20e6, 50e-6, 2e-12, 1 / 20e3
    edge = LoadedEdge(np.array([rate]), np.array([peak]), np.array([c_out]), g)
    step = 1.0
    for travel in (0.2, 0.6, 0.95):
        expected, _ = quad(lambda v: 1.0 / min(rate, (peak - g * (v - 0.5 * step)) / c_out), 0.0, travel,
                           points=[0.5 * step + (peak - rate * c_out) / g], epsabs=0.0, epsrel=1e-10)
        assert edge.time(np.array([travel]), step)[0] == pytest.approx(expected, rel=1e-9)
    # The fastest slope is where the edge starts: the load helps the output there.
    assert edge.steepest(step)[0] == pytest.approx(min(rate, (peak + g * 0.5) / c_out))
    # A load that takes the whole peak before the end: the end is not reached.
    weak = LoadedEdge(np.array([rate]), np.array([20e-6]), np.array([c_out]), g)
    assert weak.time(np.array([0.95]), step)[0] == np.inf


def test_without_a_load_the_edge_is_the_constant_rate():
    edge = LoadedEdge(np.array([10e6]), np.array([1.0]), np.array([1e-12]), 0.0)
    constant = ConstantSlew(np.array([10e6]))
    assert edge.time(np.array([0.4]), 1.0)[0] == pytest.approx(constant.time(np.array([0.4]), 1.0)[0])
    slope = np.array([1e8])
    assert edge.entry(slope, 1.0)[0] == pytest.approx(constant.entry(slope, 1.0)[0])


def test_each_designs_step_figures_are_its_own():
    """Solving the step's ends for the stable designs only changes no design's figure."""
    tech = generic180()
    topology = topologies.available()["two_stage_miller"]
    x = random_designs(topology, tech, 80, seed=2)
    whole, _ = topologies.evaluate(topology, x, tech, APPLIED)
    half, _ = topologies.evaluate(topology, {k: v[:40] for k, v in x.items()}, tech, APPLIED)
    for name in (M.step_settling_s, M.step_slope_v_per_s):
        np.testing.assert_array_equal(whole[name][:40], half[name])
    assert np.isfinite(whole[M.step_settling_s]).sum() >= 10


def test_a_step_the_pair_or_the_output_cannot_follow_does_not_settle():
    """Designs stable at the quiescent point read inf, not NaN, where the step's ends lie outside the output
    swing or (non-inverting) the inputs leave the pair's common-mode range and the end has no DC point."""
    tech = generic180()
    for name in ("telescopic_cascode", "two_stage_miller"):
        topology = topologies.available()[name]
        metrics, _ = topologies.evaluate(topology, random_designs(topology, tech, 200, seed=1), tech,
                                         replace(APPLIED, r_network=1e6))
        stable = metrics[M.cl_stable] == 1.0
        outside = ((metrics[M.out_low_v] > 0.6) | (metrics[M.out_high_v] < 1.2)
                   | (metrics[M.cm_low_v] > 0.75) | (metrics[M.cm_high_v] < 1.05))
        settle = metrics[M.step_settling_s]
        assert not np.isnan(settle[stable & outside]).any(), name
        assert (settle[stable & (metrics[M.out_low_v] > 0.6)] == np.inf).all(), name
        assert (stable & outside).sum() >= 5, name


def test_the_benchmark_times_a_settling_study():
    from ampfront.optimize.bench import _bench_settling
    from ampfront.topologies.process.techfile import shipped

    line = _bench_settling(shipped()["generic180"], 200, 1)
    rate = float(line.split(": ")[1].split(" designs/s")[0].replace(",", ""))
    assert rate > 0 and "both ends" in line
