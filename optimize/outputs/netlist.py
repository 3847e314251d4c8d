"""SPICE netlists of sized designs: a subcircuit per design and a testbench that runs as it is in ngspice.

The subcircuit contract, identical for every topology: `.subckt <name> inp inn out vdd vss`, holding the
amplifier, its bias network and compensation, and nothing else (no sources, analyses or model cards).
"""

from __future__ import annotations

import math
import re

import numpy as np

from ampfront.topologies.application import ideal_gain, network_noise_resistance, network_resistors
from ampfront.topologies.base import PORTS, Build, Conditions
from ampfront.topologies.catalog import M
from ampfront.topologies.process.base import Technology

RESULT_TAG = "ampfront:"  # testbench result lines start with this, so a parser can find them
# What the open-loop testbench prints besides catalog metrics: the output's DC level (V) and the common-mode
# and supply gains (dB) the rejection ratios are read from.
OUT_DC, CM_GAIN, SUPPLY_GAIN = "out_dc", "cm_gain", "supply_gain"
# Catalog metrics the open-loop testbench measures directly.
TESTBENCH_METRICS = (M.gain_db, M.gbw_hz, M.phase_margin_deg, M.supply_current_a, M.noise_1hz_v_rthz,
                     M.noise_100hz_v_rthz)
# Everything that becomes a SPICE name (designs, device roles, nodes) is a plain identifier: a netlist is
# data, and nothing a plug-in or a results folder supplies may add a line or a control block to it.
IDENTIFIER = re.compile(r"^[A-Za-z][A-Za-z0-9_]{0,63}$")
_CONTROL = re.compile(r"[\x00-\x1f\x7f]")


class NetlistError(ValueError):
    """A design that cannot be written as a netlist (a non-finite value, an unsafe name)."""


def _name(value: str, what: str) -> str:
    if not isinstance(value, str) or not IDENTIFIER.match(value):
        raise NetlistError(f"{what} {value!r:.40} is not a plain identifier")
    return value


def _comment(text: str) -> str:
    return _CONTROL.sub(" ", str(text))


def _at(values, i: int) -> float:
    value = float(np.asarray(values).reshape(-1)[i] if np.ndim(values) else values)
    if not math.isfinite(value):
        raise NetlistError(f"a non-finite value ({value})")
    return value


def subckt(build: Build, i: int, tech: Technology, name: str, title: str = "", notes: str = "") -> str:
    _name(name, "design name")
    lines = [f"* {_comment(title or name)}: sized by ampfront (pre-layout estimate)",
             *([notes] if notes else []), f".subckt {name} {' '.join(PORTS)}"]
    for d in build.devices:
        nodes = tuple(_name(n, "node") for n in d.nodes)
        lines.append(tech.spice_instance(_name(d.role, "device role"), d.polarity, nodes, _at(d.w, i), _at(d.l, i)))
    for e in build.elements:
        if e.kind not in ("R", "C", "I"):
            raise NetlistError(f"element kind {e.kind!r}")
        lines.append(f"{e.kind}{_name(e.role, 'element role')} {_name(e.a, 'node')} {_name(e.b, 'node')} "
                     f"{_at(e.value, i):.6g}")
    lines.append(f".ends {name}")
    return "\n".join(lines) + "\n"


def design_files(build: Build, i: int, tech: Technology, cond: Conditions, design: str, title: str,
                 horizon: float) -> dict[str, str]:
    """Every file of one design, by name: its subcircuit (operating point as comments), its open-loop
    testbench, its output-swing testbench and its closed-loop small-step testbench (`horizon`, s: how long
    the step response is simulated), and where the study states an application its closed-loop testbench.
    `ampfront run` writes these; `ampfront check` rebuilds them and runs only what it
    rebuilt. The open-loop, swing and step testbenches see a feedback network as a load on the output,
    as the model does (Conditions.network_loaded); the loop testbench draws it."""
    from ampfront.optimize.outputs.tables import device_table

    op = "\n".join("* " + _comment(line) for line in device_table(build, i).to_string(index=False).splitlines())
    sub = f"{design}.sp"
    loaded = cond.network_loaded()
    files = {
        sub: subckt(build, i, tech, design, title, op),
        f"{design}_tb.sp": testbench(build, i, tech, loaded, design, sub,
                                     network_noise_resistance(cond.r_network, cond.beta)),
        f"{design}_swing.sp": swing_testbench(build, i, tech, loaded, design, sub, f"{design}_swing.dat"),
        f"{design}_step.sp": step_testbench(build, i, tech, loaded, design, sub, horizon),
    }
    if cond.applied:
        slew = _at(build.metrics.get(M.slew_v_per_s, np.inf), i)
        files[f"{design}_loop.sp"] = loop_testbench(build, i, tech, cond, design, sub, f"{design}_loop.dat",
                                                    loop_horizon(horizon, slew, cond))
    return files


