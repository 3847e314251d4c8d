"""The metric catalog is the one place metric and spec names are declared, and every consumer reads it.

References: the README's own study example (every key a user is shown must be accepted and displayed in its
own unit), and the source tree itself (a grep: no metric name is spelled outside the catalog and the
topologies that compute it).
"""

import re
import tomllib
from pathlib import Path

import numpy as np
import pytest

from ampfront.optimize.outputs.report import spec_rows
from ampfront.optimize.spec.study import SPEC_SCHEMA, load_study
from ampfront.topologies import available
from ampfront.topologies.catalog import (AGREEMENT, BOUNDS, CONDITIONS, METRICS, OBJECTIVES, format_spec,
                                         metric, spec_keys)

ROOT = Path(__file__).resolve().parents[1]
# What a unit looks like once formatted: the quantity's own unit, never another's.
SHOWN_UNIT = {"V": "V", "F": "F", "Ohm": "Ω", "dB": "dB", "Hz": "Hz", "deg": "°", "V/s": "V/µs", "W": "W",
              "m^2": "µm²", "V/sqrt(Hz)": "V/√Hz", "A": "A", "m": "m", "s": "s",
              # Plain numbers: a gain or feedback factor in V/V, a fraction in %. Text (a configuration's
              # name) is shown as written: see _unit.
              "1": ("V/V", "%")}


def _readme_study() -> str:
    text = (ROOT / "README.md").read_text()
    block = re.search(r"```toml\n(.*?)```", text, re.S)
    return block.group(1)


def test_every_key_of_the_readme_example_is_shown_in_its_own_unit(tmp_path):
    study_file = tmp_path / "readme.toml"
    study_file.write_text(_readme_study())
    study = load_study(study_file, available())
    raw = tomllib.loads(_readme_study())["spec"]
    rows = dict(spec_rows(study))
    for key in raw:
        label = BOUNDS[key].label if key in BOUNDS else CONDITIONS[key].label
        assert label in rows, key
        text = rows[label]
        assert text.endswith(_unit(key)), (key, text)
        assert "e-" not in text and "e+" not in text, (key, text)   # engineering prefixes, not exponents


def _unit(key: str) -> str:
    """The unit a spec key is shown in, checked against the dimension the study writes it in."""
    if key in BOUNDS and BOUNDS[key].form == "spots":
        unit, dimension = "Hz", BOUNDS[key].dimension   # "20 nV/√Hz at 10 kHz"
    elif key in BOUNDS:
        shown = METRICS[BOUNDS[key].metric]
        unit, dimension = shown.display_unit or shown.unit, BOUNDS[key].dimension
    else:
        unit, dimension = CONDITIONS[key].unit, CONDITIONS[key].dimension
    if dimension == "str":
        return ""
    shown = SHOWN_UNIT[dimension]
    assert (unit in shown) if isinstance(shown, tuple) else (shown in unit or unit == "Hz"), (key, unit, dimension)
    assert unit, key
    return unit


@pytest.mark.parametrize("key", spec_keys())
def test_every_spec_key_has_a_unit_and_a_label(key):
    value = 2.5 if key not in CONDITIONS or CONDITIONS[key].form == "value" else (1.0, 2.0)
    if key in BOUNDS and BOUNDS[key].form == "spots":
        value = ((20e-9, 1e4), (1e-6, 1.0))
    if key in CONDITIONS and CONDITIONS[key].dimension == "str":
        value = "non_inverting"
        assert format_spec(key, value) == "non-inverting"
    assert format_spec(key, value).endswith(_unit(key))
    if key in BOUNDS:
        assert BOUNDS[key].metric in METRICS
    assert key in SPEC_SCHEMA or (CONDITIONS[key].form if key in CONDITIONS else BOUNDS[key].form) != "value"


def test_check_compares_only_declared_metrics_with_a_bound_per_technology_kind():
    from ampfront.optimize.simulator.verdict import FIGURES

    for name, bounds in AGREEMENT.items():
        assert name in METRICS and set(bounds) == {"square_law", "gm_id_tables"}
    judged = {m for figures in FIGURES.values() for m in figures}
    swing = {"out_low_v", "out_high_v", "swing_v"}   # judged by SWING_SLACK_V / SWING_SHORTFALL_V
    # Every figure a testbench judges has its bound in the catalog, and nothing else does.
    assert judged - swing == set(AGREEMENT), judged ^ set(AGREEMENT)


def test_objectives_map_declared_metrics_with_a_direction():
    for objective in OBJECTIVES.values():
        assert METRICS[objective.metric].better in ("min", "max")


def test_every_topology_reports_only_declared_metrics_and_the_evaluator_derives_the_rest():
    from tests.helpers import DEMO_CONDITIONS, generic180, random_designs
    from ampfront.topologies.evaluate import evaluate

    tech = generic180()
    for name, topology in available().items():
        metrics, _ = evaluate(topology, random_designs(topology, tech, 4), tech, DEMO_CONDITIONS)
        for key in metrics:
            metric(key)   # raises for an undeclared name
        # Derived once, by the evaluator: no topology or stage reports them itself.
        for derived in ("swing_v", "peak_out_a", "power_w"):
            assert derived in metrics and derived not in topology.reports, (name, derived)
            stage = getattr(topology, "stage", None)
            assert stage is None or derived not in stage.reports, (name, derived)


def test_no_metric_name_is_spelled_outside_the_catalog():
    names = set(METRICS)
    allowed = {ROOT / "topologies" / "catalog.py"}
    # The topologies (and output stages) that compute a metric set it by name; everything else reads it
    # from the catalog.
    allowed |= {p for p in (ROOT / "topologies").glob("*.py") if p.stem in (
        "simple_ota", "telescopic", "folded", "two_stage", "class_ab", "stages", "evaluate", "noise", "smallsignal",
        "stability",
        "compose")}
    offenders = []
    for path in sorted((ROOT / "optimize").rglob("*.py")) + sorted((ROOT / "topologies").rglob("*.py")):
        if path in allowed:
            continue
        for quoted in re.findall(r"""["']([a-z0-9_]+)["']""", path.read_text()):
            if quoted in names:
                offenders.append(f"{path.relative_to(ROOT)}: {quoted}")
    assert offenders == []
