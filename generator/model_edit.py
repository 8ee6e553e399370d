"""Change chosen values in a user's model file and keep everything else: comments, order, layout, and
the unit the user wrote for each value. The result is validated before anyone writes it."""

from __future__ import annotations

import re
from collections.abc import Mapping
from typing import Any

import tomlkit
from tomlkit.items import Item

from . import model, units
from .errors import ModelError
from .vehicle import Vehicle

_NUMBER = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")


def number(x: float) -> str:
    """A value for a model file: up to 7 significant digits, no exponent for everyday sizes."""
    text = f"{x:.7g}"
    return text if "e" not in text else f"{x:.6e}"


def _in_unit_of(old_text: str, si_value: float, kind: units.Kind) -> str:
    """`si_value` written in the unit of `old_text` ("150 mm" -> "152.5 mm"); in SI when the old text
    has no leading number or its unit cannot express the value."""
    match = _NUMBER.match(old_text)
    if match and match.group(2):
        unit_text = match.group(2)
        try:
            per_unit = units.parse(f"1 {unit_text}", kind)
        except ValueError:
            per_unit = 0.0
        if per_unit > 0:
            return f"{number(si_value / per_unit)} {unit_text}"
    return f"{number(si_value)} {kind.si.replace('**', '^')}"


def _new_item(spec: model.Key, old: Item | None, value: float | str) -> Item:
    """The TOML item for a new value, with the old item's comment kept in its column."""
    new: Item
    if spec.kind is model.RATIO:
        new = tomlkit.item(float(number(float(value))))
    elif spec.kind is model.COUNT:
        new = tomlkit.item(int(value))
    elif spec.kind is model.CHOICE:
        new = tomlkit.string(str(value))
    else:
        old_text = str(old.unwrap()) if old is not None else ""
        new = tomlkit.string(_in_unit_of(old_text, float(value), spec.kind))
    if old is not None and old.trivia.comment:
        pad = len(old.trivia.comment_ws) + len(old.as_string()) - len(new.as_string())
        new.trivia.comment = old.trivia.comment
        new.trivia.comment_ws = " " * max(1, pad)
    return new


def edited_text(text: str, changes: Mapping[str, float | str], source: str) -> tuple[str, Vehicle]:
    """The model file text with each `section.key` set to its new value (SI, or the choice word), and
    the vehicle it now describes; ModelError (nothing changed) when the result would not be valid."""
    doc = tomlkit.parse(text.removeprefix("\ufeff"))
    for dotted, value in changes.items():
        if dotted not in model.FIELDS and dotted not in model.OPTIONAL_FIELDS:
            raise ModelError(source, dotted, "a model key such as 'body.mass'", "an unknown key")
        section, key = dotted.split(".")
        spec = {**model.SCHEMA, **model.OPTIONAL_SCHEMA}[section][key]
        table: Any = doc.get(section)
        if table is None:
            raise ModelError(source, section, f"a [{section}] section", "nothing (the section is required)")
        old = table.item(key) if key in table else None
        table[key] = _new_item(spec, old, value)
    result = tomlkit.dumps(doc)
    vehicle = model.parse_document(tomlkit.parse(result).unwrap(), source)
    return result, vehicle
