"""The reference library (``unified_planning``, bench and tests only) reading our files.

Every bench that times the oracle hands it the very texts our critics read, written to
files, so both sides start from the same bytes.
"""

from __future__ import annotations

import tempfile
import time
import warnings
from pathlib import Path


def oracle_read(domain_text: str, problem_text: str, plan_text: str):
    """The oracle's problem and plan, read from files holding these texts, and the
    seconds its plan reading took."""
    import unified_planning.shortcuts as ups
    from unified_planning.io import PDDLReader

    ups.get_environment().credits_stream = None  # no banner in the output
    with tempfile.TemporaryDirectory() as tmp, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        d, p, pl = Path(tmp, "domain.pddl"), Path(tmp, "problem.pddl"), Path(tmp, "plan.txt")
        d.write_text(domain_text)
        p.write_text(problem_text)
        pl.write_text(plan_text)
        reader = PDDLReader()
        problem = reader.parse_problem(str(d), str(p))
        t0 = time.perf_counter()
        plan = reader.parse_plan(problem, str(pl))
        return problem, plan, time.perf_counter() - t0


def oracle_verdict(validator, problem, plan, *, reason: bool = False) -> str:
    """'valid', or the oracle's status (or reason) otherwise."""
    from unified_planning.engines import ValidationResultStatus

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = validator.validate(problem, plan)
    if result.status == ValidationResultStatus.VALID:
        return "valid"
    return str(result.reason) if reason else str(result.status)
