"""How a converging search's front grew (optimize/search/growth.py): the curve the report draws and the late gain
the run warns on.

References: pymoo's ZDT1 with its analytic Pareto front (`ZDT1().pareto_front()`) and pymoo's hypervolume
indicator, which the curve must agree with on the archive the search returns; the late gain of curves whose
growth is known in closed form (a logarithmic creep, a front that has settled).
"""

import math

import numpy as np
import pytest
from pymoo.core.problem import Problem
from pymoo.indicators.hv import HV
from pymoo.problems import get_problem

from ampfront.optimize.search.converge import converge
from ampfront.optimize.search.engine import run_search
from ampfront.optimize.search.growth import LATE, POINTS, STILL_GROWING, Growth, growth, late_gain

REFERENCE = np.array([1.1, 1.1])


def test_a_logarithmic_creep_reads_its_closed_form_share():
    # The demo's telescopic cascode, seed 1 (README, Convergence): 0.00743 at 100,000 evaluations and 0.01216 at
    # 1,000,000, the curve between close to a straight line in log evaluations.
    evaluations = np.arange(200, 100_001, 200)
    b = (0.01216 - 0.00743) / np.log(10)
    hv = 0.00743 + b * np.log(evaluations / 100_000)
    # The last quarter exactly: from 75,000 to 100,000 evaluations.
    assert LATE == 0.25
    expected = b * np.log(4 / 3) / hv[-1]
    assert late_gain(evaluations, hv) == pytest.approx(expected, rel=1e-12)
    # And such a front is called still growing: ten times the run would add about ln 10 / ln (4/3) times it.
    assert expected > STILL_GROWING


def test_a_settled_front_reads_no_late_gain_and_an_empty_one_none():
    evaluations = np.arange(200, 60_001, 200)
    hv = np.minimum(evaluations / 20_000, 1.0) * 0.09
    assert late_gain(evaluations, hv) == 0.0
    assert math.isnan(late_gain(evaluations, np.zeros(len(evaluations))))
    assert math.isnan(late_gain([], []))


def test_the_curve_is_thinned_keeping_both_ends():
    history = [(g, 10, 0.001 * g) for g in range(1, 1001)]
    spent = [100 * g for g in range(1, 1001)]
    grown = growth(spent, history)
    assert len(grown.evaluations) <= POINTS
    assert grown.evaluations[0] == 100 and grown.evaluations[-1] == 100_000
    # Dense enough at both ends of a logarithmic axis: points in the first decade and in the last half.
    kept = np.asarray(grown.evaluations)
    assert (kept <= 1_000).sum() >= 5 and (kept >= 50_000).sum() >= 20
    assert grown.hypervolume[-1] == pytest.approx(1.0)
    # The late gain is read on the whole curve, before thinning.
    assert grown.late_gain == pytest.approx(late_gain(spent, [h[2] for h in history]))


@pytest.mark.parametrize("record", [
    None, "growth", {"evaluations": [1, 2], "hypervolume": [0.1]},
    {"evaluations": [1, "2"], "hypervolume": [0.1, 0.2], "late_gain": 0.1},
    {"evaluations": [1, 2], "hypervolume": [0.1, float("nan")], "late_gain": 0.1},
    {"evaluations": [True, 2], "hypervolume": [0.1, 0.2], "late_gain": 0.1},
    {"evaluations": [1, 2], "hypervolume": [0.1, 0.2], "late_gain": "much"},
    {"evaluations": [1, 2], "hypervolume": [0.1, 0.2], "late_gain": True},
    {"evaluations": [1, 2], "hypervolume": [0.1, 0.2], "late_gain": -5.0},
    {"evaluations": [1, 10**400], "hypervolume": [0.1, 0.2], "late_gain": 0.1},
    {"evaluations": [1, 10**20], "hypervolume": [0.1, 0.2], "late_gain": 0.1},
    {"evaluations": [-5, 2], "hypervolume": [0.1, 0.2], "late_gain": 0.1},
    {"evaluations": [2, 2], "hypervolume": [0.1, 0.2], "late_gain": 0.1},
    {"evaluations": [1, 2], "hypervolume": [0.1, 2.0], "late_gain": 0.1},
    {"evaluations": [1, 2], "hypervolume": [0.1, 10**400], "late_gain": 0.1},
    {"evaluations": [], "hypervolume": [], "late_gain": None},
    {"evaluations": list(range(1, POINTS + 2)), "hypervolume": [0.1] * (POINTS + 1), "late_gain": 0.0},
])
def test_a_manifest_record_that_is_not_a_curve_is_refused(record):
    assert Growth.from_record(record) is None


def test_a_late_gain_is_printed_with_its_sign():
    assert Growth((100, 200), (0.5, 0.499), -0.002).share() == "-0.2 %"
    assert Growth((100, 200), (0.4, 0.5), 0.2).share() == "+20.0 %"
    assert Growth((100,), (0.0,), math.nan).share() == ""


