"""Study files: what to design (spec), what to map (objectives), where (technology) and how hard to search.

Parsed and validated once, at the edge; everything downstream gets SI floats.
"""

from __future__ import annotations

import hashlib
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ampfront.topologies.application import CONFIGURATIONS, feedback_factor
from ampfront.topologies.base import Conditions
from ampfront.topologies.catalog import BOUNDS, CONDITIONS, DEFAULT_SATURATION_MARGIN, INPUT_CM, OBJECTIVES, OPTIONAL_RULES, RULES

from ampfront.optimize.search.ends import END_SHARE
from ampfront.topologies.errors import InputError
from ampfront.topologies.schema import Field, check_keys, parse_toml, read_table, read_toml, suggest
from ampfront.topologies.units import eng
from ampfront.topologies.process.techfile import corners, default_corner, resolve

DEFAULT_TECHNOLOGY = "sky130"   # its default corner: tt, 27 degC

# The [spec] table, from the catalog: the surroundings, then every bound (input_cm and noise_band, which
# take a range, are read by their own functions below).
SPEC_SCHEMA = {
    **{c.key: Field(c.dimension, c.required) for c in CONDITIONS.values() if c.form == "value"},
    **{b.key: Field(b.dimension) for b in BOUNDS.values() if b.form == "value"},
}
SEARCH_SCHEMA = {"population": Field("int"), "generations": Field("int"), "seed": Field("int", positive=False),
                 "refine": Field("int", positive=False), "budget": Field("int"), "front_designs": Field("int")}
# Search sizes a 24 GB, 2-core machine finishes; beyond them a study is a typo, not a plan. NSGA-II needs a
# handful of parents; numpy seeds are unsigned 32-bit. `refine`: trust-region steps of the refinement after
# the genetic search (search/refine.py), 0 for none; past a few hundred it has long converged. `budget`: the
# converging genetic search's most evaluations per topology (its ends' search comes on top, at most
# ends.END_SHARE of it, and their polish);
# `front_designs`: how many designs of its archive a topology's front keeps.
SEARCH_LIMITS = {"population": (4, 100_000), "generations": (1, 100_000), "seed": (0, 2**32 - 1),
                 "refine": (0, 1_000), "budget": (1_000, 100_000_000), "front_designs": (2, 10_000)}
# Without `generations` the search converges (search/converge.py) and stops on its own, the budget a cap it
# seldom reaches; with it, a fixed NSGA-II run of population x generations, as studies written for it ran.
SEARCH_DEFAULTS = {"seed": 1, "refine": 0}
CONVERGING_DEFAULTS = {"population": 200, "budget": 100_000, "front_designs": 100}
FIXED_DEFAULTS = {"population": 100}
_CONTROL = re.compile(r"[\x00-\x1f\x7f]")
_CORNER_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]{0,23}$")
TOP_KEYS = {"title", "topologies", "objectives", "technology", "corner", "corners", "supply_tolerance", "spec",
            "search", *OPTIONAL_RULES}
MAX_SUPPLY_TOLERANCE = 0.3   # beyond +-30 % a supply is another design, not a tolerance


@dataclass(frozen=True)
class Constraint:
    """metric >= bound (sense 'min') or metric <= bound (sense 'max'); margin is positive when met."""

    name: str
    metric: str
    sense: str
    bound: float
    scale: float

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
    generations: int | None  # None: the converging search, up to `budget` evaluations
    seed: int
    digest: str
    text: str = ""          # the study file as read, so a results folder can be rebuilt from it
    # Corners every design must meet the spec at (the nominal `corner` is sized at and always included),
    # and the supply tolerance each is evaluated at (both ends), 0 for the nominal supply only.
    corners: tuple[str, ...] = ()
    supply_tolerance: float = 0.0
    nominal_corner: str | None = None
    refine: int = 0         # trust-region steps after the genetic search (0: none)
    budget: int | None = None          # the converging search's most evaluations per topology
    front_designs: int | None = None   # designs the converging search's front keeps per topology

    @property
    def most_generations(self) -> int:
        """Generations the search runs at most (a fixed run: exactly)."""
        return self.generations or self.budget // self.population

    def search_label(self) -> str:
        if self.generations:
            label = f"NSGA-II, {self.population} x {self.generations} generations"
        else:
            label = (f"converging NSGA-II, population {self.population}, at most {self.budget:,} evaluations "
                     f"a topology and up to {END_SHARE:.0%} more searching its ends, fronts of up to "
                     f"{self.front_designs} designs")
        return label + (f", then {self.refine} refinement steps" if self.refine else "")


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


