"""Secrets in endpoint settings: filled in from the environment, never shown.

A settings file may name environment variables as ``${NAME}`` (``$${`` writes a
literal ``${``), so API keys stay out of files that get shared and committed.
Every value filled in this way, and every key written literally into a sensitive
header, becomes a :class:`Secrets` entry that is scrubbed out of any text the
guesser returns, raises or logs. For display, :func:`mask_header` and
:func:`mask_url` keep the ``${NAME}`` references (a variable's name is no secret)
and hide everything that could be one.
"""

from __future__ import annotations

import json
import re
from collections.abc import Iterable, Mapping
from typing import Any
from urllib.parse import quote, unquote_plus

from plansieve.critics.errors import InputError, Spot

MASK = "***"

# ``$${`` (an escaped dollar), a well-formed ``${NAME}``, or a ``${`` that starts a bad one.
_REF = re.compile(r"\$\$\{|\$\{([A-Za-z_][A-Za-z0-9_]*)\}|\$\{")
_NAME_RULE = "a name of letters, digits and '_' (not starting with a digit) and a closing '}'"


def fill_env(text: str, *, field: str, source: str, env: Mapping[str, str],
             found: set[str] | None = None) -> str:
    """``text`` with every ``${NAME}`` replaced by ``env[NAME]``.

    Each filled value is added to ``found`` (empty values are left out: there is
    nothing to hide). A missing variable or a malformed reference is an
    InputError naming the field; the message never holds a variable's value.
    """
    out: list[str] = []
    pos = 0
    for m in _REF.finditer(text):
        out.append(text[pos:m.start()])
        pos = m.end()
        token = m.group(0)
        if token == "$${":
            out.append("${")
            continue
        name = m.group(1)
        if name is None:
            raise InputError(Spot(source, None, None,
                                  f"'${{' at character {m.start() + 1} starts a variable "
                                  f"reference; expected {_NAME_RULE} (write '$${{' for a "
                                  f"literal '${{')", field=field))
        if name not in env:
            raise InputError(Spot(source, None, None,
                                  f"environment variable {name} is not set; set it before "
                                  f"the run, or write '$${{' for a literal '${{'",
                                  field=field))
        value = env[name]
        if found is not None and value:
            found.add(value)
        out.append(value)
    out.append(text[pos:])
    return "".join(out)


class Secrets:
    """Values that must never appear in anything plansieve shows or writes."""

    __slots__ = ("values", "_pattern")

    def __init__(self, values: Iterable[str]) -> None:
        self.values: frozenset[str] = frozenset(v for v in values if v)
        forms: set[str] = set()
        for v in self.values:
            # The value as written, and as it reads inside a JSON string or a URL,
            # since error texts often quote a request or an answer.
            forms.update((v, json.dumps(v, ensure_ascii=False)[1:-1],
                          json.dumps(v)[1:-1], quote(v, safe="")))
        # Longest first: at any position the regex takes the first alternative that matches.
        ordered = sorted(forms, key=lambda s: (-len(s), s))
        self._pattern = re.compile("|".join(map(re.escape, ordered))) if ordered else None

    @classmethod
    def none(cls) -> "Secrets":
        return cls(())

    def __or__(self, other: "Secrets") -> "Secrets":
        return Secrets(self.values | other.values)

    def __bool__(self) -> bool:
        return bool(self.values)

    def __repr__(self) -> str:  # never the values themselves
        return f"Secrets({len(self.values)} values)"

    def scrub(self, text: str) -> str:
        """``text`` with every secret (longest first) replaced by ``***``."""
        if self._pattern is None or not text:
            return text
        return self._pattern.sub(MASK, text)

    def scrub_data(self, value: Any) -> Any:
        """A copy of a JSON-like value with every string scrubbed (keys included)."""
        if isinstance(value, str):
            return self.scrub(value)
        if isinstance(value, Mapping):
            return {self.scrub_data(k): self.scrub_data(v) for k, v in value.items()}
        if isinstance(value, (list, tuple)):
            return [self.scrub_data(v) for v in value]
        return value


# -- display ------------------------------------------------------------------------------

