"""Canonical JSON (RFC 8785, the JSON Canonicalization Scheme): one byte string per value.

Hashes and MACs in the trace are taken over these bytes, so the same event always
hashes the same way, whatever wrote or re-read it: members sorted by UTF-16 code
units, no whitespace, strings with only the escapes JSON requires, numbers in the
shortest form that reads back to the same IEEE 754 double, written the way
ECMAScript writes them. Values JSON cannot carry exactly (NaN, infinities, integers
beyond 2**53, lone surrogates, non-JSON types) are refused rather than bent.
"""

from __future__ import annotations

import json
import math
import re
from typing import Any

from plansieve.critics.errors import PlansieveError

# Beyond this an integer no longer maps to exactly one IEEE 754 double (I-JSON, RFC 7493 2.2).
MAX_EXACT_INT = 2 ** 53

# The two-character escapes JSON has; other control characters become \u00xx (lower-case hex).
_SHORT_ESCAPES = {'"': '\\"', "\\": "\\\\", "\b": "\\b", "\t": "\\t", "\n": "\\n",
                  "\f": "\\f", "\r": "\\r"}
_NEEDS_ESCAPE = re.compile(r'["\\\x00-\x1f]')
_SURROGATE = re.compile("[\ud800-\udfff]")


class CanonicalError(PlansieveError, ValueError):
    """A value that has no canonical JSON form; ``path`` says where it sits (``a.b[2]``)."""

    def __init__(self, path: str, message: str) -> None:
        super().__init__(f"{path}: {message}" if path else message)
        self.path = path
        self.message = message


def canonical(obj: Any) -> bytes:
    """The RFC 8785 canonical form of a JSON-like value, as UTF-8 bytes.

    Accepts None, bool, int, float, str, list, tuple and dict with str keys.
    """
    out: list[str] = []
    try:
        _fast(obj, out)
    except (_Refused, RecursionError):
        # Something is wrong somewhere: walk again, slowly, to say exactly where.
        out = []
        try:
            _write(obj, out, "")
        except RecursionError:
            raise CanonicalError("", "the value is nested too deeply (or contains itself)") \
                from None
    return "".join(out).encode("utf-8")


class _Refused(Exception):
    """Raised by the fast writer; the slow one finds the place and the words."""


# The C string encoder escapes exactly what RFC 8785 3.2.2.2 asks (quote, backslash,
# control characters; \b \t \n \f \r short, the rest as lower-case \u00xx) and
# nothing else; tests compare it with the slow writer on every control character.
_encode_str = json.encoder.encode_basestring


def _fast(obj: Any, out: list[str]) -> None:
    """The canonical writer without path bookkeeping: the common case, every event."""
    t = type(obj)
    if t is str:
        if not obj.isascii() and _SURROGATE.search(obj):
            raise _Refused
        out.append(_encode_str(obj))
    elif t is dict:
        keys = list(obj)
        for k in keys:
            if type(k) is not str:
                raise _Refused
        if "".join(keys).isascii():
            keys.sort()  # code point order is UTF-16 order for these
        else:
            for k in keys:
                if _SURROGATE.search(k):
                    raise _Refused
            keys.sort(key=lambda k: k.encode("utf-16-be"))
        out.append("{")
        first = True
        for k in keys:
            if first:
                first = False
            else:
                out.append(",")
            out.append(_encode_str(k))
            out.append(":")
            v = obj[k]
            if type(v) is str and v.isascii():  # the commonest leaf, written in place
                out.append(_encode_str(v))
            else:
                _fast(v, out)
        out.append("}")
    elif t is list or t is tuple:
        out.append("[")
        first = True
        for item in obj:
            if first:
                first = False
            else:
                out.append(",")
            if type(item) is str and item.isascii():
                out.append(_encode_str(item))
            else:
                _fast(item, out)
        out.append("]")
    elif obj is None:
        out.append("null")
    elif obj is True:
        out.append("true")
    elif obj is False:
        out.append("false")
    elif t is int:
        if -MAX_EXACT_INT <= obj <= MAX_EXACT_INT:
            out.append(str(obj))
        else:
            raise _Refused
    elif t is float:
        if obj != obj or obj in (math.inf, -math.inf):
            raise _Refused
        out.append(_number(obj, ""))
    else:  # subclasses and other types: the slow writer knows what to do with them
        raise _Refused


