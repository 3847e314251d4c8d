"""Every metric and every spec key, declared once.

A metric is a figure the evaluator, the noise analysis or a topology reports for each design, always in SI
units; a spec key is what a study file may bound. The study schema, the constraints, the objectives, the
report's labels and units, the CSV columns and `ampfront check`'s comparison all read these tables, so a new
figure is one line here (plus the code that computes it).
"""

from __future__ import annotations

from dataclasses import dataclass
from types import SimpleNamespace
from typing import Literal

from .units import eng

Sense = Literal["min", "max"]


@dataclass(frozen=True)
class Metric:
    """One figure of merit. `unit` is the SI unit of the stored value; `shown` says how a person reads it:
    with an engineering prefix on `unit` ("eng"), or as a plain number in `unit` after multiplying by
    `scale` ("fixed", for dB, degrees, µm², V/µs)."""

    name: str
    unit: str
    label: str
    better: Sense | None = None       # "max": larger is better; None: neither (a level, a count)
    shown: Literal["eng", "fixed"] = "eng"
    scale: float = 1.0
    display_unit: str = ""            # unit text shown for "fixed" metrics (defaults to `unit`)
    digits: int = 3
    in_report: bool = False           # a column of the report's design table and its hover text
    doc: str = ""

    def format(self, value: float) -> str:
        if self.shown == "eng":
            return eng(value, self.display_unit or self.unit, self.digits)
        text = self.display_unit or self.unit
        if value is None or value != value:
            return f"n/a {text}"
        shown = value * self.scale
        # 20000 µm² reads as such, not as 2e+04: whole numbers past the shown digits keep every digit.
        if abs(shown) >= 10 ** self.digits:
            return f"{shown:,.0f} {text}"
        return f"{shown:.{self.digits}g} {text}"

    @property
    def axis_title(self) -> str:
        unit = self.display_unit or self.unit
        return f"{self.label} ({unit})" if unit and unit != "1" else self.label


def _m(*args, **kwargs) -> Metric:
    return Metric(*args, **kwargs)


