"""The swing testbench takes the output rail to rail whatever the input common mode: with the common mode
well off mid-supply, the DC sweep's ends are where the amplifier's are, not where the sweep was cut short
(an earlier testbench swept around the common mode and stopped at 2 v_cm - VDD).

Reference: ngspice (Debian package `ngspice`) running the exported swing testbench, level-1 models of the
shipped generic180 technology.
"""

import pytest

from ampfront.optimize.run import run_study
from ampfront.optimize.simulator.check import check_folder

pytestmark = pytest.mark.spice

STUDY = """
title = "Off-centre common mode"
topologies = ["two_stage_miller"]
objectives = ["power", "gbw"]
technology = "generic180"

[spec]
supply = "1.8 V"
load_capacitance = "2 pF"
input_cm = "{v_cm}"
min_gain = "60 dB"
min_gbw = "2 MHz"
min_phase_margin = "55 deg"
min_output_swing = "1.2 V"

[search]
population = 24
generations = 12
seed = 5
"""


@pytest.mark.parametrize("v_cm", ["0.6 V", "1.25 V"])
def test_swing_is_read_rail_to_rail_off_centre(v_cm, tmp_path):
    (tmp_path / "study.toml").write_text(STUDY.format(v_cm=v_cm))
    run_study(tmp_path / "study.toml", tmp_path / "out")
    table = check_folder(tmp_path / "out", 2, workers=1)
    assert len(table) >= 2
    for column in ("out_low_v", "out_high_v"):
        model, spice = table[f"{column}_model"], table[f"{column}_spice"]
        # Within the check's swing bounds (catalog SWING_SLACK_V / SWING_SHORTFALL_V): the sweep reaches both
        # of the amplifier's ends, so neither end can be cut short by the common mode.
        claims = (model - spice) if column == "out_high_v" else (spice - model)
        assert (claims <= 0.05).all() and (claims >= -0.3).all(), (column, list(zip(model, spice)))
    # A sweep cut at 2 v_cm - VDD (0.6 V: -0.6 V, so never; 1.25 V: the low end stuck at 0.7 V) would put the
    # low end far above the model's.
    assert (table["out_low_v_spice"] < 0.45).all(), list(table["out_low_v_spice"])
