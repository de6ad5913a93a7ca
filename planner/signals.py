"""Early-warning indicators of an approaching transition, from one monitored series.

Method (Dakos et al. 2012, PLoS ONE 7:e41010, "Methods for detecting early warnings of critical
transitions in time series illustrated using simulated ecological data"):

1. the series must be evenly spaced: every spacing between the times of consecutive values,
   divided by the number of grid steps it spans (a gap of one value spans two), lies within
   GRID_TOLERANCE of the median spacing, and no time drifts further than that from the even
   grid through the first and last values; values are placed on that grid (dated at its times);
   missing values inside it are filled by linear interpolation (and marked), leading and
   trailing gaps are cut off.
   Values may be any finite real numbers (anomalies, logarithms, zeros): every indicator below
   is defined for them, and variance, standard deviation, autocorrelation and skewness do not
   change when a constant is added to the series (the kernel trend absorbs it);
2. the slow trend is removed by Gaussian kernel smoothing (Nadaraya-Watson: a weighted mean
   with weights exp(-(t_i - t_j)^2 / (2 h^2)), bandwidth h in time units);
3. in a rolling window of a fixed share of the series (default half), the residuals give:
   variance (sample variance, ddof = 1) and standard deviation; lag-1 autocorrelation (the
   sample autocorrelation r1 = c1 / c0 of Box & Jenkins, Time Series Analysis, with
   c_k = (1/w) sum (x_t - mean)(x_{t+k} - mean)); skewness (the moment coefficient m3 / m2^1.5);
   each value is dated at the end of its window;
4. the trend of each indicator is Kendall's tau against time (scipy.stats.kendalltau, tau-b).

Rising variance and autocorrelation (tau > 0) are consistent with critical slowing down before a
fold (Scheffer et al. 2009, Nature 461:53-59); they are not proof. No p-value is given: windows
overlap, so the points are not independent (Dakos et al. 2012 judge significance against
surrogate series instead).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
from scipy.signal import fftconvolve
from scipy.stats import kendalltau

from planner.errors import InputError, Problem
from planner.monitoring import Record
from planner.report import CAUTION
from planner.views import ResultViews

if TYPE_CHECKING:  # views for notebooks; pandas and plotly are imported when they are asked for
    pass

DEFAULT_WINDOW = 0.5  # share of the series in each rolling window (Dakos et al. 2012)
DEFAULT_BANDWIDTH_SHARE = 0.1  # kernel bandwidth as a share of the record length (common
# practice, no source: wide enough to leave year-to-year variation, narrow enough to follow
# the slow trend)
MIN_POINTS = 10  # evenly spaced values needed at all
MIN_WINDOW_POINTS = 5  # values in one window (lag-1 autocorrelation needs a few pairs)
KERNEL_REACH = 8.0  # kernel cut at this many bandwidths (exp(-32) ~ 1e-14)
MAX_FILLED_SHARE_FACTOR = 2  # refuse a grid with more than twice as many points as values
GRID_TOLERANCE = 0.01
"""Largest departure from even spacing, as a share of the spacing. Decimal years are written
rounded: monthly samples to 4 decimals (2001.0833) are each off by up to 5e-5 year, so
consecutive spacings differ by up to 1e-4 year, 0.12% of a month; 1% accepts that with room to
spare and still refuses a sample taken days off a monthly grid (dates converted from the
calendar, whose months last 28 to 31 days, differ by up to 10% and are refused)."""
INDICATORS = ("variance", "standard deviation", "lag-1 autocorrelation", "skewness")


@dataclass(frozen=True)
class Indicator:
    """One rolling indicator: values dated at the end of each window, and Kendall's tau of the
    values against time (NaN when undefined, e.g. fewer than two windows)."""

    name: str
    times: np.ndarray
    values: np.ndarray
    kendall_tau: float


@dataclass(frozen=True, eq=False)
class Signals(ResultViews):
    """Indicators of one series. ``times`` is the regular grid (time unit of the record),
    ``series`` the values with gaps filled, ``filled`` which of them were interpolated,
    ``trend`` the kernel-smoothed trend and ``residuals`` the series minus the trend."""

    variable: str
    unit: str
    source: str
    time_name: str
    times: np.ndarray
    series: np.ndarray
    filled: np.ndarray
    trend: np.ndarray
    residuals: np.ndarray
    bandwidth: float
    window_share: float
    window_points: int
    indicators: tuple[Indicator, ...] = field(default=())

    def indicator(self, name: str) -> Indicator:
        for item in self.indicators:
            if item.name == name:
                return item
        raise KeyError(name)

    _views = ("signals_frame", "signals_figure")

    def _view_title(self) -> str:
        return f"Early-warning indicators: {self.variable}"


def kernel_trend(times: np.ndarray, values: np.ndarray, bandwidth: float) -> np.ndarray:
    """Gaussian kernel smoothing (Nadaraya-Watson) of evenly spaced ``values``, bandwidth in the
    time unit: sum_j K(t_i - t_j) x_j / sum_j K(t_i - t_j), K(d) = exp(-d^2 / (2 h^2)).

    Computed as two FFT convolutions with the kernel cut at KERNEL_REACH bandwidths (weights
    beyond are below 1e-14 of the centre), so long series cost n log n, not n^2.
    """
    times = np.asarray(times, dtype=float)
    values = np.asarray(values, dtype=float)
    if values.size < 2:
        return values.copy()
    spacing = float(times[1] - times[0])
    reach = int(min(np.ceil(KERNEL_REACH * bandwidth / spacing), values.size - 1))
    offsets = spacing * np.arange(-reach, reach + 1)
    kernel = np.exp(-0.5 * (offsets / bandwidth) ** 2)
    numerator = fftconvolve(values, kernel, mode="same")
    denominator = fftconvolve(np.ones_like(values), kernel, mode="same")
    return numerator / denominator


def rolling_indicators(residuals: np.ndarray, window: int) -> dict[str, np.ndarray]:
    """Variance, standard deviation, lag-1 autocorrelation and skewness in every window of
    ``window`` consecutive values; one value per window.

    Window sums of x, x^2, x^3 and x_t x_(t+1) come from cumulative sums (O(n) for any window),
    after subtracting the overall mean; the window's own mean is then removed algebraically.
    This is accurate when each window's mean is small beside its spread, as it is for detrended
    residuals (relative error about 1e-16 (mean / spread)^3 for the skewness).
    """
    x = np.asarray(residuals, dtype=float)
    x = x - x.mean()
    w = int(window)

    def window_sums(values: np.ndarray, length: int) -> np.ndarray:
        total = np.concatenate([[0.0], np.cumsum(values)])
        return total[length:] - total[:-length]

    count = x.size - w + 1
    s1 = window_sums(x, w)
    s2 = window_sums(x * x, w)
    s3 = window_sums(x * x * x, w)
    lagged = window_sums(x[:-1] * x[1:], w - 1)[:count]
    mean = s1 / w
    m2 = np.maximum(s2 / w - mean**2, 0.0)
    m3 = s3 / w - 3 * mean * s2 / w + 2 * mean**3
    first, last = x[:count], x[w - 1 :]
    c1 = (lagged - mean * (2 * s1 - first - last) + (w - 1) * mean**2) / w
    with np.errstate(invalid="ignore", divide="ignore"):
        autocorrelation = np.where(m2 > 0, c1 / m2, np.nan)
        skewness = np.where(m2 > 0, m3 / m2**1.5, np.nan)
    variance = m2 * w / (w - 1)
    return {
        "variance": variance,
        "standard deviation": np.sqrt(variance),
        "lag-1 autocorrelation": autocorrelation,
        "skewness": skewness,
    }


def trend_tau(times: np.ndarray, values: np.ndarray) -> float:
    """Kendall's tau (tau-b) of ``values`` against ``times``, ignoring undefined values."""
    keep = np.isfinite(values)
    if np.count_nonzero(keep) < 2:
        return float("nan")
    return float(kendalltau(times[keep], values[keep]).statistic)


