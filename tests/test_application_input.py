"""Malformed application keys (closed-loop gain, configuration, gain error, network, settling): one clear
line naming file and key, exit status 2, no traceback, no output folder, as tests/test_bad_input.py holds
every other key. Reference: the relations of topologies/application.py (a non-inverting gain is at least 1,
a feedback factor lies in (0, 1], an error is a fraction below one), from memory of any analog text."""

import subprocess
import sys
from pathlib import Path

import pytest

from ampfront.optimize.spec.study import load_study
from ampfront.topologies import available

GOOD = """
topologies = ["two_stage_miller"]
technology = "generic180"
[spec]
supply = "1.8 V"
load_capacitance = "2 pF"
min_phase_margin = "60 deg"
"""

CASES = {
    "gain_below_one": ("closed_loop_gain = 0.5\n", "spec.closed_loop_gain"),
    "gain_zero": ("closed_loop_gain = 0\n", "spec.closed_loop_gain"),
    "gain_with_unit": ('closed_loop_gain = "5 V"\n', "spec.closed_loop_gain"),
    "unknown_configuration": ('closed_loop_gain = 5\nconfiguration = "differential"\n', "spec.configuration"),
    "configuration_alone": ('configuration = "inverting"\n', "spec.configuration"),
    "gain_and_beta": ("closed_loop_gain = 5\nfeedback_factor = 0.2\n", "spec.feedback_factor"),
    "beta_above_one": ("feedback_factor = 1.5\n", "spec.feedback_factor"),
    "error_hundred_percent": ('closed_loop_gain = 5\nmax_gain_error = "100 %"\n', "spec.max_gain_error"),
    "error_above_one": ("closed_loop_gain = 5\nmax_gain_error = 2\n", "spec.max_gain_error"),
    "error_zero": ('closed_loop_gain = 5\nmax_gain_error = "0 %"\n', "spec.max_gain_error"),
    "error_without_loop": ('max_gain_error = "0.1 %"\n', "spec.max_gain_error"),
    "network_without_loop": ('feedback_resistance = "20 kOhm"\n', "spec.feedback_resistance"),
    "network_wrong_unit": ('closed_loop_gain = 5\nfeedback_resistance = "20 kV"\n', "spec.feedback_resistance"),
    "settle_band_zero": ('settle_band = "0 %"\n', "spec.settle_band"),
    "settle_band_whole": ('settle_band = "100 %"\n', "spec.settle_band"),
    "step_above_supply": ('step = "2 V"\n', "spec.step"),
    "step_negative": ('step = "-0.5 V"\n', "spec.step"),
    "settling_time_wrong_unit": ('max_settling_time = "200 nV"\n', "spec.max_settling_time"),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_bad_application_key_gives_one_clear_line(case, tmp_path):
    extra, key = CASES[case]
    study = tmp_path / f"{case}.toml"
    study.write_text(GOOD + extra)
    out = tmp_path / "out"
    proc = subprocess.run([sys.executable, "-m", "ampfront.optimize", "run", str(study), "--out", str(out)],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2, proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1, proc.stderr
    assert str(study) in lines[0] and key in lines[0] and "expected" in lines[0]
    assert "Traceback" not in proc.stderr + proc.stdout
    assert not out.exists()
    assert not any(p.name.startswith(".out") for p in tmp_path.iterdir())


@pytest.mark.parametrize("gain, configuration, beta", [(5, "non_inverting", 0.2), (4, "inverting", 0.2),
                                                      (1, "non_inverting", 1.0)])
def test_the_study_closes_the_loop_at_the_configurations_beta(gain, configuration, beta, tmp_path):
    """beta = 1/G non-inverting, 1/(1+|G|) inverting; the phase-margin bound then holds at that beta only."""
    study = tmp_path / "s.toml"
    study.write_text(GOOD + f'closed_loop_gain = {gain}\nconfiguration = "{configuration}"\n'
                     'feedback_resistance = "20 kOhm"\nload_resistance = "20 kOhm"\n')
    s = load_study(Path(study), available())
    assert s.conditions.beta == pytest.approx(beta)
    assert s.conditions.inverting == (configuration == "inverting")
    # The output drives the whole 20 kOhm network non-inverting, Rf alone inverting (inn is a virtual
    # ground), beside the 20 kOhm load.
    network = 20e3 if configuration == "non_inverting" else 20e3 * (1 - beta)
    assert s.conditions.r_output_load == pytest.approx(1 / (1 / network + 1 / 20e3))
    names = {c.name for c in s.constraints}
    assert "min_phase_margin_loop" in names and "min_phase_margin" not in names
