"""Declarative checks for TOML tables: each key names its dimension, and whether it is required.

One function, one message template, so every bad input reads the same way.
"""

from __future__ import annotations

import difflib
import tomllib
from dataclasses import dataclass
from pathlib import Path

from .errors import InputError
from .units import UnitError, parse


@dataclass(frozen=True)
class Field:
    dimension: str            # a units.DIMENSION_EXAMPLES key, or "str", "int", "bool", "list"
    required: bool = False
    positive: bool = True     # physical values must be > 0


MAX_FILE_BYTES = 1 << 20   # a study or technology file is a page of text, never megabytes


def read_toml(path: Path) -> tuple[dict, str]:
    """The parsed table and the text it came from (UTF-8; a byte-order mark is accepted and dropped)."""
    try:
        if not path.is_file():
            raise InputError(str(path), "(file)", "an existing TOML file")
        if path.stat().st_size > MAX_FILE_BYTES:
            raise InputError(str(path), "(file)", f"a TOML file under {MAX_FILE_BYTES >> 10} KiB")
        data = path.read_bytes()
    except OSError as error:
        raise InputError(str(path), "(file)", f"a readable TOML file ({error.strerror or error})") from None
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise InputError(str(path), "(file)", "a UTF-8 TOML text file") from None
    return parse_toml(str(path), text), text


def parse_toml(source: str, text: str) -> dict:
    if "\x00" in text:
        raise InputError(source, "(file)", "a text file (it holds a NUL byte)")
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise InputError(source, "(file)", f"valid TOML ({err})") from None


def suggest(name: str, choices) -> str:
    close = difflib.get_close_matches(name, list(choices), n=1)
    return f" (did you mean '{close[0]}'?)" if close else ""


def check_keys(source: str, where: str, table: dict, allowed) -> None:
    for key in table:
        if key not in allowed:
            raise InputError(source, f"{where}{key}",
                             f"one of {', '.join(sorted(allowed))}{suggest(key, allowed)}", "unknown key")


def read_table(source: str, where: str, table: object, schema: dict[str, Field]) -> dict[str, object]:
    """Validate `table` against `schema`; return SI floats (or plain values) for the keys present."""
    if not isinstance(table, dict):
        raise InputError(source, where.rstrip(".") or "(top level)", "a table")
    check_keys(source, where, table, schema)
    out: dict[str, object] = {}
    for key, field in schema.items():
        if key not in table:
            if field.required:
                raise InputError(source, f"{where}{key}", _expected(field), "missing")
            continue
        out[key] = read_value(source, f"{where}{key}", table[key], field)
    return out


def read_value(source: str, key: str, raw: object, field: Field):
    if field.dimension == "str":
        if not isinstance(raw, str) or not raw:
            raise InputError(source, key, "a non-empty string", raw)
        return raw
    if field.dimension == "int":
        if not isinstance(raw, int) or isinstance(raw, bool) or (field.positive and raw <= 0):
            raise InputError(source, key, "a positive integer", raw)
        return raw
    if field.dimension == "bool":
        if not isinstance(raw, bool):
            raise InputError(source, key, "true or false", raw)
        return raw
    try:
        value = parse(raw, field.dimension)
    except UnitError as err:
        raise InputError(source, key, str(err), raw) from None
    if field.positive and value <= 0:
        raise InputError(source, key, "a positive value", raw)
    return value


def _expected(field: Field) -> str:
    from .units import DIMENSION_EXAMPLES

    example = DIMENSION_EXAMPLES.get(field.dimension)
    return f'a value such as "{example}"' if example else f"a {field.dimension}"