def loop_horizon(step_horizon_s: float, slew: float, cond: Conditions) -> float:
    """How long to simulate the stated step, from what the run and the check both have: twice the slewing
    time, plus the small-step horizon (three 1 % settling times at the same beta) stretched for a tighter
    band (linear settling time grows as ln(1 / band))."""
    stretch = max(1.0, math.log(1.0 / cond.settle_band) / math.log(100.0))
    return 2.0 * cond.step_v / slew + 1.5 * stretch * step_horizon_s


def ac_data_file(design: str) -> str:
    """The open-loop testbench's sweep (frequency, gain dB, frequency, continuous phase deg)."""
    return f"{design}_ac.dat"


# Tags the loop testbench prints besides metrics: what its data file is to be judged against.
LOOP_STEP, LOOP_BAND, LOOP_START, LOOP_FALL = "loop_step_v", "loop_settle_band", "loop_step_at_s", "loop_fall_at_s"
LOOP_POINTS = 6000


def loop_testbench(build: Build, i: int, tech: Technology, cond: Conditions, name: str, subckt_file: str,
                   data_file: str, horizon: float) -> str:
    """The amplifier in its application: the stated network (Rf from out to the junction fb, Rg from fb to
    the reference, or to the signal when inverting; without a stated resistance, controlled sources that
    set v(fb) = beta v(out) + (1 - beta) v(signal)), the load, and

    - the static gain error, 1 - A_CL / G_ideal, from the small-signal DC transfer (.tf) of the closed loop;
    - the loop gain at the inverting input by Middlebrook's double injection (from memory of his 1975
      method): a 0 V source Vinj between fb and inn carries a voltage injection in one AC run and a current
      source Iinj into fb a current injection in the next, T_v = -v(fb) / v(inn),
      T_i = i(network) / i(amplifier), T = (T_v T_i - 1) / (T_v + T_i + 2), exact whatever the loading on
      either side of the break; its phase margin at the last unity crossing, referred to the nearest turn;
    - the stated output step (centred on the common mode), up and after `horizon` down again, in a
      transient whose v(out) goes to `data_file`, from which the check reads each edge's steepest slope and
      settling time into the band: the slower edge is the one the model's figures (the smaller of the
      source and sink slew rates) stand for."""
    if not (math.isfinite(horizon) and horizon > 0):
        raise NetlistError(f"loop horizon {horizon!r}")
    gain = ideal_gain(cond.beta, cond.inverting)
    step = cond.step_v if cond.step_v > 0 else STEP_V
    dt = horizon / LOOP_POINTS
    t0, fall = dt, horizon + dt
    end = 2 * horizon + dt
    v_lo, v_hi = -0.5 * step / gain, 0.5 * step / gain   # input levels; the output steps by +step
    if np.isfinite(cond.r_network):
        r_f, r_g = network_resistors(cond.r_network, cond.beta)
        network = [f"Rf out fb {r_f:.6g}", f"Rg fb {'sig' if cond.inverting else 'cm'} {r_g:.6g}"]
    else:
        network = [f"Efb_out fb mid out cm {cond.beta:.12g}", f"Efb_sig mid cm sig cm {1 - cond.beta:.12g}"]
    drive = ["Vpos inp cm 0"] if cond.inverting else ["Vsig sig cm 0"]
    source = "sig" if cond.inverting else "inp"
    tag = RESULT_TAG
    return "\n".join([
        f"* ampfront closed-loop application testbench for {name}: gain {gain:.6g}, feedback factor "
        f"{cond.beta:.6g}, {'inverting' if cond.inverting else 'non-inverting'}",
        *model_lines(build, i, tech),
        f".include {subckt_file}",
        f".temp {tech.temperature - 273.15:g}",
        f"Vsupply vdd 0 {cond.vdd:.6g}",
        "Vground vss 0 0",
        f"Vcm cm 0 {cond.v_cm:.6g}",
        f"Vin {source} cm dc 0 pwl(0 {v_lo:.9g} {t0:.6g} {v_lo:.9g} {2 * t0:.6g} {v_hi:.9g} {fall:.6g} {v_hi:.9g} "
        f"{fall + t0:.6g} {v_lo:.9g})",
        *drive,
        f"Xamp inp inn out vdd vss {name}",
        *network,
        # The break for the loop gain: 0 V and 0 A at DC and in the transient, so the loop stays closed.
        "Vinj inn fb dc 0 ac 0",
        "Iinj 0 fb dc 0 ac 0",
        f"Cload out 0 {cond.c_load:.6g}",
        _load(cond),
        ".options reltol=1e-5 abstol=1e-14 vntol=1e-8 method=gear",
        ".control",
        "set noaskquit",
        f"echo {tag} {LOOP_STEP} {step:.9g}",
        f"echo {tag} {LOOP_BAND} {cond.settle_band:.9g}",
        f"echo {tag} {LOOP_START} {t0:.9g}",
        f"echo {tag} {LOOP_FALL} {fall:.9g}",
        f"tf v(out) vin",
        f"let gain_error = 1 - transfer_function / ({gain:.12g})",
        f"echo {tag} {M.gain_error} $&gain_error",
        "alter vinj ac = 1",
        "ac dec 40 1 1e12",
        "let tv = -v(fb) / v(inn)",
        "alter vinj ac = 0",
        "alter iinj ac = 1",
        "ac dec 40 1 1e12",
        "let i_amp = -i(vinj)",
        "let ti = (1 - i_amp) / i_amp",
        "let tloop = (ac1.tv * ti - 1) / (ac1.tv + ti + 2)",
        "let tloop_db = db(tloop)",
        "let tloop_ph = 180 / pi * cph(tloop)",
        "meas ac f_cross when tloop_db=0 fall=LAST",
        "meas ac ph_cross find tloop_ph at=f_cross",
        "let pm_raw = 180 + ph_cross",
        "let loop_pm = pm_raw - 360 * floor((pm_raw + 180) / 360)",
        f"echo {tag} {M.loop_phase_margin_deg} $&loop_pm",
        f"tran {dt:.6g} {end:.6g} 0 {dt:.6g}",
        f"wrdata {data_file} v(out)",
        "quit 0",
        ".endc",
        ".end",
        "",
    ])


