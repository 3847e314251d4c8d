"""Throughput of the models and overhead of the search, measured on the machine it runs on."""

from __future__ import annotations

import os
import platform
import time
from dataclasses import replace

import numpy as np

from ampfront import topologies
from ampfront.topologies import kernels

from ampfront.optimize.search.problem import DesignProblem
from ampfront.optimize.search.converge import converge
from ampfront.optimize.search.engine import run_search
from ampfront.optimize.spec.study import Study
from ampfront.topologies.process.techfile import load, shipped


def _machine() -> str:
    cpu = platform.processor() or platform.machine()
    try:
        with open("/proc/cpuinfo") as handle:
            cpu = next(line.split(":", 1)[1].strip() for line in handle if line.startswith("model name"))
    except (OSError, StopIteration):
        pass
    try:
        import numba
        compiled = f"numba {numba.__version__}" if kernels.enabled() else "compiled kernels off"
    except ImportError:
        compiled = "no numba (numpy reference path)"
    return f"{cpu}, {os.cpu_count()} cores, Python {platform.python_version()}, numpy {np.__version__}, {compiled}"


def _bench_study(tech_path) -> Study:
    from ampfront.topologies.base import Conditions

    from ampfront.optimize.spec.study import _constraints

    spec = {"min_gain": 60.0, "min_gbw": 1e6, "min_phase_margin": 45.0}
    return Study(path=tech_path, title="bench", spec=spec, conditions=Conditions(1.8, 2e-12, np.inf, 0.9),
                 cm_range=(0.9, 0.9), constraints=_constraints(spec, (0.9, 0.9)), objectives=("power", "gbw"),
                 topologies=("two_stage_miller",), technology=tech_path, corner=None, population=100, generations=20,
                 seed=1, digest="")


def run_bench(designs: int, repeats: int) -> list[str]:
    lines = [f"machine: {_machine()}"]
    for tech_name in ("generic180", "sky130"):
        lines += _bench_technology(shipped()[tech_name], designs, repeats)
        lines.append(_bench_settling(shipped()[tech_name], designs, repeats))
    return lines


def _bench_settling(tech_path, designs: int, repeats: int) -> str:
    """The two-stage when a study maps settling: every design's stated step solved at both of its ends
    (topologies.step_ends), a gain-2 non-inverting loop through 20 kOhm stepping 0.6 V to 0.1 %."""
    tech = load(tech_path)
    base = _bench_study(tech_path)
    cond = replace(base.conditions, beta=0.5, r_network=20e3, step_v=0.6, settle_band=1e-3, settling=True)
    problem = DesignProblem(topologies.available()["two_stage_miller"], tech, replace(base, conditions=cond))
    X = np.random.default_rng(0).uniform(problem.xl, problem.xu, (designs, problem.n_var))
    problem.evaluate(X)
    times = [_timed_both(lambda: problem.evaluate(X)) for _ in range(repeats)]
    best, cpu = min(wall for wall, _ in times), min(used for _, used in times)
    return (f"two_stage_miller on {tech.name} with a settling objective: {designs / best:,.0f} designs/s "
            f"({designs / cpu:,.0f} by CPU time; each stable design's step solved at both ends)")


def _bench_technology(tech_path, designs: int, repeats: int) -> list[str]:
    tech = load(tech_path)
    study = _bench_study(tech_path)
    lines = []
    for name, topology in topologies.available().items():
        problem = DesignProblem(topology, tech, study)
        X = np.random.default_rng(0).uniform(problem.xl, problem.xu, (designs, problem.n_var))
        problem.evaluate(X)      # compiled kernels load on first use
        times = [_timed_both(lambda: problem.evaluate(X)) for _ in range(repeats)]
        best = min(wall for wall, _ in times)
        cpu = min(used for _, used in times)
        # CPU time of this process beside the wall clock: on a machine other work shares, the wall clock
        # counts the time the scheduler gave to others.
        lines.append(f"{name} on {tech.name}: {designs / best:,.0f} designs/s (one process, {designs} per call; "
                     f"{designs / cpu:,.0f} by CPU time)")
        population, generations = 100, 20
        wall = _timed(lambda: run_search(problem, population, generations, 1))
        model = generations * population / (designs / best)
        lines.append(f"{name} on {tech.name}: {1e3 * (wall - model) / generations:.1f} ms per generation beyond bulk "
                     f"model time (NSGA-II and per-call model overhead, population {population})")
        # The converging search (the default) at its default population, with no polish of the ends.
        population = 200
        found = []
        wall = _timed(lambda: found.append(converge(problem, population, population * (generations + 1), 1,
                                                    stall=False)))
        model = generations * population / (designs / best)
        lines.append(f"{name} on {tech.name}: {1e3 * (wall - model) / generations:.1f} ms per generation beyond bulk "
                     f"model time (converging search and per-call model overhead, population {population})")
        lines.append(_bench_front(problem, found[0], designs, repeats, f"{name} on {tech.name}"))
    return lines


def _bench_front(problem, found, designs: int, repeats: int, label: str) -> str:
    """Throughput on the designs a search spends its time on: most random designs fail the buildability
    screen before the loop analysis, every design near a front gets all of it (README, Speed)."""
    if not found.feasible or not len(found.X):
        return f"{label}: no front after {found.generations} generations to time its designs on"
    X = found.X[np.arange(designs) % len(found.X)]
    problem.evaluate(X[:100])
    times = [_timed_both(lambda: problem.evaluate(X)) for _ in range(repeats)]
    best, cpu = min(wall for wall, _ in times), min(used for _, used in times)
    return (f"{label}: {designs / best:,.0f} designs/s on its own front's designs ({len(found.X)} from a "
            f"{found.generations}-generation search, repeated to {designs} per call; {designs / cpu:,.0f} by CPU time)")


def _timed_both(work) -> tuple[float, float]:
    """(wall clock, process CPU time) of `work`, s."""
    wall, cpu = time.perf_counter(), time.process_time()
    work()
    return time.perf_counter() - wall, time.process_time() - cpu


def _timed(work) -> float:
    start = time.perf_counter()
    work()
    return time.perf_counter() - start
