"""Facts of the trade across topologies (common practice: any analog design text states them)."""

import numpy as np

from ampfront.topologies.evaluate import evaluate
from ampfront.topologies.simple_ota import SimpleOTA
from ampfront.topologies.telescopic import TelescopicCascode

from .helpers import DEMO_CONDITIONS, generic180, random_designs


def test_telescopic_gain_is_of_order_gm_ro_squared():
    """Common practice: cascoding multiplies the output resistance by a device's intrinsic gain gm*ro, so
    a telescopic OTA's gain is of order (gm ro)^2, several times a simple OTA's at the same lengths."""
    tech = generic180()
    x = random_designs(TelescopicCascode(), tech, 400, seed=9)
    tele, build = evaluate(TelescopicCascode(), x, tech, DEMO_CONDITIONS)
    simple, _ = evaluate(SimpleOTA(), {k: x[k] for k in x if k in {v.name for v in SimpleOTA().variables(tech)}},
                         tech, DEMO_CONDITIONS)
    ok = (tele["sat_min_v"] > 0.05) & (simple["sat_min_v"] > 0.05)
    assert ok.sum() > 20
    op = {d.role: d.op for d in build.devices}
    a_tele, a_simple = 10 ** (tele["gain_db"][ok] / 20), 10 ** (simple["gain_db"][ok] / 20)
    assert np.median(a_tele / a_simple) > 5
    # The hand form: A = gm1 (R_n || R_p), each cascoded side R = (gm + gmb)_cascode ro_cascode ro_below.
    def side(cascode, below):
        return (op[cascode].gm + op[cascode].gmb) / op[cascode].gds / op[below].gds

    r_n, r_p = side("cascode_n_b", "input_pair_b"), side("cascode_p_b", "mirror_top_b")
    hand = op["input_pair_b"].gm * r_n * r_p / (r_n + r_p)
    ratio = a_tele / hand[ok]
    assert np.all((ratio > 0.8) & (ratio < 1.25)), ratio


def test_folded_cascode_burns_more_current_than_telescopic_for_the_same_input_gm():
    """Common practice: the folded cascode's folding sources carry the input pair's current plus the
    cascode branch current, so at equal input gm it draws more supply current than a telescopic. Compared
    on the signal branches: the bias branches (reference and gate generators) are sized apart, and at
    microamps a telescopic's nMOS cascode generator can need more than the reference (GateGenerator)."""
    from ampfront.topologies.folded import FoldedCascode

    tech = generic180()
    x = random_designs(FoldedCascode(), tech, 300, seed=4)
    folded, fb = evaluate(FoldedCascode(), x, tech, DEMO_CONDITIONS)
    tele_names = {v.name for v in TelescopicCascode().variables(tech)}
    tele_x = {k: v for k, v in x.items() if k in tele_names}
    tele_x.update({k: random_designs(TelescopicCascode(), tech, 300, seed=4)[k] for k in tele_names - set(x)})
    tele, tb = evaluate(TelescopicCascode(), tele_x, tech, DEMO_CONDITIONS)
    gm_f = {d.role: d.op for d in fb.devices}["input_pair_a"].gm
    gm_t = {d.role: d.op for d in tb.devices}["input_pair_a"].gm
    ok = (folded["sat_min_v"] > 0.05) & (tele["sat_min_v"] > 0.05) & np.isclose(gm_f, gm_t, rtol=0.05)
    assert ok.sum() > 10

    def signal_branches(metrics, build):
        bias = sum(e.value for e in build.elements if e.kind == "I" and e.role.endswith("reference"))
        return (metrics["supply_current_a"] - bias)[ok]

    assert np.all(signal_branches(folded, fb) > signal_branches(tele, tb))