def _names(source: str, key: str, raw, choices, low: int, high: int) -> tuple[str, ...]:
    expected = (f"a list of {low} to {high} distinct names from {', '.join(choices)}" if high > low
                else f"a list of names from {', '.join(choices)}")
    if not isinstance(raw, list) or not low <= len(raw) <= high or not all(isinstance(n, str) for n in raw):
        raise InputError(source, key, expected, raw)
    for name in raw:
        if name not in choices:
            raise InputError(source, key, f"names from {', '.join(choices)}{suggest(name, choices)}", name)
    if len(set(raw)) != len(raw):
        duplicate = next(n for n in raw if raw.count(n) > 1)
        raise InputError(source, key, "each name once", duplicate)
    return tuple(raw)


def _search(source: str, raw) -> dict[str, int | None]:
    given = read_table(source, "search.", raw, SEARCH_SCHEMA)
    for key, (low, high) in SEARCH_LIMITS.items():
        if key in given and not low <= given[key] <= high:
            raise InputError(source, f"search.{key}", f"a whole number from {low:,} to {high:,}", given[key])
    if "generations" in given:
        for key in CONVERGING_DEFAULTS.keys() - {"population"}:
            if key in given:
                raise InputError(source, f"search.{key}", "no value beside search.generations (a fixed run); "
                                 "drop generations for a converging search", given[key])
        return {**SEARCH_DEFAULTS, **FIXED_DEFAULTS, "budget": None, "front_designs": None, **given}
    search = {**SEARCH_DEFAULTS, **CONVERGING_DEFAULTS, "generations": None, **given}
    if search["budget"] < 2 * search["population"]:
        raise InputError(source, "search.budget", f"at least two populations ({2 * search['population']:,} "
                         "evaluations)", search["budget"])
    return search


def _title(source: str, raw, default: str) -> str:
    if raw is None:
        return default
    if not isinstance(raw, str) or not raw.strip() or len(raw) > 200 or _CONTROL.search(raw):
        raise InputError(source, "title", "one line of text (up to 200 characters, no control characters)", raw)
    return raw


def _noise_spots(source: str, raw) -> tuple[tuple[float, float], ...]:
    """max_noise_at: one ["20 nV/sqrt(Hz)", "10 kHz"] pair, or a list of them."""
    from ampfront.topologies.schema import read_value

    if raw is None:
        return ()
    expected = 'a limit and a frequency ["20 nV/sqrt(Hz)", "10 kHz"], or a list of such pairs'
    pairs = raw if isinstance(raw, list) and raw and all(isinstance(p, list) for p in raw) else [raw]
    out = []
    for pair in pairs:
        if not isinstance(pair, list) or len(pair) != 2:
            raise InputError(source, "spec.max_noise_at", expected, raw)
        out.append((read_value(source, "spec.max_noise_at", pair[0], Field("V/sqrt(Hz)")),
                    read_value(source, "spec.max_noise_at", pair[1], Field("Hz"))))
    if len(out) > 20:
        raise InputError(source, "spec.max_noise_at", "at most 20 spots", len(out))
    return tuple(out)


@dataclass(frozen=True)
class Application:
    """How the amplifier is used (topologies/application.py), as the Conditions fields it sets."""

    beta: float = 1.0
    inverting: bool = False
    r_network: float = np.inf
    step_v: float = 0.0
    settle_band: float = 0.01
    stated: bool = False    # a closed-loop gain or feedback factor was given


