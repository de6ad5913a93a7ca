"""Early-warning indicators (method of Dakos et al. 2012, PLoS ONE 7:e41010): AR(1) and
Ornstein-Uhlenbeck reference values, Kendall's tau against scipy, the kernel trend against
scipy.ndimage, rolling statistics against numpy and scipy, gaps, tolerant time grids, any real
values, and the `signals` command."""

from __future__ import annotations

import contextlib
import io
import json
from itertools import combinations
from pathlib import Path

import numpy as np
import pytest
from scipy.ndimage import gaussian_filter1d
from scipy.stats import kendalltau, skew

from planner.cli import main
from planner.errors import InputError
from planner.monitoring import parse_record
from planner.signals import (
    GRID_TOLERANCE,
    INDICATORS,
    early_warning,
    kernel_trend,
    record_signals,
    rolling_indicators,
)

DEMO = Path(__file__).resolve().parent.parent / "scenarios" / "data" / "alder-mere-monitoring.csv"
NO_TREND = 1e9  # a bandwidth so wide that the kernel trend is the series mean


def _ar1(phi: float, sigma: float, n: int, seed: int, burn: int = 500) -> np.ndarray:
    """x_t = phi x_(t-1) + e_t, e_t ~ N(0, sigma^2), started in its stationary law."""
    rng = np.random.default_rng(seed)
    noise = sigma * rng.standard_normal(n + burn)
    x = np.empty(n + burn)
    x[0] = noise[0] / np.sqrt(1 - phi**2)
    for t in range(1, n + burn):
        x[t] = phi * x[t - 1] + noise[t]
    return x[burn:]


@pytest.mark.parametrize("phi", [-0.5, 0.2, 0.6, 0.9])
def test_ar1_lag1_autocorrelation_and_variance(phi):
    """For a stationary AR(1) x_t = phi x_(t-1) + e_t, the lag-1 autocorrelation is phi and the
    variance sigma^2 / (1 - phi^2) (Box & Jenkins, Time Series Analysis, the AR(1) process).
    Tolerance: four standard errors, with var(r1) ~ (1 - phi^2) / n (Bartlett's formula for an
    AR(1), Box & Jenkins, from memory) and var(s^2) ~ 2 gamma0^2 (1 + phi^2) / ((1 - phi^2) n)
    (Bartlett 1946, from memory)."""
    n, sigma = 20000, 0.7
    x = _ar1(phi, sigma, n, seed=int(100 * (phi + 1)))
    signals = early_warning(np.arange(n, dtype=float), x, window=1.0, bandwidth=NO_TREND)
    r1 = signals.indicator("lag-1 autocorrelation").values[0]
    variance = signals.indicator("variance").values[0]
    gamma0 = sigma**2 / (1 - phi**2)
    assert r1 == pytest.approx(phi, abs=4 * np.sqrt((1 - phi**2) / n))
    spread = np.sqrt(2 * gamma0**2 * (1 + phi**2) / ((1 - phi**2) * n))
    assert variance == pytest.approx(gamma0, abs=4 * spread)


def _ornstein_uhlenbeck(
    lam: float, sigma: float, dt: float, samples: int, members: int, substeps: int, seed: int
) -> np.ndarray:
    """(samples, members): dx = -lambda x dt + sigma dW by Euler-Maruyama with ``substeps``
    steps per sample, all members at once, started in the stationary law."""
    rng = np.random.default_rng(seed)
    h = dt / substeps
    x = rng.standard_normal(members) * sigma / np.sqrt(2 * lam)
    series = np.empty((samples, members))
    for i in range(samples):
        for _ in range(substeps):
            x = x - lam * x * h + sigma * np.sqrt(h) * rng.standard_normal(members)
        series[i] = x
    return series


def _whole_series_statistics(times: np.ndarray, series: np.ndarray):
    """Lag-1 autocorrelation and variance of each member (one window, no trend), and the
    last member's signals."""
    r1, variance = [], []
    for member in series.T:
        signals = early_warning(times, member, window=1.0, bandwidth=NO_TREND)
        r1.append(signals.indicator("lag-1 autocorrelation").values[0])
        variance.append(signals.indicator("variance").values[0])
    return np.array(r1), np.array(variance), signals