# Small enough that every device stays in its small-signal range (the step response is the closed loop's
# poles and zeros, not slewing), large enough to stand well clear of the simulator's tolerances.
STEP_V = 1e-3
STEP_POINTS = 4000


def step_horizon(gbw_hz: float, settling_s: float) -> float:
    """How long to simulate a small step: past the predicted settling, and at least 20 loop time constants."""
    floor = 20.0 / (2 * math.pi * gbw_hz) if math.isfinite(gbw_hz) and gbw_hz > 0 else 1e-6
    return max(3.0 * settling_s, floor) if math.isfinite(settling_s) else floor


def step_testbench(build: Build, i: int, tech: Technology, cond: Conditions, name: str, subckt_file: str,
                   horizon: float) -> str:
    """The loop closed at the study's feedback factor by an ideal VCVS (v(inn) - v_cm = beta (v(out) -
    v_cm), so nothing but the load loads the output), a STEP_V step at inp one time step long, and the
    overshoot of v(out) over its final level, in percent of the step it makes."""
    if not (math.isfinite(horizon) and horizon > 0):
        raise NetlistError(f"step horizon {horizon!r}")
    dt = horizon / STEP_POINTS
    t0, end = dt, horizon + dt
    tag = RESULT_TAG
    return "\n".join([
        f"* ampfront closed-loop small-step testbench for {name}: overshoot at feedback factor {cond.beta:g}",
        *model_lines(build, i, tech),
        f".include {subckt_file}",
        f".temp {tech.temperature - 273.15:g}",
        f"Vsupply vdd 0 {cond.vdd:.6g}",
        "Vground vss 0 0",
        f"Vcm cm 0 {cond.v_cm:.6g}",
        f"Vin inp cm dc 0 pwl(0 0 {t0:.6g} 0 {2 * t0:.6g} {STEP_V:g})",
        f"Xamp inp inn out vdd vss {name}",
        f"Efb inn cm out cm {cond.beta:.12g}",
        f"Cload out 0 {cond.c_load:.6g}",
        _load(cond),
        # Gear integration: a lightly damped loop with BSIM4 devices stalls trapezoidal steps ("timestep too
        # small"); tolerances well below the 1 mV step's percent-level overshoot.
        ".options reltol=1e-5 abstol=1e-14 vntol=1e-8 method=gear",
        ".control",
        "set noaskquit",
        f"tran {dt:.6g} {end:.6g} 0 {dt:.6g}",
        f"meas tran v_start find v(out) at={t0:.6g}",
        f"meas tran v_final avg v(out) from={end - 0.05 * horizon:.6g} to={end:.6g}",
        f"meas tran v_peak max v(out) from={t0:.6g} to={end:.6g}",
        "let overshoot = 100 * (v_peak - v_final) / (v_final - v_start)",
        f"echo {tag} {M.overshoot_pct} $&overshoot",
        "quit 0",
        ".endc",
        ".end",
        "",
    ])


