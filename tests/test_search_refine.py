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
    plain = run_search(problem, study.population, study.generations, seed=1)
    refined = run_search(problem, study.population, study.generations, seed=1, refine_steps=40)
    target = reference[f"{LEVELS[0]:g}"]["power_w"]
    assert least_power(refined.F, study.objectives, LEVELS[0]) <= 1.02 * target
    # The genetic search alone stops far above it at this budget (the issue measured 30 % and more).
    assert least_power(plain.F, study.objectives, LEVELS[0]) > 1.2 * target
    out = problem.evaluate(refined.X, return_as_dictionary=True)
    assert (out["G"] <= 0).all()
    assert refined.refined > 0 and refined.evaluations == plain.evaluations + refined.refined
