"""Canonical JSON against RFC 8785 (JCS) and the ECMAScript rules it builds on."""

from __future__ import annotations

import json
import math
import struct
from decimal import ROUND_FLOOR, Decimal, localcontext

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from plansieve.loop.canonical import CanonicalError, canonical, canonical_text, number_text


def _double(bits: str) -> float:
    return struct.unpack(">d", bytes.fromhex(bits))[0]


# Source: RFC 8785, Appendix B ("Number Serialization Samples"): IEEE 754 bit patterns and
# the text JCS prescribes for them. Written from memory; the same rows appear in several
# public JCS test suites, which agree with the values below.
APPENDIX_B = [
    ("0000000000000000", "0"),
    ("8000000000000000", "0"),  # minus zero
    ("0000000000000001", "5e-324"),
    ("8000000000000001", "-5e-324"),
    ("7fefffffffffffff", "1.7976931348623157e+308"),
    ("ffefffffffffffff", "-1.7976931348623157e+308"),
    ("4340000000000000", "9007199254740992"),
    ("c340000000000000", "-9007199254740992"),
    ("4430000000000000", "295147905179352830000"),
    ("44b52d02c7e14af5", "9.999999999999997e+22"),
    ("44b52d02c7e14af6", "1e+23"),
    ("44b52d02c7e14af7", "1.0000000000000001e+23"),
    ("444b1ae4d6e2ef4e", "999999999999999700000"),
    ("444b1ae4d6e2ef4f", "999999999999999900000"),
    ("444b1ae4d6e2ef50", "1e+21"),
    ("3eb0c6f7a0b5ed8c", "9.999999999999997e-7"),
    ("3eb0c6f7a0b5ed8d", "0.000001"),
    ("41b3de4355555553", "333333333.3333332"),
    ("41b3de4355555554", "333333333.33333325"),
    ("41b3de4355555555", "333333333.3333333"),
    ("41b3de4355555556", "333333333.3333334"),
    ("41b3de4355555557", "333333333.33333343"),
    ("becbf647612f3696", "-0.0000033333333333333333"),
    ("43143ff3c1cb0959", "1424953923781206.2"),  # round to even
]


@pytest.mark.parametrize(("bits", "expected"), APPENDIX_B)
def test_rfc8785_appendix_b_numbers(bits, expected):
    assert canonical(_double(bits)) == expected.encode("ascii")
    assert _reference_number(_double(bits)) == expected  # the test's own reference agrees


# Source: RFC 8785, Appendix B: the NaN and Infinity rows are errors (from memory).
@pytest.mark.parametrize("bits", ["7fffffffffffffff", "7ff0000000000000", "fff0000000000000"])
def test_rfc8785_non_finite_numbers_are_refused(bits):
    with pytest.raises(CanonicalError, match="not a JSON number"):
        canonical({"cost": [1, _double(bits)]})


def test_refusals_name_where_the_value_sits():
    with pytest.raises(CanonicalError) as err:
        canonical({"totals": {"cost": math.nan}})
    assert err.value.path == "totals.cost"
    with pytest.raises(CanonicalError, match=r"a Python set has no JSON form") as err:
        canonical({"steps": [1, {"x": {1}}]})
    assert err.value.path == "steps[1].x"
    with pytest.raises(CanonicalError, match="keys must be strings"):
        canonical({1: "one"})


def test_ecmascript_layout_boundaries():
    # Source: ECMA-262, Number::toString (the steps RFC 8785 3.2.2.3 adopts), from memory:
    # plain digits while the decimal exponent n <= 21, "0.000..." while n > -6.
    assert number_text(1e20) == "100000000000000000000"
    assert number_text(1e21) == "1e+21"
    assert number_text(1e-6) == "0.000001"
    assert number_text(1e-7) == "1e-7"
    assert number_text(1.5e-7) == "1.5e-7"
    assert number_text(123e-20) == "1.23e-18"
    assert number_text(2.0) == "2"  # an integral float has no ".0"
    assert number_text(-0.0) == "0"
    assert number_text(0.1 + 0.2) == "0.30000000000000004"
    # 2**-24 = 5.9604644775390625e-8 sits exactly between two 16-digit decimals; only the
    # upper one reads back (the gap below a power of two is half the gap above), so
    # Number::toString must pick it, not the round-half-even neighbour.
    assert number_text(2.0 ** -24) == "5.960464477539063e-8"


