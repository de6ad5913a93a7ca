"""Early-warning indicators (method of Dakos et al. 2012, PLoS ONE 7:e41010): AR(1) and
Ornstein-Uhlenbeck reference values, Kendall's tau against scipy, the kernel trend against
scipy.ndimage, rolling statistics against numpy and scipy, gaps, and the `signals` command."""

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
from planner.signals import early_warning, kernel_trend, rolling_indicators

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


def test_ornstein_uhlenbeck_sampled_at_dt_has_lag1_autocorrelation_exp_minus_lambda_dt():
    """dx = -lambda x dt + sigma dW sampled every dt has lag-1 autocorrelation exp(-lambda dt)
    and variance sigma^2 / (2 lambda) (Scheffer et al. 2009, Nature 461:53-59, box 1).
    Simulated by Euler-Maruyama with 50 substeps per sample, 200 independent members at once;
    the mean over members is compared (tolerance covers sampling error and the small-sample
    bias of r1, about -(1 + 4 rho) / n, Kendall 1954, from memory)."""
    lam, sigma, dt, samples, members, substeps = 0.5, 0.3, 1.0, 1000, 200, 50
    rng = np.random.default_rng(9)
    h = dt / substeps
    x = rng.standard_normal(members) * sigma / np.sqrt(2 * lam)
    series = np.empty((samples, members))
    for i in range(samples):
        for _ in range(substeps):
            x = x - lam * x * h + sigma * np.sqrt(h) * rng.standard_normal(members)
        series[i] = x
    times = dt * np.arange(samples)
    r1, variance = [], []
    for member in series.T:
        signals = early_warning(times, member, window=1.0, bandwidth=NO_TREND)
        r1.append(signals.indicator("lag-1 autocorrelation").values[0])
        variance.append(signals.indicator("variance").values[0])
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


def test_rising_autocorrelation_before_a_transition_gives_positive_tau():
    """Critical slowing down (Scheffer et al. 2009): as the recovery rate falls the lag-1
    autocorrelation and variance rise; an AR(1) whose coefficient climbs from 0.1 to 0.95 over
    the record gives clearly positive taus, and the same series reversed gives negative ones."""
    rng = np.random.default_rng(21)
    n = 400
    phi = np.linspace(0.1, 0.95, n)
    x = np.zeros(n)
    for t in range(1, n):
        x[t] = phi[t] * x[t - 1] + rng.standard_normal()
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
    with pytest.raises(InputError, match="off the regular spacing"):
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
