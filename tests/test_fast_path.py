"""The compiled kernels against the numpy/LAPACK reference path they stand in for.

Outside reference: the numpy code kept beside each kernel (topologies/smallsignal.py `_crossings` on
`Modal.response`, topologies/process/tables.py interpolation and bisection), run through
`kernels.reference_path()`. Both paths share the LAPACK eigendecomposition and solves, so they may differ
only by rounding: 1e-9 relative on every reported metric, and the same NaN/inf pattern.
"""

import numpy as np
import pytest

from ampfront import topologies
from ampfront.topologies import kernels
from ampfront.topologies.evaluate import evaluate
from ampfront.topologies.process.techfile import load, shipped
from ampfront.topologies.smallsignal import Modal, _crossings, _crossings_compiled

from .helpers import DEMO_CONDITIONS, random_designs

pytestmark = pytest.mark.skipif(not kernels.enabled(), reason="numba not importable: only the reference runs")

METRICS = ("gain_db", "gbw_hz", "phase_margin_deg", "gain_margin_db", "rhp_poles", "power_w", "noise_rms_v",
           "noise_thermal_v_rthz", "noise_flicker_1hz_v_rthz", "noise_corner_hz", "cmrr_db", "psrr_db",
           "output_resistance_ohm", "slew_v_per_us", "swing_v", "sat_min_v", "dc_residual",
           # The loop closed at beta (topologies/stability.py, compiled in stability_kernels.py).
           "cl_rhp_poles", "cl_stable", "cl_pole_hz", "cl_damping", "loop_crossover_hz", "loop_phase_margin_deg",
           "loop_phase_min_deg", "loop_gain_margin_db", "conditionally_stable", "gain_error")


def _same(fast, ref, rtol):
    finite = np.isfinite(ref)
    np.testing.assert_array_equal(fast[~finite], ref[~finite])      # NaN and signed inf where the reference has them
    np.testing.assert_allclose(fast[finite], ref[finite], rtol=rtol, atol=0)


@pytest.mark.parametrize("tech_name", ["generic180", "sky130"])
@pytest.mark.parametrize("name", sorted(topologies.available()))
def test_metrics_match_the_reference(name, tech_name):
    tech = load(shipped()[tech_name])
    topology = topologies.available()[name]
    # Few random class-AB designs work (two stages must both bias): a larger sample finds enough of them.
    x = random_designs(topology, tech, 1600 if name.endswith("_ab") else 400, seed=11)
    fast, _ = evaluate(topology, x, tech, DEMO_CONDITIONS)
    with kernels.reference_path():
        ref, _ = evaluate(topology, x, tech, DEMO_CONDITIONS)
    # The comparison must cover designs with a real loop, not only NaN rows.
    assert np.isfinite(ref["phase_margin_deg"]).sum() >= 20
    for key in METRICS:
        if key in ref:
            _same(fast[key], ref[key], 1e-9)


@pytest.mark.parametrize("inverting", [False, True])
@pytest.mark.parametrize("name", ["two_stage_miller", "folded_cascode_ab"])
def test_applied_loop_matches_the_reference(name, inverting):
    """A feedback network at beta 0.1 and the inverting drive (which changes the closed loop's input
    column): every compiled kernel the applied loop runs against the numpy path. The return ratio with the
    network's coupling into the input devices' gate row is read on the numpy path in both (the compiled
    reading knows a lumped pole only), so here it checks the kernels around it."""
    from dataclasses import replace

    tech = load(shipped()["generic180"])
    topology = topologies.available()[name]
    cond = replace(DEMO_CONDITIONS, beta=0.1, r_network=200e3, inverting=inverting)
    x = random_designs(topology, tech, 1200 if name.endswith("_ab") else 300, seed=3)
    fast, _ = evaluate(topology, x, tech, cond, step=True)
    with kernels.reference_path():
        ref, _ = evaluate(topology, x, tech, cond, step=True)
    assert np.isfinite(ref["loop_phase_margin_deg"]).sum() >= 20
    for key in METRICS + ("overshoot_pct", "settling_s"):
        if key in ref:
            _same(fast[key], ref[key], 1e-9)


def _synthetic_modal(designs, modes, seed):
    """Modal data of random stable and unstable pole sets, dense enough in frequency that the phase turns
    several times and the gain crosses unity more than once in some designs."""
    rng = np.random.default_rng(seed)
    modal = object.__new__(Modal)
    tau = 10.0 ** rng.uniform(-10, 2, (designs, modes))
    q = 10.0 ** rng.uniform(-1, 1.5, (designs, modes))
    shape = (designs, modes)
    modal.lam = tau * (rng.choice([1.0, 1.0, 1.0, -0.05], shape) + 1j / q * rng.choice([-1, 1], shape))
    modal.r0 = 10.0 ** rng.uniform(-1, 4, shape) * np.exp(1j * rng.uniform(-np.pi, np.pi, shape))
    modal.r1 = np.where(rng.random((designs, modes)) < 0.2, modal.r0 * tau * 0.1, 0.0)
    modal.dc = modal.r0.sum(axis=1) * rng.choice([-1.0, 1.0], designs)
    return modal


@pytest.mark.parametrize("modes", [1, 3, 8])
def test_crossings_match_the_reference_on_hard_responses(modes):
    modal = _synthetic_modal(3000, modes, seed=modes)
    args = (1e-3, 1e11, 8, 6)
    with np.errstate(all="ignore"):
        fast, probe = _crossings_compiled(modal, *args)
        ref = _crossings(modal.dc.real, modal.response, *args)
        ref_probe = modal.response(np.where(ref.gbw > 0, ref.gbw, args[0])[:, None])[:, 0]
    assert np.isfinite(ref.gain_margin).sum() > 100 and np.isfinite(ref.phase_margin).sum() > 100
    for field in ("gbw", "phase_margin", "gain_margin"):
        _same(getattr(fast, field), getattr(ref, field), 1e-9)
    np.testing.assert_allclose(probe, ref_probe, rtol=1e-12)


