"""Malformed studies: one clear line naming file and key, exit status 2, no traceback, no output folder."""

import subprocess
import sys
import textwrap

import pytest

from .clirun import TINY_STUDY

GOOD_SPEC = """
[spec]
supply = "1.8 V"
load_capacitance = "2 pF"
min_gain = "60 dB"
"""

CASES = {
    "unknown_key": (GOOD_SPEC + 'min_gian = "3 dB"\n', "spec.min_gian"),
    "missing_supply": ('[spec]\nload_capacitance = "2 pF"\n', "spec.supply"),
    "wrong_unit": (GOOD_SPEC.replace('"2 pF"', '"2 pV"'), "spec.load_capacitance"),
    "missing_unit": (GOOD_SPEC.replace('"1.8 V"', '"1.8"'), "spec.supply"),
    "number_not_string": (GOOD_SPEC.replace('"1.8 V"', "1.8"), "spec.supply"),
    "negative_value": (GOOD_SPEC.replace('"2 pF"', '"-2 pF"'), "spec.load_capacitance"),
    "zero_value": (GOOD_SPEC.replace('"1.8 V"', '"0 V"'), "spec.supply"),
    "cm_range_reversed": (GOOD_SPEC + 'input_cm = ["1.2 V", "0.6 V"]\n', "spec.input_cm"),
    "cm_above_supply": (GOOD_SPEC + 'input_cm = "2.5 V"\n', "spec.input_cm"),
    "swing_above_supply": (GOOD_SPEC + 'min_output_swing = "2 V"\n', "spec.min_output_swing"),
    "unknown_objective": ('objectives = ["power", "speed"]\n' + GOOD_SPEC, "objectives"),
    "one_objective": ('objectives = ["power"]\n' + GOOD_SPEC, "objectives"),
    "unknown_topology": ('topologies = ["three_stage"]\n' + GOOD_SPEC, "topologies"),
    "missing_technology": ('technology = "nosuchprocess"\n' + GOOD_SPEC, "technology"),
    "corner_not_shipped": ('technology = "sky130"\ncorner = "sf"\n' + GOOD_SPEC, "corner"),
    "corner_on_square_law": ('technology = "generic180"\ncorner = "sf"\n' + GOOD_SPEC, "corner"),
    "corners_not_shipped": ('technology = "sky130"\ncorners = ["ss", "sf"]\n' + GOOD_SPEC, "corners"),
    "corners_empty": ('corners = []\n' + GOOD_SPEC, "corners"),
    "corners_not_list": ('corners = "ss"\n' + GOOD_SPEC, "corners"),
    "corners_duplicate": ('corners = ["ss", "ss"]\n' + GOOD_SPEC, "corners"),
    "supply_tolerance_zero": ('supply_tolerance = "0 %"\n' + GOOD_SPEC, "supply_tolerance"),
    "supply_tolerance_half": ('supply_tolerance = "50 %"\n' + GOOD_SPEC, "supply_tolerance"),
    "supply_tolerance_unitless": ('supply_tolerance = "10"\n' + GOOD_SPEC, "supply_tolerance"),
    "supply_tolerance_in_volts": ('supply_tolerance = "0.1 V"\n' + GOOD_SPEC, "supply_tolerance"),
    "not_toml": ("this is [not toml\n", "(file)"),
    "no_spec": ('title = "x"\n', "spec"),
    "bad_population": (GOOD_SPEC + "[search]\npopulation = -5\n", "search.population"),
    "unknown_search_key": (GOOD_SPEC + "[search]\ngens = 5\n", "search.gens"),
    "noise_band_reversed": (GOOD_SPEC + 'noise_band = ["1 MHz", "1 Hz"]\n', "spec.noise_band"),
    "noise_band_one_edge": (GOOD_SPEC + 'noise_band = "1 MHz"\n', "spec.noise_band"),
    "noise_band_wrong_unit": (GOOD_SPEC + 'noise_band = ["1 Hz", "1 MV"]\n', "spec.noise_band"),
    "noise_rms_wrong_unit": (GOOD_SPEC + 'max_noise_rms = "5 uA"\n', "spec.max_noise_rms"),
    "seed_negative": (GOOD_SPEC + "[search]\nseed = -1\n", "search.seed"),
    "seed_too_large": (GOOD_SPEC + "[search]\nseed = 99999999999\n", "search.seed"),
    "seed_text": (GOOD_SPEC + '[search]\nseed = "seven"\n', "search.seed"),
    "population_huge": (GOOD_SPEC + "[search]\npopulation = 1000000000\n", "search.population"),
    "population_one": (GOOD_SPEC + "[search]\npopulation = 1\n", "search.population"),
    "generations_zero": (GOOD_SPEC + "[search]\ngenerations = 0\n", "search.generations"),
    "refine_negative": (GOOD_SPEC + "[search]\nrefine = -1\n", "search.refine"),
    "refine_too_many": (GOOD_SPEC + "[search]\nrefine = 5000\n", "search.refine"),
    "refine_fraction": (GOOD_SPEC + "[search]\nrefine = 2.5\n", "search.refine"),
    "population_float": (GOOD_SPEC + "[search]\npopulation = 50.5\n", "search.population"),
    "budget_with_generations": (GOOD_SPEC + "[search]\ngenerations = 10\nbudget = 50000\n", "search.budget"),
    "budget_tiny": (GOOD_SPEC + "[search]\nbudget = 10\n", "search.budget"),
    "budget_below_two_populations": (GOOD_SPEC + "[search]\npopulation = 4000\nbudget = 5000\n", "search.budget"),
    "budget_text": (GOOD_SPEC + '[search]\nbudget = "a lot"\n', "search.budget"),
    "front_designs_one": (GOOD_SPEC + "[search]\nfront_designs = 1\n", "search.front_designs"),
    "front_designs_with_generations": (GOOD_SPEC + "[search]\ngenerations = 10\nfront_designs = 50\n",
                                       "search.front_designs"),
    "search_not_table": ('search = 5\n' + GOOD_SPEC, "search"),
    "objectives_nested": ('objectives = [["power"], "gbw"]\n' + GOOD_SPEC, "objectives"),
    "objectives_duplicate": ('objectives = ["power", "power"]\n' + GOOD_SPEC, "objectives"),
    "objectives_six": ('objectives = ["power", "gbw", "gain", "area", "phase_margin", "power"]\n' + GOOD_SPEC,
                       "objectives"),
    "objectives_not_list": ('objectives = "power"\n' + GOOD_SPEC, "objectives"),
    "topologies_nested": ('topologies = [["simple_ota"]]\n' + GOOD_SPEC, "topologies"),
    "topologies_duplicate": ('topologies = ["simple_ota", "simple_ota"]\n' + GOOD_SPEC, "topologies"),
    "topologies_empty": ('topologies = []\n' + GOOD_SPEC, "topologies"),
    "topologies_number": ('topologies = [3]\n' + GOOD_SPEC, "topologies"),
    "title_with_nul": ('title = "a\\u0000b"\n' + GOOD_SPEC, "title"),
    "title_with_newline": ('title = "a\\nb"\n' + GOOD_SPEC, "title"),
    "title_not_text": ("title = 5\n" + GOOD_SPEC, "title"),
    "title_too_long": ('title = "' + "x" * 300 + '"\n' + GOOD_SPEC, "title"),
    "spec_not_table": ('spec = "fast"\n', "spec"),
    "technology_number": ("technology = 180\n" + GOOD_SPEC, "technology"),
    "corner_list": ('technology = "sky130"\ncorner = ["tt"]\n' + GOOD_SPEC, "corner"),
    "unknown_top_key": ('budget = "lots"\n' + GOOD_SPEC, "budget"),
    "gain_as_list": (GOOD_SPEC.replace('"60 dB"', '["60 dB"]'), "spec.min_gain"),
    "gain_as_table": (GOOD_SPEC.replace('min_gain = "60 dB"', 'min_gain = { value = "60 dB" }'), "spec.min_gain"),
    "infinite_value": (GOOD_SPEC.replace('"2 pF"', '"1e999 pF"'), "spec.load_capacitance"),
    "nan_value": (GOOD_SPEC.replace('"2 pF"', '"nan pF"'), "spec.load_capacitance"),
    "huge_value_is_cut": (GOOD_SPEC.replace('"2 pF"', '"' + "9" * 200000 + ' pF"'), "spec.load_capacitance"),
    "input_cm_three": (GOOD_SPEC + 'input_cm = ["0.5 V", "0.9 V", "1.2 V"]\n', "spec.input_cm"),
    "input_cm_nested": (GOOD_SPEC + 'input_cm = [["0.5 V"], "0.9 V"]\n', "spec.input_cm"),
    "negative_load_resistance": (GOOD_SPEC + 'load_resistance = "-5 kOhm"\n', "spec.load_resistance"),
    "area_wrong_unit": (GOOD_SPEC + 'max_area = "5 um"\n', "spec.max_area"),
    "slew_wrong_unit": (GOOD_SPEC + 'min_slew_rate = "5 V"\n', "spec.min_slew_rate"),
    "noise_band_zero": (GOOD_SPEC + 'noise_band = ["0 Hz", "1 kHz"]\n', "spec.noise_band"),
    "gain_margin_zero": (GOOD_SPEC + 'min_gain_margin = "0 dB"\n', "spec.min_gain_margin"),
    "spot_noise_one_value": (GOOD_SPEC + 'max_noise_at = "20 nV/sqrt(Hz)"\n', "spec.max_noise_at"),
    "spot_noise_wrong_unit": (GOOD_SPEC + 'max_noise_at = ["20 nV/sqrt(Hz)", "10 kV"]\n', "spec.max_noise_at"),
    "spot_noise_reversed": (GOOD_SPEC + 'max_noise_at = ["10 kHz", "20 nV/sqrt(Hz)"]\n', "spec.max_noise_at"),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_bad_study_gives_one_clear_line(case, tmp_path):
    text, key = CASES[case]
    study = tmp_path / f"{case}.toml"
    study.write_text(textwrap.dedent(text))
    out = tmp_path / "out"
    proc = subprocess.run([sys.executable, "-m", "ampfront.optimize", "run", str(study), "--out", str(out)],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2, proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1, proc.stderr
    assert str(study) in lines[0] and key in lines[0] and "expected" in lines[0]
    assert len(lines[0]) < 600   # a long value is named, not reprinted
    assert "Traceback" not in proc.stderr + proc.stdout
    assert not out.exists()
    assert not any(p.name.startswith(".out") for p in tmp_path.iterdir())


def test_missing_study_file(tmp_path):
    proc = subprocess.run([sys.executable, "-m", "ampfront.optimize", "run", str(tmp_path / "nope.toml"), "--out",
                           str(tmp_path / "out")], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2 and "nope.toml" in proc.stderr and "Traceback" not in proc.stderr


@pytest.mark.parametrize("args, key", [
    (["--corner", "xx"], "corner"),
    (["--library", "acme"], "--library"),
    (["--lengths", "0.15,abc"], "--lengths"),
    (["--lengths", "0.15,-1"], "--lengths"),
    (["--lengths", "0.5,0.5"], "--lengths"),
    (["--lengths", "nan"], "--lengths"),
    (["--temp", "-300"], "--temp"),
    (["--temp", "nan"], "--temp"),
    (["--temp", "inf"], "--temp"),
    (["--temp", "warm"], "--temp"),
    (["--nmos", "x;.control"], "--nmos"),
    (["--pmos", ""], "--pmos"),
    (["--corner", "../tt"], "corner"),
    (["--bogus"], "--bogus"),
])
def test_bad_characterize_options(args, key, tmp_path):
    proc = subprocess.run([sys.executable, "-m", "ampfront.optimize", "characterize", "--out", str(tmp_path / "t"), *args],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2, proc.stderr
    assert key in proc.stderr and "Traceback" not in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1, proc.stderr
    assert not (tmp_path / "t").exists()


def test_characterize_out_that_is_a_file(tmp_path):
    target = tmp_path / "a_file"
    target.write_text("mine\n")
    proc = subprocess.run([sys.executable, "-m", "ampfront.optimize", "characterize", "--out", str(target),
                           "--lengths", "0.5", "--no-flicker"], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2 and "--out" in proc.stderr and len(proc.stderr.strip().splitlines()) == 1
    assert target.read_text() == "mine\n"


def test_characterize_out_that_cannot_be_created(tmp_path):
    """Refused before any sweep: /proc takes no new folders."""
    proc = subprocess.run([sys.executable, "-m", "ampfront.optimize", "characterize", "--out", "/proc/ampfront-x",
                           "--lengths", "0.5", "--no-flicker"], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2 and "--out" in proc.stderr and "Traceback" not in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1, proc.stderr


@pytest.mark.parametrize("seed", ["-1", "abc", "1e30"])
def test_bad_seed_on_the_command_line(seed, tmp_path):
    study = tmp_path / "study.toml"
    study.write_text(TINY_STUDY)
    proc = subprocess.run([sys.executable, "-m", "ampfront.optimize", "run", str(study), "--out", str(tmp_path / "out"),
                           "--seed", seed], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2 and "--seed" in proc.stderr and "Traceback" not in proc.stderr, proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1, proc.stderr
    assert not (tmp_path / "out").exists()


def test_a_clean_run_prints_no_warnings(tmp_path):
    """Numerical warnings from designs the search tries and rejects (NaN, overflow) are not the user's
    business: a successful run's stderr holds only ampfront's own lines."""
    study = tmp_path / "study.toml"
    study.write_text(TINY_STUDY.replace('topologies = ["simple_ota"]', 'topologies = ["folded_cascode_ab", "two_stage_miller"]'))
    proc = subprocess.run([sys.executable, "-m", "ampfront.optimize", "run", str(study), "--out", str(tmp_path / "out")],
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode in (0, 3), proc.stderr
    assert "Warning" not in proc.stderr and "warn(" not in proc.stderr, proc.stderr


@pytest.mark.spice
def test_characterize_names_a_missing_device(tmp_path):
    """A device the library does not define: ngspice's complaint becomes one clear line."""
    proc = subprocess.run([sys.executable, "-m", "ampfront.optimize", "characterize", "--out", str(tmp_path / "t"),
                           "--nmos", "sky130_fd_pr__nfet_99v9", "--lengths", "0.5", "--no-flicker"],
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 1, proc.stderr
    assert "sky130_fd_pr__nfet_99v9" in proc.stderr and "device name not in the library" in proc.stderr
    assert "Traceback" not in proc.stderr
    assert not list((tmp_path).glob("t/*.npz"))
