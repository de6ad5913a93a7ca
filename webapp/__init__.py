"""The web app over the planner: compare schedules on the hysteresis diagram, edit them, and
brief stakeholders. Every number shown comes from ``planner``."""

from webapp.app import create_app

__all__ = ["create_app"]