def test_a_record_reads_back_as_written():
    grown = growth([100, 200, 300, 400], [(1, 5, 0.1), (2, 5, 0.2), (3, 5, 0.25), (4, 5, 0.3)])
    again = Growth.from_record(grown.record())
    assert again.evaluations == grown.evaluations
    assert again.hypervolume == pytest.approx(grown.hypervolume, abs=1e-6)
    assert again.late_gain == pytest.approx(grown.late_gain, abs=1e-4)


def test_the_curve_agrees_with_pymoo_on_zdt1():
    problem = get_problem("zdt1")
    indicator = HV(ref_point=REFERENCE)
    found = converge(problem, population=100, budget=20_000, seed=3, hypervolume=indicator)
    assert found.feasible and len(found.spent_at) == len(found.history)
    # Each point is taken when that many designs have been evaluated, never more than the search spent.
    assert np.all(np.diff(found.spent_at) > 0) and found.spent_at[-1] <= found.evaluations
    # The last point is the returned archive's hypervolume, by pymoo's own indicator.
    assert found.history[-1][2] == pytest.approx(indicator(found.F), rel=1e-12)
    # The archive only improves (its thinning aside), and reaches the analytic front's hypervolume.
    values = np.array([h[2] for h in found.history])
    assert np.all(np.diff(values) >= -0.01 * values[-1])
    assert values[-1] >= 0.98 * indicator(problem.pareto_front())


def test_run_search_carries_the_genetic_search_s_curve():
    problem = get_problem("zdt1")
    indicator = HV(ref_point=REFERENCE)
    result = run_search(problem, 100, None, 3, budget=20_000, hypervolume=indicator, front_designs=50)
    assert result.growth is not None
    # The curve ends where the genetic search did; the ends searched after it spent more.
    assert result.growth.evaluations[-1] < result.evaluations
    fixed = run_search(problem, 100, 20, 3)
    assert fixed.growth is None


def test_a_front_that_still_creeps_is_not_called_converged():
    """A front growing as generations**0.1 gains under 0.5 % over every 30 generations past the 600th (the
    stall rule's window), but 1 - 0.75**0.1 = 2.8 % over every last quarter: the search runs to its budget
    where the stall rule alone stopped it. A flat one still stops at its first stalls."""
    problem = get_problem("zdt1")
    calls = []

    def creep(F):
        calls.append(1)
        return len(calls) ** 0.1

    creeping = converge(problem, population=50, budget=50 * 1_200, seed=1, hypervolume=creep)
    assert creeping.stopped == "budget" and creeping.generations >= 1_200
    assert late_gain(creeping.spent_at, [h[2] for h in creeping.history]) > STILL_GROWING
    flat = converge(problem, population=50, budget=50 * 1_200, seed=1, hypervolume=lambda F: 1.0)
    assert flat.stopped == "converged" and flat.evaluations < 10_000


def test_the_terminal_gives_each_front_s_late_gain_and_the_budget_it_hit(tmp_path):
    import json

    from .clirun import ampfront
    from .test_search_converge import TINY

    # The converging search's own small study, its budget cut to 3,000 evaluations.
    (tmp_path / "study.toml").write_text(TINY + "population = 40\nbudget = 3000\n")
    proc = ampfront("run", tmp_path / "study.toml", "--out", tmp_path / "out")
    assert proc.returncode == 0, proc.stderr
    record = json.loads((tmp_path / "out" / "manifest.json").read_text())["convergence"]["topologies"]
    grown = Growth.from_record(record["two_stage_miller"]["growth"])
    line = next(x for x in proc.stderr.splitlines() if x.startswith("hypervolume on the study's window"))
    assert "two_stage_miller " in line and f"({grown.share()} in its last quarter)" in line
    # 3,000 evaluations end this search before any stall: the warning names the budget and the late gain.
    assert record["two_stage_miller"]["stopped"] == "budget"
    warning = next(x for x in proc.stderr.splitlines() if "reached its budget (3,000 evaluations)" in x)
    assert f"the last quarter of its evaluations added {grown.share()} of its hypervolume" in warning
    assert ("still growing" in warning) == (grown.late_gain > STILL_GROWING)


class _NarrowlyFeasible(Problem):
    """Feasible where x0 < 0.01 only: a fresh random population of 20 usually holds no feasible design."""

    def __init__(self):
        super().__init__(n_var=2, n_obj=2, n_ieq_constr=1, xl=np.zeros(2), xu=np.ones(2))

    def _evaluate(self, X, out, *args, **kwargs):
        out["F"] = np.column_stack([X[:, 1], 1.0 - X[:, 1] ** 0.5])
        out["G"] = X[:, [0]] - 0.01


def test_the_front_found_is_kept_through_a_population_with_no_feasible_design():
    """After its first stall a search explores from a fresh population beside the archive; a generation of
    that population with no feasible design still reads the archive's hypervolume, not zero."""
    found = converge(_NarrowlyFeasible(), population=20, budget=20_000, seed=2, hypervolume=HV(ref_point=REFERENCE))
    values = np.array([h[2] for h in found.history])
    feasible = np.array([h[1] for h in found.history])
    first = int(np.flatnonzero(values > 0)[0])
    # The case arose: some later generation's population held no feasible design.
    assert (feasible[first:] == 0).any()
    assert np.all(values[first:] > 0)
