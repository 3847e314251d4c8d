"""Verification tasks on a real Dask cluster, and the failure statuses a task reports.

References: Dask's scheduler (`distributed` LocalCluster), which must move a SIGKILLed worker's tasks to
the surviving worker so that every task's result arrives exactly once; ngspice (Debian package `ngspice`),
whose own failure to solve a circuit, and a run killed at its timeout, must come back as statuses with
their reasons rather than as exceptions.
"""

import os
import signal
import time

import pytest

from ampfront.optimize.simulator import cluster, tasks
from ampfront.optimize.simulator.ngspice import NO_CONVERGENCE, TIMEOUT
from ampfront.optimize.simulator.tasks import STEP, make_task, run_task
from ampfront.topologies.catalog import M

# A transient long enough (about a second) that a worker is caught running one, printing a value that
# names its task, so a result delivered to the wrong task or twice would show.
SLOW = """* a transient that takes a while
V1 in 0 pulse(0 1 0 1n 1n 1 2)
R1 in a 1k
C1 a 0 1n
.control
set noaskquit
tran 1n {stop} 0 1n
echo "ampfront: {metric} {value}"
quit 0
.endc
.end
"""

# No DC solution: ideal-ish diodes across the supply with stepping disabled, so ngspice gives up.
DIVERGENT = """* no operating point
Vsupply vdd 0 1.8
D1 vdd a dmod
D2 a 0 dmod
R1 a 0 1e-9
.model dmod d is=1e-30 n=0.01
.options itl1=3 gminsteps=0 srcsteps=0 noopiter
.control
set noaskquit
op
quit 0
.endc
.end
"""


def _task(design, deck, timeout=60.0):
    return make_task(design, STEP, {f"{design}_step.sp": deck}, timeout=timeout)


@pytest.mark.spice
def test_killed_worker_loses_and_duplicates_nothing():
    count = 16
    submitted = [_task(f"d{i:02d}", SLOW.format(stop="200u", metric=M.overshoot_pct, value=i)) for i in range(count)]
    received, killed = [], None
    with cluster.client(workers=2) as client:
        # Workers are fresh interpreters: they must run this checkout's code, not an installed copy.
        assert set(client.run(lambda: tasks.__file__).values()) == {tasks.__file__}
        pids = client.run(os.getpid)
        for task, outcome in cluster.run(client, submitted):
            received.append((task, outcome))
            if killed is None:
                deadline = time.monotonic() + 120
                while killed is None and time.monotonic() < deadline:
                    busy = [address for address, keys in client.processing().items() if keys]
                    if busy and len(received) < count - 2:
                        killed = busy[0]
                        os.kill(pids[killed], signal.SIGKILL)
                    else:
                        time.sleep(0.05)
    assert killed is not None, "no worker was caught running a task"
    keys = [task.key for task, _ in received]
    assert sorted(keys) == sorted(t.key for t in submitted) and len(set(keys)) == count
    for task, outcome in received:
        assert outcome.failure == "", outcome.reason
        assert outcome.key == task.key
        assert outcome.values[M.overshoot_pct] == int(task.design[1:])


@pytest.mark.spice
def test_circuit_without_a_solution_is_a_no_convergence_status():
    outcome = run_task(_task("div", DIVERGENT))
    assert outcome.failure == NO_CONVERGENCE and outcome.values == {}
    assert "did not measure" in outcome.reason


@pytest.mark.spice
def test_run_past_its_timeout_is_killed_and_a_timeout_status():
    outcome = run_task(_task("hang", SLOW.format(stop="50m", metric=M.overshoot_pct, value=1), timeout=1.0))
    assert outcome.failure == TIMEOUT, outcome.reason
    assert "within 1 s" in outcome.reason


def test_missing_model_file_is_named_not_run():
    deck = ".include /nonexistent/models_fet.spice\n" + SLOW.format(stop="1u", metric=M.overshoot_pct, value=1)
    outcome = run_task(_task("remote", deck))
    assert outcome.failure and "/nonexistent/models_fet.spice" in outcome.reason


def test_a_task_cannot_place_files_outside_its_folder(tmp_path):
    task = make_task("x", STEP, {"x_step.sp": "* nothing\n.end\n", f"../{tmp_path.name}/evil.sp": "x"})
    outcome = run_task(task)
    assert outcome.failure and "plain file name" in outcome.reason
    assert not (tmp_path / "evil.sp").exists()


def test_task_key_follows_the_netlist_text():
    a = _task("d", SLOW.format(stop="1u", metric=M.overshoot_pct, value=1))
    b = _task("d", SLOW.format(stop="1u", metric=M.overshoot_pct, value=2))
    assert a.key != b.key and a.key == _task("d", SLOW.format(stop="1u", metric=M.overshoot_pct, value=1)).key
