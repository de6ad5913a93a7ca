"""Pieces a careful engineer writes by hand for the scipy baselines (shared by the benchmarks)."""

from __future__ import annotations

from bisect import bisect_right


def piecewise_linear(times: list[float], values: list[float]):
    """u(t) through the points (times, values): right-continuous at jumps, held after the end."""
    last = len(times) - 1

    def load(t):
        j = bisect_right(times, t) - 1
        if j < 0:
            return values[0]
        if j >= last:
            return values[last]
        t0, t1 = times[j], times[j + 1]
        return values[j] + (values[j + 1] - values[j]) * (t - t0) / (t1 - t0)

    return load


def recycling(load, s: float, r: float, q: float, m_q: float):
    """(rhs, jac) of dP/dt = L(t) - s P + r P^q / (m^q + P^q) in plain floats, m^q given."""

    def rhs(t, y):
        p = y[0]
        p_q = p**q
        return [load(t) - s * p + r * p_q / (m_q + p_q)]

    def jac(t, y):
        p = y[0]
        d = m_q + p**q
        return [[-s + r * q * p ** (q - 1.0) * m_q / (d * d)]]

    return rhs, jac
