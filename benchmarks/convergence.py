"""Convergence benchmark of the search (README, Convergence). Not a test: it measures, and prints a table.

    python3 benchmarks/convergence.py reference               # long scipy DE runs, written to reference.json
    python3 benchmarks/convergence.py textbook --seeds 1,2,3,4,5 [--refine 40]
    python3 benchmarks/convergence.py demo studies/sensor_readout.toml --seeds 1,2,3,4,5 --long 10 [--refine 40]

`textbook`: the least power on the front at GBW >= 5, 10 and 20 MHz against the least power a long
differential evolution of scipy (a general-purpose reference library) finds on the same model and
constraints with GBW held at each level. `demo`: per topology, hypervolume on the study's fixed window at
the study's budget against a run `--long` times as many generations, the spread of the least power across
seeds, and the search's wall time. `--engine FILE` measures another engine module's `run_search` (same
signature) on the same problems; hypervolume is always taken here, on the window.
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import sys
import time
from pathlib import Path

import numpy as np
from scipy.optimize import differential_evolution

from ampfront import topologies
from ampfront.optimize.search.engine import run_search
from ampfront.optimize.search.hypervolume import window_for
from ampfront.optimize.search.problem import DesignProblem
from ampfront.optimize.spec.study import load_study
from ampfront.topologies.catalog import OBJECTIVES
from ampfront.topologies.process.techfile import load

HERE = Path(__file__).resolve().parent
TEXTBOOK = HERE / "textbook_two_stage.toml"
REFERENCE = HERE / "reference.json"
LEVELS = (5e6, 10e6, 20e6)
TOPOLOGY = "two_stage_miller"


def study_at(path: Path, min_gbw: float | None = None):
    text = path.read_text()
    if min_gbw is not None:
        text = text.replace('min_gbw = "5 MHz"', f'min_gbw = "{min_gbw / 1e6:g} MHz"')
    return load_study(path, topologies.available(), text=text)


def problem_for(study, name: str) -> DesignProblem:
    return DesignProblem(topologies.available()[name], load(study.technology, study.corner), study)


def values(F: np.ndarray, objectives, name: str) -> np.ndarray:
    """An objective's column back in SI (the search keeps log10 and negated maxima)."""
    k = list(objectives).index(name)
    objective = OBJECTIVES[name]
    v = -F[:, k] if objective.sense == "max" else F[:, k]
    return 10.0 ** v if objective.log else v


def least_power(F: np.ndarray, objectives, level: float) -> float:
    power, gbw = values(F, objectives, "power"), values(F, objectives, "gbw")
    return float(power[gbw >= level].min()) if (gbw >= level).any() else float("nan")


def reference(iterations: int, seed: int) -> dict:
    """Least power at each GBW level: scipy's differential evolution, power alone, Deb-style penalty
    (a design that misses any constraint scores 10 + its total violation, above every feasible log power)."""
    out = {}
    for level in LEVELS:
        problem = problem_for(study_at(TEXTBOOK, level), TOPOLOGY)

        def score(X):
            result = problem.evaluate(X.T, return_as_dictionary=True)
            cv = np.maximum(result["G"], 0).sum(axis=1)
            return np.where(cv <= 0, result["F"][:, 0], 10 + cv)

        start = time.perf_counter()
        found = differential_evolution(score, list(zip(problem.xl, problem.xu)), popsize=10, maxiter=iterations,
                                       tol=0, atol=0, seed=seed, vectorized=True, updating="deferred",
                                       polish=False, init="sobol", mutation=(0.5, 1.0), recombination=0.9)
        # With vectorized=True scipy counts one evaluation per generation (a population each).
        out[f"{level:g}"] = {"power_w": float(10.0 ** found.fun), "generations": int(found.nfev),
                             "wall_s": round(time.perf_counter() - start, 1)}
        print(f"reference at GBW >= {level / 1e6:g} MHz: {1e3 * 10.0 ** found.fun:.4f} mW", flush=True)
    return {"method": f"scipy differential_evolution, popsize 10, {iterations} generations, seed {seed}",
            "levels": out}


