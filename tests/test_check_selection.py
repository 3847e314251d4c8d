"""Which front designs `ampfront check` picks.

Reference: the definitions applied by brute force with numpy on fronts made here (the extreme of an
objective is its best value over the topology's designs; the knee is the design nearest the ideal corner
once every objective is scaled to 0..1), and the rule that the choice is made per topology.
"""

import numpy as np
import pandas as pd
import pytest

from ampfront.optimize.simulator.selection import SelectionError, choose, knee
from ampfront.topologies.catalog import OBJECTIVES

OBJ = ("power", "gbw")
POWER, GBW = OBJECTIVES["power"].metric, OBJECTIVES["gbw"].metric


def _front(seed=0, per=20, names=("a", "b")):
    rng = np.random.default_rng(seed)
    parts = []
    for k, name in enumerate(names):
        p = np.sort(10 ** rng.uniform(-5, -3, per))
        g = p ** 0.7 * 1e9 * (k + 1) * rng.uniform(0.9, 1.1, per)   # more power buys more GBW
        parts.append(pd.DataFrame({"topology": name, "design": [f"{name}_{i:03d}" for i in range(per)],
                                   POWER: p, GBW: g}))
    return pd.concat(parts, ignore_index=True)


def test_extremes_are_each_topologys_best_on_each_objective():
    front = _front()
    got = set(choose(front, OBJ, "extremes"))
    want = set()
    for _, part in front.groupby("topology"):
        want |= {part[POWER].idxmin(), part[GBW].idxmax()}
    assert got == want


def test_knee_is_nearest_the_ideal_corner_and_ignores_units():
    front = _front(seed=3).query("topology == 'a'").reset_index(drop=True)
    lp, lg = np.log10(front[POWER]), -np.log10(front[GBW])
    scaled = np.column_stack([(lp - lp.min()) / np.ptp(lp), (lg - lg.min()) / np.ptp(lg)])
    assert knee(front, OBJ) == [int(np.argmin((scaled ** 2).sum(axis=1)))]
    rescaled = front.assign(**{POWER: front[POWER] * 1e3})
    assert knee(rescaled, OBJ) == knee(front, OBJ)


def test_every_topology_gets_its_knee_and_extremes_in_a_count():
    front = _front(names=("a", "b", "c"))
    picked = front.iloc[choose(front, OBJ, "3")]
    assert picked["topology"].value_counts().to_dict() == {"a": 3, "b": 3, "c": 3}
    assert set(choose(front, OBJ, "extremes")) | set(choose(front, OBJ, "knee")) <= set(choose(front, OBJ, "3"))
    assert len(choose(front, OBJ, "7")) == 21 and len(choose(front, OBJ, "all")) == len(front)


def test_whole_front_choice_is_not_per_topology():
    front = _front(names=("a", "b"))
    assert len(choose(front, OBJ, "knee", per_topology=False)) == 1
    assert len(choose(front, OBJ, "knee")) == 2


def test_designs_by_name_and_bad_names():
    front = _front()
    assert choose(front, OBJ, "b_004, a_001") == [1, 24]
    for bad in ("a_001,zz_9", "0", ",", "kneee"):
        with pytest.raises(SelectionError):
            choose(front, OBJ, bad)
