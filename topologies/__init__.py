"""Op-amp topology models: physics only, vectorized over a population of designs."""

from .base import Build, Conditions, Device, Element, OutputStage, StageBuild, Topology, Variable
from .class_ab import ClassABOutput
from .evaluate import evaluate
from .registry import available

__all__ = ["Build", "ClassABOutput", "Conditions", "Device", "Element", "OutputStage", "StageBuild", "Topology",
           "Variable", "available", "evaluate"]
