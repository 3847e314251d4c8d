"""The stability module against independent computations, on every registered topology and both shipped
technologies (generic180 square law, sky130 tables), random populations.

Reference: scipy. The closed loop is rebuilt another way: the evaluator's own stamping with inn as the
driven node (the DRIVES table given an "inverting" entry for the test), and the feedback as an extra
unknown v(inn) with the row v(inn) - beta v(out) = 0, an augmented pencil handed to scipy.linalg.eigvals
(QZ, which returns poles at infinity as such). The Nyquist count uses the open loop's poles from
scipy.linalg.eigvals(G, -C) and the winding of 1 + T(jw) on a dense grid of direct solves. The step
response is integrated in time (scipy.linalg.lu_factor, trapezoidal rule after one backward-Euler step)
instead of summed from modes. None of it shares code with the module's eigendecomposition of G'^-1 C', its
modal sums, grids or refinements.
"""

import numpy as np
import pytest
import scipy.linalg
import scipy.optimize

from ampfront import topologies
from ampfront.topologies.evaluate import DRIVES
from ampfront.topologies.evaluate import small_signal  # noqa: E402
from ampfront.topologies.process.techfile import load, shipped
from ampfront.topologies.stability import SETTLE_BAND, closed_loop_poles, stability_from_circuits

from .helpers import DEMO_CONDITIONS, random_designs

NAMES = sorted(topologies.available())
TECHS = {name: load(shipped()[name]) for name in ("generic180", "sky130")}
FASTEST = 1e14   # rad/s: poles beyond are outside any device model here, compared as infinite


@pytest.fixture
def inverting(monkeypatch):
    monkeypatch.setitem(DRIVES, "inverting", ("inn", ("inp",)))
    return lambda build, cond: small_signal(build, cond, "inverting")


def _population(name, tech_name, count=160, seed=4):
    tech, topology = TECHS[tech_name], topologies.available()[name]
    with np.errstate(all="ignore"):
        build = topology.build(random_designs(topology, tech, count, seed=seed), tech, DEMO_CONDITIONS)
        diff, cm = small_signal(build, DEMO_CONDITIONS), small_signal(build, DEMO_CONDITIONS, "common_mode")
    # The evaluator's circuits quarantine designs they cannot solve (identity matrices in their place).
    finite = np.flatnonzero(~(diff.quarantined | cm.quarantined))
    return build, diff, cm, finite


def _augmented(diff, inv, k, beta):
    """Pencil (A, B) of unknowns [node voltages, v(inn)]: A + sB singular at the closed-loop poles."""
    n, out = len(diff.nodes), diff.nodes.index("out")
    a = np.zeros((n + 1, n + 1))
    b = np.zeros((n + 1, n + 1))
    a[:n, :n], b[:n, :n] = diff.G[k, :n, :n], diff.C[k, :n, :n]
    a[:n, n], b[:n, n] = inv.G[k, :n, n], inv.C[k, :n, n]
    a[n, n], a[n, out] = 1.0, -beta
    return a, b


def _match(ours, ref):
    """Worst relative distance from each reference pole to the nearest of ours, and vice versa."""
    worst = 0.0
    for p, q in ((ref, ours), (ours, ref)):
        for z in p:
            worst = max(worst, np.min(np.abs(q - z)) / abs(z))
    return worst


@pytest.mark.parametrize("tech_name", list(TECHS))
@pytest.mark.parametrize("name", NAMES)
@pytest.mark.parametrize("beta", [1.0, 0.2])
def test_closed_loop_poles_agree_with_qz_of_the_augmented_pencil(name, tech_name, beta, inverting):
    build, diff, cm, finite = _population(name, tech_name)
    inv = inverting(build, DEMO_CONDITIONS)
    poles = closed_loop_poles(diff, cm, beta)
    metrics = stability_from_circuits(diff, cm, beta)
    assert np.isnan(poles[np.setdiff1d(np.arange(diff.designs), finite)]).all()
    picked = finite[:10]
    assert len(picked) >= 6
    for k in picked:
        a, b = _augmented(diff, inv, k, beta)
        ref = scipy.linalg.eigvals(a, -b)
        ref = ref[np.isfinite(ref) & (np.abs(ref) < FASTEST)]
        ours = poles[k][np.isfinite(poles[k]) & (np.abs(poles[k]) < FASTEST)]
        assert len(ours) == len(ref), (k, np.sort_complex(ours), np.sort_complex(ref))
        assert _match(ours, ref) < 1e-6
        assert metrics["cl_rhp_poles"][k] == (ref.real >= 0).sum()


