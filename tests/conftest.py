from pathlib import Path

import pytest

from optimize.run import run_study

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "studies" / "sensor_readout.toml"


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory):
    """The shipped demo study, run once for every test that inspects its outputs."""
    out = tmp_path_factory.mktemp("demo") / "result"
    run_study(DEMO, out)
    return out
