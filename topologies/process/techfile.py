"""Technology files (TOML) to technology objects, validated at the edge."""

from __future__ import annotations

import hashlib
import json
import re
import zipfile
from dataclasses import replace

import numpy as np
from pathlib import Path

from ampfront.topologies.process import DATA_DIR, LevelOneDevice, SquareLaw, Technology
from ampfront.topologies.process.base import Layout
from ampfront.topologies.process.tables import DeviceTable, TableProcess

from ..errors import InputError
from ..schema import Field, read_table, read_toml, suggest
from .libraries import model_library, shipped_libraries

# A technology's name reaches file names, manifests and SPICE comments: a plain name only. Its description
# reaches a SPICE comment line: one line of text.
_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.+-]{0,39}$")
_CONTROL = re.compile(r"[\x00-\x1f\x7f]")


def _check_text(source: str, top: dict) -> None:
    if not _NAME.match(top["name"]):
        raise InputError(source, "name", "a plain name of letters, digits and _ . + - (up to 40)", top["name"])
    if _CONTROL.search(top.get("description", "")):
        raise InputError(source, "description", "one line of text without control characters",
                         top["description"])

_SQUARE_LAW_TOP = {
    "name": Field("str", True), "kind": Field("str", True), "description": Field("str"),
    "supply": Field("V", True), "temperature": Field("degC", True, positive=False),
    "l_min": Field("m", True), "l_max": Field("m", True), "w_min": Field("m", True),
    "cap_density": Field("F/m^2", True), "diffusion_length": Field("m", True),
    "nmos": Field("table", True), "pmos": Field("table", True),
}
# Layout rules (optional; Layout's defaults, marked common practice there, stand in for missing ones).
_LAYOUT = {
    "layout_overhead": Field("1"), "resistor_sheet": Field("Ohm"), "resistor_width": Field("m"),
    "min_reference_current": Field("A"),
}
_LEVEL_ONE = {
    "kp": Field("A/V^2", True), "vto": Field("V", True), "lambda_l": Field("m/V", True),
    "gamma": Field("V^0.5", True, positive=False), "phi": Field("V", True), "tox": Field("m", True),
    "cgso": Field("F/m", True, positive=False), "cgdo": Field("F/m", True, positive=False),
    "cgbo": Field("F/m", True, positive=False), "cj": Field("F/m^2", True, positive=False),
    "mj": Field("1", True), "cjsw": Field("F/m", True, positive=False), "mjsw": Field("1", True),
    "pb": Field("V", True),
    "avt": Field("V*m"),
    "kf": Field("1", positive=False),
}


def shipped() -> dict[str, Path]:
    return {path.stem: path for path in sorted(DATA_DIR.glob("*.toml"))}


def resolve(name_or_file: str, relative_to: Path | None = None, source: str = "technology") -> Path:
    """A shipped technology name, or a path to a technology file."""
    builtin = shipped()
    if name_or_file in builtin:
        return builtin[name_or_file]
    path = Path(name_or_file)
    if relative_to is not None and not path.is_absolute():
        path = relative_to / path
    if path.suffix == ".toml" and path.is_file():
        return path
    raise InputError(source, "technology",
                     f"a shipped technology ({', '.join(builtin)}) or an existing .toml file"
                     f"{suggest(name_or_file, builtin)}", name_or_file)


_TABLE_TOP = {
    "name": Field("str", True), "kind": Field("str", True), "description": Field("str"),
    "supply": Field("V", True), "w_min": Field("m", True), "cap_density": Field("F/m^2", True),
    "library": Field("str", True), "default_corner": Field("str", True), "diffusion_length": Field("m"),
    **_LAYOUT,
}


def _layout(top: dict) -> Layout:
    given = {"diffusion_length": top.get("diffusion_length"), "overhead": top.get("layout_overhead"),
             "resistor_sheet": top.get("resistor_sheet"), "resistor_width": top.get("resistor_width"),
             "min_reference_current": top.get("min_reference_current")}
    return Layout(**{k: v for k, v in given.items() if v is not None})


