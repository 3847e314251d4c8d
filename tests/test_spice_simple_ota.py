"""The five-transistor OTA's exported netlists simulated by an outside reference, in a study that also
runs the two-stage Miller and merges their fronts.

Reference: ngspice (Debian package `ngspice`), level-1 MOSFET. Bounds as for the two-stage: DC gain 0.5 dB,
GBW 5 %, phase margin 3 deg, supply current 2 %.
"""

import pandas as pd
import pytest

from optimize.run import run_study
from optimize.verify import BOUNDS, check_folder

STUDY = """
title = "Reference buffer comparison"
topologies = ["simple_ota", "two_stage_miller"]
objectives = ["power", "gbw"]
technology = "generic180"

[spec]
supply = "1.8 V"
load_capacitance = "1 pF"
min_gain = "30 dB"
min_gbw = "1 MHz"
min_phase_margin = "60 deg"
input_cm = "0.9 V"

[search]
population = 60
generations = 25
seed = 3
"""


@pytest.fixture(scope="module")
def comparison(tmp_path_factory):
    folder = tmp_path_factory.mktemp("compare")
    (folder / "study.toml").write_text(STUDY)
    run_study(folder / "study.toml", folder / "out")
    return folder / "out"


@pytest.mark.spice
def test_simple_ota_front_matches_ngspice(comparison):
    front = pd.read_csv(comparison / "front.csv")
    ota = front[front["topology"] == "simple_ota"].reset_index(drop=True)
    assert len(ota) >= 3
    only_ota = comparison.parent / "ota_only"
    only_ota.mkdir()
    (only_ota / "netlists").symlink_to(comparison / "netlists")
    ota.to_csv(only_ota / "front.csv", index=False)
    (only_ota / "manifest.json").symlink_to(comparison / "manifest.json")
    table = check_folder(only_ota, 4)
    assert len(table) >= 3
    for column, (kind, bound) in BOUNDS["square_law"].items():
        model, spice = table[f"{column}_model"], table[f"{column}_spice"]
        error = (spice - model).abs() if kind == "abs" else ((spice - model) / model).abs()
        assert (error <= bound).all(), (column, list(error))


def test_merged_front_says_who_wins_where(comparison):
    front = pd.read_csv(comparison / "front.csv")
    assert set(front["topology"]) == {"simple_ota", "two_stage_miller"}
    assert front["on_merged_front"].any()
    merged = front[front["on_merged_front"]]
    # No merged-front design is beaten on both power and GBW by any design of either topology.
    for _, row in merged.iterrows():
        better = (front["power_w"] <= row["power_w"]) & (front["gbw_hz"] >= row["gbw_hz"])
        strictly = (front["power_w"] < row["power_w"]) | (front["gbw_hz"] > row["gbw_hz"])
        assert not (better & strictly).any()
