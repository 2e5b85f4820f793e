"""Test plans: the YAML schema, engineering units, and a loader that locates every problem."""

from sweeper.plan.loader import PlanError, Problem, load_plan, load_plan_text
from sweeper.plan.schema import Plan
from sweeper.plan.units import format_quantity, parse_quantity

__all__ = [
    "Plan",
    "PlanError",
    "Problem",
    "format_quantity",
    "load_plan",
    "load_plan_text",
    "parse_quantity",
]
