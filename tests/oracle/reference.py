"""A thin wrapper around the ``unified_planning`` library, used as an independent plan oracle.

Test-only: the library judges plans with its own PDDL reader and simulator, so a
disagreement with our plan simulator points at a bug on one side. Nothing from
``plansieve`` is imported here, so the oracle side cannot inherit our mistakes.

Steps are plain ``(action, args)`` pairs of lower-case names, as a plan file
would name them. Parsed problems are cached by file path: the library's reader
costs a tenth of a second or more per problem.
"""

from __future__ import annotations

import functools
import warnings
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path
from typing import Iterable, Sequence

import unified_planning.shortcuts as ups
from unified_planning.engines import (FailedValidationReason, SequentialPlanValidator,
                                      ValidationResultStatus)
from unified_planning.engines.sequential_simulator import UPSequentialSimulator
from unified_planning.exceptions import UPException
from unified_planning.io import PDDLReader
from unified_planning.model.fluent import get_all_fluent_exp
from unified_planning.plans import ActionInstance, SequentialPlan

# The library prints a credits banner the first time an engine is made.
ups.get_environment().credits_stream = None

Step = tuple[str, tuple[str, ...]]


@dataclass(frozen=True)
class OracleVerdict:
    """The oracle's answer for one plan.

    ``failed_step`` is the 1-based step that could not be applied, or None when
    the plan is valid or fails only at the goal. ``judged`` is False when the
    plan named something the oracle cannot even express (an undeclared action or
    object, or the wrong number of arguments): the library raises instead of
    answering, so we call such a step inapplicable ourselves. Source: PDDL 1.2
    manual (McDermott et al. 1998), sec. 6 and 11 — a plan is a sequence of
    ground instances of the domain's actions, one declared object per parameter;
    a step that is not one is not part of any valid plan.
    """

    valid: bool
    reason: str
    failed_step: int | None = None
    judged: bool = True


def _quiet(fn):
    """Run ``fn`` with the library's warnings silenced.

    It warns that it "cannot establish" support for numeric problems whose
    initial state leaves some fluents undefined (tpp_metric); with its checks
    skipped it still evaluates them, and reading an undefined value raises,
    which the validator reports as an inapplicable step.
    """

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return fn(*args, **kwargs)

    return wrapper