def canonical_text(obj: Any) -> str:
    """The canonical form as a str (for messages and tests)."""
    return canonical(obj).decode("utf-8")


def number_text(x: float | int) -> str:
    """A number as ECMAScript's Number::toString writes it (RFC 8785 3.2.2.3)."""
    return _number(x, "")


def _write(obj: Any, out: list[str], path: str) -> None:
    if obj is None:
        out.append("null")
    elif obj is True:
        out.append("true")
    elif obj is False:
        out.append("false")
    elif isinstance(obj, str):
        out.append(_string(obj, path))
    elif isinstance(obj, (int, float)):
        out.append(_number(obj, path))
    elif isinstance(obj, (list, tuple)):
        out.append("[")
        for i, item in enumerate(obj):
            if i:
                out.append(",")
            _write(item, out, f"{path}[{i}]")
        out.append("]")
    elif isinstance(obj, dict):
        for key in obj:
            if not isinstance(key, str):
                raise CanonicalError(path, f"object keys must be strings — found {key!r}")
            _string(key, _child(path, key))  # refuses lone surrogates before they are sorted
        out.append("{")
        # RFC 8785 3.2.3: sort by UTF-16 code units. Big-endian UTF-16 bytes compare
        # in exactly that order (code point order differs above U+FFFF).
        for i, key in enumerate(sorted(obj, key=lambda k: k.encode("utf-16-be"))):
            if i:
                out.append(",")
            out.append(_string(key, path))
            out.append(":")
            _write(obj[key], out, _child(path, key))
        out.append("}")
    else:
        raise CanonicalError(path, f"a Python {type(obj).__name__} has no JSON form")


def _child(path: str, key: str) -> str:
    if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", key):
        return f"{path}.{key}" if path else key
    return f"{path}[{_string(key, path)}]"


def _string(s: str, path: str) -> str:
    """RFC 8785 3.2.2.2: quote, backslash and control characters escaped; nothing else."""
    if _SURROGATE.search(s):
        # RFC 8785 3.2.2.2 requires well-formed Unicode; a lone surrogate has no UTF-8 form.
        raise CanonicalError(path, "the string holds a lone UTF-16 surrogate, which is not text")
    return '"' + _NEEDS_ESCAPE.sub(_escape, s) + '"'


def _escape(match: re.Match[str]) -> str:
    c = match.group()
    return _SHORT_ESCAPES.get(c) or f"\\u{ord(c):04x}"


def _number(x: float | int, path: str) -> str:
    if isinstance(x, int):
        if abs(x) <= MAX_EXACT_INT:
            return str(int(x))
        # Beyond 2**53 an integer is kept only when it is exactly what its own canonical
        # text says — as when a large double such as 1e17 is written and read back as an
        # int. Any other would be silently rounded to the nearest double.
        try:
            text = _number(float(x), path)
        except OverflowError:
            text = "e"
        if "e" not in text and int(text) == x:
            return text
        raise CanonicalError(path, f"the integer {x} is beyond 2**53 and no JSON number "
                                   "holds it exactly")
    if math.isnan(x) or math.isinf(x):
        raise CanonicalError(path, f"{x} is not a JSON number (RFC 8785 allows finite "
                                   "numbers only)")
    if x == 0:
        return "0"  # minus zero too
    # repr gives the shortest digits that read back to x (correctly rounded);
    # ECMAScript asks for the same digits, then lays them out by its own rules.
    text = repr(float(x))
    sign = "-" if text[0] == "-" else ""
    mantissa, _, exp = text.lstrip("-").partition("e")
    whole, _, frac = mantissa.partition(".")
    digits = whole + frac
    stripped = digits.lstrip("0")
    # x = 0.d1d2...dk * 10**n, with d1 != 0
    n = len(whole) + (int(exp) if exp else 0) - (len(digits) - len(stripped))
    digits = stripped.rstrip("0")
    k = len(digits)
    # ECMA-262 Number::toString steps, with k digits and decimal exponent n.
    if k <= n <= 21:
        return sign + digits + "0" * (n - k)
    if 0 < n <= 21:
        return sign + digits[:n] + "." + digits[n:]
    if -6 < n <= 0:
        return sign + "0." + "0" * (-n) + digits
    e = n - 1
    exponent = ("+" if e >= 0 else "-") + str(abs(e))
    if k == 1:
        return sign + digits + "e" + exponent
    return sign + digits[0] + "." + digits[1:] + "e" + exponent
