"""`ampfront run` on a study no design can meet, as a user runs it: a fresh interpreter, its exit status,
its stderr and the folder it leaves.

References: the README's contract for an infeasible study (exit status 3, front.csv of the closest designs
with meets_spec false, a report that says so, every number in engineering units) and Python's csv and
html.parser reading what was written.
"""

import re

import pandas as pd

from .clirun import ampfront

IMPOSSIBLE = """
title = "Impossible amplifier"
topologies = ["simple_ota", "two_stage_miller"]
objectives = ["power", "gbw"]
technology = "generic180"

[spec]
supply = "1.8 V"
load_capacitance = "2 pF"
min_gain = "200 dB"
min_gbw = "2 GHz"
max_power = "1 uW"
max_noise_density = "1 nV/sqrt(Hz)"

[search]
population = 8
generations = 2
"""
# A float printed by Python's repr or %g in SI: 2e+09, 1e-06, 3.1E-5.
RAW_EXPONENT = re.compile(r"\d[eE][+-]?\d")


def test_an_infeasible_study_exits_3_and_leaves_a_flagged_front_and_report(tmp_path):
    study = tmp_path / "study.toml"
    study.write_text(IMPOSSIBLE)
    proc = ampfront("run", study, "--out", tmp_path / "out", "-q")
    assert proc.returncode == 3, proc.stderr
    assert "Traceback" not in proc.stderr
    assert not RAW_EXPONENT.search(proc.stderr), proc.stderr
    # Each topology is named with what it misses, in the units of the spec.
    assert "simple_ota: no design met the spec" in proc.stderr and "below the bound 2 GHz" in proc.stderr
    front = pd.read_csv(tmp_path / "out" / "front.csv")
    assert len(front) > 0 and not front["meets_spec"].any()
    assert set(front["topology"]) == {"simple_ota", "two_stage_miller"}
    page = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    assert 'id="infeasible"' in page and "No design met the whole spec." in page
    # The plot opens on the verdict's axes: power (paid) against GBW (wanted).
    assert page.index('"label":"Power vs GBW"') < page.index('"label":"GBW vs Power"')
    assert "own front only" not in page and "closest designs, missing the spec" in page
