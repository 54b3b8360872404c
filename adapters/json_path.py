"""Paths into a JSON answer: where the endpoint put the plan text and the token counts.

A path is dotted keys with ``[n]`` list indexes, as in ``choices[0].message.content``;
a key that is not a plain word is written quoted in brackets, ``data["odd key"]``.
When a path does not lead anywhere, :class:`PathMissing` says how far it got and
what was there instead, so a wrong path in a settings file is fixed in one go.
"""

from __future__ import annotations

import json
import re
from typing import Any

JsonPath = tuple["str | int", ...]

# A bare key: anything but separators, brackets, quotes and white space.
_BARE = re.compile(r"[^.\[\]\s\"']+")
_INDEX = re.compile(r"[0-9]+")
_SHOWN = 80  # longest value text quoted in a message
_KEYS_SHOWN = 12


class PathMissing(LookupError):
    """The answer does not hold what the path points at; the message says why."""

    def __init__(self, message: str) -> None:
        super().__init__(message)
        self.message = message

    def __str__(self) -> str:
        return self.message


def _expected(what: str, text: str, i: int) -> ValueError:
    got = f"{text[i]!r}" if i < len(text) else "the end"
    return ValueError(f"expected {what} at column {i + 1}, found {got}")


def _quoted(text: str, i: int) -> tuple[str, int]:
    """Read a quoted key starting at ``text[i]``; returns (key, index after the quote)."""
    quote_char = text[i]
    j = i + 1
    while j < len(text) and text[j] != quote_char:
        j += 2 if text[j] == "\\" else 1
    if j >= len(text):
        raise ValueError(f"expected a closing {quote_char} for the key opened at column {i + 1}")
    body = text[i + 1:j]
    if quote_char == '"':
        try:
            # A double-quoted key is a JSON string (RFC 8259 sec. 7).
            return json.loads(text[i:j + 1]), j + 1
        except json.JSONDecodeError as e:
            raise ValueError(f"expected a JSON string at column {i + 1}: {e.msg}") from None
    return re.sub(r"\\(.)", r"\1", body), j + 1


def parse_path(text: str) -> JsonPath:
    """``"choices[0].message.content"`` -> ``("choices", 0, "message", "content")``."""
    parts: list[str | int] = []
    i = 0
    n = len(text)
    if n == 0:
        raise ValueError("expected a key name or [index] at column 1, found an empty path")
    need_key = text[0] != "["
    while i < n or need_key:
        if need_key:
            m = _BARE.match(text, i)
            if not m:
                raise _expected("a key name", text, i)
            parts.append(m.group(0))
            i = m.end()
            need_key = False
            continue
        ch = text[i]
        if ch == ".":
            i += 1
            need_key = True
        elif ch == "[":
            i += 1
            if i < n and text[i] in "\"'":
                key, i = _quoted(text, i)
                parts.append(key)
            else:
                m = _INDEX.match(text, i)
                if not m:
                    raise _expected("a list index (0, 1, ...) or a quoted key", text, i)
                parts.append(int(m.group(0)))
                i = m.end()
            if i >= n or text[i] != "]":
                raise _expected("']'", text, i)
            i += 1
        else:
            raise _expected("'.', '[' or the end of the path", text, i)
    return tuple(parts)


def show_path(path: JsonPath) -> str:
    """The text form of a path; ``parse_path(show_path(p)) == p``."""
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part}]"
        elif _BARE.fullmatch(part):
            out += f".{part}" if out else part
        else:
            out += f"[{json.dumps(part, ensure_ascii=False)}]"
    return out


def _clip(text: str, limit: int) -> str:
    return text if len(text) <= limit else text[:limit - 3] + "..."


def _key_list(obj: dict) -> str:
    keys = [_clip(str(k), 40) for k in obj]
    shown = ", ".join(keys[:_KEYS_SHOWN])
    if len(keys) > _KEYS_SHOWN:
        shown += f" and {len(keys) - _KEYS_SHOWN} more"
    return shown


def _items(n: int) -> str:
    return "a list of 1 item" if n == 1 else f"a list of {n} items"


def describe(value: Any) -> str:
    """What a JSON value is, in a few words; short scalars are quoted."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, dict):
        return f"an object with keys {_key_list(value)}" if value else "an empty object"
    if isinstance(value, list):
        return _items(len(value)) if value else "an empty list"
    if isinstance(value, str):
        shown = json.dumps(value, ensure_ascii=False)
        return (f"the text {shown}" if len(shown) <= _SHOWN
                else f"a text of {len(value)} characters")
    if isinstance(value, (int, float)):
        shown = repr(value)
        return f"the number {shown}" if len(shown) <= _SHOWN else "a number"
    return f"a {type(value).__name__}"


def lookup(data: Any, path: JsonPath) -> Any:
    """The value ``path`` points at inside ``data``; :class:`PathMissing` if there is none."""
    here = data
    for depth, part in enumerate(path):
        where = "at the top" if depth == 0 else f"under {show_path(path[:depth])}"
        name = "the answer" if depth == 0 else show_path(path[:depth])
        if isinstance(part, int):
            if not isinstance(here, list):
                raise PathMissing(f"{name} is {describe(here)}, not a list, so [{part}] "
                                  f"cannot be read")
            if part >= len(here):
                held = "1 item" if len(here) == 1 else f"{len(here)} items"
                raise PathMissing(f"{name} holds {held}, so [{part}] is missing")
            here = here[part]
            continue
        key = _clip(part, 40)
        if not isinstance(here, dict):
            raise PathMissing(f"the answer has no {key!r} {where}: {name} is "
                              f"{describe(here)}, not an object")
        if part not in here:
            holds = f"it holds keys {_key_list(here)}" if here else "it is an empty object"
            raise PathMissing(f"the answer has no {key!r} {where}; {holds}")
        here = here[part]
    return here