def test_ornstein_uhlenbeck_sampled_at_dt_has_lag1_autocorrelation_exp_minus_lambda_dt():
    """dx = -lambda x dt + sigma dW sampled every dt has lag-1 autocorrelation exp(-lambda dt)
    and variance sigma^2 / (2 lambda) (Scheffer et al. 2009, Nature 461:53-59, box 1).
    Simulated by Euler-Maruyama with 50 substeps per sample, 200 independent members at once;
    the mean over members is compared (tolerance covers sampling error and the small-sample
    bias of r1, about -(1 + 4 rho) / n, Kendall 1954, from memory)."""
    lam, sigma, dt, samples, members, substeps = 0.5, 0.3, 1.0, 1000, 200, 50
    series = _ornstein_uhlenbeck(lam, sigma, dt, samples, members, substeps, seed=9)
    r1, variance, _ = _whole_series_statistics(dt * np.arange(samples), series)
    assert np.mean(r1) == pytest.approx(np.exp(-lam * dt), abs=0.012)
    assert np.mean(variance) == pytest.approx(sigma**2 / (2 * lam), rel=0.05)


def test_kendall_tau_is_scipys_on_window_end_times():
    """Each indicator's tau equals scipy.stats.kendalltau of (window end time, indicator value),
    and on tie-free data equals Kendall's own definition (concordant - discordant) / (n choose 2)
    (Kendall 1938, Biometrika 30:81-93)."""
    rng = np.random.default_rng(4)
    times = 1950.0 + np.arange(80)
    values = np.cumsum(rng.standard_normal(80)) + 5
    signals = early_warning(times, values, window=0.4, bandwidth=8.0)
    for indicator in signals.indicators:
        assert indicator.times.tolist() == times[signals.window_points - 1 :].tolist()
        expected = kendalltau(indicator.times, indicator.values).statistic
        assert indicator.kendall_tau == pytest.approx(expected, abs=1e-12)
    values_ = signals.indicator("lag-1 autocorrelation").values
    ends = signals.indicator("lag-1 autocorrelation").times
    pairs = list(combinations(range(values_.size), 2))
    sign = sum(np.sign(ends[j] - ends[i]) * np.sign(values_[j] - values_[i]) for i, j in pairs)
    assert signals.indicator("lag-1 autocorrelation").kendall_tau == pytest.approx(
        sign / len(pairs), abs=1e-12
    )


def test_rolling_statistics_match_numpy_and_scipy_in_every_window():
    """Per window: variance = numpy.var(ddof=1); skewness = scipy.stats.skew (the moment
    coefficient); lag-1 autocorrelation = c1 / c0 with the Box & Jenkins sample
    autocovariances (computed here with numpy.correlate)."""
    rng = np.random.default_rng(12)
    residuals = rng.gamma(2.0, size=60)
    window = 17
    result = rolling_indicators(residuals, window)
    for start in range(residuals.size - window + 1):
        piece = residuals[start : start + window]
        centred = piece - piece.mean()
        c = np.correlate(centred, centred, mode="full")[window - 1 :] / window
        assert result["variance"][start] == pytest.approx(np.var(piece, ddof=1), rel=1e-12)
        assert result["skewness"][start] == pytest.approx(skew(piece), rel=1e-10)
        assert result["lag-1 autocorrelation"][start] == pytest.approx(c[1] / c[0], rel=1e-10)


def test_kernel_trend_matches_scipy_gaussian_filter_away_from_the_ends():
    """Gaussian kernel smoothing of evenly spaced data equals scipy.ndimage.gaussian_filter1d
    (sigma = bandwidth / spacing) where the kernel does not reach the ends of the series."""
    rng = np.random.default_rng(3)
    spacing, bandwidth = 0.5, 2.0
    times = spacing * np.arange(200)
    values = np.sin(times / 7) + 0.2 * rng.standard_normal(times.size)
    ours = kernel_trend(times, values, bandwidth)
    reference = gaussian_filter1d(values, bandwidth / spacing, truncate=10.0)
    margin = int(10 * bandwidth / spacing)
    assert ours[margin:-margin] == pytest.approx(reference[margin:-margin], abs=1e-12)


