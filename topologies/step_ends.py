"""A large output step's two edges, each settled at the operating point of the level it ends at.

The stated step moves the output between v_cm - V/2 and v_cm + V/2, up and down again, as the closed-loop
testbench drives it. At either end the loop holds the output there, so the amplifier's DC point is not the
quiescent one:

- the load (the load resistor and the feedback network, terminated at the common mode) draws
  g (v - v_cm) from the output, which the output devices carry on top of their bias (a two-stage's driver
  is left with its sink's current less the load's at the low end);
- in the non-inverting configuration the inputs follow the output at v_cm + beta (v - v_cm), so near the
  edge of the input common-mode range the pair's tail source leaves saturation and the first stage's gm
  falls with its current (ngspice: a 1.8 V SKY130 two-stage whose tail current drops from 6.3 to 2.2 uA
  with its inputs at 0.65 V settles its falling edge 2.4x slower than its rising one).

The same drawn geometry is solved at each end (topologies.geometry), and the end's closed loop gives the
linear settling of the edge that arrives there; the edge slews along the loaded path of
topologies.slewing. The step's settling time is the slower edge's, its steepest slope the smaller of the
two edges' (the testbench reads both edges the same way).
"""

from __future__ import annotations

from dataclasses import replace
from typing import Callable

import numpy as np

from .base import Build, Conditions, Topology
from .catalog import M, RULES
from .geometry import SameGeometry
from .kcl import node_imbalance
from .process.base import Technology
from .slewing import LoadedEdge
from .stability import edge_settling

EDGES = ((+1.0, M.peak_source_a), (-1.0, M.peak_sink_a))   # rising, falling: the device that drives each


def end_conditions(cond: Conditions, sign: float) -> Conditions:
    """The amplifier's surroundings with the loop holding the output at the step's upper (+1) or lower (-1)
    end; `cond` has the network folded into the load (Conditions.network_loaded)."""
    level = cond.v_cm + sign * 0.5 * cond.step_v
    g_load = 1.0 / cond.r_load if np.isfinite(cond.r_load) else 0.0
    inputs = cond.v_cm if cond.inverting else cond.v_cm + cond.beta * (level - cond.v_cm)
    # The end's own slew figures are not read (the edge's path takes the quiescent one): no step there.
    return replace(cond, v_cm=inputs, v_out=level, i_out=-(level - cond.v_cm) * g_load, step_v=0.0)


def step_edges(topology: Topology, x: dict[str, np.ndarray], tech: Technology, cond: Conditions, build: Build,
               widths: list[np.ndarray], quiescent, reported: dict[str, np.ndarray],
               circuits: Callable, r_noise: float, reach, rows: np.ndarray) -> dict[str, np.ndarray]:
    """step_settling_s and step_slope_v_per_s of the stated step (module docstring) for the designs at
    `rows` (NaN elsewhere). `widths`: what the quiescent build drew; `quiescent`: its differential circuit
    (for the output node's capacitance); `circuits(build, cond)` gives (differential, common mode, input
    coupling) of a build."""
    designs = len(build.supply_current)
    figures = {M.step_settling_s: np.full(designs, np.nan), M.step_slope_v_per_s: np.full(designs, np.nan)}
    if len(rows) == 0:
        return figures
    # Designs whose open loop does not work have no settling to speak of; solving only the rest keeps a
    # settling study's search from paying two more DC solves for designs it throws away anyway.
    again = SameGeometry(topology, widths, build).subset(rows)
    part = {k: np.broadcast_to(v, (designs,))[rows] for k, v in x.items()}
    out = quiescent.nodes.index("out")
    c_out = quiescent.C[rows, out, out]
    g_load = 1.0 / cond.r_load if np.isfinite(cond.r_load) else 0.0
    reach = None if reach is None else np.broadcast_to(reach, (designs,))[rows]
    settles, slopes = [], []
    for sign, peak in EDGES:
        end = end_conditions(cond, sign)
        built = again.build(part, tech, end)
        differential, common, coupling = circuits(built, end)
        path = LoadedEdge(reported[M.slew_v_per_s][rows], reported[peak][rows], c_out, g_load)
        settle, slope = edge_settling(differential, common, cond.beta, path, cond.step_v, cond.settle_band,
                                      reach, r_noise, cond.inverting, coupling)
        # An end whose DC point the topology's solver did not close (Kirchhoff at any node, the load's
        # current at the output included) has no small-signal circuit to trust.
        unsolved = ~(node_imbalance(built, {"out": end.i_out}) <= RULES["dc_solved"].value)
        settle, slope = np.where(unsolved, np.nan, settle), np.where(unsolved, np.nan, slope)
        settles.append(settle)
        slopes.append(slope)
    settle = np.maximum(*settles)
    # An end the output cannot reach (evaluate's reach: the linear swing, load line included), or, in the
    # non-inverting configuration, an input level outside the pair's common-mode range where the end's DC
    # point has no solution: the step does not settle there. Any other end the model cannot solve stays
    # NaN, the step's figure unknown.
    lost = np.isnan(settle) & _inputs_outside(cond, reported, rows)
    if reach is not None:
        lost |= ~np.asarray(reach, bool)
    figures[M.step_settling_s][rows] = np.where(lost, np.inf, settle)
    figures[M.step_slope_v_per_s][rows] = np.minimum(*slopes)
    return figures


def _inputs_outside(cond: Conditions, reported: dict[str, np.ndarray], rows: np.ndarray) -> np.ndarray:
    """Designs whose input common-mode range misses the levels the non-inverting inputs step between."""
    if cond.inverting:
        return np.zeros(len(rows), bool)
    swing = 0.5 * cond.beta * cond.step_v
    return ((reported[M.cm_low_v][rows] > cond.v_cm - swing) | (reported[M.cm_high_v][rows] < cond.v_cm + swing))