class ReferenceProblem:
    """One parsed problem on the oracle side, with its validator and simulator."""

    def __init__(self, domain_path: Path, problem_path: Path, problem=None) -> None:
        self.domain_path = Path(domain_path)
        self.problem_path = Path(problem_path)
        if problem is None:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                problem = PDDLReader().parse_problem(str(self.domain_path), str(self.problem_path))
        self.problem = problem
        self.actions = _by_lower_name(self.problem.actions)
        self.objects = _by_lower_name(self.problem.all_objects)
        self.fluents = _by_lower_name(self.problem.fluents)
        self._validator = SequentialPlanValidator()
        self._validator.skip_checks = True
        self._simulator: UPSequentialSimulator | None = None
        self._candidates: list[tuple[object, tuple]] | None = None
        self._atoms: dict[str, list] = {}

    # -- judging plans -----------------------------------------------------

    @_quiet
    def validate(self, steps: Sequence[Step]) -> OracleVerdict:
        """Is the plan executable from the initial state, and does it reach the goal?"""
        instances = []
        for number, (name, args) in enumerate(steps, 1):
            instance, why, judged = self._instance(name, args)
            if instance is None:
                # The oracle cannot take this step. If an earlier step already fails,
                # that one is the first failure; otherwise this one is.
                earlier = self._run(instances)
                if earlier.failed_step is not None:
                    return earlier
                return OracleVerdict(False, f"step {number} ({' '.join((name, *args))}): {why}",
                                     failed_step=number, judged=judged)
            instances.append(instance)
        return self._run(instances)

    def _run(self, instances: list) -> OracleVerdict:
        try:
            result = self._validator.validate(self.problem, SequentialPlan(instances))
        except UPException as e:  # e.g. a goal that reads an undefined fluent
            return OracleVerdict(False, f"oracle raised {type(e).__name__}: {e}")
        reason = "; ".join(m.message for m in result.log_messages) or str(result.status.name)
        if result.status == ValidationResultStatus.VALID:
            return OracleVerdict(True, reason)
        failed = None
        if result.reason == FailedValidationReason.INAPPLICABLE_ACTION:
            # The trace holds the initial state and one state per applied step.
            failed = len(result.trace)
        return OracleVerdict(False, reason, failed_step=failed)

    def _instance(self, name: str, args: Sequence[str]):
        """The library's action instance for one step, or None, why, and who decided."""
        action = self.actions.get(name.lower())
        if action is None:
            return None, f"undeclared action {name!r}", False
        if len(args) != len(action.parameters):
            return None, f"{name} takes {len(action.parameters)} arguments, {len(args)} given", False
        params = []
        for a in args:
            obj = self.objects.get(a.lower())
            if obj is None:
                return None, f"undeclared object {a!r}", False
            params.append(obj)
        try:
            # The library checks each argument's type against its parameter here.
            return ActionInstance(action, params), "", True
        except UPException as e:
            return None, f"the oracle refuses the step: {type(e).__name__}: {e}", True

    # -- simulating, for the random-walk generator -------------------------

    @property
    def simulator(self) -> UPSequentialSimulator:
        if self._simulator is None:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                self._simulator = UPSequentialSimulator(self.problem, error_on_failed_checks=False)
        return self._simulator

    @_quiet
    def initial_state(self):
        return self.simulator.get_initial_state()

    @property
    @_quiet
    def candidates(self) -> list[tuple[object, tuple]]:
        """Ground actions worth trying, in a fixed order: every typed binding of
        each action's parameters whose static preconditions hold initially.

        We prune here ourselves instead of calling the library's grounder: in
        unified_planning 1.3.0 its pruning raises ``ValueError: list.remove(x)``
        when one parameter occurs in two static preconditions (logistics'
        ``(LOCATION ?loc-from)`` and ``(in-city ?loc-from ?city)``). Pruning only
        drops steps whose static facts are false, which no simulator would call
        applicable, so a uniform draw among the rest is still uniform among the
        applicable ones.
        """
        if self._candidates is None:
            statics = self.problem.get_static_fluents()
            true_init = {fe for fe, v in self.problem.explicit_initial_values.items()
                         if v.is_bool_constant() and v.bool_constant_value()}
            found = []
            for action in self.problem.actions:
                conds = [c for c in _conjuncts(action.preconditions)
                         if c.is_fluent_exp() and c.fluent() in statics
                         and c.fluent().type.is_bool_type()]
                found.extend((action, params) for params in _bindings(self.problem, action, conds, true_init))
            found.sort(key=lambda ap: (ap[0].name, tuple(str(x) for x in ap[1])))
            self._candidates = found
        return self._candidates

    def is_applicable(self, state, action, params) -> bool:
        """The oracle's answer, asked only when a quick look cannot rule the step out.

        The quick look reads the action's top-level positive atoms in the state:
        if one is false, so is the whole precondition, since the library keeps
        preconditions as a conjunction. It saves grounding the action, which is
        where the library spends its time.
        """
        em = self.problem.environment.expression_manager
        for fluent, where in self._positive_atoms(action):
            args = [params[w] if isinstance(w, int) else w for w in where]
            if not state.get_value(em.FluentExp(fluent, args)).bool_constant_value():
                return False
        return self._oracle_applicable(state, action, params)

    @_quiet
    def _oracle_applicable(self, state, action, params) -> bool:
        return self.simulator.is_applicable(state, action, params)

    def _positive_atoms(self, action) -> list:
        cached = self._atoms.get(action.name)
        if cached is None:
            index = {p.name: i for i, p in enumerate(action.parameters)}
            cached = []
            for c in _conjuncts(action.preconditions):
                if (c.is_fluent_exp() and c.fluent().type.is_bool_type()
                        and all(a.is_parameter_exp() or a.is_object_exp() for a in c.args)):
                    where = tuple(index[a.parameter().name] if a.is_parameter_exp() else a
                                  for a in c.args)
                    cached.append((c.fluent(), where))
            self._atoms[action.name] = cached
        return cached

    @_quiet
    def apply(self, state, action, params):
        return self.simulator.apply(state, action, params)

    @_quiet
    def facts(self, state) -> tuple[set[tuple[str, ...]], dict[tuple[str, ...], Fraction]]:
        """The true ground atoms and the defined numeric fluents of a state.

        Keys are ``(name, arg, ...)`` in lower case. Fluents the library turned
        into action costs (``total-cost``) are not part of its state and so do
        not appear.
        """
        return state_facts(self.problem, state)


