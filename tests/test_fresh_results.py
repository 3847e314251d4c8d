"""Every simulation result is fresh: an output an earlier run left behind is removed before the run, its
absence is a status, and a run past its timeout is killed with everything it started.

Reference: ngspice itself (Debian package `ngspice`) running small decks of this test's own; the process
table (`ps`) for what is left running. The rules are the project's own (README, "Checking").
"""

import subprocess
import uuid

import pytest

from ampfront.optimize.simulator.ngspice import TIMEOUT, UNREADABLE, SpiceError, run_ngspice, simulate_swing

pytestmark = pytest.mark.spice

# A DC sweep that prints nothing to a file: a swing deck whose wrdata line was lost.
SILENT_SWEEP = """* a sweep that writes no data file
Vset set 0 0.9
R1 set out 1k
R2 out 0 1k
.control
dc Vset 0 1.8 0.1
quit 0
.endc
.end
"""


def test_a_stale_sweep_file_is_removed_and_its_absence_is_a_status(tmp_path):
    deck = tmp_path / "d_swing.sp"
    deck.write_text(SILENT_SWEEP)
    stale = tmp_path / "d_swing.dat"
    stale.write_text("0 0\n0.9 0.9\n1.8 1.8\n")   # what an earlier run might have left
    with pytest.raises(SpiceError) as error:
        simulate_swing(deck, stale.name, 0.9)
    assert error.value.kind == UNREADABLE and "wrote no d_swing.dat" in str(error.value)
    assert not stale.exists()


def _running(tag: str) -> list[str]:
    ps = subprocess.run(["ps", "-eo", "args"], capture_output=True, text=True).stdout
    return [line for line in ps.splitlines() if tag in line and "ps -eo" not in line]


def test_a_run_past_its_timeout_leaves_nothing_running(tmp_path):
    """The deck's own child (a shell command ngspice starts) goes with it: the whole session is killed."""
    seconds = f"{37 + uuid.uuid4().int % 1000 / 1000:.3f}"   # a duration no other process sleeps
    deck = tmp_path / "hang.sp"
    deck.write_text(f"* a deck that waits on a child\nR1 a 0 1k\n.control\nshell sleep {seconds}\nquit 0\n.endc\n.end\n")
    with pytest.raises(SpiceError) as error:
        run_ngspice(deck, timeout=1.0)
    assert error.value.kind == TIMEOUT
    assert _running(f"sleep {seconds}") == []