def test_population_sample_holds_stable_and_unstable_loops():
    """The pole comparison above sees both outcomes: unstable unity-gain loops exist among random class-AB
    designs, stable ones among all."""
    seen = []
    for tech_name in TECHS:
        for name in ("simple_ota_ab", "two_stage_miller"):
            _, diff, cm, finite = _population(name, tech_name)
            rhp = stability_from_circuits(diff, cm)["cl_rhp_poles"][finite[:10]]
            seen.append(((rhp > 0).any(), (rhp == 0).any()))
    assert any(u for u, _ in seen) and all(s for _, s in seen)


def _return_ratio(diff, inv, k, beta, freqs):
    """T(jw) = -beta v(out)/v(inn) by one direct solve per frequency."""
    n, out = len(diff.nodes), diff.nodes.index("out")
    s = 2j * np.pi * freqs[:, None, None]
    a = diff.G[k, None, :n, :n] + s * diff.C[k, None, :n, :n]
    rhs = -(inv.G[k, None, :n, n] + s[:, :, 0] * inv.C[k, None, :n, n])
    return -beta * np.linalg.solve(a, rhs[..., None])[:, out, 0]


@pytest.mark.parametrize("tech_name", list(TECHS))
@pytest.mark.parametrize("name", NAMES)
def test_closed_loop_rhp_count_obeys_nyquist(name, tech_name, inverting):
    """Closed-loop RHP poles = open-loop RHP poles + clockwise turns of 1 + T(jw) around the origin."""
    build, diff, cm, finite = _population(name, tech_name, seed=9)
    inv = inverting(build, DEMO_CONDITIONS)
    beta = 1.0
    metrics = stability_from_circuits(diff, cm, beta)
    n = len(diff.nodes)
    freqs = np.concatenate([[0.0], np.logspace(-3, 14, 17 * 300 + 1)])
    for k in finite[:6]:
        open_poles = scipy.linalg.eigvals(diff.G[k, :n, :n], -diff.C[k, :n, :n])
        open_rhp = (np.isfinite(open_poles) & (np.abs(open_poles) < FASTEST) & (open_poles.real >= 0)).sum()
        f = 1.0 + _return_ratio(diff, inv, k, beta, freqs)
        turn = np.unwrap(np.angle(f))
        clockwise = -(turn[-1] - turn[0]) / np.pi   # both halves of the jw axis
        assert metrics["cl_rhp_poles"][k] == pytest.approx(open_rhp + clockwise, abs=0.05), k


