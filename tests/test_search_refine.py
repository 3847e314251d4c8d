"""The refinement after the genetic search (optimize/search/refine.py, polish.py), against references the
project did not write: pymoo's own Pareto front of the constrained BNH problem, and scipy's differential
evolution on the same two-stage model (benchmarks/reference.json: scipy.optimize.differential_evolution,
600 generations, power alone at GBW >= 5 MHz; rerun with `python3 benchmarks/convergence.py reference`)."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pytest
from pymoo.indicators.igd import IGD
from pymoo.problems import get_problem

from ampfront.optimize.search.engine import run_search
from ampfront.optimize.search.refine import refine

BENCH = Path(__file__).resolve().parents[1] / "benchmarks"


def test_refinement_reaches_pymoo_reference_front_of_bnh():
    """BNH (Binh and Korn, two objectives, two constraints), as pymoo ships it with its exact front."""
    problem = get_problem("bnh")
    short = run_search(problem, population=40, generations=15, seed=3)
    refined = refine(problem, short.X, short.F, steps=40)
    reference = problem.pareto_front()
    before, after = IGD(reference)(short.F), IGD(reference)(refined.F)
    assert after < 0.5 * before
    out = problem.evaluate(refined.X, return_as_dictionary=True)
    assert (out["G"] <= 0).all()
    np.testing.assert_allclose(out["F"], refined.F, rtol=1e-12)
    # Both ends of the exact front: (0, 0) and (f1 at x = (5, 3), f2 there) = (136, 4).
    assert refined.F[:, 0].min() < 1e-3
    assert refined.F[:, 1].min() < 4.0 + 1e-3


def test_refinement_is_deterministic_and_never_loses_ground():
    problem = get_problem("bnh")
    short = run_search(problem, population=40, generations=15, seed=5)
    a = refine(problem, short.X, short.F, steps=20)
    b = refine(problem, short.X, short.F, steps=20)
    np.testing.assert_array_equal(a.X, b.X)
    # Every design the genetic search found is matched or beaten by a refined one.
    dominated_or_equal = (a.F[None, :, :] <= short.F[:, None, :] + 1e-12).all(axis=2).any(axis=1)
    assert dominated_or_equal.all()


def test_two_stage_low_power_end_within_two_percent_of_scipy_de():
    sys.path.insert(0, str(BENCH))
    try:
        from convergence import LEVELS, TEXTBOOK, least_power, problem_for, study_at
    finally:
        sys.path.remove(str(BENCH))
    reference = json.loads((BENCH / "reference.json").read_text())["levels"]
    study = study_at(TEXTBOOK)
    problem = problem_for(study, "two_stage_miller")
    # A fixed run at the budget studies had before the converging search (100 x 60), then refined.
    plain = run_search(problem, 100, 60, seed=1)
    refined = run_search(problem, 100, 60, seed=1, refine_steps=40)
    target = reference[f"{LEVELS[0]:g}"]["power_w"]
    assert least_power(refined.F, study.objectives, LEVELS[0]) <= 1.02 * target
    # The genetic search alone stops far above it at this budget (the issue measured 30 % and more).
    assert least_power(plain.F, study.objectives, LEVELS[0]) > 1.2 * target
    out = problem.evaluate(refined.X, return_as_dictionary=True)
    assert (out["G"] <= 0).all()
    assert refined.refined > 0 and refined.evaluations == plain.evaluations + refined.refined


def test_default_search_reaches_scipy_des_least_power_at_its_end_on_every_seed():
    """The converging search's ends are each objective's own single-objective run (ends.de_end), not only the
    polish from the front's best: seed 4 of the textbook study stopped 6.9 % above scipy's long DE with the
    polish alone (measured; README, Convergence)."""
    sys.path.insert(0, str(BENCH))
    try:
        from convergence import LEVELS, TEXTBOOK, least_power, problem_for, study_at
    finally:
        sys.path.remove(str(BENCH))
    target = json.loads((BENCH / "reference.json").read_text())["levels"][f"{LEVELS[0]:g}"]["power_w"]
    study = study_at(TEXTBOOK)
    problem = problem_for(study, "two_stage_miller")
    for seed in (4, 5):
        found = run_search(problem, study.population, None, seed, budget=study.budget)
        assert found.stopped == "converged"
        assert least_power(found.F, study.objectives, LEVELS[0]) <= 1.01 * target


def test_a_small_budget_shortens_the_ends_search():
    """The ends' differential evolution spends at most ends.END_SHARE of a converging search's budget; at the
    default budget every end of up to three objectives gets all its generations."""
    from ampfront.optimize.search.ends import END_SHARE, FRESH, GENERATIONS, SEEDED
    from ampfront.optimize.search.refine import end_generations

    assert end_generations(100_000, 3) == GENERATIONS and end_generations(None, 5) == GENERATIONS
    for budget, objectives in ((4_000, 2), (20_000, 3), (100_000, 5)):
        generations = end_generations(budget, objectives)
        assert generations < GENERATIONS
        assert objectives * (generations + 1) * (SEEDED + FRESH) <= END_SHARE * budget
    problem = get_problem("bnh")
    quick = run_search(problem, 40, None, 3, budget=4_000)
    # Genetic search within its budget (and its last population), ends within their share, and the polish.
    assert quick.evaluations <= 4_000 + 40 + END_SHARE * 4_000 + 2_000


SMALL_REFINED = """
title = "Refined two-stage"
topologies = ["two_stage_miller"]
objectives = ["power", "gbw"]
technology = "generic180"