_DECLARED = (
    # The open loop, measured as the testbench measures it.
    _m("gain_db", "dB", "DC gain", "max", "fixed", in_report=True),
    _m("gbw_hz", "Hz", "GBW", "max", in_report=True, doc="unity-gain frequency of the open loop"),
    _m("phase_margin_deg", "deg", "Phase margin", "max", "fixed", display_unit="°", in_report=True),
    _m("gain_margin_db", "dB", "Gain margin", "max", "fixed", in_report=True),
    _m("rhp_poles", "1", "Open-loop RHP poles", "min", "fixed", display_unit="", doc="right-half-plane poles"),
    _m("cmrr_db", "dB", "CMRR", "max", "fixed", in_report=True, doc="low-frequency, unmismatched circuit"),
    _m("psrr_db", "dB", "PSRR", "max", "fixed", in_report=True, doc="low-frequency, from the positive supply"),
    _m("output_resistance_ohm", "Ω", "Output resistance", "min", in_report=True),
    # The loop closed at the study's feedback factor (unity by default), from the same circuit.
    _m("cl_rhp_poles", "1", "Closed-loop RHP poles", "min", "fixed", display_unit="",
       doc="closed-loop poles with Re(s) >= 0: unstable however the margins read"),
    _m("cl_stable", "1", "Closed-loop stable", "max", "fixed", display_unit=""),
    _m("cl_pole_hz", "Hz", "Dominant closed-loop pole"),
    _m("cl_damping", "1", "Closed-loop damping", "max", "fixed", display_unit=""),
    _m("overshoot_pct", "%", "Small-step overshoot", "min", "fixed", in_report=True),
    _m("settling_s", "s", "Small-step settling (1 %)", "min"),
    _m("loop_crossover_hz", "Hz", "Loop-gain crossover", "max"),
    _m("loop_phase_margin_deg", "deg", "Loop phase margin", "max", "fixed", display_unit="°", in_report=True,
       doc="of the loop broken at the inverting input, where the feedback closes"),
    _m("loop_phase_min_deg", "deg", "Lowest loop phase above unity gain", "max", "fixed", display_unit="°"),
    _m("loop_gain_margin_db", "dB", "Loop gain margin", "max", "fixed", in_report=True,
       doc="how far inside -1 the loop's Nyquist curve crosses the negative real axis (-inf: left of it)"),
    _m("conditionally_stable", "1", "Conditionally stable", "min", "fixed", display_unit="",
       doc="stable, but the loop phase falls below -180 deg while the loop gain exceeds one"),
    # The application the study states (topologies/application.py): the closed loop at its beta.
    _m("gain_error", "1", "Static gain error", "min", "fixed", scale=100.0, display_unit="%", in_report=True,
       doc="1 - beta A_CL of the closed loop's DC solution; 1 / (1 + A0 beta) in the textbook form"),
    _m("step_settling_s", "s", "Settling time", "min", in_report=True,
       doc="slewing, then linear settling from the closed loop's poles and residues"),
    _m("step_slope_v_per_s", "V/s", "Steepest slope of the stated step", None, "fixed", scale=1e-6,
       display_unit="V/µs", doc="the slew rate where the step slews, else the linear response's"),
    # Budgets.
    _m("power_w", "W", "Power", "min", in_report=True),
    _m("supply_current_a", "A", "Supply current", "min"),
    _m("area_m2", "m²", "Area", "min", "fixed", scale=1e12, display_unit="µm²", digits=4, in_report=True,
       doc="devices with their diffusion and the layout overhead, capacitors and resistors (Layout)"),
    _m("max_device_width_m", "m", "Widest device", "min", doc="total width of the widest device group"),
    _m("bias_share", "1", "Bias share of supply current", "min", "fixed", scale=100.0, display_unit="%",
       in_report=True, doc="reference currents of the bias network over the whole supply current"),
    _m("reference_ratio", "1", "Smallest reference / technology floor", "max", "fixed", display_unit="×"),
    _m("min_width_ratio", "1", "Narrowest device / w_min", "max", "fixed", display_unit="× w_min"),
    _m("sat_min_v", "V", "Smallest saturation margin", "max", doc="min over devices of VDS - Vdsat"),
    _m("dc_residual", "1", "KCL residual", "min", "fixed", display_unit="× supply current"),
    # Large signal: the topology's own figures.
    _m("slew_v_per_s", "V/s", "Slew rate", "max", "fixed", scale=1e-6, display_unit="V/µs", in_report=True),
    _m("out_high_v", "V", "Highest linear output", "max"),
    _m("out_low_v", "V", "Lowest linear output", "min"),
    _m("swing_v", "V", "Output swing", "max", in_report=True, doc="out_high_v - out_low_v, peak to peak"),
    _m("cm_low_v", "V", "Lowest input common mode", "min"),
    _m("cm_high_v", "V", "Highest input common mode", "max"),
    _m("peak_source_a", "A", "Peak source current", "max"),
    _m("peak_sink_a", "A", "Peak sink current", "max"),
    _m("peak_out_a", "A", "Peak output current", "max", in_report=True, doc="the smaller of source and sink"),
    _m("offset_sys_v", "V", "Systematic offset", None),
    _m("offset_sigma_v", "V", "Offset (1σ)", "min", in_report=True, doc="threshold mismatch, Pelgrom"),
    # Noise, input-referred.
    _m("noise_thermal_v_rthz", "V/√Hz", "White noise", "min", in_report=True),
    _m("noise_flicker_1hz_v_rthz", "V/√Hz", "Flicker noise at 1 Hz", "min"),
    _m("noise_1hz_v_rthz", "V/√Hz", "Noise at 1 Hz", "min", doc="white floor and flicker together"),
    _m("noise_100hz_v_rthz", "V/√Hz", "Noise at 100 Hz", "min"),
    _m("noise_corner_hz", "Hz", "1/f corner", "min", in_report=True),
    _m("noise_rms_v", "V", "Noise in band", "min", display_unit="Vrms", in_report=True),
    _m("noise_spot_v_rthz", "V/√Hz", "Spot noise (closest to its limit)", "min",
       doc="input-referred density at the study's max_noise_at point that comes nearest its limit"),
    _m("noise_spot_ratio", "1", "Spot noise / its limit", "min", "fixed", display_unit="×"),
    # Output-stage figures.
    _m("quiescent_out_a", "A", "Output quiescent current", None),
    _m("min_device_current_a", "A", "Least output-device current at full drive", None),
    # Hand analysis kept for explanation beside the solver's figure.
    _m("gbw_hand_hz", "Hz", "GBW (dominant-pole hand form)", None),
)
METRICS: dict[str, Metric] = {m.name: m for m in _DECLARED}
# Names for code outside the topologies: `M.gain_db` rather than a string literal, so a misspelt name fails
# loudly and every name stays declared here once.
M = SimpleNamespace(**{name: name for name in METRICS})

