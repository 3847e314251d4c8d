"""Many scipy SLSQP runs, one per design, whose every model call is batched into one vectorized evaluation.

SLSQP (Kraft's sequential least-squares QP, in scipy) asks for one point at a time. Each run lives in a thread
of its own that only waits: when every run still going has posted its point, the points are evaluated in one
call of the model and every run gets its row back. A batch holds exactly one request per live run, whatever
the threads' timing, and the model's rows are independent, so the result is the same every time.
"""

from __future__ import annotations

import threading
from typing import Callable

import numpy as np


class Lockstep:
    def __init__(self, evaluate: Callable[[np.ndarray], tuple], runs: int):
        self._evaluate = evaluate
        self._live = runs
        self._asked: dict[int, np.ndarray] = {}
        self._answers: dict[int, tuple] = {}
        self._turn = threading.Condition()
        self.evaluations = 0
        self.failure: BaseException | None = None

    def ask(self, run: int, rows: np.ndarray) -> tuple:
        """Evaluates `rows` (r, n) for `run` together with every other run's request."""
        with self._turn:
            self._asked[run] = rows
            self._maybe_flush()
            while run not in self._answers:
                if self.failure is not None:
                    raise RuntimeError("a batched evaluation failed") from self.failure
                self._turn.wait()
            return self._answers.pop(run)

    def leave(self) -> None:
        with self._turn:
            self._live -= 1
            self._maybe_flush()

    def _maybe_flush(self) -> None:
        if not self._asked or len(self._asked) < self._live:
            return
        runs = sorted(self._asked)
        sizes = [len(self._asked[r]) for r in runs]
        try:
            outs = self._evaluate(np.concatenate([self._asked[r] for r in runs]))
        except BaseException as error:    # handed to every waiting run, so none waits forever
            self.failure = error
            self._turn.notify_all()
            return
        self.evaluations += sum(sizes)
        edges = np.cumsum([0] + sizes)
        for r, a, b in zip(runs, edges[:-1], edges[1:]):
            self._answers[r] = tuple(o[a:b] for o in outs)
        self._asked.clear()
        self._turn.notify_all()