def test_integers():
    assert canonical([0, -1, 2 ** 53, -(2 ** 53)]) == b"[0,-1,9007199254740992,-9007199254740992]"
    assert canonical([True, False, None]) == b"[true,false,null]"  # bool is not a number here
    # I-JSON (RFC 7493 2.2): beyond 2**53 a number no longer means one exact integer
    with pytest.raises(CanonicalError, match="beyond 2\\*\\*53"):
        canonical(2 ** 53 + 1)
    with pytest.raises(CanonicalError, match="beyond 2\\*\\*53"):
        canonical(2 ** 60)  # a double, but JCS would write it as 1152921504606847000
    # ...while a large double that was written and read back as an int keeps its text
    assert canonical(int(1e17)) == canonical(1e17) == b"100000000000000000"
    assert canonical(json.loads(canonical(2.0 ** 60))) == b"1152921504606847000"


# Source: RFC 8785, section 3.2.3, the sorting example (from memory; it matches the copies
# in public JCS test suites). U+1F600 is the UTF-16 pair D83D DE00, so it sorts before
# U+FB33 — after it in code point order, which is where a plain sort() goes wrong.
def test_rfc8785_sorting_example():
    given_ = json.loads(r'''{
        "\u20ac": "Euro Sign",
        "\r": "Carriage Return",
        "\ufb33": "Hebrew Letter Dalet With Dagesh",
        "1": "One",
        "\ud83d\ude00": "Emoji: Grinning Face",
        "\u0080": "Control",
        "\u00f6": "Latin Small Letter O With Diaeresis"
    }''')
    out = canonical_text(given_)
    order = [v for _, v in json.loads(out, object_pairs_hook=list)]
    assert order == ["Carriage Return", "One", "Control", "Latin Small Letter O With Diaeresis",
                     "Euro Sign", "Emoji: Grinning Face", "Hebrew Letter Dalet With Dagesh"]
    assert out.startswith('{"\\r":"Carriage Return","1":"One","\u0080":"Control",')


# Source: RFC 8785, section 3.2.2 / 3.2.4, the example of the whole transformation
# (input and output from memory; they match the copies in public JCS test suites).
def test_rfc8785_worked_example():
    given_ = json.loads(r'''{
        "numbers": [333333333.33333329, 1E30, 4.50, 2e-3, 0.000000000000000000000000001],
        "string": "\u20ac$\u000F\u000aA'\u0042\u0022\u005c\\\"\/",
        "literals": [null, true, false]
    }''')
    expected = ('{"literals":[null,true,false],"numbers":[333333333.3333333,1e+30,4.5,0.002,'
                '1e-27],"string":"\u20ac$\\u000f\\nA\'B\\"\\\\\\\\\\"/"}')
    assert canonical(given_) == expected.encode("utf-8")


def test_string_escapes():
    # Source: ECMA-262 QuoteJSONString (RFC 8785 3.2.2.2), from memory: the two-letter
    # escapes for \b \t \n \f \r, \u00xx in lower-case hex for the other controls,
    # everything else (DEL, U+2028, non-ASCII) as it is.
    short = {0x08: "\\b", 0x09: "\\t", 0x0A: "\\n", 0x0C: "\\f", 0x0D: "\\r"}
    for c in range(0x20):
        want = short.get(c, f"\\u{c:04x}")
        assert canonical_text(chr(c)) == f'"{want}"'
    assert canonical_text('a"b\\c') == '"a\\"b\\\\c"'
    assert canonical_text("\x7f\u2028\u00e9\U0001f600/") == '"\x7f\u2028\u00e9\U0001f600/"'


def test_lone_surrogates_are_refused():
    # Source: RFC 8785 3.2.2.2 (from memory): JCS data must be well-formed Unicode.
    with pytest.raises(CanonicalError, match="lone UTF-16 surrogate"):
        canonical({"text": "ok \ud83d"})
    with pytest.raises(CanonicalError, match="lone UTF-16 surrogate"):
        canonical({"\udc00": 1})


# --- cross-checks -----------------------------------------------------------------------------


def _reference_number(x: float) -> str:
    """ECMAScript Number::toString written a second way, as a check (ECMA-262, from memory).

    Digits: the smallest k for which some k-digit decimal reads back to x; among those
    the one closest to x, the even one on a tie — computed with exact decimals, not
    with repr, which the code under test uses. Layout: the four cases on k and n.
    """
    if x == 0:
        return "0"
    with localcontext() as ctx:
        ctx.prec = 1200  # exact: a double has at most 767 significant decimal digits
        exact = Decimal(abs(x))
        top = exact.adjusted()
        for k in range(1, 18):
            unit = Decimal(1).scaleb(top - k + 1)
            low = exact.quantize(unit, rounding=ROUND_FLOOR)
            fits = [c for c in (low, low + unit) if c and float(c) == abs(x)]
            if fits:
                best = min(fits, key=lambda c: (abs(c - exact), int(c / unit) % 2))
                break
    digits = str(int(best.scaleb(-best.adjusted() + 20))).rstrip("0")
    k, n = len(digits), best.adjusted() + 1
    sign = "-" if x < 0 else ""
    if k <= n <= 21:
        body = digits + "0" * (n - k)
    elif 0 < n <= 21:
        body = digits[:n] + "." + digits[n:]
    elif -6 < n <= 0:
        body = "0." + "0" * -n + digits
    else:
        body = digits[0] + ("." + digits[1:] if k > 1 else "") + f"e{n - 1:+d}"
    return sign + body