# Headroom a topology budgets for parts it draws as ideal sources: `sat_<role>_v`, joined to the
# saturation constraint like every device's own VDS - Vdsat.
HEADROOM_PREFIX, HEADROOM_SUFFIX = "sat_", "_v"


def is_headroom(name: str) -> bool:
    return name.startswith(HEADROOM_PREFIX) and name.endswith(HEADROOM_SUFFIX) and name != "sat_min_v"


def metric(name: str) -> Metric:
    """The declared metric, or a headroom entry described from its role."""
    if name in METRICS:
        return METRICS[name]
    if is_headroom(name):
        role = name[len(HEADROOM_PREFIX):-len(HEADROOM_SUFFIX)]
        return Metric(name, "V", f"Saturation margin of {role.replace('_', ' ')}", "max")
    raise KeyError(f"'{name}' is not a declared metric (topologies/catalog.py)")


# What every core topology must report in Build.metrics (the evaluator derives the rest).
CORE_REPORTS = frozenset({"slew_v_per_s", "out_high_v", "out_low_v", "cm_low_v", "cm_high_v", "offset_sys_v",
                          "offset_sigma_v", "peak_source_a", "peak_sink_a"})
# What an output stage must report: the figures of the new output it replaces.
STAGE_REPORTS = frozenset({"slew_v_per_s", "out_high_v", "out_low_v", "peak_source_a", "peak_sink_a"})
# Computed by the evaluator from a topology's figures; a topology never sets these.
DERIVED = frozenset({"swing_v", "peak_out_a"})


@dataclass(frozen=True)
class Objective:
    """A quantity a study may map on its fronts; `log` when it spans decades (searched as log10)."""

    name: str
    metric: str
    log: bool

    @property
    def sense(self) -> Sense:
        return METRICS[self.metric].better


OBJECTIVES: dict[str, Objective] = {o.name: o for o in (
    Objective("gain", "gain_db", False),
    Objective("power", "power_w", True),
    Objective("gbw", "gbw_hz", True),
    Objective("area", "area_m2", True),
    Objective("phase_margin", "phase_margin_deg", False),
    Objective("settling", "step_settling_s", True),
)}


@dataclass(frozen=True)
class Bound:
    """A spec key that bounds one metric: metric >= value (sense "min") or <= value ("max").

    `dimension` is how the study writes the value (units.parse dimension); `floor` keeps a bound near zero
    (dB, degrees) from blowing up the search's normalized violation."""

    key: str
    metric: str
    sense: Sense
    dimension: str
    label: str
    floor: float = 0.0
    doc: str = ""
    # Further metrics the same bound holds: the phase margin of the open loop as the testbench measures it
    # and of the loop as the feedback closes it (they part where the tail node's capacitance separates the
    # two inputs' paths) must both meet it. Each is (suffix, metric); its constraint is named <key>_<suffix>.
    also: tuple[tuple[str, str], ...] = ()
    # Held even when the study does not set it: what any op-amp block a designer would draw stays within
    # (0.1 mm² of area, 2 mm of width for one device group, a 6 dB gain margin; common practice, README
    # "Buildability" and "Stability, as the loop closes").
    default: float | None = None
    # "value": one quantity in `dimension`; "spots": a list of [limit, frequency] pairs (the metric is then
    # the worst spot's ratio to its limit, bounded by 1).
    form: Literal["value", "spots"] = "value"


