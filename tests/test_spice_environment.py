"""ngspice's environment: its OpenMP threads wait passively (measured reason in
optimize/simulator/ngspice.spice_environment; the variable is the OpenMP specification's OMP_WAIT_POLICY)."""

import subprocess

from ampfront.optimize.simulator import ngspice


def test_ngspice_threads_wait_passively_unless_the_user_says_otherwise(monkeypatch):
    monkeypatch.delenv("OMP_WAIT_POLICY", raising=False)
    assert ngspice.spice_environment()["OMP_WAIT_POLICY"] == "passive"
    monkeypatch.setenv("OMP_WAIT_POLICY", "active")
    assert ngspice.spice_environment()["OMP_WAIT_POLICY"] == "active"


def test_every_deck_is_run_in_that_environment(monkeypatch, tmp_path):
    monkeypatch.delenv("OMP_WAIT_POLICY", raising=False)
    seen = {}

    class Recorder:
        returncode = 0

        def __init__(self, args, **kwargs):
            seen.update(kwargs)

        def communicate(self, timeout=None):
            return "", ""

    monkeypatch.setattr(ngspice, "ngspice", lambda: "ngspice")
    monkeypatch.setattr(subprocess, "Popen", Recorder)
    ngspice.run_ngspice(tmp_path / "deck.sp")
    assert seen["env"]["OMP_WAIT_POLICY"] == "passive"
    assert seen["env"]["PATH"]          # the rest of the user's environment is kept
