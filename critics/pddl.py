"""Read PDDL domains and problems into the model, or build a problem from Python.

Reading happens in three steps kept in three modules: the grammar
(``pddl.lark``) recognises the text, ``transform`` turns it into model nodes,
``semantics`` checks names, arities and types. This module joins them and turns
whatever goes wrong into one of our errors, pointing at the file, line and
column of the original (not lower-cased) text with what was expected there.
"""

from __future__ import annotations

import bisect
import functools
import math
import re
from collections.abc import Iterable, Mapping
from os import PathLike
from pathlib import Path

from lark import Lark, Token
from lark.exceptions import UnexpectedCharacters, UnexpectedInput, UnexpectedToken
from lark.lexer import PatternRE, TerminalDef

from plansieve.critics.errors import (
    InputError, ModelError, PddlSyntaxError, Spot, UnsupportedRequirement,
)
from plansieve.critics.model import (
    Atom, Domain, Formula, FrozenMap, Metric, Param, Problem, Source, Task, TimedLiteral,
)
from plansieve.critics.semantics import (
    Issue, ProblemChecker, check_domain, check_problem, domain_preferences, preference_names,
    requirement_issues, unsupported_in_domain,
)
from plansieve.critics.transform import (
    InitFact, InitValue, PddlTransformer, ShapeError, UnsupportedFeature,
)

__all__ = ["parse_domain", "parse_problem", "load_domain", "load_problem", "load_task",
           "build_problem"]

_STARTS = ["domain", "problem", "init_element", "goal_spec", "constraint_spec", "fluent_spec",
           "metric_spec"]


@functools.lru_cache(maxsize=1)
def _parser() -> Lark:
    """The LALR parser with the transformer built in (no parse tree is kept)."""
    return Lark.open_from_package(
        "plansieve.critics", "pddl.lark", parser="lalr", lexer="contextual",
        start=_STARTS, transformer=PddlTransformer(), maybe_placeholders=False,
    )


def _word_by_word(terminal: TerminalDef) -> None:
    """Switch off the fast-path terminals of the grammar (NAME_RUN, PLAIN_ATOM)."""
    if terminal.name == "NAME_RUN":
        terminal.pattern = PatternRE(r"[a-z][a-z0-9_\-]*")  # one name, as NAME
    elif terminal.name == "PLAIN_ATOM":
        terminal.pattern = PatternRE(r"\((?!)")  # matches nothing


@functools.lru_cache(maxsize=1)
def _word_parser() -> Lark:
    """The same parser reading typed lists and atoms word by word.

    Text the fast parser rejects is read again by this one, so a syntax error is
    always found and described by the word-by-word rules, and text that only those
    rules accept (the fast tokens look at the text, not at the parser's state) is
    still read. Built on first use: valid files never need it.
    """
    return Lark.open_from_package(
        "plansieve.critics", "pddl.lark", parser="lalr", lexer="contextual",
        start=_STARTS, transformer=PddlTransformer(), maybe_placeholders=False,
        edit_terminals=_word_by_word,
    )


# ---------------------------------------------------------------------------
# Text and positions

_UPPER_TO_LOWER = {c: c + 32 for c in range(ord("A"), ord("Z") + 1)}


def _lower(text: str) -> str:
    """PDDL is case-insensitive; lower only ASCII so positions stay the same."""
    return text.lower() if text.isascii() else text.translate(_UPPER_TO_LOWER)


