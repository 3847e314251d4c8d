"""Searching several topologies at once, one process each, with their progress relayed to the parent."""

from __future__ import annotations

import multiprocessing
import os
import queue as queue_module
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from typing import Callable


def _worker(study, name: str, progress_queue):
    # Imported here: the worker is a fresh (spawned) interpreter.
    from ampfront.optimize.run import NoFeasibleDesign, search_topology
    from ampfront.topologies.process.techfile import load

    tech = load(study.technology, study.corner)   # loaded in the worker: tables are not pickled across
    try:
        return search_topology(study, tech, name, lambda g, f, h: progress_queue.put((name, g, f, h)))
    except NoFeasibleDesign as missed:
        return str(missed)


def search_all(study, progress_factory: Callable | None, workers: int | None = None) -> dict[str, object]:
    """name -> TopologyFront, or the infeasibility message; one process per topology, up to `workers`."""
    workers = workers or min(len(study.topologies), os.cpu_count() or 1)
    progress = {n: progress_factory(n, study.generations) for n in study.topologies} if progress_factory else {}
    context = multiprocessing.get_context("spawn")
    with context.Manager() as manager, ProcessPoolExecutor(workers, mp_context=context) as pool:
        relay = manager.Queue()
        pending = {pool.submit(_worker, study, name, relay): name for name in study.topologies}
        results = {}
        while pending:
            done, _ = wait(pending, timeout=0.2, return_when=FIRST_COMPLETED)
            _drain(relay, progress)
            for future in done:
                results[pending.pop(future)] = future.result()
        _drain(relay, progress)
    return results


def _drain(relay, progress) -> None:
    while True:
        try:
            name, generation, feasible, hv = relay.get_nowait()
        except queue_module.Empty:
            return
        if name in progress:
            progress[name](generation, feasible, hv)