# Header and query names that usually carry credentials (common practice; no standard
# lists them). Matched case-insensitively as parts of the name.
_SENSITIVE_PARTS = ("auth", "key", "token", "secret", "password", "passwd", "cookie",
                    "credential", "session", "signature")
# The headers whose value starts with an auth-scheme word (RFC 9110 sec. 11.4).
_SCHEME_HEADERS = ("authorization", "proxy-authorization")
_SCHEME = re.compile(r"([!#$%&'*+.^_`|~0-9A-Za-z-]+)([ \t]+)(.*)\Z", re.S)
_KEEP = re.compile(r"\$\{[A-Za-z_][A-Za-z0-9_]*\}")


def is_sensitive(name: str) -> bool:
    """Whether a header or query parameter name looks like it carries a credential."""
    low = name.lower()
    return any(part in low for part in _SENSITIVE_PARTS)


def _mask_literal(text: str) -> str:
    """``text`` with every literal run hidden; ``${NAME}`` references and spaces kept."""
    out: list[str] = []
    pos = 0
    for m in _KEEP.finditer(text):
        if m.start() > 0 and text[m.start() - 1] == "$":
            continue  # ``$${NAME}`` is literal text, not a reference
        out.append(_mask_run(text[pos:m.start()]))
        out.append(m.group(0))
        pos = m.end()
    out.append(_mask_run(text[pos:]))
    return "".join(out)


def _mask_run(run: str) -> str:
    if not run.strip():
        return run
    lead = run[:len(run) - len(run.lstrip())]
    trail = run[len(run.rstrip()):]
    return f"{lead}{MASK}{trail}"


def _split_scheme(name: str, value: str) -> tuple[str, str]:
    """(scheme and the spaces after it, credentials) for Authorization-like headers."""
    if name.lower() in _SCHEME_HEADERS:
        m = _SCHEME.match(value)
        if m and "${" not in m.group(1):
            return m.group(1) + m.group(2), m.group(3)
    return "", value


def mask_header(name: str, value: str) -> str:
    """A header value fit for display: credentials hidden, ``${NAME}`` kept."""
    if not is_sensitive(name):
        return value
    scheme, rest = _split_scheme(name, value)
    return scheme + _mask_literal(rest)


def literal_secrets(headers: Mapping[str, str]) -> set[str]:
    """The credentials written literally (not as ``${NAME}``) into sensitive headers.

    ``Bearer abc123`` gives both ``"Bearer abc123"`` and ``"abc123"``; parts of a
    value around a ``${NAME}`` count as well, except an auth-scheme word.
    """
    out: set[str] = set()
    for name, value in headers.items():
        if not is_sensitive(name):
            continue
        scheme, rest = _split_scheme(name, value)
        if not _KEEP.search(value):
            if value.strip():
                out.add(value.strip())
            if rest.strip():
                out.add(rest.strip())
            continue
        for part in _KEEP.split(rest):
            part = part.replace("$${", "${").strip()
            if part:
                out.add(part)
    return out


def mask_url(url: str) -> str:
    """A URL fit for display: userinfo password and credential-like query values hidden.

    RFC 3986 sec. 3.2.1 says applications should not render the part of userinfo
    after the first ':' as clear text; a userinfo without ':' is hidden whole,
    since tokens are commonly passed there (common practice).
    """
    rest, hash_, fragment = url.partition("#")
    rest, q, query = rest.partition("?")
    head, sep, tail = rest.partition("//")
    if sep:
        authority, slash, path = tail.partition("/")
        userinfo, at, host = authority.rpartition("@")
        if at:
            user, colon, password = userinfo.partition(":")
            userinfo = (f"{user}:{_mask_literal(password)}" if colon
                        else _mask_literal(user))
            authority = f"{userinfo}@{host}"
        rest = f"{head}//{authority}{slash}{path}"
    if q:
        parts = []
        for item in query.split("&"):
            key, eq, val = item.partition("=")
            if eq and is_sensitive(unquote_plus(key)):
                val = _mask_literal(val)
            parts.append(f"{key}{eq}{val}")
        rest = f"{rest}?{'&'.join(parts)}"
    return f"{rest}{hash_}{fragment}"
