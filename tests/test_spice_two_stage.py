"""Exported two-stage netlists simulated by an outside reference.

Reference: ngspice (Debian package `ngspice`), level-1 MOSFET, on the netlists ampfront writes for the demo
study run on the square-law technology generic180. Bounds from the issue: DC gain 0.5 dB, GBW 5 %, phase margin 3 deg, supply current 2 %.
"""

import numpy as np
import pandas as pd
import pytest

from ampfront.optimize.simulator.ngspice import simulate


@pytest.mark.spice
def test_front_designs_match_ngspice(square_law_run):
    demo_run = square_law_run
    front = pd.read_csv(demo_run / "front.csv")
    front = front[front["topology"] == "two_stage_miller"].reset_index(drop=True)
    # Five designs spread over the front: cheapest, fastest, highest gain and two in between.
    picks = sorted({int(front["power_w"].idxmin()), int(front["gbw_hz"].idxmax()), int(front["gain_db"].idxmax()),
                    len(front) // 3, 2 * len(front) // 3})
    assert len(picks) >= 5
    for i in picks:
        row = front.iloc[i]
        got = simulate(demo_run / "netlists" / f"{row['design']}_tb.sp")
        assert abs(got["gain_db"] - row["gain_db"]) < 0.5, row["design"]
        assert got["gbw_hz"] == pytest.approx(row["gbw_hz"], rel=0.05), row["design"]
        assert abs(got["phase_margin_deg"] - row["phase_margin_deg"]) < 3.0, row["design"]
        assert got["supply_current_a"] == pytest.approx(row["supply_current_a"], rel=0.02), row["design"]
        assert np.isfinite(list(got.values())).all()


@pytest.mark.spice
def test_testbench_runs_from_any_folder(square_law_run, tmp_path):
    demo_run = square_law_run
    """The testbench finds its subcircuit beside it, wherever ngspice is started from."""
    import shutil
    import subprocess

    name = pd.read_csv(demo_run / "front.csv")["design"].iloc[0]
    for suffix in (".sp", "_tb.sp"):
        shutil.copy(demo_run / "netlists" / f"{name}{suffix}", tmp_path)
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    proc = subprocess.run(["ngspice", "-b", str(tmp_path / f"{name}_tb.sp")], cwd=elsewhere,
                          capture_output=True, text=True, timeout=120)
    assert "ampfront: gbw_hz" in proc.stdout


def test_subcircuit_contract(demo_run):
    """Only the subcircuit: the agreed ports, no sources, analyses or model cards."""
    for path in sorted((demo_run / "netlists").glob("*.sp")):
        if path.name.endswith(("_tb.sp", "_swing.sp", "_step.sp")):
            continue
        text = path.read_text()
        lines = [line for line in text.splitlines() if line and not line.startswith("*")]
        assert lines[0] == f".subckt {path.stem} inp inn out vdd vss"
        assert lines[-1].startswith(".ends")
        assert not any(line.lower().startswith((".model", ".include", ".lib", ".control", "v")) for line in lines)


@pytest.mark.spice
def test_check_command_reports_agreement(square_law_run):
    demo_run = square_law_run
    from typer.testing import CliRunner

    from ampfront.optimize.cli import app

    result = CliRunner().invoke(app, ["check", str(demo_run), "--designs", "3", "--whole-front"])
    assert result.exit_code == 0, result.output
    assert result.output.count(": agrees [ok]") == 3
    # Every judged figure is printed, model beside simulator.
    for label in ("DC gain", "GBW", "Phase margin", "Supply current", "CMRR", "PSRR", "Noise at 1 Hz",
                  "Lowest linear output"):
        assert result.output.count(label) == 3, label
