"""Steppers of the engine, by name: single runs through LSODA, batches through Dormand-Prince
(explicit, error-controlled) or Rosenbrock (stiff), process noise through Euler-Maruyama."""

from __future__ import annotations

from planner.integrate.solvers.base import Step, StepError, Stepper
from planner.integrate.solvers.dop853 import DormandPrince853
from planner.integrate.solvers.dopri5 import DormandPrince
from planner.integrate.solvers.euler_maruyama import EulerMaruyama
from planner.integrate.solvers.lsoda import Lsoda
from planner.integrate.solvers.rosenbrock import Rosenbrock23, batched_solve

SOLVERS: dict[str, type[Stepper]] = {
    "lsoda": Lsoda,
    "dopri5": DormandPrince,
    "dop853": DormandPrince853,
    "rosenbrock23": Rosenbrock23,
    "euler-maruyama": EulerMaruyama,
}

__all__ = ["SOLVERS", "Step", "StepError", "Stepper", "batched_solve"]
