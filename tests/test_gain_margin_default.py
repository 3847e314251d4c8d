"""A front holds a gain margin even when the study states only a phase margin.

The search trades away whatever the spec leaves free: with a 60 deg phase margin alone, the sensor-readout
demo's telescopic cascode front filled with designs whose loop gain grazes -1 at a resonance (gain margins
near 0 dB, some below). The catalog therefore holds min_gain_margin at 6 dB unless the study says otherwise
(common practice: the loop gain may double before the loop rings out), at the testbench's unity-feedback
loop and at the loop the study closes, as the phase margin is held. Reference: the metrics' own definitions
(tests/test_stability_vs_scipy.py holds the loop's gain margin to dense scipy solves).
"""

import numpy as np
import pytest

from ampfront import topologies
from ampfront.optimize.outputs.report import spec_rows
from ampfront.optimize.search.problem import DesignProblem
from ampfront.optimize.spec.study import load_study
from ampfront.topologies.process.techfile import load, shipped

from .conftest import ROOT

SENSOR = ROOT / "studies" / "sensor_readout.toml"
ADC = ROOT / "studies" / "adc_driver_x5.toml"


def _margins(study):
    return {c.name: c.bound for c in study.constraints if "gain_margin" in c.name}


def test_a_study_without_a_gain_margin_holds_six_db_at_both_loops():
    study = load_study(SENSOR, topologies.available())
    assert _margins(study) == {"min_gain_margin": 6.0, "min_gain_margin_loop": 6.0}
    assert ("minimum gain margin", "6 dB (default)") in spec_rows(study)


def test_a_study_closing_its_own_loop_holds_it_there_only():
    """A gain-of-5 driver is judged at beta = 1/5, as its phase margin is: the unity-feedback testbench's
    gain margin would over-compensate it."""
    study = load_study(ADC, topologies.available())
    assert _margins(study) == {"min_gain_margin_loop": 6.0}


def test_a_stated_gain_margin_replaces_the_default(tmp_path):
    path = tmp_path / "s.toml"
    path.write_text(SENSOR.read_text().replace('min_phase_margin = "60 deg"',
                                               'min_phase_margin = "60 deg"\nmin_gain_margin = "12 dB"'))
    study = load_study(path, topologies.available())
    assert _margins(study) == {"min_gain_margin": 12.0, "min_gain_margin_loop": 12.0}
    rows = dict(spec_rows(study))
    assert rows["minimum gain margin"] == "12 dB"


def test_no_design_under_the_margin_is_feasible(tmp_path):
    """A property over random SKY130 designs on a loosened sensor spec (so that random designs meet it):
    none the search would keep has less than 6 dB at either loop, and some are refused for that alone."""
    path = tmp_path / "loose.toml"
    path.write_text(SENSOR.read_text().replace('min_gain = "70 dB"', 'min_gain = "30 dB"')
                    .replace('min_gbw = "5 MHz"', 'min_gbw = "100 kHz"').replace('"600 uW"', '"50 mW"')
                    .replace('min_output_swing = "1 V"', 'min_output_swing = "0.2 V"')
                    .replace('max_noise_rms = "40 uV"', 'max_noise_rms = "1 V"'))
    study = load_study(path, topologies.available())
    problem = DesignProblem(topologies.available()["two_stage_miller"], load(shipped()["sky130"]), study)
    X = np.random.default_rng(4).uniform(problem.xl, problem.xu, (6000, problem.n_var))
    out = problem.evaluate(X, return_as_dictionary=True)
    metrics, _ = problem.metrics(X)
    names = [c.name for c in study.constraints]
    feasible = (out["G"] <= 0).all(axis=1)
    assert (metrics["gain_margin_db"][feasible] >= 6).all()
    assert (metrics["loop_gain_margin_db"][feasible] >= 6).all()
    others = np.delete(out["G"], [names.index("min_gain_margin"), names.index("min_gain_margin_loop")], axis=1)
    refused = (others <= 0).all(axis=1) & ~feasible
    assert refused.sum() > 0, "no random design met everything but the gain margin: the property is untested"


def test_a_searched_telescopic_front_keeps_the_margin():
    """The case that showed the gap: a short converging search of the demo's telescopic cascode. Without the
    default, 116 of this search's 459 front designs had under 6 dB (checked by setting the default to None;
    DEVELOPERS.md, "Gain margin by default")."""
    from ampfront.optimize.search.engine import run_search

    study = load_study(SENSOR, topologies.available())
    problem = DesignProblem(topologies.available()["telescopic_cascode"], load(shipped()["sky130"]), study)
    result = run_search(problem, 200, None, 1, budget=30_000)
    assert result.feasible and len(result.X) >= 20
    metrics, _ = problem.metrics(result.X)
    assert (metrics["gain_margin_db"] >= 6).all() and (metrics["loop_gain_margin_db"] >= 6).all()


@pytest.mark.parametrize("k", [2.0, 5.0])
def test_the_simulator_side_reads_a_swept_gain_margin(k):
    """ngspice's side (`ngspice.gain_margin`) on the sweep the open-loop testbench writes (40 points a
    decade, continuous phase): K / (1 + s/p)^3 has 20 log10(8 / K) (from memory of any feedback-control
    text); one pole never reaches -180 deg."""
    from ampfront.optimize.simulator.ngspice import gain_margin

    f = np.logspace(-1, 12, 13 * 40 + 1)
    for poles, expected in (([1e3] * 3, 20 * np.log10(8 / k)), ([1e3], np.inf)):
        h = k / np.prod([1 + 1j * f / p for p in poles], axis=0)
        read = gain_margin(f, 20 * np.log10(np.abs(h)), np.degrees(np.unwrap(np.angle(h))))
        assert read == pytest.approx(expected, abs=0.01)


def test_the_check_judges_a_margin_the_model_reads_as_infinite_by_the_bound():
    """Where the model's phase never reaches -180 deg (inf) and ngspice's creeps past it on the feedforward
    plateau far above the crossover, what the model claimed, the bound, is what the check holds; a finite
    model margin is held to ngspice's within 1 dB as any figure."""
    from ampfront.optimize.simulator.tasks import OPEN_LOOP, Outcome, make_task
    from ampfront.optimize.simulator.verdict import FIGURES, rows
    from ampfront.topologies.catalog import M

    study = load_study(SENSOR, topologies.available())
    task = make_task("ota_001", OPEN_LOOP, {"ota_001_tb.sp": "x"})

    def judged(model_gm, spice_gm):
        model = {m: 1.0 for m in FIGURES[OPEN_LOOP]} | {M.gain_margin_db: model_gm}
        spice = dict(model) | {M.gain_margin_db: spice_gm}
        row = next(r for r in rows(task, Outcome(task.key, spice), "simple_ota", model, "gm_id_tables",
                                   study.constraints, 1.8) if r["metric"] == M.gain_margin_db)
        # A row that agrees never reads as off by more than its bound.
        assert (row["status"] == "agrees") == (row["error"] <= row["bound"])
        return row["status"], row["meets_spec"]

    assert judged(np.inf, 15.7) == ("agrees", "yes")
    assert judged(np.inf, 4.0) == ("disagrees", "no")
    assert judged(np.inf, np.inf)[0] == "agrees"
    assert judged(12.0, 12.8)[0] == "agrees" and judged(12.0, 14.0)[0] == "disagrees"