def engine_from(path: Path | None, refine: int = 0):
    if path is None:
        return lambda study, problem, long, seed, window: run_search(
            problem, study.population, study.generations and study.generations * long, seed, refine_steps=refine,
            budget=study.budget and study.budget * long, hypervolume=window.hypervolume,
            front_designs=study.front_designs, stall=long == 1, contributions=window.thinning)
    spec = importlib.util.spec_from_file_location("engine_under_test", path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module      # dataclasses look their module up while the class is made
    spec.loader.exec_module(module)
    return lambda study, problem, long, seed, window: module.run_search(
        problem, study.population, study.generations * long, seed)


def textbook(seeds, long: int, search) -> list[str]:
    ref = json.loads(REFERENCE.read_text())["levels"]
    study = study_at(TEXTBOOK)
    problem = problem_for(study, TOPOLOGY)
    window = window_for(study)
    lines = ["seed | " + " | ".join(f"P at >= {lv / 1e6:g} MHz (vs ref)" for lv in LEVELS) + " | HV | s"]
    for seed in seeds:
        start = time.process_time()
        result = search(study, problem, long, seed, window)
        wall = time.process_time() - start
        cells = []
        for level in LEVELS:
            p, r = least_power(result.F, study.objectives, level), ref[f"{level:g}"]["power_w"]
            cells.append(f"{1e3 * p:.4f} mW ({100 * (p / r - 1):+.1f} %)")
        lines.append(f"{seed} | " + " | ".join(cells) + f" | {window.hypervolume(result.F):.4f} | {wall:.1f}")
        print(lines[-1], flush=True)
    return lines


def demo(path: Path, seeds, long: int, search) -> list[str]:
    study = load_study(path, topologies.available())
    window = window_for(study)
    lines = ["topology | HV default (seeds) | HV x%d | least power over seeds | spread | s per run" % long]
    for name in study.topologies:
        problem = problem_for(study, name)
        hvs, powers, walls = [], [], []
        for seed in seeds:
            start = time.process_time()
            result = search(study, problem, 1, seed, window)
            walls.append(time.process_time() - start)
            hvs.append(window.hypervolume(result.F) if result.feasible else float("nan"))
            powers.append(values(result.F, study.objectives, "power").min() if result.feasible else float("nan"))
        hv_long = float("nan")
        if long > 1 and np.isfinite(hvs).any():     # a topology that meets nothing has no front to compare
            longer = search(study, problem, long, seeds[0], window)
            hv_long = window.hypervolume(longer.F) if longer.feasible else float("nan")
        p = np.array(powers)
        lines.append(f"{name} | {min(hvs):.4f}-{max(hvs):.4f} | {hv_long:.4f} | "
                     f"{1e6 * np.nanmin(p):.2f}-{1e6 * np.nanmax(p):.2f} uW | {np.nanmax(p) / np.nanmin(p):.3f}x | "
                     f"{np.mean(walls):.1f}")
        print(lines[-1], flush=True)
    return lines


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("what", choices=("reference", "textbook", "demo"))
    parser.add_argument("study", nargs="?", type=Path)
    parser.add_argument("--seeds", default="1,2,3,4,5")
    parser.add_argument("--long", type=int, default=1, help="generations multiplier (demo: of the long run)")
    parser.add_argument("--iterations", type=int, default=600, help="reference: DE generations")
    parser.add_argument("--engine", type=Path, help="an engine module file to measure instead of ours")
    parser.add_argument("--refine", type=int, default=0, help="refinement steps after the genetic search")
    args = parser.parse_args(argv)
    seeds = [int(s) for s in args.seeds.split(",")]
    if args.what == "reference":
        REFERENCE.write_text(json.dumps(reference(args.iterations, 1), indent=2) + "\n")
    elif args.what == "textbook":
        textbook(seeds, args.long, engine_from(args.engine, args.refine))
    else:
        if args.study is None:
            sys.exit("convergence.py demo: name a study file")
        demo(args.study, seeds, args.long, engine_from(args.engine, args.refine))


if __name__ == "__main__":
    main()