def model_lines(build: Build, i: int, tech: Technology) -> list[str]:
    lengths: dict[str, set[float]] = {"n": set(), "p": set()}
    for d in build.devices:
        lengths[d.polarity].add(_at(d.l, i))
    return tech.spice_models(lengths)


def _load(cond: Conditions) -> str:
    """The load resistor returns to its own copy of the common-mode level, so the rejection runs (which
    move `cm`) do not drive the output through it."""
    if not np.isfinite(cond.r_load):
        return "* no load resistance in the spec"
    return f"Rload out term {cond.r_load:.6g}\nVterm term 0 {cond.v_cm:.6g}"


def testbench(build: Build, i: int, tech: Technology, cond: Conditions, name: str, subckt_file: str,
              r_network_noise: float = 0.0) -> str:
    """Open-loop testbench: DC loop closed through a large inductor (unity-gain follower at DC), the
    inverting input held at AC ground by a large capacitor, an AC source on the non-inverting input.
    `r_network_noise` (Ohm): a feedback network's Rf || Rg, in series with the input for the noise run
    only (1 mOhm for the AC runs, so its pole with the input capacitance moves no gain or phase)."""
    rl = _load(cond)
    tag = RESULT_TAG
    return "\n".join([
        f"* ampfront testbench for {name}: open-loop gain, GBW, phase and gain margins and supply current",
        *model_lines(build, i, tech),
        f".include {subckt_file}",
        f".temp {tech.temperature - 273.15:g}",
        f"Vsupply vdd 0 {cond.vdd:.6g}",
        "Vground vss 0 0",
        f"Vcm cm 0 {cond.v_cm:.6g}",
        *(["Vin src cm dc 0 ac 1", "Rnetwork src inp 1e-3"] if r_network_noise > 0 else ["Vin inp cm dc 0 ac 1"]),
        f"Xamp inp inn out vdd vss {name}",
        # 1 TH: at the 0.1 Hz gain point it is 600 GOhm, far above any output resistance it would load.
        "Lloop out inn 1e12",
        "Cloop inn cm 1",
        f"Cload out 0 {cond.c_load:.6g}",
        rl,
        ".control",
        "set noaskquit",
        "op",
        "let supply_current = -i(vsupply)",
        "let out_dc = v(out)",
        f"echo {tag} {M.supply_current_a} $&supply_current",
        f"echo {tag} {OUT_DC} $&out_dc",
        "ac dec 40 0.1 1e12",
        "let gain_db_vec = vdb(out)",
        "let phase_vec = 180 / pi * cph(v(out))",
        "meas ac gain_db find gain_db_vec at=0.1",
        "meas ac gbw_hz when gain_db_vec=0 fall=1",
        "meas ac phase_at_gbw find phase_vec at=gbw_hz",
        # The whole sweep for the gain margin, read by the simulator's side where the phase first passes
        # -180 deg (a measure that finds no crossing would leave ngspice with nothing to print).
        f"wrdata {ac_data_file(_name(name, 'design name'))} gain_db_vec phase_vec",
        # Referred to the nearest turn: a pole-zero doublet can carry the continuous phase a full turn
        # round, which would read as a margin 360 deg off (the model reads it the same way).
        "let pm_raw = 180 + phase_at_gbw",
        "let phase_margin = pm_raw - 360 * floor((pm_raw + 180) / 360)",
        f"echo {tag} {M.gain_db} $&gain_db",
        f"echo {tag} {M.gbw_hz} $&gbw_hz",
        f"echo {tag} {M.phase_margin_deg} $&phase_margin",
        # Input-referred noise density at 1 Hz (flicker) and 100 Hz (index 10 of a 5-per-decade sweep): with
        # the DC loop closed only through the inductor this is the open-loop amplifier's own noise.
        *([f"alter rnetwork = {r_network_noise:.6g}"] if r_network_noise > 0 else []),
        "noise v(out) vin dec 5 1 100",
        "setplot noise1",
        "let noise_1hz = inoise_spectrum[0]",  # ngspice reports V/sqrt(Hz)
        "let noise_100hz = inoise_spectrum[10]",
        f"echo {tag} {M.noise_1hz_v_rthz} $&noise_1hz",
        f"echo {tag} {M.noise_100hz_v_rthz} $&noise_100hz",
        # Common-mode and supply gains at 0.1 Hz: the AC source moved to the common-mode level, then to
        # the supply. Rejection ratios are the open-loop gain over these.
        "alter vin ac = 0",
        "alter vcm ac = 1",
        "ac lin 1 0.1 0.1",
        "let cm_gain = db(mag(v(out)))",
        f"echo {tag} {CM_GAIN} $&cm_gain",
        "alter vcm ac = 0",
        "alter vsupply ac = 1",
        "ac lin 1 0.1 0.1",
        "let supply_gain = db(mag(v(out)))",
        f"echo {tag} {SUPPLY_GAIN} $&supply_gain",
        "quit 0",
        ".endc",
        ".end",
        "",
    ])


