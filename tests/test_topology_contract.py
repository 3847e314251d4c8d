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
