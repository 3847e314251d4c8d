"""Study files: what to design (spec), what to map (objectives), where (technology) and how hard to search.

Parsed and validated once, at the edge; everything downstream gets SI floats.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ampfront.topologies.base import Conditions

from ampfront.topologies.errors import InputError
from ampfront.topologies.schema import Field, check_keys, read_table, read_toml, suggest
from ampfront.topologies.process.techfile import corners, resolve

DEFAULT_TECHNOLOGY = "sky130"   # its default corner: tt, 27 degC

# Objectives: the metric behind each, its direction, and the transform the search works in (log for
# quantities that span decades, so the front is spread evenly over them).
OBJECTIVES = {
    "gain": ("gain_db", "max", False),
    "power": ("power_w", "min", True),
    "gbw": ("gbw_hz", "max", True),
    "area": ("area_um2", "min", True),
    "phase_margin": ("phase_margin_deg", "max", False),
}

SPEC_SCHEMA = {
    "supply": Field("V", True),
    "load_capacitance": Field("F", True),
    "load_resistance": Field("Ohm"),
    "min_gain": Field("dB"),
    "min_gbw": Field("Hz"),
    "min_phase_margin": Field("deg"),
    "min_gain_margin": Field("dB"),
    "min_slew_rate": Field("V/s"),
    "min_output_swing": Field("V"),
    "input_cm": Field("V"),          # or a two-element list, see _input_cm
    "max_power": Field("W"),
    "max_area": Field("m^2"),
    "max_offset_sigma": Field("V"),
    "max_noise_density": Field("V/sqrt(Hz)"),
    "max_noise_rms": Field("V"),
    "min_output_current": Field("A"),
    "min_cmrr": Field("dB"),
    "min_psrr": Field("dB"),
    "saturation_margin": Field("V"),
}
SEARCH_SCHEMA = {"population": Field("int"), "generations": Field("int"), "seed": Field("int", positive=False)}
TOP_KEYS = {"title", "topologies", "objectives", "technology", "corner", "spec", "search"}

# Saturation headroom kept on every device unless the study says otherwise (common practice: 50-100 mV).
DEFAULT_SATURATION_MARGIN = 0.05


@dataclass(frozen=True)
class Constraint:
    """metric >= bound (sense 'min') or metric <= bound (sense 'max'); margin is positive when met."""

    name: str
    metric: str
    sense: str
    bound: float
    scale: float
    unit: str

    def margin(self, metrics: dict[str, np.ndarray]) -> np.ndarray:
        value = metrics[self.metric]
        return value - self.bound if self.sense == "min" else self.bound - value

    def violation(self, metrics: dict[str, np.ndarray]) -> np.ndarray:
        """pymoo convention: <= 0 when satisfied, normalized so constraints weigh alike."""
        return -self.margin(metrics) / self.scale


@dataclass(frozen=True)
class Study:
    path: Path
    title: str
    spec: dict
    conditions: Conditions
    cm_range: tuple[float, float]
    constraints: tuple[Constraint, ...]
    objectives: tuple[str, ...]
    topologies: tuple[str, ...]
    technology: Path
    corner: str | None
    population: int
    generations: int
    seed: int
    digest: str


def _input_cm(source: str, raw, supply: float) -> tuple[float, float]:
    field = Field("V", positive=False)
    from ampfront.topologies.schema import read_value

    if raw is None:
        return supply / 2, supply / 2
    if isinstance(raw, list):
        if len(raw) != 2:
            raise InputError(source, "spec.input_cm", 'a level "0.9 V" or a range ["0.6 V", "1.2 V"]', raw)
        low, high = (read_value(source, "spec.input_cm", v, field) for v in raw)
        if low > high:
            raise InputError(source, "spec.input_cm", "a range whose first value is the lower", raw)
    else:
        low = high = read_value(source, "spec.input_cm", raw, field)
    if low < 0 or high > supply:
        raise InputError(source, "spec.input_cm", f"levels between 0 V and the supply ({supply:g} V)", raw)
    return low, high


DEFAULT_NOISE_BAND = (1.0, 1e6)   # Hz


def _noise_band(source: str, raw) -> tuple[float, float]:
    from ampfront.topologies.schema import read_value

    if raw is None:
        return DEFAULT_NOISE_BAND
    expected = 'a band ["1 Hz", "100 kHz"], lower edge first, both above 0'
    if not isinstance(raw, list) or len(raw) != 2:
        raise InputError(source, "spec.noise_band", expected, raw)
    low, high = (read_value(source, "spec.noise_band", v, Field("Hz")) for v in raw)
    if not 0 < low < high:
        raise InputError(source, "spec.noise_band", expected, raw)
    return low, high


def load_study(path: Path, topology_names) -> Study:
    source = str(path)
    raw = read_toml(path)
    check_keys(source, "", raw, TOP_KEYS)
    if "spec" not in raw:
        raise InputError(source, "spec", "a [spec] table", "missing")
    spec_raw = dict(raw["spec"]) if isinstance(raw["spec"], dict) else raw["spec"]
    cm_raw = spec_raw.pop("input_cm", None) if isinstance(spec_raw, dict) else None
    band_raw = spec_raw.pop("noise_band", None) if isinstance(spec_raw, dict) else None
    spec = read_table(source, "spec.", spec_raw, SPEC_SCHEMA)
    supply = spec["supply"]
    cm_range = _input_cm(source, cm_raw, supply)
    noise_band = _noise_band(source, band_raw)
    swing = spec.get("min_output_swing")
    if swing is not None and swing >= supply:
        raise InputError(source, "spec.min_output_swing", f"a swing below the supply ({supply:g} V)", swing)
    if spec.get("min_gain_margin", 1.0) <= 0:
        raise InputError(source, "spec.min_gain_margin", "a positive margin in dB")

    objectives = raw.get("objectives", ["power", "gbw"])
    if (not isinstance(objectives, list) or not 2 <= len(objectives) <= 5
            or len(set(map(str, objectives))) != len(objectives)):
        raise InputError(source, "objectives", f"a list of 2 to 5 distinct names from {', '.join(OBJECTIVES)}",
                         objectives)
    for name in objectives:
        if name not in OBJECTIVES:
            raise InputError(source, "objectives",
                             f"names from {', '.join(OBJECTIVES)}{suggest(str(name), OBJECTIVES)}", name)

    topologies = raw.get("topologies", ["two_stage_miller"])
    if not isinstance(topologies, list) or not topologies:
        raise InputError(source, "topologies", f"a non-empty list from {', '.join(topology_names)}", topologies)
    for name in topologies:
        if name not in topology_names:
            raise InputError(source, "topologies",
                             f"names from {', '.join(topology_names)}{suggest(str(name), topology_names)}", name)

    search = read_table(source, "search.", raw.get("search", {}), SEARCH_SCHEMA)
    technology = raw.get("technology", DEFAULT_TECHNOLOGY)
    if not isinstance(technology, str):
        raise InputError(source, "technology", "a shipped technology name or a .toml file path", technology)
    tech_path = resolve(technology, path.parent, source)
    corner = raw.get("corner")
    if corner is not None:
        shipped_corners = corners(tech_path)
        if corner not in shipped_corners:
            raise InputError(source, "corner", f"a corner the technology ships: {', '.join(shipped_corners) or 'none'}"
                             f"{suggest(str(corner), shipped_corners)}", corner)

    constraints = _constraints(spec, cm_range)
    conditions = Conditions(vdd=supply, c_load=spec["load_capacitance"],
                            r_load=spec.get("load_resistance", np.inf), v_cm=0.5 * (cm_range[0] + cm_range[1]),
                            noise_band=noise_band)
    return Study(
        path=path, title=str(raw.get("title", path.stem)), spec=spec, conditions=conditions,
        cm_range=cm_range, constraints=constraints, objectives=tuple(objectives),
        topologies=tuple(topologies), technology=tech_path, corner=corner,
        population=search.get("population", 100), generations=search.get("generations", 60),
        seed=search.get("seed", 1), digest=hashlib.sha256(path.read_bytes()).hexdigest(),
    )


def _constraints(spec: dict, cm_range: tuple[float, float]) -> tuple[Constraint, ...]:
    """Every spec bound becomes a constraint (objectives included: a front of designs that meet spec)."""
    table = [
        ("min_gain", "gain_db", "min", "dB"), ("min_gbw", "gbw_hz", "min", "Hz"),
        ("min_phase_margin", "phase_margin_deg", "min", "deg"), ("min_gain_margin", "gain_margin_db", "min", "dB"),
        ("min_slew_rate", "slew_v_per_us", "min", "V/us"), ("min_output_swing", "swing_v", "min", "V"),
        ("max_power", "power_w", "max", "W"), ("max_area", "area_um2", "max", "um^2"),
        ("max_offset_sigma", "offset_sigma_v", "max", "V"),
        ("max_noise_density", "noise_thermal_v_rthz", "max", "V/sqrt(Hz)"),
        ("max_noise_rms", "noise_rms_v", "max", "V"),
        ("min_output_current", "peak_out_a", "min", "A"),
        ("min_cmrr", "cmrr_db", "min", "dB"), ("min_psrr", "psrr_db", "min", "dB"),
    ]
    out = []
    for key, metric, sense, unit in table:
        if key in spec:
            bound = spec[key]
            if key == "min_slew_rate":
                bound *= 1e-6
            elif key == "max_area":
                bound *= 1e12
            out.append(Constraint(key, metric, sense, bound, max(abs(bound), 1.0 if unit == "dB" else 0.0), unit))
    margin = spec.get("saturation_margin", DEFAULT_SATURATION_MARGIN)
    out.append(Constraint("saturation_margin", "sat_min_v", "min", margin, 0.1, "V"))
    out.append(Constraint("min_width", "min_width_ratio", "min", 1.0, 1.0, "x w_min"))
    # A DC operating point that does not satisfy KCL to 0.1 % of the supply current is not a design.
    out.append(Constraint("dc_solved", "dc_residual", "max", 1e-3, 1e-3, "x supply"))
    # An amplifier whose open loop has right-half-plane poles is unstable whatever its phase margin says.
    out.append(Constraint("open_loop_stable", "rhp_poles", "max", 0.0, 1.0, "poles"))
    # The input common-mode range must lie inside what the amplifier accepts.
    out.append(Constraint("input_cm_low", "cm_low_v", "max", cm_range[0], 0.1, "V"))
    out.append(Constraint("input_cm_high", "cm_high_v", "min", cm_range[1], 0.1, "V"))
    return tuple(out)
