"""The small-signal solver and its margin search, checked against an independent computation.

Reference: scipy. For sampled designs of every topology, the same nodal matrices G and C are handed to
scipy.linalg.eigvals (generalized eigenproblem -> poles) and to scipy.linalg.solve on a dense grid, the
unity-gain frequency is found with scipy.optimize.brentq and the phase by dense unwrapping. None of that
shares code with ampfront's batched solve, coarse grid and regula-falsi refinement. The input-referred
white noise is rebuilt the same way: one scipy solve per noise source (a unit current between a device's
drain and source), instead of the solver's single adjoint solve.
"""

import numpy as np
import pytest
import scipy.linalg
import scipy.optimize

from ampfront import topologies
from ampfront.topologies.evaluate import evaluate, small_signal
from ampfront.topologies.noise import BOLTZMANN, GAMMA_THERMAL
from ampfront.topologies.smallsignal import loop_metrics

from .helpers import DEMO_CONDITIONS, generic180, random_designs


def _scipy_response(G, C, n, out, f):
    s = 2j * np.pi * f
    return scipy.linalg.solve(G[:n, :n] + s * C[:n, :n], -(G[:n, n] + s * C[:n, n]))[out]


NAMES = sorted(topologies.available())


@pytest.mark.parametrize("name", NAMES)
def test_gbw_and_phase_margin_agree_with_scipy(name):
    tech = generic180()
    topology = topologies.available()[name]
    metrics_x = random_designs(topology, tech, 400, seed=3)
    build = topology.build(metrics_x, tech, DEMO_CONDITIONS)
    circuit = small_signal(build, DEMO_CONDITIONS)
    ours = loop_metrics(circuit, "out")
    n, out = len(circuit.nodes), circuit.nodes.index("out")
    good = np.where((ours.phase_margin > 20) & (ours.gbw > 1e3))[0][:12]
    assert len(good) >= 8
    for k in good:
        G, C = circuit.G[k], circuit.C[k]
        a0 = _scipy_response(G, C, n, out, 0.0).real
        mag = lambda f: np.log(abs(_scipy_response(G, C, n, out, f)))  # noqa: E731
        dense = np.logspace(-1, 12, 2000)
        h = np.array([_scipy_response(G, C, n, out, f) for f in dense]) * np.sign(a0)
        first = np.argmax(np.abs(h) < 1)
        fu = scipy.optimize.brentq(mag, dense[first - 1], dense[first], rtol=1e-12)
        phase = np.unwrap(np.angle(h))
        pm = 180 + np.degrees(np.interp(np.log(fu), np.log(dense), phase))
        assert ours.gbw[k] == pytest.approx(fu, rel=1e-3)
        assert ours.phase_margin[k] == pytest.approx(pm, abs=0.2)
        assert ours.gain[k] == pytest.approx(a0, rel=1e-9)


@pytest.mark.parametrize("name", NAMES)
def test_poles_from_scipy_reproduce_the_response(name):
    """H(s) rebuilt from scipy's poles and zeros matches the solver's response at random frequencies."""
    tech = generic180()
    topology = topologies.available()[name]
    build = topology.build(random_designs(topology, tech, 60, seed=11), tech, DEMO_CONDITIONS)
    circuit = small_signal(build, DEMO_CONDITIONS)
    # Designs whose devices all conduct (random sizings can leave a device off its model's range).
    with np.errstate(invalid="ignore"):
        finite = np.flatnonzero(np.isfinite(circuit.G).all(axis=(1, 2)) & np.isfinite(circuit.C).all(axis=(1, 2))
                                & (np.abs(np.linalg.det(circuit.G[:, :-1, :-1])) > 0))
    assert len(finite) >= 5
    circuit = circuit.subset(finite[:5])
    n, out = len(circuit.nodes), circuit.nodes.index("out")
    freqs = np.logspace(2, 9, 9)
    ours = circuit.response("out", freqs)
    for k in range(5):
        G, C = circuit.G[k, :n, :n], circuit.C[k, :n, :n]
        poles = scipy.linalg.eigvals(G, -C)
        poles = poles[np.isfinite(poles)]
        for j, f in enumerate(freqs):
            h = _scipy_response(circuit.G[k], circuit.C[k], n, out, f)
            assert ours[k, j] == pytest.approx(h, rel=1e-9)
        # Every pole is a frequency where the admittance matrix is singular.
        for p in poles[np.abs(poles) < 1e13]:
            sv = scipy.linalg.svdvals(G + p * C)
            assert sv[-1] / sv[0] < 1e-6


@pytest.mark.parametrize("name", NAMES)
def test_white_noise_agrees_with_one_solve_per_source(name):
    tech = generic180()
    topology = topologies.available()[name]
    x = random_designs(topology, tech, 1200 if name.endswith("_ab") else 300, seed=8)
    metrics, build = evaluate(topology, x, tech, DEMO_CONDITIONS)
    circuit = small_signal(build, DEMO_CONDITIONS)
    n, index = len(circuit.nodes), {node: i for i, node in enumerate(circuit.nodes)}
    good = np.flatnonzero((metrics["sat_min_v"] > 0.05) & (metrics["gain_db"] > 20))[:6]
    assert len(good) >= 3
    kt4 = 4 * BOLTZMANN * tech.temperature
    for k in good:
        G = circuit.G[k, :n, :n]
        out = index["out"]

        def to_out(a, b):
            rhs = np.zeros(n)
            for node, sign in ((a, 1.0), (b, -1.0)):
                if node in index:
                    rhs[index[node]] += sign
            return scipy.linalg.solve(G, rhs)[out]

        power = sum(kt4 * GAMMA_THERMAL * d.op.gm[k] * to_out(d.nodes[0], d.nodes[2]) ** 2 for d in build.devices)
        power += sum(kt4 / np.broadcast_to(e.value, (len(x["i_tail"]),))[k] * to_out(e.a, e.b) ** 2
                     for e in build.elements if e.kind == "R")
        referred = np.sqrt(power) / abs(10 ** (metrics["gain_db"][k] / 20))
        assert metrics["noise_thermal_v_rthz"][k] == pytest.approx(referred, rel=1e-6)
