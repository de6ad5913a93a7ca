"""Planner for reversing a lake regime shift: equilibria, schedules, costs and briefings."""

__version__ = "0.1.0"