def state_facts(problem, state) -> tuple[set[tuple[str, ...]], dict[tuple[str, ...], Fraction]]:
    """The true ground atoms and defined numeric fluents of one of the library's states."""
    atoms: set[tuple[str, ...]] = set()
    numbers: dict[tuple[str, ...], Fraction] = {}
    for fluent in problem.fluents:
        for fe in get_all_fluent_exp(problem, fluent):
            try:
                v = state.get_value(fe)
            except UPException:  # undefined numeric fluent
                continue
            key = (fluent.name.lower(), *(str(a).lower() for a in fe.args))
            if fluent.type.is_bool_type():
                if v.bool_constant_value():
                    atoms.add(key)
            else:
                numbers[key] = Fraction(v.constant_value())
    return atoms, numbers


def _by_lower_name(items: Iterable) -> dict:
    out = {}
    for it in items:
        key = it.name.lower()
        assert key not in out, f"oracle names clash when lower-cased: {key}"
        out[key] = it
    return out


_loaded: dict[tuple[str, str], ReferenceProblem] = {}


def _key(domain_path: Path | str, problem_path: Path | str) -> tuple[str, str]:
    return str(Path(domain_path).resolve()), str(Path(problem_path).resolve())


def load_reference(domain_path: Path | str, problem_path: Path | str) -> ReferenceProblem:
    """The oracle's view of a domain and problem file, parsed once per process."""
    key = _key(domain_path, problem_path)
    ref = _loaded.get(key)
    if ref is None:
        ref = _loaded[key] = ReferenceProblem(Path(key[0]), Path(key[1]))
    return ref


def register_variant(base: ReferenceProblem, goals: Sequence, problem_path: Path) -> ReferenceProblem:
    """A copy of ``base`` with other goals, known to load_reference under ``problem_path``.

    The library's reader spends most of a second on a domain like miconic, so a
    goal variant is made by cloning the parsed problem rather than re-reading
    it. The goals are built by the caller from the same goal description that is
    written into the variant's PDDL file for our reader.
    """
    problem = base.problem.clone()
    problem.clear_goals()
    for g in goals:
        problem.add_goal(g)
    ref = ReferenceProblem(base.domain_path, problem_path, problem=problem)
    _loaded[_key(base.domain_path, problem_path)] = ref
    return ref


def step_of(action, params) -> Step:
    """A library (action, parameters) pair as a plain lower-case step."""
    return (action.name.lower(), tuple(str(p).lower() for p in params))


def _conjuncts(formulas) -> list:
    out, todo = [], list(formulas)
    while todo:
        f = todo.pop()
        if f.is_and():
            todo.extend(f.args)
        else:
            out.append(f)
    return out


def _bindings(problem, action, conds, true_init):
    """Typed parameter bindings of ``action`` under which every static condition holds."""
    params = list(action.parameters)
    domains = [list(problem.objects(p.type)) for p in params]
    pos = {p.name: i for i, p in enumerate(params)}
    # A static condition is checked as soon as its last parameter is bound.
    checks: dict[int, list] = {}
    for c in conds:
        idx = [pos[a.parameter().name] for a in c.args if a.is_parameter_exp()]
        if all(a.is_parameter_exp() or a.is_object_exp() for a in c.args):
            checks.setdefault(max(idx, default=-1), []).append(c)
    em = problem.environment.expression_manager
    if any(em.FluentExp(c.fluent(), c.args) not in true_init for c in checks.get(-1, [])):
        return
    chosen: list = []

    def holds(c) -> bool:
        args = [em.ObjectExp(chosen[pos[a.parameter().name]]) if a.is_parameter_exp() else a
                for a in c.args]
        return em.FluentExp(c.fluent(), args) in true_init

    def extend(i: int):
        if i == len(params):
            yield tuple(em.ObjectExp(o) for o in chosen)
            return
        for obj in domains[i]:
            chosen.append(obj)
            if all(holds(c) for c in checks.get(i, [])):
                yield from extend(i + 1)
            chosen.pop()

    yield from extend(0)