def early_warning(
    times: np.ndarray,
    values: np.ndarray,
    *,
    window: float | None = DEFAULT_WINDOW,
    bandwidth: float | None = None,
    variable: str = "",
    unit: str = "",
    source: str = "<data>",
    time_name: str = "time",
    rows: np.ndarray | None = None,
) -> Signals:
    """Indicators of an evenly spaced series of any finite real values (NaN for gaps); see the
    module docstring.

    ``window`` is the share of the series in each rolling window (0 < window <= 1; None: the
    default);
    ``bandwidth`` the kernel bandwidth in time units (default DEFAULT_BANDWIDTH_SHARE of the
    record length);
    ``rows`` the file row of each time, for messages (default: messages count points from 1).
    """
    times = np.asarray(times, dtype=float)
    values = np.asarray(values, dtype=float)
    if times.shape != values.shape or times.ndim != 1:
        raise ValueError("times and values must be 1-D arrays of the same length")
    column = f"column {variable}" if variable else "(series)"
    places = _Places(source, column, time_name, rows)
    window = DEFAULT_WINDOW if window is None else float(window)
    if not 0 < window <= 1:
        raise InputError([Problem("--window", "window", "must be a share of the series in (0, 1]")])
    if bandwidth is not None and not (np.isfinite(bandwidth) and bandwidth > 0):
        raise InputError([Problem("--bandwidth", "bandwidth", "must be a positive time span")])
    grid, series, filled = _regular(times, values, places)
    if grid.size < MIN_POINTS:
        raise InputError(
            [
                Problem(
                    source,
                    column,
                    f"too few points: {grid.size} evenly spaced values; the indicators need at "
                    f"least {MIN_POINTS}",
                )
            ]
        )
    points = int(round(window * grid.size))
    if points < MIN_WINDOW_POINTS:
        raise InputError(
            [
                Problem(
                    "--window",
                    "window",
                    f"{window:g} of {grid.size} values is {points} per window; "
                    f"at least {MIN_WINDOW_POINTS} are needed (widen the window)",
                )
            ]
        )
    length = float(grid[-1] - grid[0])
    bandwidth = DEFAULT_BANDWIDTH_SHARE * length if bandwidth is None else float(bandwidth)
    trend = kernel_trend(grid, series, bandwidth)
    residuals = series - trend
    ends = grid[points - 1 :]
    indicators = tuple(
        Indicator(name, ends, result, trend_tau(ends, result))
        for name, result in rolling_indicators(residuals, points).items()
    )
    return Signals(
        variable=variable,
        unit=unit,
        source=source,
        time_name=time_name,
        times=grid,
        series=series,
        filled=filled,
        trend=trend,
        residuals=residuals,
        bandwidth=bandwidth,
        window_share=float(window),
        window_points=points,
        indicators=indicators,
    )


