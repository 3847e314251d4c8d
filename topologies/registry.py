"""Name -> topology: the built-ins plus any installed through the `ampfront.topologies` entry-point group."""

from __future__ import annotations

from importlib.metadata import entry_points

from .base import Topology
from .class_ab import ClassABOutput
from .compose import WithOutputStage
from .folded import FoldedCascode
from .simple_ota import SimpleOTA
from .telescopic import TelescopicCascode
from .two_stage import TwoStageMiller

ENTRY_POINT_GROUP = "ampfront.topologies"
_BUILTIN: tuple[type, ...] = (SimpleOTA, TelescopicCascode, FoldedCascode, TwoStageMiller)


class PluginError(Exception):
    """A third-party topology that does not implement the interface."""


def _check(obj, origin: str) -> Topology:
    topology = obj() if isinstance(obj, type) else obj
    missing = [a for a in ("name", "title", "prefix", "variables", "build") if not hasattr(topology, a)]
    if missing:
        raise PluginError(f"topology from {origin} lacks {', '.join(missing)}")
    return topology


def available() -> dict[str, Topology]:
    found: dict[str, Topology] = {}
    for cls in _BUILTIN:
        topology = _check(cls, "ampfront")
        found[topology.name] = topology
    for entry in entry_points(group=ENTRY_POINT_GROUP):
        topology = _check(entry.load(), f"entry point {entry.value}")
        if topology.name in found:
            raise PluginError(f"entry point {entry.value} reuses the topology name '{topology.name}'")
        found[topology.name] = topology
    # Every single-stage core, built-in or not, also comes with the class-AB output stage after it.
    for core in list(found.values()):
        if getattr(core, "single_stage", False):
            composed = WithOutputStage(core, ClassABOutput())
            found.setdefault(composed.name, composed)
    return found
