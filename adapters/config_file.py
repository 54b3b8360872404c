"""The run configuration file: one TOML table for everything ``plansieve run`` needs.

A run is the task, a guesser, the critics, the feedback level, a budget and a
trace. Writing them in a file (``plansieve.toml``, or ``--config FILE``) keeps an
endpoint's settings, prices and redaction patterns out of shell history and in
review; options on the command line still override the file. Paths in the file
are read relative to the file's own folder, so a configuration can be moved with
the files it names.

Secrets never sit in the file: header values and the URL name environment
variables as ``${NAME}``, filled in only when the guesser is built; what is shown
back (:func:`effective_text`) hides any credential written literally.
"""

from __future__ import annotations

import json
import math
import os
import re
from collections.abc import Mapping, Sequence
from os import PathLike
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import (
    AfterValidator, BaseModel, ConfigDict, Field, PrivateAttr, field_validator, model_validator,
)

from plansieve.adapters.http_settings import HttpSettings
from plansieve.critics.config_text import read_model, read_text_file, with_lines
from plansieve.critics.errors import InputError, Spot
from plansieve.critics.select import CRITIC_NAMES
from plansieve.loop.budget import Budget, Prices, budget_of
from plansieve.loop.feedback import FeedbackLevel
from plansieve.loop.trace import KEY_VARIABLE


Rate = Annotated[float, Field(ge=0.0, le=1.0)]
PositiveNumber = Annotated[float, Field(gt=0, allow_inf_nan=False)]
_ENV_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")