@dataclass(frozen=True)
class _Places:
    """Where a problem with the ``index``-th time or value of a series is, for messages."""

    source: str
    column: str
    time_name: str
    rows: np.ndarray | None

    def place(self, index: int) -> str:
        return f"point {index + 1}" if self.rows is None else f"row {int(self.rows[index])}"

    def at(self, index: int, *, time: bool = False) -> str:
        where = f"column {self.time_name}" if time else self.column
        return f"{self.place(index)}, {where}"

    def problem(self, index: int, reason: str, *, time: bool = False) -> InputError:
        return InputError([Problem(self.source, self.at(index, time=time), reason)])


def _regular(times: np.ndarray, values: np.ndarray, places: _Places):
    """The series on its even grid (times, values with gaps filled, which were filled).

    Only times with a value count. The spacing is the median step between consecutive ones;
    each step must be a whole number of spacings (a gap spans several) within GRID_TOLERANCE of
    the spacing per grid step; the grid then runs evenly from the first to the last value, and
    each time must lie within GRID_TOLERANCE of a spacing from its grid point (no slow drift).
    Values are placed on their grid points and gaps interpolated linearly.
    """
    bad_value = np.flatnonzero(np.isinf(values))
    if bad_value.size:
        raise places.problem(bad_value[0], f"value {values[bad_value[0]]:g} is not finite")
    known = np.flatnonzero(np.isfinite(values))
    bad_time = known[~np.isfinite(times[known])]
    if bad_time.size:
        raise places.problem(bad_time[0], "time is not a finite number", time=True)
    if known.size < 2:
        raise InputError([Problem(places.source, places.column, "fewer than two values")])
    t, x = times[known], values[known]
    steps = np.diff(t)

    def refuse(j: int, reason: str) -> InputError:  # j: position among the known values
        return places.problem(int(known[j]), reason, time=True)

    backwards = np.flatnonzero(steps <= 0)
    if backwards.size:
        j = backwards[0] + 1
        raise refuse(
            j,
            f"time {t[j]:.10g} does not come after {t[j - 1]:.10g} "
            f"({places.place(known[j - 1])}); the times must increase",
        )
    spacing = float(np.median(steps))
    counts = np.maximum(np.rint(steps / spacing), 1.0)
    uneven = np.flatnonzero(np.abs(steps / counts - spacing) > GRID_TOLERANCE * spacing)
    if uneven.size:
        j = uneven[0] + 1
        raise refuse(
            j,
            f"time {t[j]:.10g} is {steps[j - 1]:.6g} after the previous value "
            f"({places.place(known[j - 1])}), {steps[j - 1] / spacing:.4g} times the median "
            f"spacing {spacing:.6g}; the indicators need evenly spaced times: each step a whole "
            f"number of spacings (gaps are allowed) within {GRID_TOLERANCE:.0%} of the spacing",
        )
    index = np.concatenate([[0], np.cumsum(counts).astype(int)])
    spacing = float((t[-1] - t[0]) / index[-1])
    drift = np.abs(t - (t[0] + spacing * index)) / spacing
    drifting = np.flatnonzero(drift > GRID_TOLERANCE)
    if drifting.size:
        j = drifting[0]
        raise refuse(
            j,
            f"time {t[j]:.10g} is {drift[j]:.3g} of a spacing away from the even grid from "
            f"{t[0]:.10g} in steps of {spacing:.6g}; the times drift (the indicators need "
            f"evenly spaced times, within {GRID_TOLERANCE:.0%} of the spacing)",
        )
    if index[-1] + 1 > MAX_FILLED_SHARE_FACTOR * known.size:
        raise InputError(
            [
                Problem(
                    places.source,
                    places.column,
                    f"with the time step {spacing:g}, most of the {index[-1] + 1} evenly "
                    "spaced values would be interpolated; check the times",
                )
            ]
        )
    grid_steps = np.arange(index[-1] + 1)
    series = np.interp(grid_steps, index, x)
    filled = np.ones(grid_steps.size, dtype=bool)
    filled[index] = False
    return t[0] + spacing * grid_steps, series, filled


