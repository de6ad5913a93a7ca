"""The one integration engine: a problem, small option objects, a registry of steppers, one
driver and one solution type. Nothing outside this package steps an ODE."""

from planner.integrate.driver import choose_solver, integrate, settle
from planner.integrate.options import Limits, Save, Settling, Tolerance, Watch
from planner.integrate.problem import Problem, ProcessNoise, held, system_limits
from planner.integrate.solution import (
    STATUSES,
    Solution,
    Status,
    Trajectory,
    WatchRecord,
    trajectory,
)
from planner.integrate.solvers import SOLVERS

__all__ = [
    "SOLVERS",
    "STATUSES",
    "Limits",
    "Problem",
    "ProcessNoise",
    "Save",
    "Settling",
    "Solution",
    "Status",
    "Tolerance",
    "Trajectory",
    "Watch",
    "WatchRecord",
    "choose_solver",
    "held",
    "integrate",
    "settle",
    "system_limits",
    "trajectory",
]
