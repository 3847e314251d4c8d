"""Shared test helpers: random populations inside a topology's declared bounds."""

import numpy as np

from ampfront.topologies.process.techfile import load, shipped
from ampfront.topologies.base import Conditions

DEMO_CONDITIONS = Conditions(vdd=1.8, c_load=2e-12, r_load=np.inf, v_cm=0.9)


def generic180():
    return load(shipped()["generic180"])


def random_designs(topology, tech, n: int, seed: int = 0) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = {}
    for v in topology.variables(tech):
        u = rng.random(n)
        x[v.name] = np.exp(np.log(v.low) + u * np.log(v.high / v.low)) if v.log else v.low + u * (v.high - v.low)
    return x