def _table_gm_id_bounds(tech: TableProcess) -> tuple[float, float]:
    """gm/ID from 3 S/A up to the most any characterized length reaches (weak inversion at the table's
    lowest VGS, VDS 0.9 V): the search may go wherever the tables know the device; a design beyond what its
    own length reaches reads NaN off the table and loses."""
    vgs = np.linspace(0.16, 1.2, 200)
    best = 0.0
    for polarity in ("n", "p"):
        for l in tech.length_grid:
            op = tech.operating_point(polarity, np.full_like(vgs, 4e-6), np.full_like(vgs, l), vgs,
                                      np.full_like(vgs, 0.9), np.zeros_like(vgs))
            with np.errstate(all="ignore"):
                best = max(best, float(np.nanmax(op.gm / op.id)))
    return 3.0, float(np.floor(best * 0.98))
_TABLE_CORNER = {"temperature": Field("degC", True, positive=False), "nmos": Field("str", True),
                 "pmos": Field("str", True), "flicker": Field("str")}


# A square-law corner: the nominal parameter set with every |VT| shifted and every KP scaled (both
# polarities alike: the slow and fast process corners; skewed corners would need one entry per polarity).
_SQUARE_LAW_CORNER = {"vto_shift": Field("V", True, positive=False), "kp_scale": Field("1", True)}


def corners(path: Path) -> list[str]:
    raw, _ = read_toml(path)
    table = raw.get("corners", {})
    return sorted(table) if isinstance(table, dict) and raw.get("kind") in ("gm_id_tables", "square_law") else []


def default_corner(path: Path) -> str | None:
    """The corner a study without `corner` is sized at: the file's default_corner, or tt if it declares one."""
    raw, _ = read_toml(path)
    if raw.get("kind") == "gm_id_tables":
        return raw.get("default_corner")
    return "tt" if "tt" in corners(path) else None


def load(path: Path, corner: str | None = None) -> Technology:
    source = str(path)
    raw, _ = read_toml(path)
    kind = raw.get("kind")
    if kind == "gm_id_tables":
        return _load_tables(path, raw, corner)
    if kind != "square_law":
        raise InputError(source, "kind", "one of: square_law, gm_id_tables", kind)
    schema = {k: v for k, v in _SQUARE_LAW_TOP.items() if v.dimension != "table"} | _LAYOUT
    top = read_table(source, "", {k: v for k, v in raw.items() if k not in ("nmos", "pmos", "corners")},
                     schema | {"nmos": Field("str"), "pmos": Field("str")})
    _check_text(source, top)
    devices = {}
    for polarity in ("nmos", "pmos"):
        if polarity not in raw:
            raise InputError(source, polarity, "a table of level-1 parameters", "missing")
        devices[polarity] = LevelOneDevice(**read_table(source, f"{polarity}.", raw[polarity], _LEVEL_ONE))
    if top["l_min"] >= top["l_max"]:
        raise InputError(source, "l_max", "a length above l_min", raw.get("l_max"))
    name = top["name"]
    if corner not in (None, "nominal"):
        shipped_corners = raw.get("corners", {})
        if not isinstance(shipped_corners, dict) or corner not in shipped_corners:
            listed = ", ".join(sorted(shipped_corners)) if isinstance(shipped_corners, dict) else ""
            raise InputError(source, "corner", f"a corner the file declares under [corners]: {listed or 'none'}",
                             corner)
        entry = read_table(source, f"corners.{corner}.", shipped_corners[corner], _SQUARE_LAW_CORNER)
        devices = {k: replace(d, vto=d.vto + entry["vto_shift"], kp=d.kp * entry["kp_scale"])
                   for k, d in devices.items()}
        if entry["vto_shift"] != 0 or entry["kp_scale"] != 1:
            name = f"{name}-{corner}"
    return SquareLaw(
        name=name, description=top.get("description", ""), supply=top["supply"],
        temperature=top["temperature"] + 273.15, l_min=top["l_min"], l_max=top["l_max"],
        w_min=top["w_min"], cap_density=top["cap_density"], diffusion_length=top["diffusion_length"],
        nmos=devices["nmos"], pmos=devices["pmos"], layout=_layout(top),
    )


# A table's device name reaches every netlist as a subcircuit name: a SPICE identifier and nothing else.
_DEVICE = re.compile(r"^[A-Za-z][A-Za-z0-9_]{0,79}$")