class _Lines:
    """Line starts of a text, computed once, for turning offsets into line/column."""

    def __init__(self, text: str) -> None:
        self.text = text
        self.starts = [0] + [m.end() for m in re.finditer("\n", text)]

    def offset(self, line: int, column: int) -> int:
        return self.starts[line - 1] + column - 1

    def position(self, offset: int) -> tuple[int, int]:
        i = bisect.bisect_right(self.starts, offset) - 1
        return i + 1, offset - self.starts[i] + 1

    def line_text(self, line: int | None) -> str | None:
        if line is None or not 1 <= line <= len(self.starts):
            return None
        start = self.starts[line - 1]
        end = self.text.find("\n", start)
        return self.text[start:] if end < 0 else self.text[start:end].rstrip("\r")

    def word(self, line: int, column: int, word: int) -> tuple[int, int]:
        """Where word number ``word`` of the node opened at (line, column) starts."""
        text, n = self.text, len(self.text)
        pos = self.offset(line, column)
        if not (0 <= pos < n) or text[pos] != "(":
            return line, column
        i, k = pos + 1, 0
        while i < n:
            c = text[i]
            if c.isspace():
                i += 1
            elif c == ";":
                j = text.find("\n", i)
                i = n if j < 0 else j
            elif c == ")":
                break
            elif k == word:
                return self.position(i)
            elif c == "(":
                depth = 0
                while i < n:
                    if text[i] == "(":
                        depth += 1
                    elif text[i] == ")":
                        depth -= 1
                        if depth == 0:
                            i += 1
                            break
                    i += 1
                k += 1
            else:
                while i < n and not text[i].isspace() and text[i] not in "();":
                    i += 1
                k += 1
        return line, column


def _spot(file: str, lines: _Lines | None, line: int | None, column: int | None, message: str,
          field: str | None = None) -> Spot:
    return Spot(file, line, column, message, lines.line_text(line) if lines else None, field)


def _issue_spots(file: str, text: str | None, issues: Iterable[Issue],
                 field: str | None = None) -> list[Spot]:
    lines = _Lines(text) if text is not None else None
    out = []
    for issue in sorted(issues, key=lambda i: (i.loc.line, i.loc.column) if i.loc else (0, 0)):
        if issue.loc is None:
            out.append(Spot(file, None, None, issue.message, None, field))
            continue
        line, column = issue.loc.line, issue.loc.column
        if issue.word is not None and lines is not None:
            line, column = lines.word(line, column, issue.word)
        out.append(_spot(file, lines, line, column, issue.message, field))
    return out


def _raise_issues(file: str, text: str | None, issues: list[Issue]) -> None:
    if not issues:
        return
    spots = _issue_spots(file, text, issues)
    if any(i.requirement for i in issues):
        raise UnsupportedRequirement(spots)
    raise ModelError(spots)


# ---------------------------------------------------------------------------
# Syntax errors in plain words

_TERMINAL_WORDS = {
    "LPAR": "an opening '('",
    "RPAR": "a closing ')'",
    "NAME": "a name",
    "NAME_RUN": "a name",
    "VARIABLE": "a variable like ?x",
    "NUMBER": "a number",
    "REQUIREMENT": "a requirement like :strips",
    "DURATION_VAR": "?duration",
    "OPTIMIZATION": "minimize or maximize",
    "ANY_WORD": "a word",
    "$END": "the end of the file",
}
# Terminals that only restate another choice (a whole fact is also an opening
# parenthesis; PLAIN_ATOM never matches in the word-by-word parser) or that we
# do not advertise. NAME_RUN is a name there.
_UNSAID = {"GROUND_ATOM", "GROUND_VALUE", "PLAIN_ATOM", "UNSUPPORTED_SECTION",
           "CONTINUOUS_TIME"}

_SECTION_WORDS = {":requirements", ":types", ":constants", ":predicates", ":functions",
                  ":constraints", ":domain", ":objects", ":init", ":goal", ":metric"}
_ACTION_PARTS = {":parameters", ":precondition", ":effect", ":duration", ":condition"}


def _expected_words(names: Iterable[str]) -> str:
    parser = _word_parser()
    first, keywords, last = [], [], set()
    for n in set(names) - _UNSAID:
        if n in ("LPAR", "RPAR"):
            first.append(_TERMINAL_WORDS[n])
        elif n in _TERMINAL_WORDS:
            last.add(_TERMINAL_WORDS[n])
        else:
            try:
                pattern = parser.get_terminal(n).pattern
                keywords.append(f"'{pattern.value}'")
            except KeyError:  # pragma: no cover - every terminal has a pattern
                keywords.append(n.lower())
    words = sorted(first) + sorted(keywords) + sorted(last)
    if not words:
        return "nothing more"
    if len(words) == 1:
        return words[0]
    return ", ".join(words[:-1]) + " or " + words[-1]


