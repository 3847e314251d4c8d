"""Fronts a designer can act on: nothing past the technology's or the study's limits is feasible, the
search box comes from the technology, and a front piled against a search bound is said out loud.

References: the technology files' own declared limits (SKY130: MIM 2 fF/µm² documented by the PDK; layout
rules from memory of its documentation, marked so in sky130.toml), the tables' own reach in gm/ID and
length, and the shipped micropower demo study (an invented scenario of ours).
"""

import json

import numpy as np
import pytest

from ampfront import topologies
from ampfront.optimize.run import run_study
from ampfront.optimize.search.problem import DesignProblem
from ampfront.optimize.spec.study import load_study
from ampfront.topologies.catalog import BOUNDS
from ampfront.topologies.process.techfile import load, shipped

from .conftest import ROOT

MICROPOWER = ROOT / "studies" / "biopotential_frontend.toml"


@pytest.mark.parametrize("technology", ["generic180", "sky130"])
def test_no_design_past_a_limit_is_feasible(technology, tmp_path):
    """A property over random design vectors: every design the search would call feasible keeps every
    device within the default width and the amplifier within the default area, on both technologies."""
    tech = load(shipped()[technology])
    study_file = tmp_path / "s.toml"
    study_file.write_text(MICROPOWER.read_text().replace('technology = "sky130"', f'technology = "{technology}"')
                          .replace('max_power = "30 uW"', 'max_power = "50 mW"')
                          .replace('max_noise_rms = "5 uV"', 'max_noise_rms = "1 V"')
                          .replace('min_gain = "75 dB"', 'min_gain = "30 dB"'))
    study = load_study(study_file, topologies.available())
    width, area = BOUNDS["max_device_width"].default, BOUNDS["max_area"].default
    rng = np.random.default_rng(3)
    seen = 0
    for name, topology in topologies.available().items():
        problem = DesignProblem(topology, tech, study)
        X = rng.uniform(problem.xl, problem.xu, (4000, problem.n_var))
        out = problem.evaluate(X, return_as_dictionary=True)
        metrics, build = problem.metrics(X)
        feasible = (out["G"] <= 0).all(axis=1)
        seen += int(feasible.sum())
        widest = np.max([d.w for d in build.devices], axis=0)
        assert (widest[feasible] <= width * (1 + 1e-12)).all(), name
        assert (metrics["area_m2"][feasible] <= area * (1 + 1e-12)).all(), name
        # Area counts more than the gates: every device's drawn footprint, capacitors and resistors.
        gates = sum(d.w * d.l for d in build.devices)
        ok = np.isfinite(metrics["area_m2"])
        assert (metrics["area_m2"][ok] > gates[ok]).all(), name
    assert seen > 0


def test_the_search_box_is_the_technology():
    tech = load(shipped()["sky130"])
    variables = {v.name: v for v in topologies.available()["two_stage_miller"].variables(tech)}
    assert variables["l_in"].high == pytest.approx(tech.length_grid.max())   # 8 um, the longest characterized
    low, high = tech.gm_id_bounds
    assert variables["gmid_in"].high == high and high >= 26       # weak inversion as far as the tables reach
    assert variables["bias_ratio"].high >= 40                        # designers mirror references up by tens


def test_micropower_demo_is_feasible_and_not_held_by_the_box(tmp_path):
    summary = run_study(MICROPOWER, tmp_path / "out")
    assert summary.feasible
    manifest = json.loads((tmp_path / "out" / "manifest.json").read_text())
    assert manifest["at_search_bounds"] == [], manifest["at_search_bounds"]
    import pandas as pd

    front = pd.read_csv(tmp_path / "out" / "front.csv")
    assert front["power_w"].min() < 30e-6 and (front["gain_db"] >= 75).all()
    assert (front["bias_share"] > 0).all() and (front["bias_share"] < 1).all()


def test_a_front_against_a_search_bound_is_reported(tmp_path):
    """A study built to hit one: a power budget of little more than the bias floor leaves the whole front at
    the smallest tail current the box allows."""
    study = tmp_path / "pinned.toml"
    study.write_text('title = "Pinned"\ntopologies = ["simple_ota"]\nobjectives = ["power", "gain"]\n'
                     'technology = "generic180"\n[spec]\nsupply = "1.8 V"\nload_capacitance = "1 pF"\n'
                     'min_gain = "20 dB"\nmax_power = "1.2 uW"\n[search]\npopulation = 40\ngenerations = 20\n')
    summary = run_study(study, tmp_path / "out")
    piles = [p for p in summary.piles if p.variable == "i_tail" and p.side == "lower"]
    assert piles and piles[0].count >= piles[0].total / 2
    assert any("i_tail at its lower search bound" in w for w in summary.warnings)
    manifest = json.loads((tmp_path / "out" / "manifest.json").read_text())
    assert any(p["variable"] == "i_tail" for p in manifest["at_search_bounds"])