@pytest.mark.parametrize("tech_name", list(TECHS))
@pytest.mark.parametrize("name", NAMES)
def test_loop_phase_and_gain_margin_agree_with_dense_solves(name, tech_name, inverting):
    build, diff, cm, finite = _population(name, tech_name, seed=5)
    inv = inverting(build, DEMO_CONDITIONS)
    beta = 0.5
    metrics = stability_from_circuits(diff, cm, beta)
    freqs = np.logspace(-3, 12, 15 * 400 + 1)
    checked = 0
    for k in finite[:8]:
        t = _return_ratio(diff, inv, k, beta, freqs)
        t0 = _return_ratio(diff, inv, k, beta, np.zeros(1))[0].real
        if t0 <= 1.0:
            continue
        phase = np.unwrap(np.concatenate([[0.0], np.angle(t)]))[1:]
        above = np.abs(t) > 1
        falls = np.flatnonzero(above[:-1] & ~above[1:])
        if len(falls) == 0:
            continue   # the loop gain stays above one over the whole reference band
        last = falls[-1]
        mag = lambda lf: np.log(abs(_return_ratio(diff, inv, k, beta, np.exp([lf]))[0]))  # noqa: E731
        f_c = np.exp(scipy.optimize.brentq(mag, np.log(freqs[last]), np.log(freqs[last + 1]), xtol=1e-14))
        phase_c = np.interp(np.log(f_c), np.log(freqs), phase)
        margin = (np.degrees(phase_c) + 360.0) % 360.0 - 180.0
        lowest = np.degrees(min(phase[above].min(), phase_c))
        assert metrics["loop_crossover_hz"][k] == pytest.approx(f_c, rel=1e-6)
        # Turns apart only where the reading sits on the branch cut at +-180 deg.
        assert abs((metrics["loop_phase_margin_deg"][k] - margin + 180) % 360 - 180) < 0.05
        assert metrics["loop_phase_min_deg"][k] == pytest.approx(lowest, abs=0.05)
        # The gain margin: |T| where the dense phase passes an odd multiple of -180 deg, each instant by brentq.
        branch = np.floor((phase + np.pi) / (2 * np.pi))
        reach = []
        for i in np.flatnonzero(np.diff(branch) != 0):
            level, ref = np.pi * (2 * max(branch[i], branch[i + 1]) - 1), 0.5 * (phase[i] + phase[i + 1])

            def turned(lf, level=level, ref=ref):
                t_at = _return_ratio(diff, inv, k, beta, np.exp([lf]))[0]
                return ref + np.angle(t_at * np.exp(-1j * ref)) - level
            at = scipy.optimize.brentq(turned, np.log(freqs[i]), np.log(freqs[i + 1]), xtol=1e-14)
            reach.append(abs(_return_ratio(diff, inv, k, beta, np.exp([at]))[0]))
        expected = (np.inf if not reach else -np.inf if max(reach) > 1 else -20 * np.log10(max(reach)))
        if np.isfinite(expected):
            assert metrics["loop_gain_margin_db"][k] == pytest.approx(expected, abs=0.01)
        else:
            assert metrics["loop_gain_margin_db"][k] == expected
        checked += 1
    assert checked >= 3


def _reference_step(g, c, b0, b1, out, t_end, steps):
    """Unit step at t = 0 into (G + s C) x = -(b0 + s b1): backward Euler across the step (it takes the
    input's impulse through b1 as a charge) and for a few steps after, so modes far faster than the step
    leave nothing for the trapezoidal rule to carry on ringing; then the trapezoidal rule."""
    h = t_end / steps
    lu = scipy.linalg.lu_factor(c / h + g)
    x = scipy.linalg.lu_solve(lu, -b0 - b1 / h)
    y = [0.0, x[out]]
    for _ in range(3):
        x = scipy.linalg.lu_solve(lu, c @ x / h - b0)
        y.append(x[out])
    lu = scipy.linalg.lu_factor(c / h + g / 2)
    rest = c / h - g / 2
    for _ in range(steps - 4):
        x = scipy.linalg.lu_solve(lu, rest @ x - b0)
        y.append(x[out])
    return np.arange(steps + 1) * h, np.array(y)


@pytest.mark.parametrize("tech_name", list(TECHS))
@pytest.mark.parametrize("name", NAMES)
def test_step_response_agrees_with_time_integration(name, tech_name):
    build, diff, cm, finite = _population(name, tech_name, count=1000, seed=6)
    beta = 1.0
    metrics = stability_from_circuits(diff, cm, beta)
    # The fixed-step reference resolves ringing of damping 0.05 and up; a near-oscillator needs finer steps
    # than a test can afford (its figures converge on ours as the step shrinks).
    stable = finite[(metrics["cl_stable"][finite] > 0) & np.isfinite(metrics["settling_s"][finite])
                    & (metrics["cl_damping"][finite] >= 0.05)]
    from ampfront.topologies.stability import closed_loop_matrices
    g, c, g_p, c_p, out = closed_loop_matrices(diff, cm, beta)
    compared = 0
    for k in stable:
        t_s = metrics["settling_s"][k]
        # To three settling times: an overshoot inside the band can peak after the settling instant.
        t, y = _reference_step(g[k], c[k], g_p[k], c_p[k], out, 3.0 * t_s, 60000)
        final = np.linalg.solve(g[k], -g_p[k])[out]
        err = np.abs(y - final) / abs(final)
        rise = (y - final) * np.sign(final)
        peak = rise.argmax()
        if peak < 60:
            continue   # the peak is the step's feed-through at t = 0+, finer than the reference's steps
        if peak < 1000:
            # An early peak (a zero's) is resolved again on a window ten times its instant: the trapezoidal
            # rule at 167 steps to the peak read 57.563 % where 4x the steps read 57.632 % and ours 57.637 %.
            _, early = _reference_step(g[k], c[k], g_p[k], c_p[k], out, 10.0 * t[peak], 60000)
            rise = np.concatenate([(early - final) * np.sign(final), rise[10 * peak:]])
        overshoot = 100 * max(rise.max(), 0.0) / abs(final)
        assert metrics["overshoot_pct"][k] == pytest.approx(overshoot, abs=0.05)
        # The settling instant: outside the band just before it, inside from just after it on (a band edge
        # grazed at a ringing peak may leave 2 % of the band either way).
        after = t > 1.01 * t_s
        near = (t > 0.99 * t_s) & (t < 1.01 * t_s)
        assert err[after].max() <= SETTLE_BAND * 1.02
        assert err[near].max() >= SETTLE_BAND * 0.98
        compared += 1
        if compared == 2:
            break
    assert compared == 2