def _rising_ar1(first: float, last: float, n: int, seed: int) -> np.ndarray:
    """x_t = phi_t x_(t-1) + e_t, e_t ~ N(0, 1), x_0 = 0, phi climbing linearly first -> last."""
    rng = np.random.default_rng(seed)
    phi = np.linspace(first, last, n)
    x = np.zeros(n)
    for t in range(1, n):
        x[t] = phi[t] * x[t - 1] + rng.standard_normal()
    return x


def test_rising_autocorrelation_before_a_transition_gives_positive_tau():
    """Critical slowing down (Scheffer et al. 2009): as the recovery rate falls the lag-1
    autocorrelation and variance rise; an AR(1) whose coefficient climbs from 0.1 to 0.95 over
    the record gives clearly positive taus, and the same series reversed gives negative ones."""
    n = 400
    x = _rising_ar1(0.1, 0.95, n, seed=21)
    times = np.arange(n, dtype=float)
    rising = early_warning(times, x + 0.01 * times, window=0.5)
    falling = early_warning(times, x[::-1] + 0.01 * times, window=0.5)
    for name in ("lag-1 autocorrelation", "variance"):
        assert rising.indicator(name).kendall_tau > 0.5
        assert falling.indicator(name).kendall_tau < -0.5


def test_gaps_are_filled_linearly_and_marked():
    times = np.arange(2000.0, 2020.0)
    values = 1.0 + 0.1 * np.arange(20.0)
    values[[4, 11]] = np.nan
    keep = np.ones(20, dtype=bool)
    keep[15] = False  # a missing row
    signals = early_warning(times[keep], values[keep], window=0.5)
    assert signals.times.tolist() == times.tolist()
    assert np.flatnonzero(signals.filled).tolist() == [4, 11, 15]
    assert signals.series == pytest.approx(1.0 + 0.1 * np.arange(20.0))


def test_uneven_times_and_short_series_are_input_errors():
    with pytest.raises(InputError, match=r"point 4, column time: time 3.5 is 1.5 after"):
        early_warning(np.array([0, 1, 2, 3.5, 4, 5, 6, 7, 8, 9, 10.0]), np.ones(11))
    with pytest.raises(InputError, match="too few points"):
        early_warning(np.arange(8.0), np.ones(8))
    with pytest.raises(InputError, match="at least 5 are needed"):
        early_warning(np.arange(12.0), np.arange(12.0), window=0.2)


def test_cli_signals_json_and_html(tmp_path):
    out, err = io.StringIO(), io.StringIO()
    html = tmp_path / "signals.html"
    argv = ["signals", str(DEMO), "--column", "TP", "--before", "2002", "--json"]
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([*argv, "--html", str(html)])
    assert code == 0, err.getvalue()
    result = json.loads(out.getvalue())
    assert result["variable"] == "TP"
    assert max(result["times"]) < 2002
    assert set(result["indicators"]) == {
        "variance",
        "standard deviation",
        "lag-1 autocorrelation",
        "skewness",
    }
    for indicator in result["indicators"].values():
        expected = kendalltau(indicator["times"], indicator["values"]).statistic
        assert indicator["kendall_tau"] == pytest.approx(expected)
    assert "Kendall tau" in html.read_text(encoding="utf-8")


# ---------------------------------------------------------------------------------------------
# Tolerant time grids, any real values, headers as the project writes them


def _monthly_years(first_year: int, months: int) -> np.ndarray:
    """Monthly sample times as decimal years written with 4 decimals (2001.0833, ...)."""
    return np.round(first_year + np.arange(months) / 12, 4)


def _csv(times: np.ndarray, values: np.ndarray) -> str:
    """A monitoring CSV of one series of anomalies, as a spreadsheet writes it."""
    rows = (f"{t:.4f},{v:.6f}" for t, v in zip(times, values, strict=True))
    return "\n".join(["year,anomaly [ug/L]", *rows]) + "\n"