[spec]
supply = "1.8 V"
load_capacitance = "2 pF"
min_gain = "60 dB"
min_gbw = "2 MHz"
max_power = "2 mW"

[search]
population = 24
generations = 8
refine = 4
"""


def test_manifest_hypervolume_is_pymoo_hv_of_front_csv_on_the_spec_window(tmp_path):
    """The stored number, recomputed from front.csv alone with pymoo's HV on the window the README states:
    from each objective's spec bound to three decades better (log power, log GBW)."""
    import pandas as pd
    from pymoo.indicators.hv import HV

    from ampfront.optimize.run import run_study

    study = tmp_path / "study.toml"
    study.write_text(SMALL_REFINED)
    run_study(study, tmp_path / "out")
    manifest = json.loads((tmp_path / "out" / "manifest.json").read_text())
    front = pd.read_csv(tmp_path / "out" / "front.csv")
    F = np.column_stack([np.log10(front["power_w"]), -np.log10(front["gbw_hz"])])
    reference = np.array([np.log10(2e-3), -np.log10(2e6)])
    scaled = np.maximum((F - (reference - 3.0)) / 3.0, 0.0)
    expected = HV(ref_point=np.ones(2))(scaled[(scaled < 1).all(axis=1)])
    stored = manifest["convergence"]["hypervolume"]["two_stage_miller"]
    assert stored == pytest.approx(expected, rel=1e-5)
    assert manifest["convergence"]["refine_steps"] == 4
    assert stored > 0


def test_polish_moves_a_gridded_variable_cell_by_cell():
    """A variable the model snaps to a grid (as lengths are) has no slope; the polish moves it a cell at a
    time as a 0/1 choice of its linear program. Staircase: f = (x0 - 0.3)^2 + (snap(x1) - 0.75)^2 with x1
    snapped to quarters; from x1 = 0 the optimum is three cells away."""
    from pymoo.core.problem import Problem

    from ampfront.optimize.search.polish import polish

    class Staircase(Problem):
        def __init__(self):
            super().__init__(n_var=2, n_obj=1, n_ieq_constr=1, xl=np.zeros(2), xu=np.ones(2))

        def _evaluate(self, X, out, *args, **kwargs):
            snapped = np.round(X[:, 1] * 4) / 4
            out["F"] = ((X[:, 0] - 0.3) ** 2 + (snapped - 0.75) ** 2)[:, None]
            out["G"] = (X[:, 0] - 0.9)[:, None]

    problem = Staircase()
    result = polish(problem, np.array([[0.8, 0.0]]), np.array([[True]]), np.array([1.0]), 60,
                    moving=np.array([True, False]), cells=[(1, np.linspace(0, 1, 5))])
    assert result.X[0, 1] == pytest.approx(0.75)
    assert result.X[0, 0] == pytest.approx(0.3, abs=1e-3)
    # Without the cells the gridded variable stays where it started.
    held = polish(problem, np.array([[0.8, 0.0]]), np.array([[True]]), np.array([1.0]), 60,
                  moving=np.array([True, False]))
    assert held.X[0, 1] == 0.0