_FINITE = st.floats(allow_nan=False, allow_infinity=False)
# Uniform over bit patterns too, so every exponent range gets its share.
_BITS = st.integers(0, 2 ** 64 - 1).map(lambda b: struct.unpack(">d", b.to_bytes(8, "big"))[0]) \
    .filter(math.isfinite)


@settings(max_examples=3000, deadline=None)
@given(st.one_of(_FINITE, _BITS))
def test_numbers_round_trip_and_follow_ecmascript(x):
    text = number_text(x)
    assert float(text) == x  # round trip (minus zero reads back as zero, which equals it)
    assert float(json.loads(text)) == x  # a JSON reader may give an int for "1e17"'s digits
    assert text == _reference_number(x)
    if "e" not in text and "." in text:
        assert not text.endswith("0")  # the fewest digits


def _utf16_units(s: str) -> list[int]:
    units = []
    for ch in s:
        cp = ord(ch)
        if cp > 0xFFFF:
            cp -= 0x10000
            units += [0xD800 + (cp >> 10), 0xDC00 + (cp & 0x3FF)]
        else:
            units.append(cp)
    return units


@settings(max_examples=300, deadline=None)
@given(st.dictionaries(st.text(max_size=6), st.integers(-5, 5), max_size=12))
def test_members_sorted_by_utf16_code_units(d):
    # Source: RFC 8785 3.2.3: compare keys as arrays of UTF-16 code units.
    keys = [k for k, _ in json.loads(canonical(d), object_pairs_hook=list)]
    assert keys == sorted(d, key=_utf16_units)


def _same_json(a, b) -> bool:
    """Equal as JSON values: every number is an IEEE 754 double (RFC 8785 3.2.2.3)."""
    if isinstance(a, bool) or isinstance(b, bool) or a is None or b is None:
        return a is b
    if isinstance(a, (int, float)) and isinstance(b, (int, float)):
        return float(a) == float(b)
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(map(_same_json, a, b))
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(_same_json(a[k], b[k]) for k in a)
    return type(a) is type(b) and a == b


_JSON = st.recursive(
    st.none() | st.booleans() | st.integers(-(2 ** 53), 2 ** 53) | _FINITE | st.text(),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=8), inner,
                                                               max_size=4),
    max_leaves=20)


@settings(max_examples=400, deadline=None)
@given(_JSON)
def test_canonical_form_reads_back_to_the_same_value_and_bytes(value):
    out = canonical(value)
    back = json.loads(out)
    assert _same_json(back, value)
    assert canonical(back) == out  # canonical(parse(canonical(x))) is a fixed point
    assert b"\n" not in out  # one value, one line: newlines inside strings are escaped


@settings(max_examples=300, deadline=None)
@given(st.text())
def test_strings_escape_like_the_standard_encoder(s):
    # Cross-check: Python's json encoder (ensure_ascii=False) escapes the same set, the way
    # RFC 8259 7 and ECMAScript both describe.
    assert canonical_text(s) == json.dumps(s, ensure_ascii=False)


# The writer has a fast path (C string escaping, no path bookkeeping) and a slow one
# that also says where a bad value sits. They must write the same bytes for every value.
_json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-2**53, 2**53)
    | st.floats(allow_nan=False, allow_infinity=False) | st.text(),
    lambda inner: st.lists(inner, max_size=4)
    | st.dictionaries(st.text(max_size=6), inner, max_size=4),
    max_leaves=30)


@settings(max_examples=1500, deadline=None)
@given(_json_values)
def test_fast_and_slow_writers_agree(value):
    from plansieve.loop import canonical as c
    fast: list[str] = []
    slow: list[str] = []
    c._fast(value, fast)
    c._write(value, slow, "")
    assert "".join(fast) == "".join(slow)


def test_fast_writer_escapes_every_control_character_like_the_slow_one():
    from plansieve.loop import canonical as c
    for code in list(range(0x20)) + [0x22, 0x5C, 0x7F, 0x2028, 0xFEFF]:
        s = f"a{chr(code)}b"
        fast: list[str] = []
        c._fast(s, fast)
        assert fast[0] == c._string(s, "")

