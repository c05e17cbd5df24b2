"""Pure statistics core: numpy and scipy only, no I/O, clock or settings."""
from .design import DesignResult, design, design_plan, plan_warnings
from .recheck import Recheck
from .exact import ExactResult, PathCounts, run_exact
from .sprt import CLEARED, FLAGGED, MONITORING, PlanInputError, SprtPlan, check_rates

__all__ = ["design", "design_plan", "plan_warnings", "Recheck", "DesignResult", "ExactResult", "PathCounts", "run_exact", "SprtPlan",
           "check_rates", "PlanInputError", "MONITORING", "FLAGGED", "CLEARED"]