def _context(e: UnexpectedInput, text: str) -> str:
    """Which section or action part the parser was inside, from its stack.

    Completed parts are already reduced to model nodes; what is left as tokens are
    the parentheses still open (and ones just closed but not yet reduced), with the
    keywords right after them.
    """
    ip = getattr(e, "interactive_parser", None)
    stack = ip.parser_state.value_stack if ip is not None else []
    open_: list[dict] = []
    for i, v in enumerate(stack):
        if not isinstance(v, Token):
            continue
        if v.type == "LPAR":
            open_.append({})
        elif v.type == "RPAR":
            if open_:
                open_.pop()
        elif open_ and v in (":action", ":durative-action"):
            nxt = stack[i + 1] if i + 1 < len(stack) else None
            if isinstance(nxt, Token):
                open_[-1]["action"] = text[nxt.start_pos:nxt.end_pos]
        elif open_ and v in _ACTION_PARTS:
            open_[-1]["part"] = str(v)
        elif open_ and v in _SECTION_WORDS:
            open_[-1]["section"] = str(v)
    action = part = section = None
    for frame in open_:
        action = frame.get("action", action)
        part = frame.get("part", part)
        section = frame.get("section", section)
    if action and part:
        return f" (in the {part} of action '{action}')"
    if action:
        return f" (in action '{action}')"
    if section:
        return f" (in the {section} section)"
    return ""


def _syntax_error(e: UnexpectedInput, file: str, text: str) -> PddlSyntaxError:
    lines = _Lines(text)
    if isinstance(e, UnexpectedToken):
        tok = e.token
        if tok.type == "$END":
            end = len(text.rstrip())
            line, column = lines.position(end)
            found = "the end of the file"
        else:
            raw = text[tok.start_pos:tok.end_pos]
            shown = raw.lstrip()
            line, column = lines.position(tok.start_pos + len(raw) - len(shown))
            shown = shown.rstrip()
            if len(shown) > 30:
                shown = shown[:27] + "..."
            found = f"'{shown}'"
        expected = e.expected
    elif isinstance(e, UnexpectedCharacters):
        line, column = e.line, e.column
        found = f"'{text[e.pos_in_stream]}'" if e.pos_in_stream < len(text) else "the end"
        expected = e.allowed
    else:  # pragma: no cover - LALR raises only the two kinds above
        line, column = getattr(e, "line", None), getattr(e, "column", None)
        found, expected = "something unexpected", set()
    ip = getattr(e, "interactive_parser", None)
    if ip is not None:
        # LALR merges look-ahead sets, so the raw set can offer tokens that would fail
        # one step later; asking the parser which tokens really advance it is exact.
        expected = ip.accepts() or expected
    message = (f"expected {_expected_words(expected)}, but found {found}"
               f"{_context(e, text)}")
    return PddlSyntaxError(_spot(file, lines, line, column, message))


# Deeper nesting than this is refused before parsing, so nothing after the parser (checks,
# grounding, simulation) can run out of Python stack. Real PDDL stays far below it.
MAX_NESTING = 200
_PARENS = re.compile(r";[^\n]*|[()]")
_COMMENTS = re.compile(rb";[^\n]*")
_ALL_BUT_PARENS = bytes(c for c in range(256) if c not in b"()")


def _depth_bound(text: str) -> int:
    """An upper bound of the nesting depth of ``text`` (comments skipped), at C speed.

    Each pass removes every ``()`` that is adjacent, so a parenthesis lies inside at
    most as many matched pairs as there were passes, plus the unmatched ``(`` left.
    The passes stop once the bound is above ``MAX_NESTING``.
    """
    data = text.encode("utf-8", "surrogatepass")
    if b";" in data:
        data = _COMMENTS.sub(b"", data)
    data = data.translate(None, _ALL_BUT_PARENS)
    passes = 0
    while passes <= MAX_NESTING and b"()" in data:
        data = data.replace(b"()", b"")
        passes += 1
    return passes + data.count(b"(")


def _check_nesting(text: str, file: str, field: str | None) -> None:
    if _depth_bound(text) <= MAX_NESTING:
        return
    depth = 0
    for m in _PARENS.finditer(text):
        c = m.group()
        if c == "(":
            depth += 1
            if depth > MAX_NESTING:
                lines = _Lines(text)
                raise ModelError(_spot(
                    file, lines, *lines.position(m.start()),
                    f"parentheses are nested more than {MAX_NESTING} levels deep here; "
                    f"expected flatter formulas (an 'and' or 'or' takes any number of parts)",
                    field))
        elif c == ")":
            depth -= 1


