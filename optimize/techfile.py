"""Technology files (TOML) to technology objects, validated at the edge."""

from __future__ import annotations

import hashlib
from pathlib import Path

from topologies.process import DATA_DIR, LevelOneDevice, SquareLaw, Technology

from .errors import InputError
from .schema import Field, read_table, read_toml, suggest

_SQUARE_LAW_TOP = {
    "name": Field("str", True), "kind": Field("str", True), "description": Field("str"),
    "supply": Field("V", True), "temperature": Field("degC", True, positive=False),
    "l_min": Field("m", True), "l_max": Field("m", True), "w_min": Field("m", True),
    "cap_density": Field("F/m^2", True), "diffusion_length": Field("m", True),
    "nmos": Field("table", True), "pmos": Field("table", True),
}
_LEVEL_ONE = {
    "kp": Field("A/V^2", True), "vto": Field("V", True), "lambda_l": Field("m/V", True),
    "gamma": Field("V^0.5", True, positive=False), "phi": Field("V", True), "tox": Field("m", True),
    "cgso": Field("F/m", True, positive=False), "cgdo": Field("F/m", True, positive=False),
    "cgbo": Field("F/m", True, positive=False), "cj": Field("F/m^2", True, positive=False),
    "mj": Field("1", True), "cjsw": Field("F/m", True, positive=False), "mjsw": Field("1", True),
    "pb": Field("V", True),
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


def load(path: Path) -> Technology:
    source = str(path)
    raw = read_toml(path)
    kind = raw.get("kind")
    if kind != "square_law":
        raise InputError(source, "kind", "one of: square_law", kind)
    schema = {k: v for k, v in _SQUARE_LAW_TOP.items() if v.dimension != "table"}
    top = read_table(source, "", {k: v for k, v in raw.items() if k not in ("nmos", "pmos")},
                     schema | {"nmos": Field("str"), "pmos": Field("str")})
    devices = {}
    for polarity in ("nmos", "pmos"):
        if polarity not in raw:
            raise InputError(source, polarity, "a table of level-1 parameters", "missing")
        devices[polarity] = LevelOneDevice(**read_table(source, f"{polarity}.", raw[polarity], _LEVEL_ONE))
    if top["l_min"] >= top["l_max"]:
        raise InputError(source, "l_max", "a length above l_min", raw.get("l_max"))
    return SquareLaw(
        name=top["name"], description=top.get("description", ""), supply=top["supply"],
        temperature=top["temperature"] + 273.15, l_min=top["l_min"], l_max=top["l_max"],
        w_min=top["w_min"], cap_density=top["cap_density"], diffusion_length=top["diffusion_length"],
        nmos=devices["nmos"], pmos=devices["pmos"],
    )


def file_hash(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()