def test_feedback_factor_outside_the_unit_interval_is_refused():
    _, diff, cm, _ = _population("simple_ota", "generic180", count=4)
    for beta in (0.0, -0.5, 1.5):
        with pytest.raises(ValueError):
            stability_from_circuits(diff, cm, beta)


FRONT_STUDY = """
title = "Front poles"
topologies = ["{name}"]
objectives = ["power", "gbw"]
technology = "{technology}"

[spec]
supply = "1.8 V"
load_capacitance = "2 pF"
{load}
min_gain = "30 dB"
min_gbw = "100 kHz"
min_phase_margin = "30 deg"
input_cm = "0.9 V"

[search]
population = {population}
generations = {generations}
seed = 7
"""
_FRONTS: dict = {}


def _front(name, tech_name, folder):
    """(build, conditions) of a short search's front for one topology; the class-AB stages, whose random
    designs seldom bias, drive a 5 kOhm load from a larger population. 40 generations: at 25 the SKY130
    pMOS folded cascode's front held one design once the 6 dB gain margin became a default."""
    from ampfront.optimize.search.outcome import TopologyFront
    from ampfront.optimize.search.single import search_topology
    from ampfront.optimize.spec.study import load_study

    key = (name, tech_name)
    if key not in _FRONTS:
        ab = name.endswith("_ab")
        (folder / "study.toml").write_text(FRONT_STUDY.format(
            name=name, technology=tech_name, load='load_resistance = "5 kOhm"' if ab else "",
            population=64 if ab else 32, generations=40))
        study = load_study(folder / "study.toml", topologies.available())
        with np.errstate(all="ignore"):
            found = search_topology(study, TECHS[tech_name], name, None)
        assert isinstance(found, TopologyFront), f"{name} on {tech_name}: no front ({found})"
        _FRONTS[key] = (found.build, study.conditions)
    return _FRONTS[key]


@pytest.mark.parametrize("tech_name", list(TECHS))
@pytest.mark.parametrize("name", NAMES)
def test_closed_loop_poles_of_front_designs_agree_with_qz(name, tech_name, inverting, tmp_path):
    """Front designs, not random ones: the search's corner of the box (high GBW for the power, margins
    near their bound) is where a pole read wrong would change the verdict."""
    build, cond = _front(name, tech_name, tmp_path)
    with np.errstate(all="ignore"):
        diff, cm = small_signal(build, cond), small_signal(build, cond, "common_mode")
        inv = inverting(build, cond)
    poles = closed_loop_poles(diff, cm, 1.0)
    metrics = stability_from_circuits(diff, cm, 1.0)
    designs = diff.designs
    assert designs >= 2
    # Every front design is closed-loop stable (the always-on rule), and QZ agrees pole by pole.
    for k in sorted({round(i * (designs - 1) / 5) for i in range(6)}):
        a, b = _augmented(diff, inv, k, 1.0)
        ref = scipy.linalg.eigvals(a, -b)
        ref = ref[np.isfinite(ref) & (np.abs(ref) < FASTEST)]
        ours = poles[k][np.isfinite(poles[k]) & (np.abs(poles[k]) < FASTEST)]
        assert len(ours) == len(ref), (k, np.sort_complex(ours), np.sort_complex(ref))
        assert _match(ours, ref) < 1e-6
        assert (ref.real < 0).all() and metrics["cl_rhp_poles"][k] == 0
