"""``{{name}}`` placeholders in request bodies and prompt templates.

A request body is a JSON value whose strings may hold placeholders. A string that
is nothing but one placeholder takes the value with its own JSON type, so
``"{{messages}}"`` becomes a list and ``"{{round}}"`` a number; a placeholder inside
longer text is replaced by its text form. An object member whose value comes out
as null is left out, so an unset ``{{sampling.temperature}}`` sends nothing.

Names are checked when the settings are read, against the names the template may
use; filling is one pass, so a filled value that happens to contain ``{{...}}``
(a model's own answer, say) is never filled again.
"""

from __future__ import annotations

import json
import re
from collections.abc import Collection, Mapping
from typing import Any

from plansieve.critics.errors import InputError, Spot, spot_in_text

# Names a request body may use. ``sampling.NAME`` picks one sampling setting.
BODY_NAMES: tuple[str, ...] = ("prompt", "messages", "system", "round", "task_id", "model",
                               "sampling")
# Names whose value is a table, so ``NAME.KEY`` may pick one entry of it.
GROUP_NAMES: frozenset[str] = frozenset({"sampling"})

_NAME = re.compile(r"[a-z_][a-z0-9_]*(?:\.[A-Za-z0-9_-]+)?")
# Anything between double braces; the inside is checked against _NAME.
_PLACE = re.compile(r"\{\{(.*?)\}\}", re.S)
_NAME_RULE = ("a name of lower-case letters, digits and '_' (for a table, NAME.KEY) "
              "between {{ and }}")


def _allowed_text(allowed: Collection[str]) -> str:
    names = list(allowed) + [f"{g}.NAME" for g in allowed if g in GROUP_NAMES]
    return ", ".join(names)


def _problems(text: str, allowed: Collection[str]) -> list[tuple[int, str]]:
    """(offset, message) for every bad placeholder in ``text``."""
    out: list[tuple[int, str]] = []
    pos = 0
    for m in _PLACE.finditer(text):
        pos = m.end()
        inner = m.group(1).strip()
        if not _NAME.fullmatch(inner):
            shown = inner if len(inner) <= 40 else inner[:37] + "..."
            out.append((m.start(), f"{{{{{shown}}}}} is not a placeholder; expected "
                                   f"{_NAME_RULE}"))
            continue
        head, dot, _ = inner.partition(".")
        if head not in allowed:
            out.append((m.start(), f"unknown placeholder {{{{{inner}}}}}; expected one of "
                                   f"{_allowed_text(allowed)}"))
        elif dot and head not in GROUP_NAMES:
            groups = [f"{g}.NAME" for g in allowed if g in GROUP_NAMES]
            also = f"; only {', '.join(groups)} picks a part" if groups else ""
            out.append((m.start(), f"{{{{{inner}}}}}: {head} is a single value, so it has "
                                   f"no parts to pick{also}"))
    rest = text.find("{{", pos)
    if rest >= 0:
        out.append((rest, "'{{' is not closed by '}}'; expected " + _NAME_RULE))
    return out


def names_in(text: str) -> list[str]:
    """The placeholder names ``text`` uses, in order (duplicates kept)."""
    return [m.group(1).strip() for m in _PLACE.finditer(text)]


def _member(field: str, key: Any) -> str:
    if isinstance(key, int):
        return f"{field}[{key}]"
    if re.fullmatch(r"[A-Za-z0-9_-]+", key):
        return f"{field}.{key}" if field else key
    return f"{field}[{json.dumps(key, ensure_ascii=False)}]"


def check_json_template(template: Any, allowed: Collection[str], *, source: str,
                        field: str) -> None:
    """Raise InputError for every bad placeholder in a body template, naming its field."""
    spots: list[Spot] = []

    def walk(node: Any, where: str) -> None:
        if isinstance(node, str):
            for _, message in _problems(node, allowed):
                spots.append(Spot(source, None, None, message, field=where))
        elif isinstance(node, Mapping):
            for key, value in node.items():
                if isinstance(key, str) and "{{" in key:
                    spots.append(Spot(source, None, None,
                                      "placeholders are filled in values only; expected "
                                      "a plain key here", field=_member(where, key)))
                walk(value, _member(where, key))
        elif isinstance(node, (list, tuple)):
            for i, value in enumerate(node):
                walk(value, _member(where, i))

    walk(template, field)
    if spots:
        raise InputError(spots)


def check_text_template(text: str, allowed: Collection[str], *, source: str) -> None:
    """Raise InputError for every bad placeholder in a text template, with line and column."""
    spots = []
    for offset, message in _problems(text, allowed):
        line = text.count("\n", 0, offset) + 1
        column = offset - (text.rfind("\n", 0, offset) + 1) + 1
        spots.append(spot_in_text(source, text, line, column, message))
    if spots:
        raise InputError(spots)


def _value(name: str, values: Mapping[str, Any]) -> Any:
    head, dot, key = name.partition(".")
    if head not in values:
        raise KeyError(f"no value given for placeholder {{{{{head}}}}}")
    value = values[head]
    if not dot:
        return value
    return value.get(key) if isinstance(value, Mapping) else None


def _as_text(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, str):
        return value
    # Numbers, true/false, lists and tables in their JSON form (RFC 8259).
    return json.dumps(value, ensure_ascii=False)


def _single(text: str) -> str | None:
    """The name when ``text`` is nothing but one placeholder, else None."""
    whole = _PLACE.fullmatch(text)
    if whole and _NAME.fullmatch(whole.group(1).strip()):
        return whole.group(1).strip()
    return None


def _fill_string(text: str, values: Mapping[str, Any]) -> Any:
    name = _single(text)
    if name is not None:
        return _value(name, values)
    return fill_text(text, values)


def fill_json(template: Any, values: Mapping[str, Any]) -> Any:
    """A new JSON value: ``template`` with its placeholders filled from ``values``.

    Filled values are put in as they are, not copied.
    """
    if isinstance(template, str):
        return _fill_string(template, values)
    if isinstance(template, Mapping):
        out = {}
        for key, value in template.items():
            filled = fill_json(value, values)
            if filled is None and isinstance(value, str) and _single(value) is not None:
                continue
            out[key] = filled
        return out
    if isinstance(template, (list, tuple)):
        return [fill_json(v, values) for v in template]
    return template


def fill_text(text: str, values: Mapping[str, Any]) -> str:
    """``text`` with every placeholder replaced by its value's text form, in one pass."""
    return _PLACE.sub(lambda m: _as_text(_value(m.group(1).strip(), values)), text)
