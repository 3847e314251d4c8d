"""Thinning a front to the designs a report shows: by exact hypervolume contributions (moocore), checked
against pymoo's hypervolume indicator and on pymoo's reference fronts, and by crowding past three objectives."""

from __future__ import annotations

import numpy as np
from pymoo.indicators.hv import HV
from pymoo.problems import get_problem
from pymoo.util.ref_dirs import get_reference_directions

from ampfront.optimize.search import operators as op
from ampfront.optimize.search.hypervolume import Window


def _sphere(partitions: int) -> np.ndarray:
    """DTLZ2's front (pymoo) at Das and Dennis's reference directions."""
    return get_problem("dtlz2", n_obj=3).pareto_front(
        ref_dirs=get_reference_directions("das-dennis", 3, n_partitions=partitions))


def _window(objectives: int) -> Window:
    names = ("power", "gbw", "gain", "area", "phase_margin")[:objectives]
    return Window(names, np.full(objectives, 1.1), np.zeros(objectives), {})


def test_contributions_are_what_pymoos_hypervolume_loses_without_each_design():
    front = _sphere(6)
    window = _window(3)
    indicator = HV(ref_point=np.ones(3))
    scaled = front / 1.1
    whole = indicator(scaled)
    lost = np.array([whole - indicator(np.delete(scaled, i, axis=0)) for i in range(len(front))])
    assert np.allclose(window.contributions(front), lost, rtol=1e-9, atol=1e-12)


def test_thinning_by_contribution_keeps_more_hypervolume_than_by_crowding_and_keeps_the_ends():
    # pymoo's reference fronts: a convex one (ZDT1) and DTLZ2's sphere; thinned to a tenth.
    for front in (get_problem("zdt1").pareto_front(n_pareto_points=400),
                  _sphere(30)):
        window = _window(front.shape[1])
        by_worth = op.thin(front, len(front) // 10, window.contributions)
        by_crowding = op.thin(front, len(front) // 10)
        assert len(by_worth) == len(by_crowding) == len(front) // 10
        assert window.hypervolume(front[by_worth]) > window.hypervolume(front[by_crowding])
        for j in range(front.shape[1]):
            assert front[by_worth, j].min() == front[:, j].min()
            assert front[by_worth, j].max() == front[:, j].max()


def test_designs_past_the_ideal_corner_keep_their_share_of_the_thinned_front():
    # Half the front lies beyond the window's ideal end of the first objective (the window's hypervolume
    # counts them at it); thinned, they are not all dropped for adding nothing inside the window.
    f1 = np.linspace(-1.0, 1.0, 41)
    front = np.column_stack([f1, (1.0 - f1) / 2])
    kept = op.thin(front, 12, _window(2).contributions)
    assert len(kept) == 12 and 0 in kept
    assert 4 <= (front[kept, 0] < 0).sum() <= 8


def test_fronts_past_three_objectives_are_thinned_by_crowding():
    assert _window(3).thinning is not None
    assert _window(4).thinning is None and _window(5).thinning is None
