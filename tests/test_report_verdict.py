"""The verdict is computed from front.csv: synthetic fronts whose winner is known by construction, written
to CSV and read back as a colleague's folder would be.

Reference: the construction itself (one topology's designs each beat the other's on both objectives, or
the two fronts cross at a frequency set by hand) and the Pareto definition of the merged front.
"""

import numpy as np
import pandas as pd

from ampfront.optimize.outputs.knee import knee
from ampfront.optimize.outputs.verdict import verdict
from ampfront.optimize.search.merge import merged_front
from ampfront.optimize.search.outcome import Infeasible, Miss
from ampfront.optimize.spec.study import Constraint
from ampfront.topologies.catalog import M

OBJECTIVES = ("power", "gbw")
TITLES = {"alpha": "Alpha amplifier", "beta": "Beta amplifier"}
CONSTRAINTS = (Constraint("max_power", M.power_w, "max", 1e-3, 1e-3), Constraint("min_gbw", M.gbw_hz, "min", 1e6, 1e6))


def _front(name: str, gbw: np.ndarray, power: np.ndarray) -> pd.DataFrame:
    return pd.DataFrame({"topology": name, "design": [f"{name}_{k:03d}" for k in range(len(gbw))],
                         "meets_spec": True, M.gbw_hz: gbw, M.power_w: power, M.gain_db: 70.0,
                         "margin_max_power": 1e-3 - power, "margin_min_gbw": gbw - 1e6})


def _through_csv(table: pd.DataFrame, tmp_path) -> pd.DataFrame:
    table = table.copy()
    table.insert(3, "on_merged_front", merged_front(table, OBJECTIVES))
    table.to_csv(tmp_path / "front.csv", index=False, float_format="%.9g")
    return pd.read_csv(tmp_path / "front.csv")


def test_a_dominating_topology_is_named_and_the_other_is_not(tmp_path):
    gbw = np.geomspace(2e6, 2e8, 40)
    # Beta needs twice the power of alpha at every GBW: alpha dominates everywhere.
    table = pd.concat([_front("beta", gbw, 2e-12 * gbw + 1e-5), _front("alpha", gbw, 1e-12 * gbw + 5e-6)])
    front = _through_csv(table, tmp_path)
    v = verdict(front, OBJECTIVES, CONSTRAINTS, ("beta", "alpha"), TITLES)
    assert "Alpha amplifier needs the least power at every GBW" in v.sentence
    assert "Beta" not in v.sentence
    alpha, beta = {s.name: s for s in v.standings}["alpha"], {s.name: s for s in v.standings}["beta"]
    assert alpha.merged == 40 and beta.merged == 0
    assert "power" in alpha.leads and "power" not in beta.leads
    assert any("Beta amplifier is never the best" in n for n in v.notes)


def test_crossing_fronts_are_split_where_they_cross(tmp_path):
    gbw = np.geomspace(1e6, 1e9, 60)
    crossing = 40e6
    # Alpha: cheap at low GBW, its power climbing steeply; beta: a floor, then gently. Equal at `crossing`.
    alpha = 1e-4 * (gbw / crossing) ** 2
    beta = 1e-4 * (gbw / crossing) ** 0.5
    front = _through_csv(pd.concat([_front("alpha", gbw, alpha), _front("beta", gbw, beta)]), tmp_path)
    v = verdict(front, OBJECTIVES, CONSTRAINTS, ("alpha", "beta"), TITLES)
    first, second = v.sentence.index("Alpha amplifier"), v.sentence.index("Beta amplifier")
    assert first < second, v.sentence
    # The boundary the sentence states, read back from its text, lies near the crossing.
    stated = v.sentence.split("up to ", 1)[1].split(",", 1)[0]
    value, unit = stated.split()
    assert unit == "MHz" and 30 <= float(value) <= 55, v.sentence


def test_infeasible_study_names_what_binds_and_by_how_much(tmp_path):
    rows = _front("alpha", np.array([3e6, 4e6]), np.array([2e-3, 3e-3]))
    rows["meets_spec"] = False
    front = _through_csv(rows, tmp_path)
    records = {"alpha": Infeasible("alpha", (Miss("max_power", M.power_w, "max", 2e-3, 1e-3),), front, None, 2, []),
               "beta": Infeasible("beta", (Miss("min_gbw", M.gbw_hz, "min", 0.99e6, 1e6),), front.iloc[0:0], None, 2,
                                  [])}
    v = verdict(front, OBJECTIVES, CONSTRAINTS, ("alpha", "beta"), TITLES, records)
    assert v.sentence.startswith("No topology meets the whole spec")
    # Beta misses by 1 %, alpha by 100 %: beta is the nearer and is named first.
    assert v.sentence.index("Beta amplifier") < v.sentence.index("Alpha amplifier")
    alpha = {s.name: s for s in v.standings}["alpha"]
    assert not alpha.feasible and alpha.binding == "maximum power: 2 mW, 1 mW over 1 mW"


def test_infeasible_rows_read_back_without_typed_records(tmp_path):
    rows = _front("alpha", np.array([0.5e6]), np.array([0.5e-3]))
    rows["meets_spec"] = False
    v = verdict(_through_csv(rows, tmp_path), OBJECTIVES, CONSTRAINTS, ("alpha",), TITLES)
    assert v.standings[0].binding == "minimum GBW: 500 kHz, 500 kHz short of 1 MHz"


def test_knee_of_a_bent_front_is_at_the_bend():
    # Two straight segments meeting at (0.1, 0.1) in normalized space: the bend is the knee.
    t = np.linspace(0, 1, 21)
    x = np.concatenate([0.1 * t, 0.1 + 0.9 * t[1:]])
    y = np.concatenate([1 - 0.9 * t, 0.1 - 0.1 * t[1:]])
    # Both objectives are searched as log10: a decade in SI is one unit of normalized space.
    table = pd.DataFrame({M.power_w: 1e-4 * 10 ** x, M.area_m2: 1e-9 * 10 ** y})
    k = knee(table, ("power", "area"))
    assert abs(x[k] - 0.1) < 1e-9 and abs(y[k] - 0.1) < 1e-9
