"""The critic chain: critics in order, each sound (can block, needed to accept) or advisory.

An advisory critic adds feedback but never blocks and never accepts — the place for
checks that can be wrong. A plan is accepted only when the chain holds at least one
sound critic and every sound critic passed. By default the chain stops at the first
sound critic that fails (later ones would judge a plan already refused); ``run_all``
asks every critic, for fuller feedback.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

from plansieve.critics.model import Task
from plansieve.critics.plan import Plan
from plansieve.critics.protocol import Critic
from plansieve.critics.verdict import Verdict

Role = Literal["sound", "advisory"]


@dataclass(frozen=True)
class Link:
    """A critic and the part it plays in the chain."""

    critic: Critic
    role: Role = "sound"

    def __post_init__(self) -> None:
        if self.role not in ("sound", "advisory"):
            raise ValueError(f"role must be 'sound' or 'advisory', not {self.role!r}")
        if self.role == "sound" and not self.critic.sound:
            raise ValueError(f"critic {self.critic.name!r} does not claim to be sound, so it "
                             f"can only be advisory")


def advisory(critic: Critic) -> Link:
    """``critic`` as an advisory link: its findings are fed back but never block."""
    return Link(critic, "advisory")


@dataclass(frozen=True)
class ChainResult:
    accepted: bool
    verdicts: list[tuple[Role, Verdict]]

    @property
    def failed(self) -> list[str]:
        """Names of the sound critics that failed."""
        return [v.critic for role, v in self.verdicts if role == "sound" and not v.passed]


class CriticChain:
    def __init__(self, critics: Sequence[Critic | Link], *, run_all: bool = False) -> None:
        links = [c if isinstance(c, Link) else Link(c, "sound" if c.sound else "advisory")
                 for c in critics]
        if not any(l.role == "sound" for l in links):
            raise ValueError("a critic chain needs at least one sound critic; advisory critics "
                             "alone can never accept a plan")
        names = [l.critic.name for l in links]
        if len(set(names)) != len(names):
            raise ValueError(f"two critics in the chain share a name: {names}")
        self.links = tuple(links)
        self.run_all = run_all

    @property
    def mode(self) -> str:
        return "run-all" if self.run_all else "stop-at-first-failure"

    def describe(self) -> list[dict]:
        return [{"name": l.critic.name, "version": l.critic.version, "sound": l.critic.sound,
                 "role": l.role} for l in self.links]

    def run(self, task: Task, plan: Plan) -> ChainResult:
        verdicts: list[tuple[Role, Verdict]] = []
        accepted = True
        for link in self.links:
            v = link.critic.check(task, plan)
            verdicts.append((link.role, v))
            if link.role == "sound" and not (v.passed and v.sound):
                accepted = False
                if not self.run_all:
                    break
        return ChainResult(accepted, verdicts)
