"""What one app instance was started with, handed to every view when it registers."""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import TYPE_CHECKING

from planner.errors import InputError, Problem
from webapp import compute
from webapp.files import Folder

if TYPE_CHECKING:
    from webapp.jobs import JobManager

JOB_SECONDS_VARIABLE = "PLANNER_JOB_SECONDS"  # environment variable overriding the job budget


def job_seconds_default() -> float:
    """The budget of one long job: ``PLANNER_JOB_SECONDS`` when set, else compute.JOB_SECONDS."""
    text = os.environ.get(JOB_SECONDS_VARIABLE, "").strip()
    if not text:
        return compute.JOB_SECONDS
    try:
        return float(text)
    except ValueError:
        raise InputError(
            [Problem(JOB_SECONDS_VARIABLE, "(environment)", f"{text[:40]!r} is not a number")]
        ) from None


@dataclass(frozen=True)
class Settings:
    folders: tuple[Folder, ...]  # listed in the picker; the first holds the demos or the user's
    save_index: int  # which folder "Save as" writes into
    cache_dir: Path
    # wall-clock budget of one long job, in seconds: past it the server kills the job's worker
    job_seconds: float = field(default_factory=job_seconds_default)

    def __post_init__(self) -> None:
        if not (math.isfinite(self.job_seconds) and self.job_seconds > 0):
            reason = f"must be a positive number of seconds, not {self.job_seconds!r}"
            raise InputError([Problem("app settings", "job_seconds", reason)])

    @property
    def save_folder(self) -> Path:
        return self.folders[self.save_index].path

    @cached_property
    def jobs(self) -> JobManager:
        """The manager that runs this app's long jobs in worker processes it can kill."""
        from webapp.jobs import JobManager

        return JobManager(self.cache_dir / "jobs", budget=self.job_seconds)