def _parse(text: str, start: str, file: str, field: str | None = None):
    """Run the parser; every failure becomes one of our errors.

    The fast parser reads most files; what it rejects is read again word by word
    (``_word_parser``), which gives the result or the error to report.
    """
    if text.count("(") > MAX_NESTING:
        _check_nesting(text, file, field)
    lowered = _lower(text)
    try:
        try:
            return _parser().parse(lowered, start=start)
        except UnexpectedInput:
            return _word_parser().parse(lowered, start=start)
    except UnexpectedInput as e:
        err = _syntax_error(e, file, text)
        if field is not None:
            err = PddlSyntaxError([Spot(s.file, s.line, s.column, s.message, s.line_text, field)
                                   for s in err.spots])
        raise err from None
    except ShapeError as e:
        raise PddlSyntaxError(_spot(file, _Lines(text), e.line, e.column, e.message, field)) \
            from None
    except UnsupportedFeature as e:
        raise UnsupportedRequirement(_spot(
            file, _Lines(text), e.line, e.column,
            f"{e.what} is not supported (it needs {e.requirement}); expected a discrete "
            f"numeric effect inside 'at start' or 'at end'", field)) from None


def _strip_bom(text: str) -> str:
    return text[1:] if text.startswith("\ufeff") else text


# ---------------------------------------------------------------------------
# Public API: text and files


def _too_deep(file: str) -> ModelError:
    return ModelError(Spot(file, None, None, "formulas are nested too deeply to check; expected "
                                             "at most a few hundred levels of parentheses"))


def parse_domain(text: str, filename: str = "<domain>") -> Domain:
    """Read a domain from PDDL text; raise an InputError subclass if it is not valid."""
    text = _strip_bom(text)
    draft = _parse(text, "domain", filename)
    _raise_issues(filename, text, unsupported_in_domain(draft))
    domain = draft.build(Source(filename, text))
    issues = check_domain(draft, domain)
    _raise_issues(filename, text, issues)
    return domain


def parse_problem(text: str, domain: Domain, filename: str = "<problem>") -> Problem:
    """Read a problem of ``domain`` from PDDL text; all its problems are reported at once."""
    text = _strip_bom(text)
    draft = _parse(text, "problem", filename)
    _raise_issues(filename, text, requirement_issues(draft.requirements))
    issues = check_problem(draft, domain)
    _raise_issues(filename, text, issues)
    return draft.build(Source(filename, text))


def _read_text(path: str | PathLike[str]) -> tuple[str, str]:
    file = str(path)
    try:
        data = Path(path).read_bytes()
    except FileNotFoundError:
        raise InputError(Spot(file, None, None, "no such file; expected a PDDL file")) from None
    except IsADirectoryError:
        raise InputError(Spot(file, None, None, "this is a directory; expected a PDDL file")) \
            from None
    except OSError as e:
        raise InputError(Spot(file, None, None,
                              f"cannot be read ({e.strerror or e}); expected a readable "
                              f"PDDL file")) from None
    try:
        return _strip_bom(data.decode("utf-8")), file
    except UnicodeDecodeError as e:
        line_start = data.rfind(b"\n", 0, e.start) + 1
        line_end = data.find(b"\n", e.start)
        raw_line = data[line_start:line_end if line_end >= 0 else len(data)]
        column = len(data[line_start:e.start].decode("utf-8", errors="replace")) + 1
        line = data.count(b"\n", 0, e.start) + 1
        raise InputError(Spot(
            file, line, column,
            f"byte 0x{data[e.start]:02x} is not UTF-8 text; expected a UTF-8 (or plain ASCII) "
            f"file", raw_line.decode("utf-8", errors="replace").rstrip("\r"))) from None


def load_domain(path: str | PathLike[str]) -> Domain:
    """Read a domain file."""
    text, file = _read_text(path)
    return parse_domain(text, file)


def load_problem(path: str | PathLike[str], domain: Domain) -> Problem:
    """Read a problem file of ``domain``."""
    text, file = _read_text(path)
    return parse_problem(text, domain, file)


