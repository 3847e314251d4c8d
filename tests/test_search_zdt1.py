"""The search layer on a problem with a known answer.

Reference: pymoo's ZDT1 and its analytic Pareto front (`ZDT1().pareto_front()`), scored with pymoo's IGD.
"""

from pymoo.indicators.igd import IGD
from pymoo.problems import get_problem

from ampfront.optimize.search.engine import algorithm_for, run_search


def test_zdt1_reaches_the_true_front():
    problem = get_problem("zdt1")
    result = run_search(problem, population=100, generations=250, seed=1)
    assert result.feasible
    igd = IGD(problem.pareto_front())(result.F)
    assert igd < 0.01


def test_many_objective_problems_get_nsga3():
    assert type(algorithm_for(2, 50)).__name__ == "NSGA2"
    assert type(algorithm_for(4, 50)).__name__ == "NSGA3"
    assert type(algorithm_for(5, 50)).__name__ == "NSGA3"
