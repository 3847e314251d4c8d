"""Stopping a parallel run: Ctrl-C or a killed worker ends every process within seconds, with one line,
and leaves no process, temporary folder or partial result behind.

Reference: the operating system's own process table (/proc) and signals (SIGINT to the process group as a
terminal sends it, SIGKILL of one worker as the kernel's out-of-memory killer would).
"""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from ampfront import topologies

STUDY = """
title = "Interrupt me"
topologies = [{names}]
objectives = ["power", "gbw"]
technology = "generic180"
[spec]
supply = "1.8 V"
load_capacitance = "2 pF"
min_gain = "40 dB"
[search]
population = 200
generations = 400
"""


def _descendants(pid: int) -> set[int]:
    parents = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
            except OSError:
                continue
            parents[int(entry.name)] = int(fields[1])
    found, frontier = set(), {pid}
    while frontier:
        frontier = {p for p, parent in parents.items() if parent in frontier} - found
        found |= frontier
    return found


def _alive(pids) -> set[int]:
    out = set()
    for pid in pids:
        try:
            state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
        except OSError:
            continue
        if state != "Z":
            out.add(pid)
    return out


def _start(tmp_path):
    names = ", ".join(f'"{n}"' for n in topologies.available())
    (tmp_path / "study.toml").write_text(STUDY.format(names=names))
    # A private temporary folder: whatever the run (or multiprocessing) leaves in it is found below.
    (tmp_path / "tmp").mkdir()
    env = {**os.environ, "TMPDIR": str(tmp_path / "tmp")}
    proc = subprocess.Popen([sys.executable, "-m", "ampfront.optimize", "run", str(tmp_path / "study.toml"), "--out",
                             str(tmp_path / "out")], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True, env=env)
    deadline = time.monotonic() + 60
    workers: set[int] = set()
    while time.monotonic() < deadline and len(workers) < 2:
        time.sleep(0.5)
        workers = {p for p in _descendants(proc.pid) if b"spawn_main" in Path(f"/proc/{p}/cmdline").read_bytes()}
    assert len(workers) >= 2, "the run never started its search processes"
    time.sleep(3)   # let the workers get into their searches
    return proc, workers


def _settle(proc, tmp_path, seconds=5.0):
    everyone = _descendants(proc.pid) | {proc.pid}
    stdout, stderr = proc.communicate(timeout=60)
    deadline = time.monotonic() + seconds
    while _alive(everyone) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert not _alive(everyone), "processes left running"
    assert "Traceback" not in stderr, stderr
    left = [p.name for p in tmp_path.iterdir() if p.name not in ("study.toml", "tmp")]
    assert left == [], left
    assert list((tmp_path / "tmp").iterdir()) == []
    return stderr


@pytest.mark.parametrize("to_group", [True, False], ids=["process_group", "process_alone"])
def test_ctrl_c_stops_every_worker(to_group, tmp_path):
    """The issue's bound: every process of the run gone within 5 s of the signal, whether a terminal sends it
    to the whole group or a supervisor to the main process alone."""
    proc, _ = _start(tmp_path)
    everyone = _descendants(proc.pid) | {proc.pid}
    sent = time.monotonic()
    if to_group:
        os.killpg(proc.pid, signal.SIGINT)     # what a terminal's Ctrl-C does
    else:
        os.kill(proc.pid, signal.SIGINT)
    while _alive(everyone) and time.monotonic() - sent < 5.0:
        proc.poll()
        time.sleep(0.05)
    assert not _alive(everyone), "processes still running 5 s after Ctrl-C"
    stderr = _settle(proc, tmp_path)
    assert proc.returncode == 130
    assert len(stderr.strip().splitlines()) == 1 and "interrupted" in stderr, stderr


def test_killed_worker_is_one_line(tmp_path):
    proc, workers = _start(tmp_path)
    os.kill(sorted(workers)[0], signal.SIGKILL)
    proc.wait(timeout=60)
    stderr = _settle(proc, tmp_path)
    assert proc.returncode == 1
    assert len(stderr.strip().splitlines()) == 1 and "stopped without a result" in stderr, stderr


def test_killed_run_takes_its_workers_with_it(tmp_path):
    """SIGKILL of the main process (nothing of ampfront's runs to clean up): its search processes stop by
    themselves within 5 s instead of searching on for nobody."""
    proc, _ = _start(tmp_path)
    everyone = _descendants(proc.pid)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=30)
    sent = time.monotonic()
    while _alive(everyone) and time.monotonic() - sent < 5.0:
        time.sleep(0.05)
    assert not _alive(everyone), "search processes still running 5 s after their run was killed"