def _application(source: str, spec: dict, raw: dict) -> Application:
    """The application keys, checked together: a gain error or a network needs a loop to sit in."""
    def fail(key, expected):
        raise InputError(source, f"spec.{key}", expected, raw.get(key))

    gain, beta = spec.get("closed_loop_gain"), spec.get("feedback_factor")
    configuration = spec.get("configuration")
    if configuration is not None and configuration not in CONFIGURATIONS:
        fail("configuration", f"one of {', '.join(CONFIGURATIONS)}{suggest(str(configuration), CONFIGURATIONS)}")
    if configuration is not None and gain is None:
        fail("configuration", "a configuration beside closed_loop_gain (feedback_factor states beta itself)")
    if gain is not None and beta is not None:
        fail("feedback_factor", "either closed_loop_gain or feedback_factor, not both")
    configuration = configuration or "non_inverting"
    if gain is not None:
        if configuration == "non_inverting" and gain < 1:
            fail("closed_loop_gain", "a non-inverting gain of at least 1 (G = 1 + Rf / Rg), such as 5")
        beta = feedback_factor(gain, configuration)
    elif beta is not None and beta > 1:
        fail("feedback_factor", "a feedback factor above 0 and at most 1, such as 0.2")
    stated = beta is not None
    for key in ("max_gain_error", "feedback_resistance"):
        if key in spec and not stated:
            fail(key, "a closed_loop_gain (or feedback_factor) beside it: the loop it belongs to")
    if spec.get("max_gain_error", 0.0) >= 1:
        fail("max_gain_error", 'a fraction below 100 %, such as "0.1 %"')
    if spec.get("settle_band", 0.0) >= 1:
        fail("settle_band", 'a fraction below 100 %, such as "0.1 %"')
    if spec.get("step", 0.0) >= spec["supply"]:
        fail("step", f"an output step below the supply ({eng(spec['supply'], 'V')})")
    return Application(beta=beta if stated else 1.0, inverting=configuration == "inverting",
                       r_network=spec.get("feedback_resistance", np.inf), step_v=spec.get("step", 0.0),
                       settle_band=spec.get("settle_band", 0.01), stated=stated)


def load_study(path: Path, topology_names, text: str | None = None) -> Study:
    """Read and validate a study; `text` stands in for the file's content (a results folder's copy)."""
    source = str(path)
    raw, text = read_toml(path) if text is None else (parse_toml(source, text), text)
    check_keys(source, "", raw, TOP_KEYS)
    if "spec" not in raw:
        raise InputError(source, "spec", "a [spec] table", "missing")
    spec_raw = dict(raw["spec"]) if isinstance(raw["spec"], dict) else raw["spec"]
    cm_raw = spec_raw.pop("input_cm", None) if isinstance(spec_raw, dict) else None
    band_raw = spec_raw.pop("noise_band", None) if isinstance(spec_raw, dict) else None
    spots_raw = spec_raw.pop("max_noise_at", None) if isinstance(spec_raw, dict) else None
    spec = read_table(source, "spec.", spec_raw, SPEC_SCHEMA)
    supply = spec["supply"]
    cm_range = _input_cm(source, cm_raw, supply)
    noise_band = _noise_band(source, band_raw)
    spots = _noise_spots(source, spots_raw)
    if spots:
        spec["max_noise_at"] = spots
    application = _application(source, spec, spec_raw)
    swing = spec.get("min_output_swing")
    if swing is not None and swing >= supply:
        raise InputError(source, "spec.min_output_swing", f"a swing below the supply ({eng(supply, 'V')})", raw["spec"]["min_output_swing"])

    objectives = _names(source, "objectives", raw.get("objectives", ["power", "gbw"]), OBJECTIVES, 2, 5)
    names = _names(source, "topologies", raw.get("topologies", ["two_stage_miller"]), list(topology_names), 1,
                   len(topology_names))
    search = _search(source, raw.get("search", {}))
    technology = raw.get("technology", DEFAULT_TECHNOLOGY)
    if not isinstance(technology, str):
        raise InputError(source, "technology", "a shipped technology name or a .toml file path", technology)
    tech_path = resolve(technology, path.parent, source)
    corner = raw.get("corner")
    if corner is not None:
        shipped_corners = corners(tech_path)
        if not isinstance(corner, str) or corner not in shipped_corners:
            raise InputError(source, "corner", f"a corner the technology ships: {', '.join(shipped_corners) or 'none'}"
                             f"{suggest(str(corner), shipped_corners)}", corner)

    corner_list = _corner_list(source, raw.get("corners"), tech_path)
    tolerance = raw.get("supply_tolerance")
    if tolerance is not None:
        from ampfront.topologies.schema import read_value

        tolerance = read_value(source, "supply_tolerance", tolerance, Field("1"))
        if not tolerance < MAX_SUPPLY_TOLERANCE:
            raise InputError(source, "supply_tolerance", f"a tolerance above 0 % and below "
                             f"{MAX_SUPPLY_TOLERANCE:.0%}, as in \"10 %\"", raw["supply_tolerance"])

    lifted = set()
    for key, rule in OPTIONAL_RULES.items():
        allowed = raw.get(key, False)
        if not isinstance(allowed, bool):
            raise InputError(source, key, "true or false", allowed)
        if allowed:
            lifted.add(rule)
    constraints = _constraints(spec, cm_range, frozenset(lifted), application.stated)
    conditions = Conditions(vdd=supply, c_load=spec["load_capacitance"],
                            r_load=spec.get("load_resistance", np.inf), v_cm=0.5 * (cm_range[0] + cm_range[1]),
                            noise_band=noise_band, noise_spots=spots, beta=application.beta,
                            inverting=application.inverting, r_network=application.r_network,
                            step_v=application.step_v, settle_band=application.settle_band,
                            settling="max_settling_time" in spec or "settling" in objectives)
    return Study(
        path=path, title=_title(source, raw.get("title"), path.stem), spec=spec, conditions=conditions,
        cm_range=cm_range, constraints=constraints, objectives=objectives,
        topologies=names, technology=tech_path, corner=corner,
        population=search["population"], generations=search["generations"], seed=search["seed"],
        digest=hashlib.sha256(text.encode("utf-8")).hexdigest(), text=text,
        corners=corner_list, supply_tolerance=tolerance or 0.0, nominal_corner=corner or default_corner(tech_path),
        refine=search["refine"], budget=search["budget"], front_designs=search["front_designs"],
    )