def load_task(domain_path: str | PathLike[str], problem_path: str | PathLike[str]) -> Task:
    """Read a domain file and one of its problem files."""
    domain = load_domain(domain_path)
    return Task(domain, load_problem(problem_path, domain))


# ---------------------------------------------------------------------------
# Public API: problems built from Python

_NAME = re.compile(r"[a-z][a-z0-9_\-]*\Z")
_FORMULA_TYPES = Formula.__args__  # the classes a Formula may be


class _Collector:
    """Spots from a problem built in Python: each names the field it came from."""

    def __init__(self, file: str) -> None:
        self.file = file
        self.syntax: list[Spot] = []
        self.unsupported: list[Spot] = []
        self.model: list[Spot] = []

    def message(self, field: str, message: str) -> None:
        self.model.append(Spot(self.file, None, None, message, None, field))

    def issues(self, field: str, issues: list[Issue], text: str | None = None) -> None:
        self.model.extend(_issue_spots(self.file, text, issues, field))

    def parse(self, text: str, start: str, field: str):
        try:
            return _parse(text, start, self.file, field)
        except UnsupportedRequirement as e:
            self.unsupported.extend(e.spots)
        except PddlSyntaxError as e:
            self.syntax.extend(e.spots)
        return None

    def name(self, value: object, field: str) -> str | None:
        if not isinstance(value, str) or not _NAME.match(value.lower()):
            self.message(field, f"{value!r} is not a PDDL name; expected letters, digits, '-' "
                                f"or '_', starting with a letter")
            return None
        return value.lower()

    def raise_if_any(self) -> None:
        if self.syntax:
            raise PddlSyntaxError(self.syntax)
        if self.unsupported:
            raise UnsupportedRequirement(self.unsupported + self.model)
        if self.model:
            raise ModelError(self.model)


def _key_text(key: object) -> str:
    if isinstance(key, tuple):
        return "(" + " ".join(str(k) for k in key) + ")"
    return str(key)