BOUNDS: dict[str, Bound] = {b.key: b for b in (
    Bound("min_gain", "gain_db", "min", "dB", "minimum DC gain", 1.0),
    Bound("min_gbw", "gbw_hz", "min", "Hz", "minimum GBW"),
    Bound("min_phase_margin", "phase_margin_deg", "min", "deg", "minimum phase margin", 1.0,
          also=(("loop", "loop_phase_margin_deg"),)),
    # Held at 6 dB unless the study states its own (common practice: the loop gain may double before the
    # loop rings out). A phase margin alone lets the search trade it away: on the sensor-readout demo 70 of
    # the telescopic cascode's 100 front designs had under 6 dB, some a resonance grazing -1 that lifts
    # their GBW by half (DEVELOPERS.md, "Gain margin by default").
    Bound("min_gain_margin", "gain_margin_db", "min", "dB", "minimum gain margin", 1.0, default=6.0,
          also=(("loop", "loop_gain_margin_db"),)),
    Bound("min_slew_rate", "slew_v_per_s", "min", "V/s", "minimum slew rate"),
    Bound("min_output_swing", "swing_v", "min", "V", "minimum output swing (peak to peak)"),
    Bound("max_power", "power_w", "max", "W", "maximum power"),
    Bound("max_area", "area_m2", "max", "m^2", "maximum area", default=0.1e-6),
    Bound("max_device_width", "max_device_width_m", "max", "m", "maximum device width", default=2e-3),
    Bound("max_offset_sigma", "offset_sigma_v", "max", "V", "maximum 1σ offset"),
    Bound("max_noise_density", "noise_thermal_v_rthz", "max", "V/sqrt(Hz)", "maximum white noise density"),
    Bound("max_noise_rms", "noise_rms_v", "max", "V", "maximum noise in band"),
    # max_noise_at = [["20 nV/sqrt(Hz)", "10 kHz"], ...]: read by the study into Conditions.noise_spots;
    # the constraint holds the worst spot's ratio to its limit at 1.
    Bound("max_noise_at", "noise_spot_ratio", "max", "V/sqrt(Hz)", "maximum spot noise", form="spots"),
    Bound("min_output_current", "peak_out_a", "min", "A", "minimum output current"),
    Bound("min_cmrr", "cmrr_db", "min", "dB", "minimum CMRR", 1.0),
    Bound("min_psrr", "psrr_db", "min", "dB", "minimum PSRR", 1.0),
    Bound("saturation_margin", "sat_min_v", "min", "V", "saturation margin on every device", 0.1),
    # The application's bounds: the study also states closed_loop_gain or feedback_factor (a beta to judge
    # them at). A gain error e asks A0 >= (1 - e) / (e beta) (topologies/application.py).
    Bound("max_gain_error", "gain_error", "max", "1", "maximum static gain error", 1e-4),
    Bound("max_settling_time", "step_settling_s", "max", "s", "maximum settling time"),
)}


@dataclass(frozen=True)
class Rule:
    """A constraint every design obeys whatever the study says (`scale` normalizes its violation)."""

    key: str
    metric: str
    sense: Sense
    value: float
    scale: float
    why: str