def _corner_list(source: str, raw, tech_path: Path) -> tuple[str, ...]:
    if raw is None:
        return ()
    shipped_corners = corners(tech_path)
    if not shipped_corners:
        raise InputError(source, "corners", "no corners: the technology declares none", raw)
    names = _names(source, "corners", raw, shipped_corners, 1, len(shipped_corners))
    for name in names:
        # A corner's name becomes part of column, file and subcircuit names: a plain identifier only.
        if not _CORNER_NAME.match(name):
            raise InputError(source, "corners", "corner names of letters, digits and _ (a technology file's "
                             "[corners.<name>] must be one)", name)
    return names


def _constraints(spec: dict, cm_range: tuple[float, float], lifted: frozenset = frozenset(),
                 at_beta: bool = False) -> tuple[Constraint, ...]:
    """Every spec bound becomes a constraint (objectives included: a front of designs that meet spec), then
    the rules every design obeys whatever the spec (catalog.RULES). `at_beta`: the study states its loop,
    so a bound the catalog also holds at the loop (min_phase_margin) is judged there only, not at the
    unity-feedback open-loop testbench as well (that over-compensates a gain-of-5 loop)."""
    values = {b.key: b.default for b in BOUNDS.values() if b.default is not None}
    values |= {**spec, "saturation_margin": spec.get("saturation_margin", DEFAULT_SATURATION_MARGIN)}
    # A spot-noise list is held as its worst ratio to the limits: at most 1.
    values = {k: (1.0 if k in BOUNDS and BOUNDS[k].form == "spots" else v) for k, v in values.items()}
    out = [Constraint(b.key, b.metric, b.sense, values[b.key], max(abs(values[b.key]), b.floor))
           for b in BOUNDS.values() if b.key in values and not (at_beta and b.also)]
    out += [Constraint(f"{b.key}_{suffix}", m, b.sense, values[b.key], max(abs(values[b.key]), b.floor))
            for b in BOUNDS.values() if b.key in values for suffix, m in b.also]
    out += [Constraint(r.key, r.metric, r.sense, r.value, r.scale) for r in RULES.values() if r.key not in lifted]
    out += [Constraint(r.key, r.metric, r.sense, level, r.scale) for r, level in zip(INPUT_CM, cm_range)]
    return tuple(out)
