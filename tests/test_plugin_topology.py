"""A third-party topology installed as a package is found through the `ampfront.topologies` entry points,
listed by the CLI and optimized like a built-in one."""

import os
import subprocess
import sys
import textwrap

import pytest

PLUGIN = '''
import numpy as np

from ampfront.topologies.base import Build, Element, Variable
from ampfront.topologies.stages import BiasBranch, MirrorPair, pair_variables


class DiodeLoadedPair:
    """A differential pair whose output is pulled to the common mode by a resistor: a toy amplifier."""

    name = "toy_resistor_ota"
    title = "Toy resistor-loaded OTA"
    prefix = "toy"
    single_stage = False
    reports = frozenset({"slew_v_per_s", "out_high_v", "out_low_v", "cm_low_v", "cm_high_v", "offset_sys_v",
                         "offset_sigma_v", "peak_source_a", "peak_sink_a"})

    def variables(self, tech):
        return pair_variables(tech) + (Variable("r_out", 1e3, 1e6, "Ohm", log=True, doc="output resistor"),)

    def build(self, x, tech, cond):
        bias = BiasBranch.sized(tech, x)
        pair = MirrorPair.sized(tech, x, cond.vdd, cond.v_cm)
        devices, fig = pair.solve(tech, bias, x["i_tail"], cond.vdd, cond.v_cm,
                                  np.full_like(x["i_tail"], cond.v_cm), inverting_after=False)
        for d in devices:
            d.nodes = tuple("out" if n == "o1" else n for n in d.nodes)
        elements = [Element("R", "output_resistor", "out", "vss", x["r_out"]),
                    Element("I", "bias_reference", "vdd", "nb", bias.i_ref)]
        half = np.full_like(x["r_out"], 0.25)
        metrics = {"slew_v_per_s": fig["i_tail"] / cond.c_load, "out_high_v": cond.v_cm + half,
                   "out_low_v": cond.v_cm - half, "cm_low_v": fig["cm_low_v"], "cm_high_v": fig["cm_high_v"],
                   "offset_sys_v": fig["offset_sys_v"], "offset_sigma_v": fig["offset_sigma_v"],
                   "peak_source_a": fig["i_tail"], "peak_sink_a": fig["i_tail"]}
        return Build(devices + [bias.diode(tech)], elements, bias.i_ref + fig["i_tail"], metrics)
'''


@pytest.fixture()
def plugin_path(tmp_path, monkeypatch):
    (tmp_path / "toy_plugin.py").write_text(textwrap.dedent(PLUGIN))
    dist = tmp_path / "toy_plugin-0.1.dist-info"
    dist.mkdir()
    (dist / "METADATA").write_text("Metadata-Version: 2.1\nName: toy-plugin\nVersion: 0.1\n")
    (dist / "entry_points.txt").write_text("[ampfront.topologies]\ntoy_resistor_ota = toy_plugin:DiodeLoadedPair\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    return tmp_path


def test_plugin_is_found_listed_and_optimized(plugin_path, tmp_path):
    from ampfront import topologies
    from ampfront.optimize.run import run_study

    assert "toy_resistor_ota" in topologies.available()
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(plugin_path), os.environ.get("PYTHONPATH", "")])}
    listing = subprocess.run([sys.executable, "-m", "ampfront.optimize", "topologies"], capture_output=True, text=True,
                             env=env, timeout=120)
    assert "toy_resistor_ota" in listing.stdout and "r_out" in listing.stdout
    study = tmp_path / "toy.toml"
    study.write_text(textwrap.dedent("""
        topologies = ["toy_resistor_ota"]
        objectives = ["power", "gbw"]
        technology = "generic180"
        [spec]
        supply = "1.8 V"
        load_capacitance = "1 pF"
        min_gbw = "1 MHz"
        [search]
        population = 24
        generations = 6
        """))
    run_study(study, tmp_path / "out")
    import pandas as pd

    front = pd.read_csv(tmp_path / "out" / "front.csv")
    assert (front["topology"] == "toy_resistor_ota").all() and len(front) >= 1
    assert (front["gbw_hz"] >= 1e6).all()


STAGE_PLUGIN = """
from ampfront.topologies import ClassABOutput


class QuietClassAB(ClassABOutput):
    \"\"\"A third party's variant of the class-AB stage: its own suffix and title, the same physics.\"\"\"

    suffix = "qab"
    title = "quiet class-AB output"
"""


def test_a_third_party_output_stage_is_composed_with_every_single_stage_core(tmp_path, monkeypatch):
    """An output stage installed through `ampfront.output_stages` follows every core that declares
    single_stage, and the composition evaluates like the built-in one (same physics, so the same figures:
    the reference is the built-in class-AB composition itself)."""
    import numpy as np

    from ampfront import topologies
    from ampfront.topologies.evaluate import evaluate
    from tests.helpers import DEMO_CONDITIONS, generic180, random_designs

    (tmp_path / "stage_plugin.py").write_text(STAGE_PLUGIN)
    dist = tmp_path / "stage_plugin-0.1.dist-info"
    dist.mkdir()
    (dist / "METADATA").write_text("Metadata-Version: 2.1\nName: stage-plugin\nVersion: 0.1\n")
    (dist / "entry_points.txt").write_text("[ampfront.output_stages]\nqab = stage_plugin:QuietClassAB\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    found = topologies.available()
    cores = [n for n, t in found.items() if getattr(t, "single_stage", False)]
    assert cores and all(f"{core}_qab" in found for core in cores)
    tech = generic180()
    ours, theirs = found["folded_cascode_ab"], found["folded_cascode_qab"]
    x = random_designs(ours, tech, 16, seed=4)
    a, _ = evaluate(ours, x, tech, DEMO_CONDITIONS)
    b, _ = evaluate(theirs, x, tech, DEMO_CONDITIONS)
    np.testing.assert_array_equal(a["gain_db"], b["gain_db"])
    assert "quiet class-AB output" in theirs.title
