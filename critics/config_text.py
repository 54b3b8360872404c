"""Reading a settings file (TOML or JSON) into a pydantic model, with errors in our words.

The limits file and the run configuration are both small tables a person writes by
hand. Whatever they get wrong must come back as an :class:`InputError` that names
the file, the key path (``guesser.http.retries.attempts``), the value found and
what is allowed there — the allowed words of a fixed choice, the known keys of a
table — never the validation library's own phrasing or a traceback. For TOML the
line of the key is found by a light scan of the text, so most errors also carry a
line number.
"""

from __future__ import annotations

import difflib
import json
import re
import sys
import types
import typing
from collections.abc import Callable
from os import PathLike
from pathlib import Path
from typing import Any, Literal, TypeVar, Union

from pydantic import BaseModel, ValidationError

from plansieve.critics.errors import InputError, Spot

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib

M = TypeVar("M", bound=BaseModel)

# -- reading the text -----------------------------------------------------------------------

_TOML_AT = re.compile(r"\(at line (\d+), column (\d+)\)")


def read_text_file(path: str | PathLike[str]) -> str:
    """The UTF-8 text of a settings file, or an InputError naming it."""
    name = str(path)
    try:
        return Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(Spot(name, None, None, "no such file")) from None
    except IsADirectoryError:
        raise InputError(Spot(name, None, None, "this is a folder, not a file")) from None
    except (OSError, UnicodeDecodeError) as e:
        raise InputError(Spot(name, None, None, f"cannot read the file: {e}")) from None


def is_json(text: str) -> bool:
    """JSON when the text opens with ``{``; TOML otherwise."""
    return text.lstrip().startswith("{")


def parse_table(text: str, filename: str, model: type[BaseModel] | None = None) -> dict:
    """The top-level table of TOML or JSON text; syntax errors carry line and column."""
    lines = text.splitlines()
    try:
        data = json.loads(text) if is_json(text) else tomllib.loads(text)
    except json.JSONDecodeError as e:
        raise InputError(Spot(filename, e.lineno, e.colno, f"not valid JSON: {e.msg}",
                              lines[e.lineno - 1] if 0 < e.lineno <= len(lines) else None))
    except tomllib.TOMLDecodeError as e:
        m = _TOML_AT.search(str(e))
        line, col = (int(m.group(1)), int(m.group(2))) if m else (None, None)
        shown = lines[line - 1] if line and line <= len(lines) else None
        raise InputError(Spot(filename, line, col,
                              f"not valid TOML: {_TOML_AT.sub('', str(e)).strip()}", shown))
    if not isinstance(data, dict):
        wanted = "a table"
        if model is not None:
            keys = [f"'{k}'" for k in model.model_fields]
            wanted += " with " + (", ".join(keys[:-1]) + " and " + keys[-1]
                                  if len(keys) > 1 else "".join(keys))
        raise InputError(Spot(filename, None, None,
                              f"a {type(data).__name__} at the top; expected {wanted}"))
    return data


# -- where a key sits in TOML text ------------------------------------------------------------

_BARE = r"[A-Za-z0-9_-]+"
_QUOTED = r'"(?:[^"\\]|\\.)*"|\'[^\']*\''
_KEY = rf"(?:{_BARE}|{_QUOTED})"
_DOTTED = rf"{_KEY}(?:\s*\.\s*{_KEY})*"
_ARRAY_HEADER = re.compile(rf"^\s*\[\[\s*({_DOTTED})\s*\]\]")
_TABLE_HEADER = re.compile(rf"^\s*\[\s*({_DOTTED})\s*\]")
_ASSIGN = re.compile(rf"^\s*({_DOTTED})\s*=")
_PART = re.compile(_KEY)


def _parts(dotted: str) -> tuple[str, ...]:
    out = []
    for m in _PART.finditer(dotted):
        p = m.group(0)
        if p[0] in "\"'":
            p = json.loads(p) if p[0] == '"' else p[1:-1]
        out.append(p)
    return tuple(out)


def toml_key_lines(text: str) -> dict[tuple, int]:
    """Each table header and key of TOML text, as a path like ``("resource", 0, "floor")``,
    mapped to its 1-based line. A light scan, not a parser: it is only used to point at
    the line of a key the real parser has already read."""
    found: dict[tuple, int] = {}
    arrays: dict[tuple, int] = {}   # array-of-tables path -> index of its latest entry
    table: tuple = ()
    in_multiline: str | None = None

    def resolve(parts: tuple[str, ...]) -> tuple:
        built: tuple = ()
        for p in parts:
            built += (p,)
            if built in arrays:
                built += (arrays[built],)
        return built

    for number, line in enumerate(text.splitlines(), start=1):
        if in_multiline is not None:
            if line.count(in_multiline) % 2 == 1:
                in_multiline = None
            continue
        m = _ARRAY_HEADER.match(line)
        if m:
            parts = _parts(m.group(1))
            head = resolve(parts[:-1]) + (parts[-1],)
            arrays[head] = arrays.get(head, -1) + 1
            table = head + (arrays[head],)
            found.setdefault(head, number)
            found[table] = number
            continue
        m = _TABLE_HEADER.match(line)
        if m:
            table = resolve(_parts(m.group(1)))
            found.setdefault(table, number)
            continue
        m = _ASSIGN.match(line)
        if m:
            found.setdefault(table + _parts(m.group(1)), number)
            rest = line[m.end():]
            for quotes in ('"""', "'''"):
                if rest.count(quotes) % 2 == 1:
                    in_multiline = quotes
    return found


