"""Small validated option objects of the engine, passed keyword-only to :func:`integrate`."""

from __future__ import annotations

import math
from dataclasses import dataclass

SETTLED_RATE = 1e-9  # |dx/dt| / scale (per year) below which a state counts as settled
SCALE_FLOOR = 1e-6  # smallest per-variable scale of the settled test


def _positive(name: str, value: float) -> None:
    if not (isinstance(value, int | float) and math.isfinite(value) and value > 0):
        raise ValueError(f"{name} must be a positive finite number, not {value!r}")


@dataclass(frozen=True)
class Save:
    """What a run keeps besides its final state.

    ``every``: regular sample spacing in years (yearly: 1.0), None for none; samples are taken
    at 0, every, 2 every, ... and at the end. ``at``: sample times of one's own (years, within
    the horizon; the run is cut there, so these samples are exact), merged with those of
    ``every`` (interpolated within steps). ``steps``: also every accepted solver step (plots of
    single runs). ``dense``: keep each step's interpolant so :meth:`Solution.state_at` works.
    """

    every: float | None = None
    at: tuple[float, ...] = ()
    steps: bool = False
    dense: bool = False

    def __post_init__(self) -> None:
        if self.every is not None:
            _positive("Save.every", self.every)
        object.__setattr__(self, "at", tuple(float(t) for t in self.at))
        if not all(math.isfinite(t) and t >= 0 for t in self.at):
            raise ValueError("Save.at times must be finite and non-negative")


@dataclass(frozen=True)
class Watch:
    """A target to watch: ``variable`` (index) meets it when on the right side of ``level``.

    ``regime`` "lowest": met when x <= level; "highest": met when x >= level. The driver
    records, per member, when the target was last entered, whether it was lost after being met
    (relapse), and the time each calendar year spent not meeting it. ``absorbing``: a member
    stops when it first meets the target (first-passage times: its ``t_end``). ``by_year``:
    assemble the yearly time not meeting it (off for long runs that do not need it).
    """

    variable: int
    level: float
    regime: str = "lowest"
    absorbing: bool = False
    by_year: bool = True

    def __post_init__(self) -> None:
        if self.regime not in ("lowest", "highest"):
            raise ValueError(f"Watch.regime must be 'lowest' or 'highest', not {self.regime!r}")

    @property
    def sign(self) -> float:
        return 1.0 if self.regime == "lowest" else -1.0


@dataclass(frozen=True)
class Limits:
    """Where a state counts as diverged: beyond ``state_limit`` in magnitude, non-finite, or
    (``nonnegative`` models, whose states are amounts) below a small negative margin."""

    state_limit: float = 1e6
    nonnegative: bool = False
    max_steps: int = 1_000_000  # accepted plus rejected steps per run before it fails

    def __post_init__(self) -> None:
        _positive("Limits.state_limit", self.state_limit)

    @property
    def lower(self) -> float | None:
        return -1e-9 * self.state_limit if self.nonnegative else None


@dataclass(frozen=True)
class Tolerance:
    """Local error tolerance: ``rtol`` relative, ``atol`` absolute times each variable's scale
    (the larger of 1 and its initial magnitude)."""

    rtol: float = 1e-8
    atol: float = 1e-10

    def __post_init__(self) -> None:
        _positive("Tolerance.rtol", self.rtol)
        _positive("Tolerance.atol", self.atol)


@dataclass(frozen=True)
class Settling:
    """Stop each member once every |dx_i/dt| / max(scale_i, |x_i|) < ``rate`` per year; scale_i
    is the member's initial magnitude (at least SCALE_FLOOR)."""

    rate: float = SETTLED_RATE

    def __post_init__(self) -> None:
        _positive("Settling.rate", self.rate)
