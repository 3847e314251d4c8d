"""Name -> topology: the built-ins, those installed through the `ampfront.topologies` entry-point group, and
each built-in core turned over (its pMOS-input complement, topologies.complement), and every single-stage
core composed with every output stage (built-in or from `ampfront.output_stages`).

Each plug-in is checked against its interface when it loads, so a broken one is refused with one line
naming it and what it lacks, never at its first evaluation.
"""

from __future__ import annotations

import re
from importlib.metadata import entry_points

from .base import OutputStage, Topology
from .catalog import CORE_REPORTS, DERIVED, STAGE_REPORTS, metric
from .class_ab import ClassABOutput
from .complement import Complement
from .compose import WithOutputStage
from .errors import PluginError
from .folded import FoldedCascode
from .simple_ota import SimpleOTA
from .telescopic import TelescopicCascode
from .two_stage import TwoStageMiller

ENTRY_POINT_GROUP = "ampfront.topologies"
STAGE_ENTRY_POINT_GROUP = "ampfront.output_stages"
_BUILTIN: tuple[type, ...] = (SimpleOTA, TelescopicCascode, FoldedCascode, TwoStageMiller)
_BUILTIN_STAGES: tuple[type, ...] = (ClassABOutput,)

# Names reach file names, netlists and SPICE node names: plain identifiers only.
_IDENTIFIER = re.compile(r"^[a-z][a-z0-9_]{0,47}$")
_CONTROL = re.compile(r"[\x00-\x1f\x7f]")

__all__ = ["ENTRY_POINT_GROUP", "STAGE_ENTRY_POINT_GROUP", "PluginError", "available", "output_stages"]


def _instance(obj, origin: str):
    try:
        return obj() if isinstance(obj, type) else obj
    except Exception as error:   # a plug-in's constructor is foreign code: report it, do not crash on it
        raise PluginError(f"{origin}: could not be created ({type(error).__name__}: {error})") from None


def _check_names(thing, origin: str, fields: tuple[str, ...]) -> None:
    for field in fields:
        value = getattr(thing, field)
        if not isinstance(value, str) or not _IDENTIFIER.match(value):
            raise PluginError(f"{origin}: '{field}' must be a lower-case identifier (a-z, 0-9, _), got {value!r:.60}")
    title = getattr(thing, "title")
    if not isinstance(title, str) or not title.strip() or _CONTROL.search(title) or len(title) > 80:
        raise PluginError(f"{origin}: 'title' must be one line of text, got {title!r:.60}")


def _check_reports(reports, origin: str, required: frozenset[str]) -> None:
    if not isinstance(reports, (set, frozenset, tuple, list)):
        raise PluginError(f"{origin}: 'reports' must be a set of metric names (topologies/catalog.py)")
    for name in reports:
        try:
            metric(name)
        except KeyError:
            raise PluginError(f"{origin}: reports '{name}', which is not a declared metric (topologies/catalog.py)") from None
        if name in DERIVED:
            raise PluginError(f"{origin}: reports '{name}', which the evaluator derives; report its parts instead")
    missing = sorted(required - set(reports))
    if missing:
        raise PluginError(f"{origin}: does not report the metric '{missing[0]}'"
                          + (f" (and {len(missing) - 1} more)" if len(missing) > 1 else ""))


def check_topology(obj, origin: str) -> Topology:
    topology = _instance(obj, origin)
    missing = [a for a in ("name", "title", "prefix", "single_stage", "reports", "variables", "build")
               if not hasattr(topology, a)]
    if missing:
        raise PluginError(f"{origin}: the topology lacks '{missing[0]}'" + (
            f" (and {', '.join(missing[1:])})" if len(missing) > 1 else ""))
    _check_names(topology, origin, ("name", "prefix"))
    if not isinstance(topology.single_stage, bool):
        raise PluginError(f"{origin}: 'single_stage' must be True or False")
    if not (callable(topology.variables) and callable(topology.build)):
        raise PluginError(f"{origin}: 'variables' and 'build' must be methods")
    _check_reports(topology.reports, origin, CORE_REPORTS)
    return topology


def check_stage(obj, origin: str) -> OutputStage:
    stage = _instance(obj, origin)
    missing = [a for a in ("suffix", "title", "drive", "nodes", "reports", "variables", "build", "metrics")
               if not hasattr(stage, a)]
    if missing:
        raise PluginError(f"{origin}: the output stage lacks '{missing[0]}'" + (
            f" (and {', '.join(missing[1:])})" if len(missing) > 1 else ""))
    _check_names(stage, origin, ("suffix", "drive"))
    nodes = stage.nodes
    if not isinstance(nodes, tuple) or stage.drive not in nodes or not all(
            isinstance(n, str) and _IDENTIFIER.match(n) for n in nodes):
        raise PluginError(f"{origin}: 'nodes' must be a tuple of identifiers that includes the drive node")
    if not all(callable(getattr(stage, a)) for a in ("variables", "build", "metrics")):
        raise PluginError(f"{origin}: 'variables', 'build' and 'metrics' must be methods")
    _check_reports(stage.reports, origin, STAGE_REPORTS)
    return stage


def _gather(builtins, group: str, kind: str, check, key: str) -> dict:
    """The built-ins, then every installed plug-in of the entry-point group, each checked as it loads."""
    found: dict = {}
    for cls in builtins:
        thing = check(cls, "ampfront")
        found[getattr(thing, key)] = thing
    for entry in entry_points(group=group):
        origin = f"{kind} {entry.value}"
        thing = check(_load(entry, origin), origin)
        if getattr(thing, key) in found:
            raise PluginError(f"{origin}: reuses the {kind} {key} '{getattr(thing, key)}'")
        found[getattr(thing, key)] = thing
    return found


def _load(entry, origin: str):
    try:
        return entry.load()
    except Exception as error:   # an installed package that fails to import is reported, not raised
        raise PluginError(f"{origin}: could not be imported ({type(error).__name__}: {error})") from None


def output_stages() -> dict[str, OutputStage]:
    return _gather(_BUILTIN_STAGES, STAGE_ENTRY_POINT_GROUP, "output stage", check_stage, "suffix")


def available() -> dict[str, Topology]:
    found = _gather(_BUILTIN, ENTRY_POINT_GROUP, "topology", check_topology, "name")
    # Each built-in core also comes turned over (pMOS input pair, nMOS loads). A plug-in is not turned for
    # it: whether its figures are levels or magnitudes is its author's to say (register Complement(core)).
    for cls in _BUILTIN:
        core = next(t for t in found.values() if type(t) is cls)
        turned = check_topology(Complement(core), "ampfront")
        found.setdefault(turned.name, turned)
    # Every single-stage core, built-in or not, also comes followed by every output stage.
    for core in list(found.values()):
        if core.single_stage:
            for stage in output_stages().values():
                composed = WithOutputStage(core, stage)
                found.setdefault(composed.name, composed)
    return found