def build_problem(domain: Domain, *, name: str, objects: Mapping[str, str | Iterable[str]],
                  init: Iterable[str | tuple | Atom], goal: str | Formula | None,
                  fluents: Mapping[str | tuple, float] | None = None,
                  metric: str | Metric | None = None,
                  constraints: str | Formula | None = None) -> Problem:
    """Build a problem of ``domain`` from Python values, with the checks a file gets.

    ``objects`` maps a name to its type (or a list of types, read as ``either``);
    ``init`` holds facts as PDDL text ``"(on a b)"`` (timed literals and
    ``(= (f) 3)`` too), tuples ``("on", "a", "b")`` or ``Atom``s; ``goal`` and
    ``constraints`` are PDDL text or model formulas; ``fluents`` maps ``"(fuel v1)"``
    or ``("fuel", "v1")`` to a number; ``metric`` is a ``Metric`` or text such as
    ``"minimize (total-cost)"``. Errors name the field, e.g. ``init[3]``.
    """
    out = _Collector(f"<problem {name}>")
    pname = out.name(name, "name") or str(name)
    for field, value, kind in (("objects", objects, Mapping), ("init", init, Iterable),
                               ("fluents", fluents or {}, Mapping)):
        if isinstance(value, str) or not isinstance(value, kind):
            raise InputError(Spot(out.file, None, None,
                                  f"{type(value).__name__} given; expected a "
                                  f"{'mapping' if kind is Mapping else 'list'}", None, field))

    params: list[Param] = []
    for key, types in objects.items():
        field = f"objects[{key}]"
        oname = out.name(key, field)
        if isinstance(types, str):
            type_list = [types]
        elif isinstance(types, (list, tuple)):
            type_list = list(types)
        else:
            out.message(field, f"{types!r} is not a type; expected a type name or a list of "
                               f"type names")
            continue
        checked = [out.name(t, field) for t in type_list]
        if oname is None or None in checked:
            continue
        if not checked:
            out.message(field, "no type given; expected a type name or a list of type names")
            continue
        params.append(Param(oname, tuple(checked)))
    checker = ProblemChecker(domain, params)
    for i, issue in checker.object_issues():
        out.issues(f"objects[{params[i].name}]", [issue])

    facts: list[tuple] = []
    values: dict[tuple, float] = {}
    tils: list[TimedLiteral] = []
    for i, item in enumerate(init):
        field = f"init[{i}]"
        text = None
        if isinstance(item, str):
            el = out.parse(item, "init_element", field)
            text = item
        elif isinstance(item, Atom):
            el = InitFact(item.key, None, None)
        elif isinstance(item, (tuple, list)) and item:
            words = [out.name(w, field) for w in item]
            el = InitFact(tuple(words), None, None) if None not in words else None
        else:
            out.message(field, f"{item!r} is not a fact; expected PDDL text like '(on a b)', a "
                               f"tuple like ('on', 'a', 'b') or an Atom")
            el = None
        if el is None:
            continue
        if isinstance(el, InitFact) and any(a.startswith("?") for a in el.key[1:]):
            out.message(field, "a fact of the initial state cannot hold a variable; expected "
                               "object names")
            continue
        out.issues(field, checker.init_issues(el), text)
        if isinstance(el, InitFact):
            facts.append(el.key)
        elif isinstance(el, InitValue):
            values.setdefault(el.key, el.value)
        else:
            tils.append(el)

    for key, value in (fluents or {}).items():
        field = f"fluents[{_key_text(key)}]"
        text = None
        if isinstance(key, str):
            parsed = out.parse(key, "fluent_spec", field)
            if parsed is None:
                continue
            fkey, hl, hc = parsed
            text = key
        elif isinstance(key, tuple) and key:
            words = [out.name(w, field) for w in key]
            if None in words:
                continue
            fkey, hl, hc = tuple(words), None, None
        else:
            out.message(field, f"{key!r} is not a function term; expected PDDL text like "
                               f"'(fuel v1)' or a tuple like ('fuel', 'v1')")
            continue
        if isinstance(value, bool) or not isinstance(value, (int, float)) or \
                not math.isfinite(value):
            out.message(field, f"{value!r} is not a value for {_key_text(fkey)}; expected a "
                               f"finite number")
            continue
        el = InitValue(fkey, float(value), hl, hc, hl, hc)
        out.issues(field, checker.init_issues(el), text)
        values.setdefault(fkey, float(value))

    def formula(value, start: str, field: str):
        if value is None:
            return None
        if isinstance(value, str):
            f = out.parse(value, start, field)
            text = value
        elif isinstance(value, _FORMULA_TYPES):
            f, text = value, None
        else:
            out.message(field, f"{value!r} is not a formula; expected PDDL text like "
                               f"'(and (on a b))' or a model formula")
            return None
        if f is not None:
            try:
                out.issues(field, checker.formula_issues(f), text)
            except RecursionError:
                out.model.extend(Spot(s.file, None, None, s.message, None, field)
                                 for s in _too_deep(out.file).spots)
        return f

    goal_f = formula(goal, "goal_spec", "goal")
    constraints_f = formula(constraints, "constraint_spec", "constraints")

    metric_m = None
    if metric is not None:
        text = None
        if isinstance(metric, str):
            metric_m, text = out.parse(metric, "metric_spec", "metric"), metric
        elif isinstance(metric, Metric):
            metric_m = metric
        else:
            out.message("metric", f"{metric!r} is not a metric; expected text like "
                                  f"'minimize (total-cost)' or a Metric")
        if metric_m is not None:
            prefs = preference_names([goal_f, constraints_f]) | domain_preferences(domain)
            try:
                out.issues("metric", checker.metric_issues(metric_m, prefs), text)
            except RecursionError:
                out.model.extend(Spot(s.file, None, None, s.message, None, "metric")
                                 for s in _too_deep(out.file).spots)

    out.raise_if_any()
    objects_map: dict[str, tuple[str, ...]] = {}
    for p in params:
        objects_map.setdefault(p.name, p.types)
    return Problem(
        name=pname,
        domain_name=domain.name,
        objects=FrozenMap(objects_map),
        init=frozenset(facts),
        init_fluents=FrozenMap(values),
        goal=goal_f,
        timed_literals=tuple(tils),
        constraints=constraints_f,
        metric=metric_m,
    )
