"""Readers of spec tables: keys checked against a schema table, values coerced to their types, ranges and names
checked, each failure a FulcrumError naming the key. spec.py and spec_sections.py both read with these."""
from __future__ import annotations

import difflib
import math
from typing import Any

from .errors import FulcrumError, nfc


class Reader:
    """Reads one table of the spec, checking keys and types, with the key path for messages."""

    def __init__(self, table: Any, where: str, source: str | None, allowed: dict[str, tuple[str, str]],
                 required: tuple[str, ...] = ()) -> None:
        self.where, self.source, self.allowed = where, source, allowed
        if not isinstance(table, dict):
            raise FulcrumError(f"'{where}' should be a table of keys, found {typename(table)}.",
                               file=source, key=where, hint=f"Write it as [{where}] with key = value lines.")
        self.table = table
        for key in table:
            if key not in allowed:
                close = difflib.get_close_matches(key, list(allowed), n=1, cutoff=0.5)
                hint = f"Did you mean '{close[0]}'?" if close else f"Valid keys here: {', '.join(allowed)}."
                raise FulcrumError(f"unknown key '{key}' in [{where}].", file=source, key=f"{where}.{key}", hint=hint)
        for key in required:
            if key not in table:
                raise FulcrumError(f"[{where}] is missing the required key '{key}' ({allowed[key][1]})",
                                   file=source, key=f"{where}.{key}", hint=f"Add {key} = ... to [{where}].")

    def get(self, key: str, default: Any = None) -> Any:
        if key not in self.table:
            return default
        value = self.table[key]
        type_name = self.allowed[key][0]
        path = f"{self.where}.{key}"
        return coerce(value, type_name, path, self.source)


def typename(v: Any) -> str:
    return {str: "text", bool: "true/false", int: "a whole number", float: "a number",
            list: "a list", dict: "a table"}.get(type(v), type(v).__name__)


def coerce(value: Any, type_name: str, path: str, source: str | None) -> Any:
    def bad(expected: str) -> FulcrumError:
        return FulcrumError(f"'{path}' should be {expected}, found {typename(value)} {value!r}.",
                            file=source, key=path, hint=f"Write {path.split('.')[-1]} as {expected}.")

    if type_name in ("str", "path"):
        if not isinstance(value, str) or not value.strip():
            raise bad("non-empty text in quotes")
        return value if type_name == "path" else nfc(value)
    if type_name == "bool":
        if not isinstance(value, bool):
            raise bad("true or false")
        return value
    if type_name == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            raise bad("a whole number")
        return value
    if type_name == "float":
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            raise bad("a finite number")
        return float(value)
    if type_name == "list[str]":
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise bad('a list of texts, e.g. ["a", "b"]')
        return tuple(nfc(v) for v in value)
    if type_name == "list[float]":
        if not isinstance(value, list) or not all(
                isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) for v in value):
            raise bad("a list of numbers, e.g. [1, 99]")
        return tuple(float(v) for v in value)
    if type_name == "list[int]":
        if not isinstance(value, list) or not all(isinstance(v, int) and not isinstance(v, bool) for v in value):
            raise bad("a list of whole numbers, e.g. [200, 500]")
        return tuple(value)
    if type_name == "table[float]":
        if not isinstance(value, dict):
            raise bad("a table of numbers, e.g. { level = 0.5 }")
        out = {}
        for k, v in value.items():
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                raise FulcrumError(f"'{path}.{k}' should be a finite number, found {v!r}.",
                                   file=source, key=f"{path}.{k}", hint="Give each weight as a number.")
            out[nfc(str(k))] = float(v)
        return out
    if type_name == "table[str]":
        if not isinstance(value, dict):
            raise bad('a table of texts, e.g. { lactate = "Lactate (mmol/L)" }')
        out_text = {}
        for k, v in value.items():
            if not isinstance(v, str) or not v.strip():
                raise FulcrumError(f"'{path}.{k}' should be a text, found {v!r}.", file=source, key=f"{path}.{k}",
                                   hint='Write the label in quotes, e.g. "Lactate (mmol/L)".')
            out_text[nfc(str(k))] = nfc(v.strip())
        return out_text
    if type_name == "table[range]":
        if not isinstance(value, dict):
            raise bad("a table of [low, high] pairs")
        out = {}
        for k, v in value.items():
            pair = coerce(v, "list[float]", f"{path}.{k}", source)
            if len(pair) != 2 or pair[0] > pair[1]:
                raise FulcrumError(f"'{path}.{k}' should be [low, high] with low <= high, found {v!r}.",
                                   file=source, key=f"{path}.{k}", hint="Give two numbers, the lower first.")
            out[nfc(str(k))] = (pair[0], pair[1])
        return out
    if type_name == "table":
        return value
    raise AssertionError(type_name)


def range_check(value: float, lo: float, hi: float, path: str, source: str | None) -> None:
    if not lo <= value <= hi:
        raise FulcrumError(f"'{path}' is {value}, outside {lo} to {hi}.", file=source, key=path,
                           hint=f"Choose a value from {lo} to {hi}.")


def known(name: str, table: dict, path: str, source: str | None) -> None:
    if name not in table:
        close = difflib.get_close_matches(name, list(table), n=1, cutoff=0.4)
        hint = (f"Did you mean '{close[0]}'? " if close else "") + f"Known names: {', '.join(table)}."
        raise FulcrumError(f"'{path}' names '{name}', which the spec does not define.", file=source, key=path,
                           hint=hint)