class _Section(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid")


class TaskSection(_Section):
    """The PDDL task; the command line's --domain and --problem win over it."""

    domain: str | None = Field(None, min_length=1)
    problem: str | None = Field(None, min_length=1)
    # the name the trace records for the task; default: the problem file's name
    id: str | None = Field(None, min_length=1)


class MistakeKinds(_Section):
    """The local guesser's mistake rates per kind (see adapters/mistakes.py)."""

    drop: Rate = 0.0
    swap: Rate = 0.0
    wrong_argument: Rate = 0.0
    invent: Rate = 0.0


class LocalGuesserSettings(_Section):
    """The built-in heuristic planner and its error model."""

    heuristic: Literal["ff", "add"] = "ff"
    node_limit: int = Field(50_000, ge=1)
    seed: int = 0
    # one rate for every kind of mistake, or a table with a rate per kind
    mistakes: MistakeKinds = MistakeKinds()
    uptake: Rate = 0.7

    @field_validator("mistakes", mode="before")
    @classmethod
    def _one_rate_for_all(cls, value: Any) -> Any:
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            if not (0.0 <= value <= 1.0):  # also refuses nan
                raise ValueError("expected a rate from 0 to 1, or a table of rates with "
                                 f"{', '.join(MistakeKinds.model_fields)}")
            return {kind: value for kind in MistakeKinds.model_fields}
        if not isinstance(value, (dict, MistakeKinds)):
            raise ValueError("expected a rate from 0 to 1, or a table of rates with "
                             f"{', '.join(MistakeKinds.model_fields)}")
        return value


class GuesserSection(_Section):
    """Who proposes plans: ``kind`` picks the table that is used."""

    kind: Literal["local", "http"] = "local"
    local: LocalGuesserSettings = LocalGuesserSettings()
    http: HttpSettings | None = None

    @model_validator(mode="after")
    def _http_needs_its_table(self) -> "GuesserSection":
        if self.kind == "http" and self.http is None:
            raise ValueError("kind 'http' needs a [guesser.http] table with at least a url")
        return self


CriticName = Literal[CRITIC_NAMES]  # type: ignore[valid-type]


class CriticsSection(_Section):
    """Which critics judge the plans, and the limits file they read."""

    # None: the critics the task calls for
    names: list[CriticName] | None = Field(None, min_length=1)
    run_all: bool = False
    limits: str | None = Field(None, min_length=1)


class FeedbackSection(_Section):
    level: FeedbackLevel = "all-with-fixes"


class BudgetSection(_Section):
    """Limits on one run; whichever is reached first ends it."""

    rounds: int = Field(5, ge=1)
    seconds: PositiveNumber | None = None
    tokens: int | None = Field(None, ge=1)
    cost: PositiveNumber | None = None
    # money per thousand tokens, for guessers that report tokens but no cost
    prices: Prices | None = None

    def budget(self) -> Budget:
        return budget_of(rounds=self.rounds, seconds=self.seconds, tokens=self.tokens,
                         cost=self.cost)


def _pattern(text: str) -> str:
    from plansieve.loop.trace import Redactor, TraceError
    try:
        Redactor(patterns=[text])
    except TraceError as e:  # the error shows the pattern itself; say it once
        raise ValueError(str(e).replace(f"redaction pattern #1 {text!r} ", "")) from None
    return text


def _env_name(text: str) -> str:
    if not _ENV_NAME.match(text):
        raise ValueError("expected the name of an environment variable (letters, digits and "
                         "underscores, not starting with a digit)")
    return text


class TraceSection(_Section):
    """Where the trace goes and what is kept out of it."""

    path: str | None = Field(None, min_length=1)
    fsync: bool = False
    # regular expressions whose matches become [redacted] in every event
    redact: list[Annotated[str, AfterValidator(_pattern)]] = []
    # the environment variable holding the HMAC key; named here, it must be set
    key_env: Annotated[str, AfterValidator(_env_name)] = KEY_VARIABLE


class RunConfig(_Section):
    """Everything a run is configured with. Every table and key may be left out."""

    task: TaskSection = TaskSection()
    guesser: GuesserSection = GuesserSection()
    critics: CriticsSection = CriticsSection()
    feedback: FeedbackSection = FeedbackSection()
    budget: BudgetSection = BudgetSection()
    trace: TraceSection = TraceSection()

    _source: str | None = PrivateAttr(None)

    @property
    def source(self) -> str | None:
        """The file this was read from (None when built in code)."""
        return self._source

    @property
    def folder(self) -> Path | None:
        """The folder relative paths in the file are read against (None: the current one)."""
        return Path(self._source).parent if self._source is not None else None

    def with_source(self, source: str | None) -> "RunConfig":
        copy = self.model_copy()
        copy._source = source
        return copy


SCHEMA_PATH = Path(__file__).resolve().parents[1] / "docs" / "schema" / "config.schema.json"


def schema_text() -> str:
    """The JSON Schema of a configuration file, as kept in docs/schema/config.schema.json
    (editors that read TOML against a JSON Schema can use it)."""
    schema = {
        "$schema": "https://json-schema.org/draft/2020-12/schema",
        **RunConfig.model_json_schema(mode="validation"),
        "title": "plansieve configuration (plansieve.toml)",
    }
    return json.dumps(schema, indent=2, ensure_ascii=False) + "\n"


# -- reading ---------------------------------------------------------------------------------


def _concealed(path: tuple) -> bool:
    """Header values may be credentials: their bad values are described, not shown."""
    return path[:3] == ("guesser", "http", "headers")


def _against(folder: Path, text: str | None) -> str | None:
    if text is None:
        return None
    p = Path(text).expanduser()
    return text if p.is_absolute() else os.path.normpath(folder / p)


def parse_config(text: str, filename: str = "<config>") -> RunConfig:
    """A RunConfig from TOML (or JSON) text; relative paths are resolved against the
    folder of ``filename``, except prompt templates, which the HTTP guesser resolves
    against :attr:`RunConfig.folder` itself."""
    config = read_model(RunConfig, text, filename, strict=True, conceal=_concealed)
    folder = Path(filename).parent
    fixed = config.model_copy(update={
        "task": config.task.model_copy(update={
            "domain": _against(folder, config.task.domain),
            "problem": _against(folder, config.task.problem)}),
        "critics": config.critics.model_copy(update={
            "limits": _against(folder, config.critics.limits)}),
        "trace": config.trace.model_copy(update={"path": _against(folder, config.trace.path)}),
    })
    return fixed.with_source(filename)


def load_config(path: str | PathLike[str]) -> RunConfig:
    """Read and validate a configuration file; errors name the file, the key path, the
    value found and what is allowed."""
    return parse_config(read_text_file(path), str(path))


# -- building what the file describes ---------------------------------------------------------


def make_guesser(config: RunConfig, *, env: Mapping[str, str] | None = None):
    """The guesser ``config.guesser.kind`` names, built from its table.

    The HTTP guesser fills ``${NAME}`` references from ``env`` (default: the process
    environment) and reads its prompt templates now, so a missing variable or template
    is an InputError before any round runs.
    """
    g = config.guesser
    if g.kind == "http":
        from plansieve.adapters.http_guesser import HttpGuesser
        assert g.http is not None  # the model requires it
        try:
            return HttpGuesser(g.http, env=env, base_dir=config.folder,
                               source=config.source or "the configuration")
        except InputError as e:
            raise _located(e, config) from None
    from plansieve.adapters.heuristic import HeuristicGuesser
    from plansieve.adapters.mistakes import MistakeRates
    local = g.local
    return HeuristicGuesser(heuristic=local.heuristic, node_limit=local.node_limit,
                            seed=local.seed,
                            mistakes=MistakeRates(**local.mistakes.model_dump(),
                                                  uptake=local.uptake))


def _located(err: InputError, config: RunConfig) -> InputError:
    """Lines for errors found while building from the file (a missing variable...)."""
    if config.source is None:
        return err
    try:
        text = read_text_file(config.source)
    except InputError:
        return err
    return with_lines(err, config.source, text, conceal=_concealed)


def trace_key(config: RunConfig, env: Mapping[str, str] | None = None) -> bytes | None:
    """The HMAC key for the trace. A ``key_env`` named in the file must be set; the
    default variable is used when set and skipped when not."""
    from plansieve.loop.trace import key_from_env
    t = config.trace
    key = key_from_env(t.key_env, env)
    if key is None and "key_env" in t.model_fields_set:
        raise _located(InputError(Spot(
            config.source or "<config>", None, None,
            f"the environment variable {t.key_env} is not set (or empty); it should hold "
            "the key that signs the trace", field="trace.key_env")), config)
    return key


def make_trace(config: RunConfig, run_id: str, *, env: Mapping[str, str] | None = None,
               also: Sequence[Any] = ()):
    """A TraceWriter to ``config.trace.path`` (and the sinks in ``also``, such as a
    progress display) with the file's redaction and key; None with neither."""
    t = config.trace
    if t.path is None and not also:
        return None
    from plansieve.loop.trace import FileSink, Redactor, TraceWriter
    key = trace_key(config, env)
    redact = Redactor(patterns=t.redact) if t.redact else None
    sinks = ([FileSink(t.path, fsync=t.fsync)] if t.path is not None else []) + list(also)
    return TraceWriter(sinks, run_id=run_id, hmac_key=key, redact=redact)


# -- showing it back ---------------------------------------------------------------------------


def _masked(config: RunConfig) -> dict[str, Any]:
    from plansieve.adapters.secrets import mask_header, mask_url
    data = config.model_dump(mode="python", exclude_none=True)
    if config.guesser.kind == "http" and "local" not in config.guesser.model_fields_set:
        del data["guesser"]["local"]  # neither used nor written: only noise
    http = config.guesser.http
    if http is not None:
        shown = data["guesser"]["http"]
        shown["url"] = mask_url(http.url)
        shown["headers"] = {k: mask_header(k, v) for k, v in http.headers.items()}
        # what is in force: the preset's body and answer paths unless the file gave its own
        shown["body"] = http.request_body()
        shown["answer"] = http.answer_paths().model_dump(exclude_none=True)
        order = list(HttpSettings.model_fields)
        data["guesser"]["http"] = {k: shown[k] for k in order if k in shown}
        folder = config.folder
        if folder is not None:
            prompts = shown.get("prompts", {})
            for k, v in list(prompts.items()):
                prompts[k] = _against(folder, v)
    return data


def effective_text(config: RunConfig) -> str:
    """The settings in force, as TOML: defaults filled in, preset shapes spelled out,
    paths resolved, and credentials (header values, URL passwords and keys) masked."""
    lines: list[str] = []
    _table(_masked(config), (), lines)
    text = "\n".join(lines).lstrip("\n") + "\n"
    # say so where the key would be
    if config.critics.names is None:
        text = text.replace("[critics]\n", "[critics]\n# names: those the task calls for\n", 1)
    text = text.replace("\nprompts = {}\n", "\n# prompts: plansieve's own templates\n", 1)
    return text


_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+\Z")


def _key(k: str) -> str:
    return k if _BARE_KEY.match(k) else _string(k)


def _string(s: str) -> str:
    out = ['"']
    for ch in s:
        if ch in '"\\':
            out.append("\\" + ch)
        elif ch == "\n":
            out.append("\\n")
        elif ch == "\t":
            out.append("\\t")
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04X}")
        else:
            out.append(ch)
    out.append('"')
    return "".join(out)


def _value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return _string(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x) for x in v if x is not None) + "]"
    if isinstance(v, dict):
        inner = ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items() if x is not None)
        return "{ " + inner + " }" if inner else "{}"
    return _string(str(v))


def _table(data: dict, path: tuple, lines: list[str]) -> None:
    plain = {k: v for k, v in data.items() if not (isinstance(v, dict) and v)}
    nested = {k: v for k, v in data.items() if isinstance(v, dict) and v}
    if path and (plain or not nested):
        lines += ["", "[" + ".".join(_key(p) for p in path) + "]"]
    for k, v in plain.items():
        lines.append(f"{_key(k)} = {_value(v)}")
    for k, v in nested.items():
        _table(v, path + (k,), lines)
