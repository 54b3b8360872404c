"""A critic of our own in the chain: a yard rule the PDDL model does not state.

At the (invented) Port of Veyrun, night shifts may not use the west stack's lane
more than twice. This critic counts those drives. It is sound for what it checks
(counting is exact), so it may block and is needed to accept; a check that could be
wrong would go in with ``plansieve.advisory(...)`` instead, to add feedback only.

    python examples/embedding/custom_critic.py
"""

from __future__ import annotations

import time
from pathlib import Path

import plansieve
from plansieve.critics.verdict import ConstraintViolated

HERE = Path(__file__).resolve().parent.parent / "harbour"


class WestLaneQuota:
    name = "west-lane-quota"
    version = "1.0"
    sound = True

    def __init__(self, most: int = 2) -> None:
        self.most = most

    def check(self, task, plan) -> plansieve.Verdict:
        started = time.perf_counter()
        uses = [i for i, s in enumerate(plan.steps, 1)
                if s.action == "drive" and "west-stack" in s.args[1:]]
        findings = []
        if len(uses) > self.most:
            step = uses[self.most]
            findings.append(ConstraintViolated(
                step=step, step_text=plan.steps[step - 1].call(),
                constraint=f"at most {self.most} drives on the west-stack lanes per shift",
                operator="quota",
                message=f"drive number {self.most + 1} on the west-stack lanes; the night "
                        f"shift allows {self.most}"))
        return plansieve.Verdict(critic=self.name, version=self.version, sound=True,
                                 passed=not findings, findings=findings,
                                 steps_checked=len(plan.steps),
                                 seconds=time.perf_counter() - started)


def main() -> None:
    task = plansieve.load_task(HERE / "domain.pddl", HERE / "problem.pddl")
    plan = plansieve.load_plan(HERE / "plan-good.plan")
    result = plansieve.check(task, plan, [plansieve.PlanSimulator(), WestLaneQuota(most=1)])
    for v in result.verdicts:
        print(v.critic, "passed" if v.passed else "failed", [f.message for f in v.findings])
    print("accepted" if result.passed else "refused")


if __name__ == "__main__":
    main()
