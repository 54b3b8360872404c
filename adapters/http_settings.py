"""What the HTTP guesser is told about its endpoint: configured, never coded.

One pydantic model per concern (timeouts, retries, limits, where the answer lies,
prompts), gathered in :class:`HttpSettings`. Two presets fill in the request body
and the answer paths for the shapes most servers speak:

- ``chat-messages``: a list of role/content messages in, ``choices[0].message.content``
  out, token counts under ``usage``;
- ``prompt-text``: ``{"prompt": ...}`` in, ``{"text": ...}`` out.

``preset = "custom"`` leaves both to the user. Header values and the URL may name
environment variables as ``${NAME}``; they are filled in when the guesser is built
(:mod:`plansieve.adapters.secrets`) and never shown anywhere.
"""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

Preset = Literal["chat-messages", "prompt-text", "custom"]
PRESETS: tuple[str, ...] = ("chat-messages", "prompt-text", "custom")

Conversation = Literal["history", "fresh"]
CONVERSATIONS: tuple[str, ...] = ("history", "fresh")

# The HTTP status codes worth another attempt (RFC 9110 §15: 408 Request Timeout,
# 429 Too Many Requests (RFC 6585 §4), 500, 502, 503, 504); every other 4xx is final.
TRANSIENT_STATUS: frozenset[int] = frozenset({408, 429, 500, 502, 503, 504})


class _Section(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid")


class Timeouts(_Section):
    """Seconds to wait: for the connection, between bytes of the answer, for a whole attempt."""

    connect: float = Field(10.0, gt=0)
    read: float = Field(120.0, gt=0)
    call: float = Field(300.0, gt=0)


class Retries(_Section):
    """How often and how patiently to try again after transient trouble.

    ``attempts`` counts every try of one round, the first included. Waits double
    from ``first_wait``, each stretched by a random factor between 1 and
    ``1 + jitter`` so that loops do not retry in step, and stop growing at
    ``longest_wait``; a server's ``Retry-After`` replaces the computed wait, but a wait longer
    than ``longest_wait`` or than the time the budget has left is not waited out:
    the round fails at once instead.
    """

    attempts: int = Field(4, ge=1, le=100)
    first_wait: float = Field(0.5, ge=0)
    longest_wait: float = Field(60.0, ge=0)
    jitter: float = Field(0.5, ge=0)


class Limits(_Section):
    """Guards on the endpoint, shared by every loop in the process that uses it."""

    max_answer_bytes: int = Field(4 * 1024 * 1024, ge=1)
    concurrency: int = Field(32, ge=1)
    requests_per_minute: float | None = Field(None, gt=0)


class AnswerPaths(_Section):
    """Where the answer text and the usage figures sit in the JSON answer.

    Paths are dotted keys with ``[n]`` list indexes: ``choices[0].message.content``.
    ``format = "text"`` takes the whole body as the answer text and reads no usage.
    """

    format: Literal["json", "text"] = "json"
    text: str = "text"
    input_tokens: str | None = None
    output_tokens: str | None = None
    cost: str | None = None


class Prompts(_Section):
    """Prompt template files; any left out uses plansieve's own default.

    ``system`` opens the conversation, ``task`` is the first request and ``retry``
    carries the feedback in later rounds.
    """

    system: str | None = None
    task: str | None = None
    retry: str | None = None


_PRESET_BODY: dict[str, Any] = {
    "chat-messages": {"model": "{{model}}", "messages": "{{messages}}"},
    "prompt-text": {"prompt": "{{prompt}}"},
}
_PRESET_ANSWER: dict[str, AnswerPaths] = {
    "chat-messages": AnswerPaths(text="choices[0].message.content",
                                 input_tokens="usage.prompt_tokens",
                                 output_tokens="usage.completion_tokens"),
    "prompt-text": AnswerPaths(text="text"),
}


class HttpSettings(_Section):
    """Everything about one endpoint. Only ``url`` is required."""

    url: str = Field(min_length=1)
    method: Literal["POST", "PUT"] = "POST"
    preset: Preset = "chat-messages"
    headers: dict[str, str] = {}
    # A JSON value with ``{{placeholder}}`` strings; None takes the preset's body.
    body: dict[str, Any] | list[Any] | None = None
    # None takes the preset's paths.
    answer: AnswerPaths | None = None
    model: str | None = None
    # Sampling settings added to the top level of an object body (temperature, max_tokens...).
    sampling: dict[str, Any] = {}
    conversation: Conversation = "history"
    prompts: Prompts = Prompts()
    timeouts: Timeouts = Timeouts()
    retries: Retries = Retries()
    limits: Limits = Limits()

    @model_validator(mode="after")
    def _custom_needs_shape(self) -> "HttpSettings":
        if self.preset == "custom" and (self.body is None or self.answer is None):
            missing = [k for k in ("body", "answer") if getattr(self, k) is None]
            raise ValueError(f"preset 'custom' needs {' and '.join(missing)} to be given")
        return self

    def request_body(self) -> dict[str, Any] | list[Any]:
        """The body template in force: the user's, or the preset's."""
        return self.body if self.body is not None else _PRESET_BODY[self.preset]

    def answer_paths(self) -> AnswerPaths:
        """The answer paths in force: the user's, or the preset's."""
        return self.answer if self.answer is not None else _PRESET_ANSWER[self.preset]
