"""Random design vectors, inside and far outside the declared bounds and with NaN and infinities, through
every evaluator on both technologies (open loop; at three corners with a supply tolerance; in a closed-loop
application): no exception, and no design the search would call feasible with a non-finite objective,
constrained metric or any other figure a feasible design reports (a few are infinite by definition).

Reference: numpy's IEEE-754 semantics (a NaN or inf anywhere must surface as a violated constraint, never as
a feasible number). The default count keeps CI short; `AMPFRONT_RANDOM_VECTORS=1000000` runs the full
campaign (README, "How it is checked").
"""

import os

import numpy as np
import pytest

from ampfront import topologies
from ampfront.optimize.search.problem import DesignProblem
from ampfront.optimize.spec.study import Study, _constraints
from ampfront.topologies.base import Conditions
from ampfront.topologies.process.techfile import load, shipped

COUNT = int(os.environ.get("AMPFRONT_RANDOM_VECTORS", "3000"))
CHUNK = 20_000
SPEC = {"min_gain": 20.0, "min_gbw": 1e3, "min_phase_margin": 10.0, "max_power": 1.0,
        "max_noise_rms": 1.0, "min_output_current": 1e-9, "min_cmrr": 1.0, "min_psrr": 1.0,
        "max_offset_sigma": 1.0, "min_slew_rate": 1.0, "min_output_swing": 0.01, "max_area": 1.0}


def _study(tech_path) -> Study:
    conditions = Conditions(1.8, 2e-12, 10e3, 0.9)
    return Study(path=tech_path, title="random", spec=SPEC, conditions=conditions, cm_range=(0.9, 0.9),
                 constraints=_constraints(SPEC, (0.9, 0.9)), objectives=("power", "gbw", "gain", "area"),
                 topologies=(), technology=tech_path, corner=None, population=8, generations=1, seed=1, digest="")


def _vectors(problem, n: int, rng) -> np.ndarray:
    span = problem.xu - problem.xl
    X = rng.uniform(problem.xl - span, problem.xu + span, (n, problem.n_var))
    inside = rng.random(n) < 0.5
    X[inside] = rng.uniform(problem.xl, problem.xu, (int(inside.sum()), problem.n_var))
    poison = rng.random(X.shape) < 0.02
    X[poison] = rng.choice([np.nan, np.inf, -np.inf, 0.0, -1e30, 1e30], int(poison.sum()))
    return X


# Figures that are infinite or unknown by definition on a sound design: no -180 deg crossing (gain margins,
# which a study bounds by default: +inf meets a minimum),
# no reference current to bound, a flicker corner where flicker is unknown; and the small-step figures,
# which the search computes only when a bound or an objective asks for them (check always does).
MAY_BE_INFINITE = {"gain_margin_db", "loop_gain_margin_db", "reference_ratio", "flicker_corner_hz",
                   "overshoot_pct", "settling_s"}

LOOSE = """
title = "random vectors"
topologies = ["simple_ota"]
objectives = ["power", "gbw"]
technology = "{technology}"
{extra}
[spec]
supply = "1.8 V"
load_capacitance = "2 pF"
load_resistance = "10 kOhm"
min_gain = "20 dB"
min_phase_margin = "10 deg"
max_power = "1 W"
{spec}
"""
KINDS = {
    "corners": ('corners = ["tt", "ss", "ff"]\nsupply_tolerance = "10 %"', ""),
    "application": ("", 'closed_loop_gain = 2\nconfiguration = "non_inverting"\nmax_gain_error = "50 %"\n'
                        'feedback_resistance = "20 kOhm"\nstep = "0.2 V"\nsettle_band = "1 %"\n'
                        'max_settling_time = "1 s"'),
}


def _loaded_study(tmp_path, technology: str, kind: str) -> Study:
    from ampfront.optimize.spec.study import load_study

    extra, spec = KINDS[kind]
    path = tmp_path / f"{kind}.toml"
    path.write_text(LOOSE.format(technology=technology, extra=extra, spec=spec))
    return load_study(path, topologies.available())


def _check(problem, X, constraints) -> int:
    metrics, _ = problem.metrics(X)
    out = problem.evaluate(X, return_as_dictionary=True)
    feasible = (out["G"] <= 0).all(axis=1)
    name = problem.topology.name
    assert np.isfinite(out["F"][feasible]).all(), name
    for c in constraints:
        held = metrics[c.metric][feasible]
        assert (np.isfinite(held) | ((held == np.inf) & (c.metric in MAY_BE_INFINITE))).all(), (name, c.metric)
    for key, values in metrics.items():
        values = np.asarray(values)
        if key in MAY_BE_INFINITE or values.dtype.kind not in "fi" or values.shape[:1] != feasible.shape:
            continue
        assert not np.isnan(values[feasible]).any(), (name, key)
    assert np.isfinite(X[feasible]).all(), name   # a NaN or infinite coordinate is never a design
    return int(feasible.sum())


@pytest.mark.filterwarnings("ignore::RuntimeWarning")
@pytest.mark.parametrize("kind", sorted(KINDS))
@pytest.mark.parametrize("technology", ["generic180", "sky130"])
def test_random_vectors_at_corners_and_in_a_loop(technology, kind, tmp_path):
    study = _loaded_study(tmp_path, technology, kind)
    tech = load(study.technology, study.corner)
    rng = np.random.default_rng(12)
    feasible_total = 0
    for name, topology in topologies.available().items():
        problem = DesignProblem(topology, tech, study)
        feasible_total += _check(problem, _vectors(problem, max(COUNT // 20, 150), rng), study.constraints)
    assert feasible_total > 0


@pytest.mark.filterwarnings("ignore::RuntimeWarning")
@pytest.mark.parametrize("technology", ["generic180", "sky130"])
def test_random_vectors_never_raise_nor_pass_non_finite(technology):
    tech_path = shipped()[technology]
    tech, study = load(tech_path), _study(tech_path)
    rng = np.random.default_rng(11)
    feasible_total = 0
    for name, topology in topologies.available().items():
        problem = DesignProblem(topology, tech, study)
        for start in range(0, COUNT, CHUNK):
            X = _vectors(problem, min(CHUNK, COUNT - start), rng)
            feasible_total += _check(problem, X, study.constraints)
    assert feasible_total > 0   # the campaign must reach real designs, not only rejects
