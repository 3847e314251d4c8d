"""Study files generated from the schema with mutated values: every one either runs or is refused with one
line and exit 2; none gives a traceback.

Reference: hypothesis (PyPI), which draws the mutations (types, units, ranges, nesting, encodings) and
shrinks any failure to its smallest case; the catalog's spec keys are the schema it draws from.
"""

import io
import json
from contextlib import redirect_stderr, redirect_stdout

import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from ampfront.optimize import cli
from ampfront.topologies.catalog import spec_keys

BASE = {
    "title": "fuzz", "topologies": ["simple_ota"], "objectives": ["power", "gbw"], "technology": "generic180",
    "spec": {"supply": "1.8 V", "load_capacitance": "2 pF", "min_gain": "30 dB"},
    "search": {"population": 8, "generations": 1, "seed": 1},
}
UNITS = ["V", "mV", "pF", "F", "kOhm", "Ohm", "dB", "deg", "Hz", "MHz", "uW", "W", "um^2", "V/us", "A", "uA",
         "nV/sqrt(Hz)", "uV", "", "µV", "furlongs", "°", "Ω"]

numbers = st.one_of(st.integers(-10**12, 10**12), st.floats(allow_nan=True, allow_infinity=True),
                    st.sampled_from([0, -1, 1e-300, 1e300]))
quantities = st.builds(lambda n, u, sp: f"{n}{' ' if sp else ''}{u}", numbers, st.sampled_from(UNITS), st.booleans())
scalars = st.one_of(quantities, numbers, st.booleans(), st.text(max_size=30),
                    st.text(alphabet=st.characters(codec="utf-8"), max_size=10))
values = st.recursive(scalars, lambda inner: st.one_of(st.lists(inner, max_size=4),
                                                         st.dictionaries(st.text(max_size=5), inner, max_size=3)),
                      max_leaves=6)
places = st.sampled_from(
    [("spec", k) for k in spec_keys()] + [("search", k) for k in ("population", "generations", "seed")]
    + [(None, k) for k in ("title", "topologies", "objectives", "technology", "corner", "spec", "search",
                          "unknown")])


def _toml(value, key=None) -> str:
    """Just enough of a TOML writer for the generated values (json strings are valid TOML basic strings)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return {"nan": "nan", "inf": "inf", "-inf": "-inf"}.get(str(value), repr(value))
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, list):
        return "[" + ", ".join(_toml(v) for v in value) + "]"
    return "{" + ", ".join(f"{json.dumps(k)} = {_toml(v)}" for k, v in value.items()) + "}"


def _document(study: dict) -> str:
    lines = [f"{k} = {_toml(v)}" for k, v in study.items() if not isinstance(v, dict)]
    for k, v in study.items():
        if isinstance(v, dict):
            lines.append(f"[{json.dumps(k)}]")
            lines += [f"{json.dumps(kk)} = {_toml(vv)}" for kk, vv in v.items()]
    return "\n".join(lines) + "\n"


@pytest.mark.filterwarnings("ignore::RuntimeWarning")
@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(mutations=st.lists(st.tuples(places, values), min_size=1, max_size=3), encoding=st.sampled_from(
    ["utf-8", "utf-8-sig", "utf-16", "latin-1"]))
def test_mutated_study_runs_or_is_one_line(mutations, encoding, tmp_path_factory):
    folder = tmp_path_factory.mktemp("fuzz")
    study = json.loads(json.dumps(BASE))
    for (table, key), value in mutations:
        target = study if table is None else study.setdefault(table, {}) if isinstance(study.get(table), dict) else study
        target[key] = value
    path = folder / "study.toml"
    try:
        path.write_bytes(_document(study).encode(encoding))
    except UnicodeEncodeError:
        path.write_bytes(_document(study).encode("utf-8", "surrogatepass"))
    err, out = io.StringIO(), io.StringIO()
    with redirect_stderr(err), redirect_stdout(out), pytest.raises(SystemExit) as done:
        cli.main_with(["run", str(path), "--out", str(folder / "out"), "--quiet"])
    code = done.value.code
    event(f"exit {code}")
    lines = err.getvalue().strip().splitlines()
    if code == 2:
        assert len(lines) == 1 and lines[0].startswith("ampfront: "), err.getvalue()
        assert not (folder / "out").exists()
    else:
        assert code in (0, 3), err.getvalue()
        assert (folder / "out" / "manifest.json").is_file()