def record_signals(
    record: Record,
    column: str | None = None,
    *,
    window: float | None = DEFAULT_WINDOW,
    bandwidth: float | None = None,
    before: float | None = None,
) -> Signals:
    """Indicators of one column of a monitoring record (default: its only data column), named
    with or without its unit (``TP`` or ``TP [g P / m2]``); its values may be any real numbers.

    ``before`` keeps the times strictly before it (e.g. the year of a transition, whose jump
    would otherwise dominate the indicators).
    """
    if column is None:
        if len(record.names) != 1:
            raise InputError(
                [
                    Problem(
                        record.source,
                        "(columns)",
                        f"several data columns ({', '.join(record.headers)}); choose one with "
                        "--column",
                    )
                ]
            )
        column = record.names[0]
    index = record.find(column, option="--column")
    values = record.column(column, option="--column", amounts=False)
    times, rows = record.times, record.rows
    if before is not None:
        keep = times < before
        times, values, rows = times[keep], values[keep], rows[keep]
    return early_warning(
        times,
        values,
        window=window,
        bandwidth=bandwidth,
        variable=record.label(index),
        unit=record.units[index],
        source=record.source,
        time_name=record.time_name,
        rows=rows,
    )


def _number(value: float) -> float | None:
    return float(value) if np.isfinite(value) else None


def signals_json(signals: Signals) -> dict[str, Any]:
    """The `planner signals --json` object: settings, series, trend and each indicator."""
    return {
        "source": signals.source,
        "variable": signals.variable,
        "unit": signals.unit,
        "time": signals.time_name,
        "window": {"share": signals.window_share, "points": signals.window_points},
        "bandwidth": signals.bandwidth,
        "times": signals.times.tolist(),
        "series": signals.series.tolist(),
        "filled": signals.filled.tolist(),
        "trend": signals.trend.tolist(),
        "indicators": {
            item.name: {
                "kendall_tau": _number(item.kendall_tau),
                "times": item.times.tolist(),
                "values": [_number(v) for v in item.values],
            }
            for item in signals.indicators
        },
    }


def signals_text(signals: Signals, *, caution: bool = True) -> str:
    """A terminal summary: settings and each indicator's first and last value and its tau."""
    unit = f" ({signals.unit})" if signals.unit else ""
    filled = int(np.count_nonzero(signals.filled))
    lines = [
        f"{signals.source}: early-warning indicators of {signals.variable}{unit}",
        f"{signals.times.size} evenly spaced values from {signals.times[0]:g} to "
        f"{signals.times[-1]:g}" + (f", {filled} filled by interpolation" if filled else ""),
        f"rolling window {signals.window_points} values ({signals.window_share:.0%}), "
        f"Gaussian kernel bandwidth {signals.bandwidth:.3g}",
        "",
        f"{'indicator':<24} {'first':>10} {'last':>10} {'Kendall tau':>12}",
    ]
    for item in signals.indicators:
        lines.append(
            f"{item.name:<24} {item.values[0]:>10.4g} {item.values[-1]:>10.4g} "
            f"{item.kendall_tau:>12.3f}"
        )
    lines += [
        "",
        "Rising variance and lag-1 autocorrelation (tau > 0) are consistent with an approaching "
        "transition; they are not proof, and overlapping windows make tau look more certain "
        "than it is.",
    ]
    if caution:
        lines += ["", CAUTION]
    return "\n".join(lines)
