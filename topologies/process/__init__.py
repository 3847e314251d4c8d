"""Process models behind one interface (`Technology`) and the technologies shipped with ampfront."""

from pathlib import Path

from .base import OperatingPoint, Polarity, Technology, diode_vgs
from .square_law import LevelOneDevice, SquareLaw

DATA_DIR = Path(__file__).parent / "data"

__all__ = ["DATA_DIR", "LevelOneDevice", "OperatingPoint", "Polarity", "SquareLaw", "Technology", "diode_vgs"]