def line_of(lines: dict[tuple, int], path: tuple) -> int | None:
    """The line of ``path``, or of the nearest enclosing key or table that was written."""
    for end in range(len(path), 0, -1):
        if path[:end] in lines:
            return lines[path[:end]]
    return None


def path_of(field: str) -> tuple:
    """``guesser.http.headers[0]`` -> ``("guesser", "http", "headers", 0)``."""
    out: list = []
    for name, index in re.findall(r"([^.\[\]]+)|\[(\d+)\]", field):
        out.append(int(index) if index else name)
    return tuple(out)


def with_lines(err: InputError, filename: str, text: str, *,
               conceal: Callable[[tuple], bool] | None = None) -> InputError:
    """``err`` with a line added to each of its Spots in ``filename`` that names a field
    but no line (an error found after validation, by whoever uses the settings)."""
    if is_json(text):
        return err
    lines = toml_key_lines(text)
    text_lines = text.splitlines()
    spots = []
    for s in err.spots:
        if s.file == filename and s.line is None and s.field:
            path = path_of(s.field)
            line = line_of(lines, path)
            shown = None
            if line is not None and line <= len(text_lines) and not (conceal and conceal(path)):
                shown = text_lines[line - 1]
            s = Spot(s.file, line, None, s.message, shown, s.field)
        spots.append(s)
    return type(err)(spots)


# -- validation errors in our words -----------------------------------------------------------

_OUR_WORDS = {
    "missing": "missing; this key is required here",
    "float_type": "expected a number",
    "float_parsing": "expected a number",
    "finite_number": "expected a finite number",
    "int_type": "expected a whole number",
    "int_parsing": "expected a whole number",
    "int_from_float": "expected a whole number",
    "bool_type": "expected true or false",
    "bool_parsing": "expected true or false",
    "string_type": "expected text in quotes",
    "greater_than": "expected a number above {gt}",
    "greater_than_equal": "expected a number of {ge} or more",
    "less_than": "expected a number below {lt}",
    "less_than_equal": "expected a number of {le} or less",
    "too_short": "expected at least {min_length} item(s)",
    "too_long": "expected at most {max_length} item(s)",
    "model_type": "expected a table",
    "model_attributes_type": "expected a table",
    "dict_type": "expected a table",
    "list_type": "expected a list",
}


def field_path(loc: tuple) -> str:
    """``("guesser", "http", "headers", 0)`` -> ``guesser.http.headers[0]``."""
    out = ""
    for part in loc:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out


def _unwrap(t: Any) -> Any:
    """Strip Annotated and an Optional's None."""
    while True:
        if typing.get_origin(t) is typing.Annotated:
            t = typing.get_args(t)[0]
            continue
        if _is_union(t):
            members = [a for a in typing.get_args(t) if a is not type(None)]
            if len(members) == 1:
                t = members[0]
                continue
        return t


def _is_union(t: Any) -> bool:
    return typing.get_origin(t) in (Union, types.UnionType)


def _is_model(t: Any) -> bool:
    return isinstance(t, type) and issubclass(t, BaseModel)


def _tag_member(members: list, tag: str) -> Any:
    """The member of a union that a validation-error tag (``dict[str,any]``...) names."""
    for m in members:
        name = getattr(m, "__name__", "")
        origin = typing.get_origin(m)
        if (name and tag == name) or (origin is not None and tag.startswith(origin.__name__)):
            return m
    return None


class _Place:
    """Where a validation error's location leads in the model: the path a user wrote
    (union tags removed), the table that holds the last key, and the key's type."""

    def __init__(self, model: type[BaseModel], loc: tuple) -> None:
        self.path: list = []
        self.table: type[BaseModel] | None = model
        self.annotation: Any = model
        self.through_union = False
        current: Any = model
        for part in loc:
            current = _unwrap(current)
            if _is_union(current):
                members = [a for a in typing.get_args(current) if a is not type(None)]
                member = _tag_member(members, str(part))
                if member is not None:
                    self.through_union = True
                    current = member
                    continue
                current = None
            elif _is_model(current):
                self.table = current
                field = current.model_fields.get(part) if isinstance(part, str) else None
                current = field.annotation if field is not None else None
            elif typing.get_origin(current) is dict:
                current = typing.get_args(current)[1] if typing.get_args(current) else None
            elif typing.get_origin(current) in (list, tuple):
                args = typing.get_args(current)
                current = args[0] if args else None
            else:
                current = None
            self.path.append(part)
        self.annotation = _unwrap(current) if current is not None else None

    def allowed_words(self) -> tuple | None:
        if typing.get_origin(self.annotation) is Literal:
            return typing.get_args(self.annotation)
        return None

    def list_of_tables(self) -> bool:
        if typing.get_origin(self.annotation) not in (list, tuple):
            return False
        args = typing.get_args(self.annotation)
        return bool(args) and _is_model(_unwrap(args[0]))


