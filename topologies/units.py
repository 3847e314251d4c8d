"""Quantities as people write them ("2 pF", "10 MHz", "5 V/us") to SI floats, and back.

Parsing happens once, at the edge; everything inside works in plain SI floats.
"""

from __future__ import annotations

import math
import re

_PREFIX = {
    "f": 1e-15, "p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "μ": 1e-6,
    "m": 1e-3, "": 1.0, "k": 1e3, "M": 1e6, "G": 1e9, "T": 1e12,
}

# Each dimension the study and technology files use: canonical SI name and the spellings we accept.
# A spelling maps to (dimension, factor to SI).
_UNITS: dict[str, tuple[str, float]] = {}


def _register(dimension: str, spellings: dict[str, float], prefixable: bool = True) -> None:
    for text, factor in spellings.items():
        if prefixable:
            for prefix, scale in _PREFIX.items():
                _UNITS.setdefault(prefix + text, (dimension, factor * scale))
        else:
            _UNITS[text] = (dimension, factor)


_register("V", {"V": 1.0})
_register("A", {"A": 1.0})
_register("W", {"W": 1.0})
_register("F", {"F": 1.0})
_register("Ohm", {"Ohm": 1.0, "ohm": 1.0, "Ω": 1.0})
_register("Hz", {"Hz": 1.0})
_register("m", {"m": 1.0})
_register("s", {"s": 1.0})
_register("V/s", {"V/s": 1.0, "V/us": 1e6, "V/µs": 1e6, "V/ns": 1e9, "V/ms": 1e3}, prefixable=False)
_register("dB", {"dB": 1.0}, prefixable=False)
_register("deg", {"deg": 1.0, "°": 1.0}, prefixable=False)
_register("degC", {"degC": 1.0, "°C": 1.0, "C": 1.0}, prefixable=False)
_register("A/V^2", {"A/V^2": 1.0, "A/V2": 1.0}, prefixable=True)
_register("F/m^2", {"F/m^2": 1.0, "fF/um^2": 1e-3, "fF/µm^2": 1e-3}, prefixable=False)
_register("F/m", {"F/m": 1.0, "fF/um": 1e-9, "fF/µm": 1e-9}, prefixable=False)
_register("m/V", {"m/V": 1.0, "um/V": 1e-6, "µm/V": 1e-6}, prefixable=False)
_register("V^0.5", {"V^0.5": 1.0}, prefixable=False)
_register("m^2", {"m^2": 1.0, "um^2": 1e-12, "µm^2": 1e-12}, prefixable=False)
_register("V*m", {"V*m": 1.0, "mV*um": 1e-9, "mV*µm": 1e-9}, prefixable=False)
_register("V^2/Hz", {"V^2/Hz": 1.0}, prefixable=True)
_register("V/sqrt(Hz)", {"V/sqrt(Hz)": 1.0, "V/rtHz": 1.0}, prefixable=True)
_register("1", {"": 1.0, "%": 1e-2, "ppm": 1e-6}, prefixable=False)

_NUMBER = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")

DIMENSION_EXAMPLES = {
    "V": "1.8 V", "A": "20 uA", "W": "450 uW", "F": "2 pF", "Ohm": "10 kOhm", "Hz": "10 MHz",
    "m": "0.5 um", "s": "1 us", "V/s": "5 V/us", "dB": "70 dB", "deg": "60 deg", "degC": "27 degC",
    "A/V^2": "270 uA/V^2", "F/m^2": "1 fF/um^2", "F/m": "0.35 fF/um", "m/V": "0.08 um/V",
    "V^0.5": "0.45 V^0.5", "m^2": "4 um^2", "V*m": "5 mV*um", "1": "0.8",
}


class UnitError(ValueError):
    """A quantity that does not parse or has the wrong dimension; message says what was expected."""


def parse(text: object, dimension: str) -> float:
    """Return the SI value of `text` ("2 pF") for `dimension` ("F"); raise UnitError otherwise."""
    example = DIMENSION_EXAMPLES.get(dimension, dimension)
    if dimension == "1" and isinstance(text, (int, float)) and not isinstance(text, bool):
        return float(text)
    if not isinstance(text, str):
        raise UnitError(f'a quantity with unit such as "{example}"')
    match = _NUMBER.match(text)
    if not match:
        raise UnitError(f'a quantity with unit such as "{example}"')
    number, unit = float(match.group(1)), match.group(2).replace(" ", "")
    if unit == "" and dimension != "1":
        raise UnitError(f'a unit, as in "{example}"')
    found = _UNITS.get(unit)
    if found is None or found[0] != dimension:
        raise UnitError(f'a quantity in {dimension}, as in "{example}"')
    value = number * found[1]
    if not math.isfinite(value):
        raise UnitError(f'a finite quantity such as "{example}"')
    return value


_ENG = [(1e12, "T"), (1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "µ"),
        (1e-9, "n"), (1e-12, "p"), (1e-15, "f"), (1e-18, "a")]


def eng(value: float, unit: str, digits: int = 3) -> str:
    """Format an SI value with an engineering prefix: eng(4.5e-4, "W") -> "450 µW"."""
    if value is None or not math.isfinite(value):
        return f"{value} {unit}"
    if value == 0:
        return f"0 {unit}"
    magnitude = abs(value)
    for scale, prefix in _ENG:
        if magnitude >= scale * 0.9995:
            break
    scaled = value / scale
    return f"{scaled:.{digits}g} {prefix}{unit}"