def swing_testbench(build: Build, i: int, tech: Technology, cond: Conditions, name: str, subckt_file: str,
                    data_file: str, step: float = 0.005) -> str:
    """DC sweep into the load: the amplifier as an inverter of gain -1 around the common-mode level
    (feedback by controlled sources, so nothing but the load loads the output), the set point swept rail
    to rail. The output and the
    set point go to `data_file`; where the output stops following the set point is the usable swing."""
    rl = _load(cond)
    return "\n".join([
        f"* ampfront output-swing testbench for {name}: DC sweep into the load",
        *model_lines(build, i, tech),
        f".include {subckt_file}",
        f".temp {tech.temperature - 273.15:g}",
        f"Vsupply vdd 0 {cond.vdd:.6g}",
        "Vground vss 0 0",
        f"Vcm cm 0 {cond.v_cm:.6g}",
        f"Xamp cm fb out vdd vss {name}",
        # Ideal feedback v(fb) = (v(out) + v(set)) / 2: no resistor loading a high-impedance output.
        "Ehalf_out fb mid out 0 0.5",
        "Ehalf_set mid 0 set 0 0.5",
        f"Vset set 0 {cond.v_cm:.6g}",
        rl,
        # Tight tolerances: the open-loop gain is read from how closely the output follows the set point.
        ".options reltol=1e-7 abstol=1e-15 vntol=1e-10",
        ".control",
        "set noaskquit",
        # The output is 2 v_cm - v(set): sweeping the set point over [2 v_cm - VDD, 2 v_cm] takes the output
        # rail to rail whatever the common mode (an off-centre v_cm would otherwise cut one end short).
        f"dc Vset {2 * cond.v_cm - cond.vdd:.6g} {2 * cond.v_cm:.6g} {step:g}",
        f"wrdata {data_file} v(out)",
        "quit 0",
        ".endc",
        ".end",
        "",
    ])