def _kind_of(value: Any) -> str:
    for kind, words in ((bool, "true or false"), (int, "a whole number"), (float, "a number"),
                        (str, "text"), (dict, "a table"), ((list, tuple), "a list")):
        if isinstance(value, kind):
            return words
    return f"a {type(value).__name__}"


def _shown(value: Any) -> str:
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, (list, tuple)):
        return "a list"
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _message(e: dict, place: _Place) -> str:
    kind = e["type"]
    ctx = {k: f"{v:g}" if isinstance(v, float) else v for k, v in (e.get("ctx") or {}).items()}
    if kind in ("tuple_type", "list_type") and place.list_of_tables():
        name = next((p for p in reversed(place.path) if isinstance(p, str)), "table")
        return f"expected a list of tables, each written [[{name}]]"
    if kind == "literal_error":
        words = place.allowed_words()
        if words:
            return "expected one of " + ", ".join(str(w) for w in words)
    if kind == "string_too_short":
        return ("expected text that is not empty" if ctx.get("min_length") == 1
                else "expected text of at least {min_length} characters".format(**ctx))
    if kind == "string_too_long":
        return "expected text of at most {max_length} characters".format(**ctx)
    if kind == "extra_forbidden":
        known = list(place.table.model_fields) if place.table is not None else []
        msg = f"unknown key; expected one of {', '.join(known)}"
        key = place.path[-1] if place.path else None
        close = difflib.get_close_matches(str(key), known, n=1) if key is not None else []
        return msg + (f" (did you mean {close[0]}?)" if close else "")
    words = _OUR_WORDS.get(kind)
    if words is None:
        return e["msg"].removeprefix("Value error, ").removeprefix("Assertion failed, ")
    return words.format(**ctx)


def validation_spots(model: type[BaseModel], err: ValidationError, filename: str, *,
                     text: str | None = None,
                     conceal: Callable[[tuple], bool] | None = None) -> list[Spot]:
    """The errors of ``model.model_validate`` as Spots: key path, our words, the value found.

    ``text`` (TOML) lets a Spot carry the line of its key. ``conceal(path)`` says which
    values must not be shown (header values and the like): the Spot names their type only.
    """
    lines = toml_key_lines(text) if text is not None and not is_json(text) else {}
    text_lines = text.splitlines() if text is not None else []
    merged: dict[str, list] = {}  # one entry per key path; a union's members merge
    hidden: set[str] = set()
    for e in err.errors():
        place = _Place(model, tuple(e["loc"]))
        path = tuple(place.path)
        msg = _message(e, place)
        has_value = e["type"] not in ("missing", "extra_forbidden")
        if has_value and "input" in e:
            value = e["input"]
            if conceal is not None and conceal(path):
                shown = _kind_of(value)
                hidden.add(field_path(path))
            else:
                shown = _shown(value)
            got = f" (got {shown})"
        else:
            got = ""
        key = field_path(path)
        entry = merged.get(key)
        if entry is not None and place.through_union and entry[3]:
            entry[1].append(msg)
            continue
        merged[key] = [path, [msg], got, place.through_union]
    spots = []
    for key, (path, msgs, got, _) in merged.items():
        if len(msgs) > 1 and all(m.startswith("expected ") for m in msgs):
            msg = "expected " + " or ".join(m.removeprefix("expected ") for m in msgs)
        else:
            msg = "; ".join(msgs)
        line = line_of(lines, path) if lines else None
        shown_line = (text_lines[line - 1] if line and line <= len(text_lines)
                      and key not in hidden else None)
        spots.append(Spot(filename, line, None, msg + got, shown_line, key or None))
    # in the order of the file where lines are known; the model's order otherwise
    return sorted(spots, key=lambda s: s.line if s.line is not None else 1 << 30)


def validate(model: type[M], data: dict, filename: str, *, text: str | None = None,
             strict: bool | None = None, conceal: Callable[[tuple], bool] | None = None) -> M:
    """``model`` from ``data``, or an InputError listing every problem in our words."""
    try:
        return model.model_validate(data, strict=strict)
    except ValidationError as e:
        raise InputError(validation_spots(model, e, filename, text=text,
                                          conceal=conceal)) from None


def read_model(model: type[M], text: str, filename: str, *, strict: bool | None = None,
               conceal: Callable[[tuple], bool] | None = None) -> M:
    """TOML or JSON text straight into ``model``."""
    return validate(model, parse_table(text, filename, model), filename, text=text,
                    strict=strict, conceal=conceal)
