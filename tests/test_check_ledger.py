"""check.csv as a record that survives kills and reruns.

Reference: Python's csv module and pandas.read_csv reading the file back (a file cut at any byte must
still parse, with every complete task's rows intact), and the rerun rule: a task is its design,
testbench, corner and netlist hash, so only finished, unchanged tasks are skipped.
"""

import csv

import pandas as pd
import pytest

from ampfront.optimize.simulator.ledger import COLUMNS, NAME, Ledger, finished, read
from ampfront.optimize.simulator.tasks import OPEN_LOOP, STEP, make_task
from ampfront.optimize.simulator.tasks import Outcome
from ampfront.optimize.simulator.verdict import FIGURES, rows
from ampfront.topologies.catalog import M
from ampfront.topologies.errors import InputError


def _rows(design, text, failure=""):
    task = make_task(design, STEP, {f"{design}_step.sp": text})
    outcome = Outcome(task.key, {} if failure else {M.overshoot_pct: 4.0}, failure, "why" if failure else "")
    return task, rows(task, outcome, "simple_ota", {M.overshoot_pct: 5.0}, "square_law", (), 1.8)


def test_a_file_cut_anywhere_still_reads(tmp_path):
    with Ledger(tmp_path) as ledger:
        for i in range(4):
            ledger.append(_rows(f"d{i}", f"deck {i}")[1])
    whole = (tmp_path / NAME).read_bytes()
    for cut in range(len(whole.splitlines()[0]) + 1, len(whole), 7):
        (tmp_path / NAME).write_bytes(whole[:cut])
        kept = read(tmp_path / NAME)
        complete = whole[:cut].count(b"\n") - 1
        assert len(kept) == complete
        assert all(r["design"].startswith("d") for r in kept)
    (tmp_path / NAME).write_bytes(whole)
    table = pd.read_csv(tmp_path / NAME)
    assert list(table.columns) == list(COLUMNS) and len(table) == 4


def test_rerun_keeps_finished_tasks_and_redoes_failed_and_changed(tmp_path):
    done_task, done = _rows("a", "deck a")
    failed_task, failed = _rows("b", "deck b", failure="timeout")
    with Ledger(tmp_path) as ledger:
        ledger.append(done + failed)
    again = Ledger(tmp_path)
    again.close()
    assert set(again.done) == {done_task.key}
    assert _rows("a", "deck a, edited")[0].key not in again.done
    with open(tmp_path / NAME, newline="") as handle:
        assert [r["design"] for r in csv.DictReader(handle)] == ["a"]
    fresh = Ledger(tmp_path, fresh=True)
    fresh.close()
    assert fresh.done == {} and read(tmp_path / NAME) == []


def test_open_loop_task_needs_every_figure_to_count_as_done():
    task = make_task("c", OPEN_LOOP, {"c_tb.sp": "x"})
    values = {m: 1.0 for m in FIGURES[OPEN_LOOP]}
    full = rows(task, Outcome(task.key, values), "simple_ota", values, "square_law", (), 1.8)
    assert finished(full) and not finished(full[:-1])


def test_a_table_that_is_not_ours_is_refused(tmp_path):
    (tmp_path / NAME).write_text("a,b\n1,2\n")
    with pytest.raises(InputError):
        Ledger(tmp_path)
    assert (tmp_path / NAME).read_text() == "a,b\n1,2\n"
