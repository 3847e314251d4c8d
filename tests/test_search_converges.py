"""The search reaches known optima at the study's own budget.

References: pymoo's G7 (constrained single objective, known optimum 24.3062), pymoo's ZDT1 and BNH with
their Pareto fronts (scored with pymoo's IGD), scipy's differential_evolution on the same two-stage model
(benchmarks/textbook_two_stage.toml), and pymoo's hypervolume of the front ampfront writes.
"""

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from pymoo.indicators.hv import HV
from pymoo.indicators.igd import IGD
from pymoo.problems import get_problem
from scipy.optimize import differential_evolution

from ampfront import topologies
from ampfront.optimize.run import run_study
from ampfront.optimize.search.engine import run_search
from ampfront.optimize.search.extremes import best_of, runs
from ampfront.optimize.search.hypervolume import window_for
from ampfront.optimize.search.problem import DesignProblem
from ampfront.optimize.spec.study import load_study
from ampfront.topologies.process.techfile import load

TEXTBOOK = Path(__file__).resolve().parents[1] / "benchmarks" / "textbook_two_stage.toml"


def test_end_runs_reach_the_known_optimum_of_g7():
    problem = get_problem("g7")
    optimum = float(problem.pareto_front()[0, 0])
    rng = np.random.default_rng(1)
    U, F, c = runs(problem, rng, rng.random((4, 50, problem.n_var)), np.zeros(4, int), np.full((4, 1), np.inf),
                   300, np.ones(1))
    _, best, violation = best_of(U, F, c, np.zeros(4, int), 1)
    assert (violation == 0).all()
    assert best.ravel() == pytest.approx(np.full(4, optimum), rel=5e-3)


@pytest.mark.parametrize("name, limit", [("zdt1", 0.03), ("bnh", 0.5)])
def test_default_budget_reaches_the_reference_front(name, limit):
    """Population 100 x 60 generations, the study default: NSGA-II alone is at IGD 0.06-0.10 on ZDT1 and
    0.57 on BNH there (README, Convergence)."""
    problem = get_problem(name)
    result = run_search(problem, population=100, generations=60, seed=1)
    assert result.feasible
    assert IGD(problem.pareto_front())(result.F) < limit


def test_least_power_within_two_percent_of_scipy():
    """The front's low-power end against a power-only differential evolution of scipy on the same model."""
    study = load_study(TEXTBOOK, topologies.available())
    problem = DesignProblem(topologies.available()["two_stage_miller"], load(study.technology), study)

    def score(X):
        out = problem.evaluate(X.T, return_as_dictionary=True)
        cv = np.maximum(out["G"], 0).sum(axis=1)
        return np.where(cv <= 0, out["F"][:, 0], 10 + cv)

    reference = differential_evolution(score, list(zip(problem.xl, problem.xu)), popsize=10, maxiter=250, tol=0,
                                       atol=0, seed=1, vectorized=True, updating="deferred", polish=False,
                                       init="sobol", mutation=(0.5, 1.0), recombination=0.9)
    assert reference.fun < 0     # feasible: a log10 power, not the penalty
    result = run_search(problem, study.population, study.generations, study.seed, window=window_for(study))
    least = 10.0 ** result.F[:, 0].min()
    assert least <= 1.02 * 10.0 ** reference.fun


def test_manifest_hypervolume_is_that_of_the_written_front(tmp_path):
    text = TEXTBOOK.read_text().replace("population = 100", "population = 20").replace("generations = 60",
                                                                                      "generations = 8")
    study = TEXTBOOK.parent / "textbook_two_stage.toml"
    local = tmp_path / "small.toml"
    local.write_text(text.replace('technology = "handbook_process.toml"',
                                  f'technology = "{study.parent / "handbook_process.toml"}"'))
    run_study(local, tmp_path / "out", workers=1)
    manifest = json.loads((tmp_path / "out" / "manifest.json").read_text())
    window = manifest["convergence"]["window"]
    stored = manifest["convergence"]["topologies"]["two_stage_miller"]["hypervolume"]
    front = pd.read_csv(tmp_path / "out" / "front.csv")
    # Searched space: log10 power (minimized), -log10 GBW (maximized); the window ends a span better.
    F = np.column_stack([np.log10(front["power_w"]), -np.log10(front["gbw_hz"])])
    reference = np.array([math.log10(window["power"]["reference"]), -math.log10(window["gbw"]["reference"])])
    ideal = reference - np.array([window["power"]["ideal_span"], window["gbw"]["ideal_span"]])
    scaled = np.maximum((F - ideal) / (reference - ideal), 0)
    expected = HV(ref_point=np.ones(2))(scaled[(scaled < 1).all(axis=1)])
    assert window["gbw"]["from_spec"] and window["gbw"]["reference"] == pytest.approx(5e6)
    assert stored == pytest.approx(expected, abs=2e-6)
