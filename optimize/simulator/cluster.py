"""Where the testbenches run: a Dask LocalCluster on this machine (one single-threaded worker process per
core: ngspice is single-threaded and a worker process dying takes only its own task down), or a Dask
scheduler already running elsewhere.

Dask moves a dead worker's tasks to the others by itself; each task is one testbench, so losing a worker
costs at most the testbenches it was running. A task whose workers keep dying is given up on by the
scheduler (its `allowed-failures`) and reported as lost, never waited on forever.
"""

from __future__ import annotations

import contextlib
import logging
import os
from collections.abc import Iterable, Iterator

from ampfront.optimize.simulator.tasks import LOOP, OPEN_LOOP, STEP, SWING, Outcome, Task, run_task

WORKER_LOST = "worker lost"
# For a task that raised on its worker (it should not: run_task turns every simulation failure into an
# Outcome), not for killed workers, which the scheduler's allowed-failures governs.
RETRIES = 2
# The open loop first, then the swing sweep, then the slower step: a check cut short has the cheapest,
# most judged figures of every design rather than all figures of a few.
PRIORITY = {OPEN_LOOP: 2, SWING: 1, STEP: 0, LOOP: -1}
# How many times a task may be on a worker that died before the scheduler gives up on it.
ALLOWED_FAILURES = 3


class ClusterError(Exception):
    """The scheduler could not be reached or the local cluster could not start."""


def cores() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


@contextlib.contextmanager
def client(scheduler: str | None = None, workers: int | None = None, connect_timeout: float = 30.0) -> Iterator:
    import dask
    from distributed import Client, LocalCluster

    # A lost worker is reported per task in check.csv; Dask's own warnings about it would bury the result.
    quiet = logging.getLogger("distributed")
    level = quiet.level
    quiet.setLevel(logging.ERROR)
    try:
        with dask.config.set({"distributed.scheduler.allowed-failures": ALLOWED_FAILURES}):
            if scheduler:
                try:
                    made = Client(scheduler, timeout=connect_timeout)
                except (OSError, TimeoutError) as error:
                    raise ClusterError(f"--scheduler {scheduler}: no Dask scheduler answered ({error})") from None
                with made:
                    yield made
            else:
                try:
                    cluster = LocalCluster(n_workers=workers or cores(), threads_per_worker=1, processes=True,
                                           dashboard_address=None, silence_logs=logging.ERROR)
                except (OSError, TimeoutError) as error:
                    raise ClusterError(f"the local Dask cluster did not start ({error})") from None
                with cluster, Client(cluster) as made:
                    yield made
    finally:
        quiet.setLevel(level)


def run(dask_client, tasks: Iterable[Task]) -> Iterator[tuple[Task, Outcome]]:
    """Every task's outcome exactly once, in the order they finish."""
    from distributed import as_completed
    from distributed.scheduler import KilledWorker

    by_key = {}
    futures = []
    for task in tasks:
        future = dask_client.submit(run_task, task, key=f"ampfront-{task.key}", pure=False, retries=RETRIES,
                                     priority=PRIORITY.get(task.testbench, 0))
        by_key[future.key] = task
        futures.append(future)
    try:
        for future in as_completed(futures):
            task = by_key[future.key]
            try:
                outcome = future.result()
            except KilledWorker as error:
                outcome = Outcome(task.key, {}, WORKER_LOST, f"every worker that ran it died ({error})")
            except Exception as error:   # a bug of the task itself, after its retries
                outcome = Outcome(task.key, {}, "failed", f"{type(error).__name__}: {error}")
            future.release()
            yield task, outcome
    finally:
        for future in futures:   # on Ctrl-C or a caller that stopped reading: nothing left running for us
            future.cancel()
