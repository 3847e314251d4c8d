"""Kirchhoff's current law over a solved DC operating point: how far a Build is from self-consistent."""

from __future__ import annotations

import numpy as np

from .base import Build

EXTERNAL = {"vdd", "vss", "inp", "inn", "0"}


def node_imbalance(build: Build, injected: dict | None = None) -> np.ndarray:
    """Largest |sum of currents into an internal node| per design, relative to the supply current.

    Device currents are the technology's, at the terminal voltages the topology reports; a fixed-point
    iteration stopped short shows up here as charge piling up at a node. `injected`: currents pushed into
    nodes from outside the Build (a load's at the output), node name -> A.
    """
    into: dict[str, np.ndarray] = dict(injected or {})
    for d in build.devices:
        drain, _, source, _ = d.nodes
        sign = 1.0 if d.polarity == "n" else -1.0   # nMOS current runs drain -> source, pMOS source -> drain
        into[drain] = into.get(drain, 0.0) - sign * d.op.id
        into[source] = into.get(source, 0.0) + sign * d.op.id
    for e in build.elements:
        if e.kind == "I":
            into[e.a] = into.get(e.a, 0.0) - e.value
            into[e.b] = into.get(e.b, 0.0) + e.value
    worst = np.zeros_like(build.supply_current)
    for node, total in into.items():
        if node not in EXTERNAL:
            worst = np.maximum(worst, np.abs(total) / build.supply_current)
    return worst
