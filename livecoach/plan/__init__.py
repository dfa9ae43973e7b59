"""Run-up planning: the optimal power profile, plan files, course and run checks.

Live-path modules (``model``, ``spg``, ``optimise``, ``plan``, ``planner``,
``checks``) are pure Python; ``reference`` (dynamic programming) needs numpy
and is for tests and benchmarks only.
"""

from livecoach.plan.model import RunModel, Trajectory, build_run_model, simulate
from livecoach.plan.optimise import OptimisedRun, final_effort_search, optimise_run
from livecoach.plan.plan import (
    CSV_COLUMNS,
    Plan,
    PlanBasis,
    PlanPoint,
    check_plan,
    load_plan,
    save_plan,
)
from livecoach.plan.planner import (
    StrategyResult,
    all_out_strategy,
    constant_power_strategy,
    make_plan,
    sensitivity_table,
)

__all__ = [
    "CSV_COLUMNS",
    "OptimisedRun",
    "Plan",
    "PlanBasis",
    "PlanPoint",
    "RunModel",
    "StrategyResult",
    "Trajectory",
    "all_out_strategy",
    "build_run_model",
    "check_plan",
    "constant_power_strategy",
    "final_effort_search",
    "load_plan",
    "make_plan",
    "optimise_run",
    "save_plan",
    "sensitivity_table",
    "simulate",
]
