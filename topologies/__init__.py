"""Op-amp topology models: physics only, vectorized over a population of designs."""

from .base import Build, Conditions, Device, Element, Topology, Variable
from .evaluate import evaluate
from .registry import available

__all__ = ["Build", "Conditions", "Device", "Element", "Topology", "Variable", "available", "evaluate"]
