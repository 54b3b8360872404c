"""The oracle on PDDL3 ``always`` constraints: problem variants, state trajectories, timed plans.

Test-only, and like the rest of this package it imports nothing from plansieve.

What the oracle (``unified_planning`` 1.3.0) does with ``(:constraints ...)`` —
read in its installed source (io/pddl_reader.py, model/problem.py,
engines/sequential_simulator.py, engines/plan_validator.py):

- Its PDDL reader takes the problem's ``:constraints`` only (a domain's are not
  read) and accepts ``(always φ)``, ``(and (always φ) ...)`` and
  ``(forall (?x - t) (always φ))`` at the top; an ``and`` holding a ``forall``
  is refused. Each ``always`` body becomes a state invariant.
- The sequential plan validator applies a step, then evaluates every invariant
  in the new state; a violation makes that step inapplicable (it raises
  UPInvalidActionError, reported as an inapplicable action). An initial state
  that violates an invariant makes the simulator raise UPProblemDefinitionError.
- The time-triggered validator keeps one state per time point (all effects at
  one time applied together) and checks every invariant over the states from 0
  to the plan's end.
- ``total-cost`` may become an action-cost metric and leave the state, so no
  constraint here names it.
"""

from __future__ import annotations

import functools
import warnings
from fractions import Fraction
from pathlib import Path

from unified_planning.engines import TimeTriggeredPlanValidator, ValidationResultStatus
from unified_planning.exceptions import UPException
from unified_planning.io import PDDLReader
from unified_planning.plans import ActionInstance, TimeTriggeredPlan

from .reference import ReferenceProblem

Key = tuple[str, ...]


@functools.lru_cache(maxsize=1)
def _reader() -> PDDLReader:
    # Building the reader's grammar costs more than a second; one serves every variant.
    return PDDLReader()


def with_constraints(problem_text: str, constraints: str, name_suffix: str) -> str:
    """The problem text with a ``(:constraints ...)`` section put after its goal."""
    lowered = problem_text.lower()
    at = lowered.find("(:metric")
    if at < 0:
        at = problem_text.rstrip().rfind(")")
    text = problem_text[:at] + f"(:constraints {constraints})\n" + problem_text[at:]
    p = text.lower().find("(problem") + len("(problem")
    while text[p].isspace():
        p += 1
    while not text[p].isspace() and text[p] != ")":
        p += 1
    return text[:p] + name_suffix + text[p:]


def load_variant(base: ReferenceProblem, text: str, path: Path) -> ReferenceProblem:
    """Write ``text`` to ``path`` (for our reader) and parse it with the oracle's reader."""
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        problem = _reader().parse_problem_string(base.domain_path.read_text(), text)
    return ReferenceProblem(base.domain_path, path, problem=problem)


def trajectory(ref: ReferenceProblem, steps) -> list[dict[Key, Fraction]]:
    """The numeric fluents in the initial state and after each step, by the oracle's simulator.

    Every step must be applicable (a random walk's steps are).
    """
    state = ref.initial_state()
    out = [ref.facts(state)[1]]
    for name, args in steps:
        action = ref.actions[name]
        params = [ref.problem.environment.expression_manager.ObjectExp(ref.objects[a])
                  for a in args]
        state = ref.apply(state, action, params)
        assert state is not None, f"not applicable in the oracle: {name} {args}"
        out.append(ref.facts(state)[1])
    return out


def fmt(v: Fraction) -> str:
    """A number as PDDL text; exact when the denominator is a power of two."""
    if v.denominator == 1:
        return str(v.numerator)
    assert v.denominator & (v.denominator - 1) == 0, v
    return repr(float(v))


# -- timed plans -----------------------------------------------------------------


class TimedOracle:
    """One temporal problem read by the oracle, to validate timed plans against it."""

    def __init__(self, domain_text: str, problem_text: str) -> None:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            self.problem = _reader().parse_problem_string(domain_text, problem_text)
        self.actions = {a.name.lower(): a for a in self.problem.actions}
        self.objects = {o.name.lower(): o for o in self.problem.all_objects}
        self.fluents = {f.name.lower(): f for f in self.problem.fluents}
        self._validator = TimeTriggeredPlanValidator()
        self._validator.skip_checks = True

    def validate(self, steps) -> tuple[bool, dict[Fraction, dict[Key, Fraction]]]:
        """Valid or not, and the values of the numeric fluents at each time the oracle keeps.

        ``steps`` are ``(start, action, args, duration)`` with exact numbers.
        """
        timed = [(Fraction(t), ActionInstance(self.actions[a], [self.objects[x] for x in args]),
                  Fraction(d)) for t, a, args, d in steps]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                result = self._validator.validate(self.problem, TimeTriggeredPlan(timed))
            except UPException as e:
                raise AssertionError(f"the oracle raised {type(e).__name__}: {e}") from None
        values = {}
        for t, state in (result.trace or {}).items():
            values[t] = self._numbers(state)
        return result.status == ValidationResultStatus.VALID, values

    def _numbers(self, state) -> dict[Key, Fraction]:
        from unified_planning.model.fluent import get_all_fluent_exp

        out = {}
        for f in self.problem.fluents:
            if f.type.is_bool_type():
                continue
            for fe in get_all_fluent_exp(self.problem, f):
                try:
                    v = state.get_value(fe)
                except UPException:
                    continue
                out[(f.name.lower(), *(str(a).lower() for a in fe.args))] = \
                    Fraction(v.constant_value())
        return out