def test_ornstein_uhlenbeck_sampled_monthly_at_rounded_decimal_years():
    """dx = -lambda x dt + sigma dW sampled every dt = 1/12 year has lag-1 autocorrelation
    exp(-lambda dt) and variance sigma^2 / (2 lambda) (Scheffer et al. 2009, Nature 461:53-59,
    box 1). The times are decimal years rounded to 4 decimals, as a spreadsheet writes them, so
    the spacings differ by up to 1e-4 year; the grid must accept them and date the values on an
    even grid from the first to the last time.

    Simulated by Euler-Maruyama (20 substeps a month), 40 independent members of 400 years.
    Tolerance: 4 standard errors of the mean over members, var(r1) ~ (1 - rho^2) / n (Bartlett's
    formula for an AR(1), Box & Jenkins, from memory), plus the small-sample bias of r1, about
    (1 + 4 rho) / n (Kendall 1954, from memory). One member also goes through a CSV file and
    `record_signals`, which must give the same indicators."""
    lam, sigma, months, members, substeps = 1.2, 0.5, 4800, 40, 20
    dt = 1 / 12
    times = _monthly_years(2001, months)
    spacings = np.diff(times)
    assert spacings.max() - spacings.min() > 5e-5  # really rounded, not evenly spaced
    series = _ornstein_uhlenbeck(lam, sigma, dt, months, members, substeps, seed=17)
    r1, variance, signals = _whole_series_statistics(times, series)
    assert not signals.filled.any()
    assert signals.times[0] == times[0]
    assert signals.times[-1] == pytest.approx(times[-1], abs=1e-9)
    assert np.diff(signals.times) == pytest.approx(np.full(months - 1, dt), abs=1e-4)
    rho = np.exp(-lam * dt)
    standard_error = np.sqrt((1 - rho**2) / months / members)
    assert np.mean(r1) == pytest.approx(rho, abs=4 * standard_error + (1 + 4 * rho) / months)
    assert np.mean(variance) == pytest.approx(sigma**2 / (2 * lam), rel=0.05)

    record = parse_record(_csv(times, series[:, 0]), "monthly.csv")
    from_file = record_signals(record, window=1.0, bandwidth=NO_TREND)
    assert from_file.indicator("lag-1 autocorrelation").values[0] == pytest.approx(r1[0], abs=1e-5)


def test_grid_tolerance_accepts_small_jitter_and_names_the_row_beyond_it():
    """A time off the monthly grid by less than GRID_TOLERANCE of the spacing is accepted (and
    dated on the grid); one off by three times the tolerance is refused, naming its file row and
    both spacings (common practice, no source: the tolerance is the module's stated choice)."""
    times = _monthly_years(2001, 60)
    values = np.sin(np.arange(60.0))
    spacing = 1 / 12
    inside, outside = times.copy(), times.copy()
    inside[30] += 0.5 * GRID_TOLERANCE * spacing
    outside[30] += 3 * GRID_TOLERANCE * spacing
    accepted = record_signals(parse_record(_csv(inside, values), "inside.csv"))
    assert accepted.times[30] == pytest.approx(times[30], abs=1e-4)
    assert accepted.series == pytest.approx(values, abs=1e-6)  # the CSV keeps 6 decimals
    with pytest.raises(InputError) as error:
        record_signals(parse_record(_csv(outside, values), "outside.csv"))
    (problem,) = error.value.problems
    assert problem.source == "outside.csv"
    assert problem.field == "row 32, column year"  # header on row 1, the 31st time on row 32
    assert f"{outside[30] - outside[29]:.6g} after the previous value (row 31)" in problem.reason
    assert f"median spacing {np.median(np.diff(outside)):.6g}" in problem.reason


def test_missing_rows_span_whole_steps_and_slow_drift_is_refused():
    """A missing month is a step of two spacings and is filled; times that each step within the
    tolerance but add up to a drift of more than the tolerance off the even grid are refused at
    the first row that is too far off (common practice, no source)."""
    times = _monthly_years(2001, 48)
    values = np.cos(np.arange(48.0))
    keep = np.ones(48, dtype=bool)
    keep[[10, 30, 31]] = False
    gappy = record_signals(parse_record(_csv(times[keep], values[keep]), "gaps.csv"))
    assert np.flatnonzero(gappy.filled).tolist() == [10, 30, 31]
    assert gappy.times == pytest.approx(2001 + np.arange(48) / 12, abs=1e-4)

    drifting = 2001 + np.concatenate([np.arange(40) * 1.008, 39 * 1.008 + np.arange(1, 80)])
    with pytest.raises(InputError, match=r"point \d+, column time: .* the times drift"):
        early_warning(drifting, np.sin(np.arange(drifting.size)))