def _device_table(file: Path, polarity: str) -> DeviceTable:
    """A table file, refused in one line when it is not one `ampfront characterize` writes."""
    expected = "a table file written by 'ampfront characterize'"
    try:
        table = DeviceTable(file)
        device, kind = table.meta["device"], table.meta.get("polarity")
    except (OSError, ValueError, KeyError, TypeError, EOFError, zipfile.BadZipFile) as error:
        raise InputError(str(file), "(table)", expected, f"unreadable: {type(error).__name__}") from None
    if not isinstance(device, str) or not _DEVICE.match(device):
        raise InputError(str(file), "meta.device", "a SPICE subcircuit name (letters, digits, _)", device)
    if kind is not None and kind != polarity[0]:
        raise InputError(str(file), "meta.polarity", f"'{polarity[0]}' (the file is listed as the {polarity})", kind)
    return table


def _load_tables(path: Path, raw: dict, corner: str | None) -> Technology:
    source = str(path)
    top = read_table(source, "", {k: v for k, v in raw.items() if k != "corners"}, _TABLE_TOP)
    _check_text(source, top)
    table = raw.get("corners")
    if not isinstance(table, dict) or not table:
        raise InputError(source, "corners", "a [corners.<name>] table per shipped corner", "missing")
    corner = corner or top["default_corner"]
    if not isinstance(corner, str) or corner not in table:
        raise InputError(source, "corner", f"a shipped corner: {', '.join(sorted(table))}{suggest(corner, table)}",
                         corner)
    entry = read_table(source, f"corners.{corner}.", table[corner], _TABLE_CORNER)
    devices = {}
    for polarity in ("nmos", "pmos"):
        file = path.parent / entry[polarity]
        if not file.is_file():
            raise InputError(source, f"corners.{corner}.{polarity}", "an existing table file (.npz)", entry[polarity])
        devices[polarity] = _device_table(file, polarity)
    flicker = {"n": None, "p": None}
    if "flicker" in entry:
        file = path.parent / entry["flicker"]
        try:
            measured = json.loads(file.read_text())
            flicker = {p: {k: measured[p][k] for k in ("l_um", "gm_id", "k_v2m2", "exponent")} for p in "np"}
        except (OSError, ValueError, KeyError, TypeError):
            raise InputError(source, f"corners.{corner}.flicker", "a flicker file written by ampfront characterize",
                             entry["flicker"]) from None
    if top["library"] not in shipped_libraries():
        raise InputError(source, "library", f"a model library ampfront declares: {', '.join(shipped_libraries())}",
                         top["library"])
    missing = None
    try:
        lib = model_library(top["library"], corner)
        library, init = tuple(lib.preamble()), tuple(lib.init)
        avt = {p: lib.avt(devices[p].meta["device"]) for p in ("nmos", "pmos")}
    except InputError as error:
        # The models are needed only to simulate: the search runs without them, and says so.
        missing = error.expected
        library, init = (), ()
        avt = {"nmos": float("nan"), "pmos": float("nan")}
    tech = TableProcess(
        name=f"{top['name']}-{corner}", description=top.get("description", ""), supply=top["supply"],
        temperature=entry["temperature"] + 273.15, w_min=top["w_min"], cap_density=top["cap_density"],
        nmos=devices["nmos"], pmos=devices["pmos"], corner=corner, spice_library=library, spice_init=init,
        avt_n=avt["nmos"], avt_p=avt["pmos"], flicker_n=flicker["n"], flicker_p=flicker["p"],
        models_missing=missing, layout=_layout(top),
    )
    return replace(tech, gm_id_bounds=_table_gm_id_bounds(tech))


def file_hash(path: Path, corner: str | None = None) -> str:
    """SHA-256 of the technology file and, for table technologies, of the corner's tables."""
    digest = hashlib.sha256(path.read_bytes())
    raw, _ = read_toml(path)
    if raw.get("kind") == "gm_id_tables":
        entry = raw.get("corners", {}).get(corner or raw.get("default_corner"), {})
        for key in ("nmos", "pmos", "flicker"):
            if key in entry:
                digest.update((path.parent / entry[key]).read_bytes())
    return digest.hexdigest()