RULES: dict[str, Rule] = {r.key: r for r in (
    Rule("min_width", "min_width_ratio", "min", 1.0, 1.0, "no device narrower than the technology's minimum"),
    Rule("dc_solved", "dc_residual", "max", 1e-3, 1e-3,
         "the DC operating point satisfies KCL to 0.1 % of the supply current"),
    Rule("min_reference_current", "reference_ratio", "min", 1.0, 1.0,
         "no bias reference below the technology's min_reference_current (leakage, mirror matching)"),
    Rule("drives_both_ways", "peak_out_a", "min", 0.0, 1e-6,
         "the output can both source and sink current into the load from the common mode (a class-AB stage "
         "whose core cannot drive one of its gates far enough cannot)"),
    Rule("open_loop_stable", "rhp_poles", "max", 0.0, 1.0,
         "an open loop with right-half-plane poles is unstable whatever its phase margin reads"),
    Rule("closed_loop_stable", "cl_rhp_poles", "max", 0.0, 1.0,
         "the loop closed at the study's feedback factor has no right-half-plane pole"),
    Rule("not_conditionally_stable", "conditionally_stable", "max", 0.0, 1.0,
         "no loop phase below -180 deg while the loop gain exceeds one (it could oscillate when slewing "
         "or when the gain drops); a study may allow it with allow_conditional_stability = true"),
)}
# Rules a study may lift (top-level key -> rule).
OPTIONAL_RULES = {"allow_conditional_stability": "not_conditionally_stable"}


# The input common-mode range a study asks for, as two bounds on what the amplifier accepts: the lowest
# level it accepts must lie below the range's low end, the highest above its high end (values: the range).
INPUT_CM = (Rule("input_cm_low", "cm_low_v", "max", float("nan"), 0.1, "accepts the lowest input common mode"),
            Rule("input_cm_high", "cm_high_v", "min", float("nan"), 0.1, "accepts the highest input common mode"))


@dataclass(frozen=True)
class Condition:
    """A spec key that describes the surroundings rather than bounding a metric."""

    key: str
    dimension: str
    label: str
    unit: str           # shown unit ("eng" formatting)
    required: bool = False
    form: Literal["value", "range", "band"] = "value"
    # How the value is shown: engineering prefix on `unit`, a fraction in percent, a plain number, as written.
    shown: Literal["eng", "percent", "plain", "text"] = "eng"


CONDITIONS: dict[str, Condition] = {c.key: c for c in (
    Condition("supply", "V", "supply", "V", required=True),
    Condition("load_capacitance", "F", "load capacitance", "F", required=True),
    Condition("load_resistance", "Ohm", "load resistance", "Ω"),
    Condition("input_cm", "V", "input common mode", "V", form="range"),
    Condition("noise_band", "Hz", "noise band", "Hz", form="band"),
    # The application (topologies/application.py): a closed-loop gain in a configuration, or beta itself.
    Condition("closed_loop_gain", "1", "closed-loop gain", "V/V", shown="plain"),
    Condition("configuration", "str", "feedback configuration", "", shown="text"),
    Condition("feedback_factor", "1", "feedback factor", "V/V", shown="plain"),
    Condition("feedback_resistance", "Ohm", "feedback network resistance (Rf + Rg)", "Ω"),
    Condition("step", "V", "output step", "V"),
    Condition("settle_band", "1", "settling band", "%", shown="percent"),
)}

# Saturation headroom kept on every device unless the study says otherwise (common practice: 50-100 mV).
DEFAULT_SATURATION_MARGIN = 0.05


def spec_keys() -> tuple[str, ...]:
    return tuple(CONDITIONS) + tuple(BOUNDS)


def format_spec(key: str, value) -> str:
    """A spec value as a person reads it, in the unit of the metric it bounds."""
    if key == "max_noise_at":
        return ", ".join(f"{eng(limit, 'V/√Hz')} at {eng(f, 'Hz')}" for limit, f in value)
    if key in BOUNDS:
        return METRICS[BOUNDS[key].metric].format(value)
    condition = CONDITIONS[key]
    if condition.shown == "text":
        return str(value).replace("_", "-")
    if condition.shown == "percent":
        return f"{100.0 * value:.3g} {condition.unit}"
    if condition.shown == "plain":
        return f"{value:.4g} {condition.unit}"
    if isinstance(value, (tuple, list)):
        low, high = value
        if low == high:
            return eng(low, condition.unit)
        return f"{eng(low, condition.unit)} to {eng(high, condition.unit)}"
    return eng(value, condition.unit)


