"""ampfront as a user installs it: a wheel in a fresh virtual environment, run from a folder whose own
`optimize.py` and `topologies.py` would shadow generic package names; and plug-ins refused at load.

References: pip and venv (the standard installers), which build and install the wheel exactly as a user's
`pip install` would; the shipped SKY130 tables must come from the wheel, not the source tree.
"""

import os
import subprocess
import sys
import textwrap
import venv

import pytest

from .clirun import TINY_STUDY, ampfront, one_line


@pytest.fixture(scope="module")
def installed(tmp_path_factory):
    root = tmp_path_factory.mktemp("wheel")
    repo = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    subprocess.run([sys.executable, "-m", "pip", "wheel", repo, "--no-deps", "-q", "-w",
                    str(root / "dist")], check=True, capture_output=True, timeout=600)
    wheel = next((root / "dist").glob("ampfront-*.whl"))
    # The environment borrows numpy, scipy and friends from this interpreter; ampfront itself is only the wheel.
    venv.create(root / "env", system_site_packages=True, with_pip=True)
    python = root / "env" / "bin" / "python"
    subprocess.run([str(python), "-m", "pip", "install", "-q", "--no-deps", "--force-reinstall", str(wheel)],
                   check=True, capture_output=True, timeout=600)
    return python, wheel


def test_wheel_ships_every_table_and_runs_a_sky130_study_anywhere(installed, tmp_path):
    import zipfile

    python, wheel = installed
    names = zipfile.ZipFile(wheel).namelist()
    for suffix in ("sky130__nfet_01v8__tt__27C.npz".replace("sky130__", "sky130_fd_pr__"), "flicker__tt__27C.json",
                   "sky130.toml", "generic180.toml", "libraries/sky130.toml"):
        assert any(n.endswith(suffix) for n in names), suffix
    # A working folder of a user's own, with modules named like ampfront's two halves.
    (tmp_path / "optimize.py").write_text("raise SystemExit('the user's optimize.py was imported')\n")
    (tmp_path / "topologies.py").write_text("raise SystemExit('the user's topologies.py was imported')\n")
    (tmp_path / "study.toml").write_text(TINY_STUDY.replace('technology = "generic180"', 'technology = "sky130"'))
    # As a user runs it: no PYTHONPATH pointing back at a source tree.
    env = {k: v for k, v in os.environ.items() if k != "PYTHONPATH"}
    where = subprocess.run([str(python), "-c", "import ampfront, ampfront.topologies as t; print(t.__file__)"],
                           cwd=tmp_path, capture_output=True, text=True, timeout=120, env=env)
    assert str(python.parent.parent) in where.stdout, where.stdout + where.stderr
    proc = subprocess.run([str(python), "-m", "ampfront.optimize", "run", "study.toml", "--out", "out"], cwd=tmp_path,
                          capture_output=True, text=True, timeout=600, env=env)
    assert proc.returncode == 0, proc.stderr
    assert (tmp_path / "out" / "front.csv").is_file()


PROBE = '''
import numpy as np
from ampfront.topologies.base import Build, Element
from ampfront.topologies.stages import BiasBranch, MirrorPair, pair_variables


class Probe:
    name = "probe_ota"
    title = "Probe"
    prefix = "prb"
    single_stage = False
    reports = frozenset({{"slew_v_per_s", "out_high_v", "out_low_v", "cm_high_v", "offset_sys_v", "offset_sigma_v",
                         "peak_source_a", "peak_sink_a"{extra}}})

    def variables(self, tech):
        return pair_variables(tech)

    def build(self, x, tech, cond):
        raise RuntimeError("never built")


class BrokenStage:
    suffix = "bad"
    title = "broken stage"
    drive = "bad_in"
    nodes = ("bad_in",)
    reports = frozenset({{"slew_v_per_s"}})

    def variables(self, tech):
        return ()
'''


@pytest.mark.parametrize("group, target, extra, needle", [
    ("ampfront.topologies", "Probe", "", "cm_low_v"),                        # a declared metric left out
    ("ampfront.topologies", "Probe", ', "cm_low_v", "bogus_v"', "bogus_v"),   # an undeclared one
    ("ampfront.output_stages", "BrokenStage", "", "build"),                   # an output stage off its protocol
])
def test_a_broken_plug_in_is_refused_at_load_with_one_line(group, target, extra, needle, tmp_path):
    (tmp_path / "probe_plugin.py").write_text(textwrap.dedent(PROBE.format(extra=extra)))
    dist = tmp_path / "probe_plugin-0.1.dist-info"
    dist.mkdir()
    (dist / "METADATA").write_text("Metadata-Version: 2.1\nName: probe-plugin\nVersion: 0.1\n")
    (dist / "entry_points.txt").write_text(f"[{group}]\nprobe = probe_plugin:{target}\n")
    (tmp_path / "study.toml").write_text(TINY_STUDY)
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(tmp_path), os.environ.get("PYTHONPATH", "")])}
    for args in (("topologies", "--technology", "generic180"), ("run", "study.toml", "--out", "out")):
        proc = subprocess.run([sys.executable, "-m", "ampfront.optimize", *args], cwd=tmp_path, env=env,
                              capture_output=True, text=True, timeout=120)
        line = one_line(proc)
        assert proc.returncode == 2 and "probe_plugin" in line and needle in line, line
    assert not (tmp_path / "out").exists()
