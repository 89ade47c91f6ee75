"""Plan a test: how long, with which design, and what it can detect."""

from spillgauge.plan.plan import PlanResult, plan_study, write_plan

__all__ = ["PlanResult", "plan_study", "write_plan"]
