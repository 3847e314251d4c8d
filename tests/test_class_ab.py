"""The class-AB output stage composed after every single-stage core.

Physics (common practice): a push-pull common-source output stage has an output resistance of order
1/(gds_p + gds_n), far below a cascode core's (gm ro)^2 ro; it draws its quiescent current through both
output devices; its linear swing into a load reaches within a few saturation voltages of either rail.
"""

import numpy as np
import pandas as pd
import pytest

from ampfront import topologies
from ampfront.topologies.process.techfile import load, shipped
from ampfront.topologies.base import Conditions
from ampfront.topologies.compose import CompositionError, WithOutputStage
from ampfront.topologies.class_ab import ClassABOutput
from ampfront.topologies.evaluate import evaluate
from tests.helpers import random_designs

LOADED = Conditions(vdd=1.8, c_load=2e-12, r_load=5e3, v_cm=0.9)
CORES = ["simple_ota", "telescopic_cascode", "folded_cascode"]


@pytest.fixture(scope="module", params=["generic180", "sky130"])
def tech(request):
    return load(shipped()[request.param])


def usable(metrics):
    return (metrics["sat_min_v"] > 0.05) & np.isfinite(metrics["gain_db"]) & (metrics["dc_residual"] < 1e-3)


@pytest.mark.parametrize("core", ["telescopic_cascode", "folded_cascode"])
def test_output_resistance_far_below_a_cascode_core(core, tech):
    plain, composed = topologies.available()[core], topologies.available()[f"{core}_ab"]
    x = random_designs(composed, tech, 5000, seed=11)
    m_ab, _ = evaluate(composed, x, tech, LOADED)
    m_core, _ = evaluate(plain, {v.name: x[v.name] for v in plain.variables(tech)}, tech, LOADED)
    # An output stage runs at least the core's current (common practice).
    ok = usable(m_ab) & usable(m_core) & (m_ab["quiescent_out_a"] >= x["i_tail"])
    assert ok.sum() >= 5
    ratio = m_core["output_resistance_ohm"][ok] / m_ab["output_resistance_ohm"][ok]
    # Median over designs: the stage lowers the output resistance at least tenfold.
    assert np.median(ratio) > 10, np.median(ratio)


def test_output_resistance_follows_the_stage_current(tech):
    """Against a simple OTA (itself ~ro/2) the stage wins by its current: ro ~ 1/(lambda I)."""
    plain, composed = topologies.available()["simple_ota"], topologies.available()["simple_ota_ab"]
    x = random_designs(composed, tech, 1500, seed=13)
    m_ab, _ = evaluate(composed, x, tech, LOADED)
    m_core, _ = evaluate(plain, {v.name: x[v.name] for v in plain.variables(tech)}, tech, LOADED)
    heavy = usable(m_ab) & usable(m_core) & (m_ab["quiescent_out_a"] > 10 * x["i_tail"])
    assert heavy.sum() >= 5
    assert (m_ab["output_resistance_ohm"][heavy] < m_core["output_resistance_ohm"][heavy]).all()


@pytest.mark.parametrize("technology", ["generic180", "sky130"])
@pytest.mark.parametrize("core", CORES)
def test_stage_figures_are_physical(driver_runs, core, technology):
    """On the front designs of a loaded line-driver study: the designs a user would see."""
    front = pd.read_csv(driver_runs(technology) / "front.csv")
    mine = front[front["topology"] == f"{core}_ab"]
    assert len(mine) >= 3
    up, down = mine["id_output_pull_up_a"], mine["id_output_pull_down_a"]
    # Quiescent: both output devices carry the same current with the output at the common-mode level.
    assert np.allclose(up, down, rtol=1e-3)
    assert np.allclose(mine["quiescent_out_a"], up)
    # Peak currents exceed the quiescent current on every design and are several times it on the typical
    # one (that is what class AB is for; a study without an output-current bound may keep a design whose
    # weaker side is only just above quiescent), and the swing lies inside the rails, around the common mode.
    assert (mine["peak_source_a"] > up).all() and (mine["peak_sink_a"] > down).all()
    assert np.median(mine["peak_source_a"] / up) > 2 and np.median(mine["peak_sink_a"] / down) > 2
    assert ((mine["out_low_v"] > 0) & (mine["out_low_v"] < 0.9) & (mine["out_high_v"] > 0.9)
            & (mine["out_high_v"] < 1.8)).all()
    # Power counts the stage: quiescent current, the floating control's source and both bias stacks.
    stage = up + mine["id_ab_float_source_a"] + mine["id_ab_replica_up_a"] + mine["id_ab_replica_down_a"]
    assert (mine["supply_current_a"] > stage).all()


def test_composition_refuses_clashing_names(tech):
    two_stage = topologies.available()["two_stage_miller"]

    class Clash(ClassABOutput):
        def variables(self, tech):
            return super().variables(tech) + two_stage.variables(tech)[:1]

    with pytest.raises(CompositionError, match="share variables"):
        WithOutputStage(two_stage, Clash()).variables(tech)


def test_every_single_stage_core_has_a_class_ab_variant():
    found = topologies.available()
    cores = [n for n, t in found.items() if getattr(t, "single_stage", False)]
    # Each single-stage core and its pMOS-input complement.
    assert sorted(cores) == sorted(CORES + [f"{c}_pmos" for c in CORES])
    assert all(f"{c}_ab" in found for c in cores)
    assert len(found) >= 14
