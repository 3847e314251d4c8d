from pathlib import Path

import pytest

from optimize.run import run_study

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "studies" / "sensor_readout.toml"


def square_law_study(folder: Path) -> Path:
    """The demo study on the shipped square-law technology, whose netlists use ngspice level-1 models."""
    path = folder / "sensor_readout_generic180.toml"
    path.write_text(DEMO.read_text().replace('technology = "sky130"', 'technology = "generic180"'))
    return path


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory):
    """The shipped demo study, run once for every test that inspects its outputs."""
    out = tmp_path_factory.mktemp("demo") / "result"
    run_study(DEMO, out)
    return out


@pytest.fixture(scope="session")
def square_law_run(tmp_path_factory):
    """The demo study on generic180 (square law), run once."""
    folder = tmp_path_factory.mktemp("square")
    run_study(square_law_study(folder), folder / "result")
    return folder / "result"
