"""Searching a study's topologies side by side, one spawned process each, progress relayed to the parent.

Ctrl-C reaches the whole process group: workers ignore it and the parent alone decides, terminating every
worker within a second or two before the KeyboardInterrupt goes on up, so no worker carries on with the next topology. A
worker that dies (killed, out of memory) is reported as WorkerLost, never as a traceback; a parent that dies
takes its workers with it.
"""

from __future__ import annotations

import multiprocessing
import os
import queue as queue_module
import signal
import sys
import threading
import time
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from typing import Callable

from ampfront.optimize.search.outcome import Outcome
from ampfront.optimize.search.single import search_topology

_relay = None   # the worker's end of the progress queue, set once per worker process


class WorkerLost(Exception):
    """A search process died without a result."""


def _init_worker(relay, parent: int) -> None:
    """`parent`: the run's process id, passed in rather than read here: a worker still starting up (imports
    take seconds on a loaded machine) when its run is killed would otherwise take init's new parent for it."""
    global _relay
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _relay = relay
    _die_with_parent()
    if os.getppid() != parent:   # gone before the kernel could be told
        os._exit(1)
    threading.Thread(target=_exit_with_parent, args=(parent,), daemon=True).start()


def _die_with_parent() -> None:
    """On Linux the kernel itself kills the worker when its parent dies (PR_SET_PDEATHSIG): a worker inside a
    long compiled call holds the GIL, so the watchdog thread alone can take many seconds to notice."""
    if not sys.platform.startswith("linux"):
        return
    try:
        import ctypes

        ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGKILL)   # 1: PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass


def _exit_with_parent(parent: int) -> None:
    """A parent killed outright (SIGKILL, out of memory) cannot stop its workers; they notice it is gone
    (they are handed to another parent) and stop, instead of searching on for nobody."""
    while os.getppid() == parent:
        time.sleep(0.25)
    os._exit(1)


def _worker(study, name: str) -> Outcome:
    # Imported here: the worker is a fresh (spawned) interpreter.
    from ampfront.topologies.process.techfile import load

    tech = load(study.technology, study.corner)   # loaded in the worker: tables are not pickled across
    return search_topology(study, tech, name, lambda g, f, h, done=False: _relay.put((name, g, f, h, done)))


def search_all(study, progress_factory: Callable | None, workers: int | None = None) -> dict[str, Outcome]:
    """name -> Outcome; one process per topology, up to `workers` at a time."""
    workers = workers or min(len(study.topologies), os.cpu_count() or 1)
    progress = {n: progress_factory(n, study.most_generations) for n in study.topologies} if progress_factory else {}
    context = multiprocessing.get_context("spawn")
    relay = context.Queue()
    pool = ProcessPoolExecutor(workers, mp_context=context, initializer=_init_worker, initargs=(relay, os.getpid()))
    results: dict[str, Outcome] = {}
    try:
        pending = {pool.submit(_worker, study, name): name for name in study.topologies}
        while pending:
            done, _ = wait(pending, timeout=0.2, return_when=FIRST_COMPLETED)
            _drain(relay, progress)
            for future in done:
                name = pending.pop(future)
                try:
                    results[name] = future.result()
                except BrokenProcessPool:
                    raise WorkerLost(f"the search process for {name} stopped without a result "
                                     "(killed, or out of memory)") from None
        _drain(relay, progress)
    except BaseException:
        _stop(pool)
        raise
    finally:
        relay.close()
        relay.join_thread()
    pool.shutdown(wait=True)
    return {name: results[name] for name in study.topologies}   # the study's order, not the finishing order


def _stop(pool: ProcessPoolExecutor) -> None:
    """End every worker now: cancel what has not started and terminate what has."""
    processes = list((pool._processes or {}).values())   # the executor offers no public handle on them
    pool.shutdown(wait=False, cancel_futures=True)
    for process in processes:
        if process.is_alive():
            process.terminate()
    for process in processes:
        process.join(timeout=3)
        if process.is_alive():
            process.kill()
            process.join(timeout=2)


def _drain(relay, progress) -> None:
    while True:
        try:
            name, generation, feasible, hv, done = relay.get_nowait()
        except (queue_module.Empty, OSError, ValueError):
            return
        if name in progress:
            progress[name](generation, feasible, hv, done=done)