@pytest.mark.parametrize("modes", [1, 2, 5])
def test_step_response_matches_the_reference_on_ringing_loops(modes):
    """The compiled step sampling (stability_kernels.sampled_step) against stability._sampled_step: stable
    pole sets from well damped to ringing for hundreds of periods, steps of either sign, a band per design."""
    from types import SimpleNamespace

    from ampfront.topologies.stability import _step

    rng = np.random.default_rng(40 + modes)
    designs = 1500
    tau = 10.0 ** rng.uniform(-9, -5, (designs, modes))
    q = 10.0 ** rng.uniform(-1.5, 1.7, (designs, modes))
    lam = tau * (1.0 + 1j / q * rng.choice([-1, 1], (designs, modes)))
    r0 = rng.uniform(-1, 1, (designs, modes)) + 1j * rng.uniform(-0.3, 0.3, (designs, modes))
    r1 = np.where(rng.random((designs, modes)) < 0.3, r0 * tau * 0.2, 0.0)
    modal = SimpleNamespace(lam=lam, r0=r0, r1=r1)
    finite = np.ones((designs, modes), bool)
    stable = np.ones(designs, bool)
    band = 10.0 ** rng.uniform(-4, -1, designs)
    with np.errstate(all="ignore"):
        fast = _step(modal, finite, stable, band)
        with kernels.reference_path():
            ref = _step(modal, finite, stable, band)
    assert np.isfinite(ref[1]).sum() > 1000 and (ref[0] > 10).sum() > 50
    for got, want in zip(fast, ref):
        _same(got, want, 1e-9)


@pytest.mark.parametrize("polarity", ["n", "p"])
def test_table_kernels_match_the_reference(polarity):
    table = load(shipped()["sky130"])._t(polarity)
    rng = np.random.default_rng(5)
    n = 4000
    # Queries reach past every axis, so off-table NaNs are compared too.
    l = np.exp(rng.uniform(np.log(table.l[0]) - 0.1, np.log(table.l[-1]) + 0.1, n))
    vgs, vds, vsb = rng.uniform(0.0, 2.0, n), rng.uniform(-0.05, 1.9, n), rng.uniform(-0.05, 1.0, n)
    calls = {
        "at": lambda: table.at("gds", l, vgs, vds, vsb),
        "at_all": lambda: np.stack(list(table.at_all(l, vgs, vds, vsb).values())),
        "curve": lambda: table.curve("gm", l, vds, vsb),
        "solve id": lambda: table.solve_vgs("id", l, rng.uniform(-25, -5, n), vds, vsb),
        "solve gm/ID": lambda: table.solve_vgs("gmid", l, np.log(rng.uniform(2, 30, n)), vds, vsb, from_top=True),
    }
    for name, call in calls.items():
        state = rng.bit_generator.state
        fast = call()
        rng.bit_generator.state = state
        with kernels.reference_path():
            ref = call()
        assert 0.3 < np.isfinite(ref).mean() < 0.95, name
        _same(fast, ref, 1e-13)


@pytest.mark.parametrize("modes", [2, 5])
def test_loop_reading_matches_the_reference_on_hard_responses(modes):
    """The return ratio's reading (crossover, margin, lowest phase above unity, crossings left of -1, gain
    margin) on random pole sets whose loop gain crosses unity and -180 deg several times, with a network pole."""
    from ampfront.topologies import stability as st

    modal = _synthetic_modal(3000, modes, seed=10 + modes)
    rng = np.random.default_rng(modes)
    tau = np.where(rng.random(3000) < 0.5, 10.0 ** rng.uniform(-9, -3, 3000), 0.0)
    beta = 0.3
    t0 = -beta * modal.dc.real

    def loop(f):
        return -beta * st._Modal.response(modal, f) * st.network_pole(f, tau)

    with np.errstate(all="ignore"), kernels.reference_path():
        ref = st._phase_reading(loop, t0, 1e-3, 1e11)
    with np.errstate(all="ignore"):
        fast = st._phase_reading_compiled(modal, beta, tau, t0, 1e-3, 1e11)
    assert 100 < ref[3].sum() < 2900 and np.isfinite(ref[1]).sum() > 100
    assert 100 < np.isfinite(ref[4]).sum() < 2900
    for f, r in zip(fast[:3] + fast[4:], ref[:3] + ref[4:]):
        _same(f, r, 1e-9)
    np.testing.assert_array_equal(fast[3], ref[3])


def test_quarantine_screen_matches_the_reference():
    """The compiled screen for unusable circuits flags exactly the designs numpy's does: NaN, inf or a
    value beyond the limit anywhere in the block, the rest of the matrix ignored."""
    from ampfront.topologies.evaluate import _unusable

    rng = np.random.default_rng(2)
    a = rng.uniform(-1.0, 1.0, (4000, 7, 7))
    for value in (np.nan, np.inf, -np.inf, 2.5, -2.5):
        rows = rng.choice(4000, 300, replace=False)
        a[rows, rng.integers(0, 7, 300), rng.integers(0, 7, 300)] = value
    for size in (7, 6):
        fast = _unusable(a, size, 2.0)
        with kernels.reference_path():
            ref = _unusable(a, size, 2.0)
        assert 0.2 < ref.mean() < 0.4
        np.testing.assert_array_equal(fast, ref)