def test_negative_values_and_zeros_give_the_indicators_of_the_shifted_series():
    """Variance, standard deviation, lag-1 autocorrelation and skewness are unchanged when a
    constant is added to the series (central moments; the Gaussian kernel trend has weights
    summing to one, so it moves by the same constant), and so are their Kendall taus: anomalies
    (negative values and zeros) give the indicators of the same series shifted to positive
    values (common practice, no source)."""
    n = 120
    anomalies = _rising_ar1(0.2, 0.9, n, seed=5)
    anomalies[[7, 50]] = 0.0
    assert (anomalies < 0).sum() > 20
    times = 1950.0 + np.arange(n)
    shifted = anomalies + 40.0
    raw = early_warning(times, anomalies, window=0.5, bandwidth=10.0)
    moved = early_warning(times, shifted, window=0.5, bandwidth=10.0)
    assert moved.trend == pytest.approx(raw.trend + 40.0, abs=1e-9)
    for name in INDICATORS:
        assert raw.indicator(name).values == pytest.approx(moved.indicator(name).values, abs=1e-9)
        assert raw.indicator(name).kendall_tau == moved.indicator(name).kendall_tau


def test_cli_signals_accepts_anomalies_and_refuses_non_finite_values_by_row(tmp_path):
    """A CSV of anomalies (negative values) gives, through `planner signals`, the taus of the
    same series shifted by a constant (shift invariance, common practice, no source); an
    infinite value is refused naming its row and column (common practice, no source)."""
    rng = np.random.default_rng(8)
    times = 1980.0 + np.arange(40)
    anomalies = np.round(rng.standard_normal(40), 3)
    anomalies[3] = 0.0
    results = []
    for name, values in (("anomalies", anomalies), ("shifted", anomalies + 10.0)):
        path = tmp_path / f"{name}.csv"
        path.write_text(_csv(times, values), encoding="utf-8")
        out, err = io.StringIO(), io.StringIO()
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            code = main(["signals", str(path), "--json"])
        assert code == 0, err.getvalue()
        results.append(json.loads(out.getvalue())["indicators"])
    for name in INDICATORS:
        assert results[0][name]["kendall_tau"] == pytest.approx(results[1][name]["kendall_tau"])

    bad = tmp_path / "infinite.csv"
    bad.write_text("year,anomaly\n2000,-1.5\n2001,inf\n2002,0.3\n", encoding="utf-8")
    err = io.StringIO()
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(err):
        code = main(["signals", str(bad)])
    assert code == 2
    assert f"{bad}: row 3, column anomaly: 'inf' is not a number" in err.getvalue()
    with pytest.raises(InputError, match=r"point 12, column x: value -inf is not finite"):
        early_warning(np.arange(12.0), np.r_[np.zeros(11), -np.inf], variable="x")


def test_cli_signals_takes_the_demo_column_by_its_written_header():
    """The demo record's header (written by scenarios/data/make_demo_record.py) names its
    columns with units, `TP [g P / m2]`; `--column` accepts that header as written and the bare
    name alike, with the same result (common practice, no source)."""
    header = next(
        line for line in DEMO.read_text(encoding="utf-8").splitlines() if not line.startswith("#")
    )
    written = header.split(",")[2]
    assert written == "TP [g P / m2]"
    outputs = []
    for column in (written, "TP"):
        out, err = io.StringIO(), io.StringIO()
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            code = main(["signals", str(DEMO), "--column", column, "--json"])
        assert code == 0, err.getvalue()
        outputs.append(json.loads(out.getvalue()))
    assert outputs[0] == outputs[1]
    assert outputs[0]["variable"] == "TP" and outputs[0]["unit"] == "g P / m2"
