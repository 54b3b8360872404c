"""Fingerprints of a task for the trace: which exact domain, problem and limits a run used.

A task read from files is fingerprinted by its texts, so an auditor can check a
trace against the files on disk. A task built in Python has no text; it is
fingerprinted by the canonical JSON of its model instead, which is stable across
runs of the same version.
"""

from __future__ import annotations

import dataclasses

from plansieve.critics.model import Task
from plansieve.loop.canonical import canonical
from plansieve.loop.events import TaskRef, sha256_text


def _model_json(obj) -> object:
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        out = {"class": type(obj).__name__}
        for f in dataclasses.fields(obj):
            if f.name in ("loc", "source"):
                continue
            out[f.name] = _model_json(getattr(obj, f.name))
        return out
    if isinstance(obj, (frozenset, set)):
        return sorted((_model_json(x) for x in obj), key=repr)
    if isinstance(obj, (tuple, list)):
        return [_model_json(x) for x in obj]
    if hasattr(obj, "items"):
        return [[_model_json(k), _model_json(v)] for k, v in obj.items()]
    if hasattr(obj, "model_dump"):
        return obj.model_dump(mode="json")
    return obj


def text_digest(part) -> str:
    """SHA-256 of a domain's or problem's source text, or of its model when it has none."""
    source = getattr(part, "source", None)
    if source is not None:
        return sha256_text(source.text)
    return sha256_text(canonical(_model_json(part)))


def task_ref(task: Task, task_id: str) -> TaskRef:
    limits = task.limits
    return TaskRef(
        domain=task.domain.name, problem=task.problem.name, task_id=task_id,
        domain_sha256=text_digest(task.domain), problem_sha256=text_digest(task.problem),
        limits_sha256=None if limits is None else sha256_text(canonical(
            limits.model_dump(mode="json"))))
