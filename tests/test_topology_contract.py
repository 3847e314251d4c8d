"""One contract every registered topology honours (the interface in topologies/base.py)."""

import pickle

import numpy as np
import pytest

from ampfront import topologies
from ampfront.topologies.evaluate import evaluate

from .helpers import DEMO_CONDITIONS, generic180, random_designs

NAMES = sorted(topologies.available())


@pytest.mark.parametrize("name", NAMES)
def test_shapes_finiteness_and_determinism(name):
    tech = generic180()
    topology = topologies.available()[name]
    variables = topology.variables(tech)
    assert len({v.name for v in variables}) == len(variables)
    assert all(v.low < v.high and (v.low > 0 or not v.log) for v in variables)
    x = random_designs(topology, tech, 64, seed=2)
    metrics, build = evaluate(topology, x, tech, DEMO_CONDITIONS)
    for key in ("gain_db", "gbw_hz", "phase_margin_deg", "power_w", "area_m2", "slew_v_per_s", "swing_v",
                "cm_low_v", "cm_high_v", "sat_min_v"):
        assert metrics[key].shape == (64,), key
    # A design the topology cannot bias (a cascode gate below threshold, say) reads NaN, which the search
    # treats as violating every constraint; most random designs must still evaluate.
    for key in ("gain_db", "power_w", "area_m2", "slew_v_per_s", "sat_min_v"):
        assert np.isfinite(metrics[key]).mean() > 0.6, key
    valid = np.isfinite(metrics["gain_db"])
    assert (metrics["power_w"][valid] > 0).all() and (metrics["area_m2"][valid] > 0).all()
    # Non-inverting from inp to out, or the testbench's DC feedback would latch instead of following.
    from ampfront.topologies.evaluate import small_signal

    assert (small_signal(build, DEMO_CONDITIONS).dc_gain("out")[valid] > -1e-9).all()
    assert len({d.role for d in build.devices}) == len(build.devices)
    again, _ = evaluate(topology, x, tech, DEMO_CONDITIONS)
    for key in metrics:
        np.testing.assert_array_equal(metrics[key], again[key])  # NaN compares equal here
    assert pickle.loads(pickle.dumps(topology)).name == name


@pytest.mark.parametrize("name", NAMES)
def test_design_evaluates_alone_as_in_a_population(name):
    tech = generic180()
    topology = topologies.available()[name]
    x = random_designs(topology, tech, 16, seed=4)
    together, _ = evaluate(topology, x, tech, DEMO_CONDITIONS)
    alone, _ = evaluate(topology, {k: v[5:6] for k, v in x.items()}, tech, DEMO_CONDITIONS)
    for key in ("gain_db", "gbw_hz", "power_w"):
        assert alone[key][0] == pytest.approx(together[key][5], rel=1e-12)


@pytest.mark.parametrize("name", NAMES)
def test_the_output_sits_where_the_conditions_hold_it(name):
    """A stated step's ends build the same geometry with the output held off the common mode and a load's
    current pushed into it (topologies/step_ends.py); Kirchhoff's law at every node, that current included,
    must close there as it does at the quiescent point."""
    from dataclasses import replace

    from ampfront.topologies.geometry import Recording, SameGeometry
    from ampfront.topologies.kcl import node_imbalance

    tech = generic180()
    topology = topologies.available()[name]
    x = random_designs(topology, tech, 160, seed=5)
    recording = Recording(tech)
    with np.errstate(all="ignore"):
        build = topology.build(x, recording, DEMO_CONDITIONS)
        held = replace(DEMO_CONDITIONS, v_out=1.0, i_out=-0.1 / 200e3)
        moved = SameGeometry(topology, recording.widths, build).build(x, tech, held)
    # Where the quiescent point closes, the linear swing reaches the held level with room to spare and the
    # output can drive the load's current several times over.
    peak = np.minimum(build.metrics["peak_source_a"], build.metrics["peak_sink_a"])
    quiescent = ((node_imbalance(build) <= 1e-3) & (build.metrics["out_high_v"] > 1.1)
                 & (peak > 4 * abs(held.i_out)))
    closes = node_imbalance(moved, {"out": held.i_out}) <= 1e-3
    assert quiescent.sum() >= 8
    assert (closes & quiescent).sum() >= 0.8 * quiescent.sum(), (closes & quiescent).sum()
