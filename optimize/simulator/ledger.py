"""check.csv: every judged figure of every verified design, one row each, written as results arrive.

Each task's rows go out in one write and are flushed to disk, so a check killed at any moment leaves a
valid CSV (a torn last line, the only damage a kill can do, is dropped when the file is next read). A
rerun keeps the rows of tasks that finished (agreeing or not) and runs the rest again: tasks that failed,
and any whose netlist text changed (a task is its design, testbench, corner and netlist hash).
"""

from __future__ import annotations

import csv
import io
import math
import os
import tempfile
from collections import defaultdict
from pathlib import Path

from ampfront.optimize.simulator.verdict import AGREES, DISAGREES, FIGURES, OPTIONAL
from ampfront.topologies.errors import InputError

NAME = "check.csv"
COLUMNS = ("design", "corner", "metric", "model", "simulated", "error", "bound", "status", "topology",
           "testbench", "netlist_sha256", "spec", "spec_bound", "model_margin", "simulated_margin",
           "meets_spec", "reason")
NUMBERS = ("model", "simulated", "error", "bound", "spec_bound", "model_margin", "simulated_margin")


def task_key(row: dict) -> str:
    return f"{row['design']}:{row['testbench']}:{row['corner']}:{row['netlist_sha256']}"


def _text(value) -> str:
    if isinstance(value, float):
        return "" if math.isnan(value) else repr(value)
    return str(value)


def _lines(rows: list[dict]) -> str:
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    for row in rows:
        writer.writerow([_text(row.get(c, "")) for c in COLUMNS])
    return buffer.getvalue()


def read(path: Path) -> list[dict]:
    """The finished rows of an earlier check; a file that is not one is refused, never overwritten."""
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        return []
    except (OSError, UnicodeDecodeError):
        raise InputError(str(path), "(file)", "the table 'ampfront check' writes (or --fresh to start anew)")
    if not text.endswith("\n"):
        text = text[:text.rfind("\n") + 1]   # a write torn by a kill
    reader = csv.reader(io.StringIO(text))
    header = next(reader, None)
    if header is None:
        return []
    if tuple(header) != COLUMNS:
        raise InputError(str(path), "(header)", "the table 'ampfront check' writes (or --fresh to start anew)")
    rows = []
    for fields in reader:
        if len(fields) != len(COLUMNS):
            raise InputError(str(path), f"line {reader.line_num}", f"{len(COLUMNS)} fields (or --fresh)")
        row = dict(zip(COLUMNS, fields))
        try:
            row.update({c: float(row[c]) if row[c] else math.nan for c in NUMBERS})
        except ValueError:
            raise InputError(str(path), f"line {reader.line_num}", "numbers in the number columns (or --fresh)")
        rows.append(row)
    return rows


def finished(rows: list[dict]) -> dict[str, list[dict]]:
    """Rows by task, for tasks that ran to a verdict on every figure their testbench judges."""
    by_task: dict[str, list[dict]] = defaultdict(list)
    for row in rows:
        by_task[task_key(row)].append(row)
    done = {}
    for key, group in by_task.items():
        figures = FIGURES.get(group[0]["testbench"], ())
        metrics = sorted(r["metric"] for r in group)
        if (metrics in (sorted(figures), sorted(set(figures) - OPTIONAL))
                and all(r["status"] in (AGREES, DISAGREES) for r in group)):
            done[key] = group
    return done


class Ledger:
    """check.csv opened for a run: earlier finished tasks kept, everything else to be appended."""

    def __init__(self, folder: Path, fresh: bool = False):
        self.path = folder / NAME
        self.done = {} if fresh else finished(read(self.path))
        kept = [row for group in self.done.values() for row in group]
        # Rewritten whole, then swapped in: a kill during the rewrite leaves the old file.
        handle, temporary = tempfile.mkstemp(prefix=f".{NAME}.", dir=folder)
        try:
            with os.fdopen(handle, "w", encoding="utf-8", newline="") as out:
                out.write(",".join(COLUMNS) + "\n" + _lines(kept))
            os.replace(temporary, self.path)
        except BaseException:
            Path(temporary).unlink(missing_ok=True)
            raise
        self._file = open(self.path, "a", encoding="utf-8", newline="")

    def append(self, rows: list[dict]) -> None:
        self._file.write(_lines(rows))
        self._file.flush()
        os.fsync(self._file.fileno())

    def close(self) -> None:
        self._file.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
