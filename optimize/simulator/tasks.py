"""One testbench of one design as a unit of work a Dask worker can run anywhere.

A task carries the text of every file the deck needs, never a path: a worker may sit on another machine
and must not read anything from the folder the check was started on. It writes the files into a folder
of its own, runs ngspice there with the project's runner (timeouts kill the whole process group), and
returns the measured values or why there are none. It never raises for a simulation that went wrong, so
a failure is a result like any other and Dask's retries are left for workers that die.
"""

from __future__ import annotations

import hashlib
import re
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

from ampfront.optimize.simulator.ngspice import (FAILED, SpiceError, simulate, simulate_loop, simulate_step,
                                                 simulate_swing)

# The testbenches of a design, by what they measure; the file suffix is how `ampfront run` names them.
OPEN_LOOP, SWING, STEP, LOOP = "open_loop", "swing", "step", "loop"
SUFFIX = {OPEN_LOOP: "_tb.sp", SWING: "_swing.sp", STEP: "_step.sp", LOOP: "_loop.sp"}


@dataclass(frozen=True)
class Task:
    design: str
    testbench: str                      # OPEN_LOOP, SWING, STEP or LOOP
    files: tuple[tuple[str, str], ...]  # (file name, text): the deck and the subcircuit it includes
    spice_init: tuple[str, ...] = ()
    v_cm: float = 0.9                   # where the swing sweep reads its mid-scale gain
    timeout: float = 120.0
    corner: str = "nominal"
    digest: str = field(default="", compare=False)   # deck_digest of the above; make_task fills it in
    stem: str = ""      # the files' base name when it is not the design's (a corner's: tsm_001_ss)

    @property
    def base(self) -> str:
        return self.stem or self.design

    @property
    def deck(self) -> str:
        return f"{self.base}{SUFFIX[self.testbench]}"

    @property
    def key(self) -> str:
        """Unique per design, testbench and netlist text: Dask's key, and how a rerun knows what is done."""
        return f"{self.design}:{self.testbench}:{self.corner}:{self.digest}"


def deck_digest(files, spice_init) -> str:
    """SHA-256 over every file's name and text and the .spiceinit lines: a changed design is a new task."""
    h = hashlib.sha256()
    for name, text in sorted(files):
        h.update(name.encode() + b"\0" + text.encode() + b"\0")
    h.update("\n".join(spice_init).encode())
    return h.hexdigest()


def make_task(design: str, testbench: str, files: dict[str, str], spice_init=(), v_cm: float = 0.9,
              timeout: float = 120.0, corner: str = "nominal", stem: str = "") -> Task:
    items = tuple(sorted(files.items()))
    return Task(design, testbench, items, tuple(spice_init), v_cm, timeout, corner, deck_digest(items, spice_init),
                stem)


@dataclass(frozen=True)
class Outcome:
    """What one task measured (`values`, SI units), or `failure` (a SpiceError kind) with its `reason`."""

    key: str
    values: dict
    failure: str = ""
    reason: str = ""


_INCLUDE = re.compile(r"^\s*\.(?:include|inc|lib)\s+(\S+)", re.IGNORECASE | re.MULTILINE)


def _absent_includes(files) -> str:
    """The first absolute model path a deck includes that this machine lacks ('' when all are here)."""
    for _, text in files:
        for path in _INCLUDE.findall(text):
            path = path.strip("'\"")
            if Path(path).is_absolute() and not Path(path).is_file():
                return path
    return ""


def run_task(task: Task) -> Outcome:
    """Runs on a worker: the deck in a private temporary folder, removed afterwards whatever happened."""
    try:
        with tempfile.TemporaryDirectory(prefix="ampfront-task-") as work:
            work = Path(work)
            for name, text in task.files:
                if Path(name).name != name:   # a task names files, never places them
                    return Outcome(task.key, {}, FAILED, f"{name}: not a plain file name")
                (work / name).write_text(text, encoding="utf-8")
            if task.spice_init:
                (work / ".spiceinit").write_text("\n".join(task.spice_init) + "\n", encoding="utf-8")
            absent = _absent_includes(task.files)
            if absent:
                return Outcome(task.key, {}, FAILED, f"{absent}: not on this worker (a remote worker needs the "
                               "device models at the path the client has them)")
            deck = work / task.deck
            if task.testbench == OPEN_LOOP:
                values = simulate(deck, task.timeout)
            elif task.testbench == SWING:
                values = simulate_swing(deck, f"{task.base}_swing.dat", task.v_cm, task.timeout)
            elif task.testbench == STEP:
                values = simulate_step(deck, task.timeout)
            elif task.testbench == LOOP:
                values = simulate_loop(deck, f"{task.base}_loop.dat", task.timeout)
            else:
                return Outcome(task.key, {}, FAILED, f"unknown testbench {task.testbench!r}")
    except SpiceError as error:
        return Outcome(task.key, {}, error.kind, str(error))
    except OSError as error:   # the worker's own disk: full, or no temporary folder
        return Outcome(task.key, {}, FAILED, f"worker could not write the deck: {error}")
    return Outcome(task.key, values)