def spec_label(key: str) -> str:
    return BOUNDS[key].label if key in BOUNDS else CONDITIONS[key].label


# How closely `ampfront check` expects ngspice to agree with the model, per technology kind: ("abs", bound in
# the metric's unit) or ("rel", fraction). Square law against ngspice level 1 is the same equations, so only
# numerics separate them; tables against BSIM4 add interpolation and the model's own noise and charge
# formulation. Bounds measured on every topology (DEVELOPERS.md, known disagreements).
AGREEMENT: dict[str, dict[str, tuple[str, float]]] = {
    # Tables: weak-inversion, long-channel designs (now inside the search box: gm/ID to ~30, L to 8 um) read
    # up to ~2.5 dB off BSIM4, the output resistance multiplying interpolated gds values (DEVELOPERS.md).
    "gain_db": {"square_law": ("abs", 0.5), "gm_id_tables": ("abs", 3.0)},
    "gbw_hz": {"square_law": ("rel", 0.05), "gm_id_tables": ("rel", 0.10)},
    "phase_margin_deg": {"square_law": ("abs", 3.0), "gm_id_tables": ("abs", 5.0)},
    # dB, read where the open loop's phase first passes -180 deg, both sides clipped at 40 dB (verdict.py):
    # measured within 0.36 dB of BSIM4 on 42 front designs of the sensor and ladder demos, class AB included.
    "gain_margin_db": {"square_law": ("abs", 1.0), "gm_id_tables": ("abs", 1.0)},
    "supply_current_a": {"square_law": ("rel", 0.02), "gm_id_tables": ("rel", 0.03)},
    "noise_1hz_v_rthz": {"square_law": ("rel", 0.05), "gm_id_tables": ("rel", 0.15)},
    "noise_100hz_v_rthz": {"square_law": ("rel", 0.05), "gm_id_tables": ("rel", 0.15)},
    "cmrr_db": {"square_law": ("abs", 2.0), "gm_id_tables": ("abs", 6.0)},
    "psrr_db": {"square_law": ("abs", 2.0), "gm_id_tables": ("abs", 6.0)},
    # Percentage points, from the closed-loop small-step transient (the bound for PM >= 45 deg).
    "overshoot_pct": {"square_law": ("abs", 3.0), "gm_id_tables": ("abs", 4.0)},
    # The application testbench (_loop.sp): the loop's phase margin as the open loop's; the static gain error
    # relative (it is 1 / (1 + A0 beta), so the gain bound in dB sets it: 0.5 dB is 6 %, 3 dB 41 %); settling
    # within 20 %; the slope where the step slews within 10 % (where it does not, the slope is not judged:
    # the pair's large-signal gm makes it nonlinear, and the settling time already judges the response).
    "loop_phase_margin_deg": {"square_law": ("abs", 3.0), "gm_id_tables": ("abs", 5.0)},
    "gain_error": {"square_law": ("rel", 0.1), "gm_id_tables": ("rel", 0.5)},
    "step_settling_s": {"square_law": ("rel", 0.2), "gm_id_tables": ("rel", 0.2)},
    "step_slope_v_per_s": {"square_law": ("rel", 0.1), "gm_id_tables": ("rel", 0.1)},
}
# Power is the supply current at the study's supply, so it agrees as the current does.
AGREEMENT["power_w"] = AGREEMENT["supply_current_a"]
# Swing from the DC sweep into the load: the model's ends keep every device of the signal path saturated, so
# they may end up to SWING_SHORTFALL_V short of where the swept gain collapses 20 dB, and may claim at most
# SWING_SLACK_V beyond it (each end; twice both for the swing itself).
SWING_SLACK_V = 0.05
SWING_SHORTFALL_V = 0.3
