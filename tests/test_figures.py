"""Figure styles: schedules stay distinct and never look like the equilibrium curves."""

from __future__ import annotations

from planner.figures import (
    DISTINCT_SCHEDULES,
    STABLE_COLOUR,
    UNSTABLE_COLOUR,
    schedule_line,
    schedule_marker,
)


def test_at_least_twelve_schedules_have_distinct_styles():
    """Colour and dash together differ for the first 18 schedules; dash alone tells apart
    schedules of the same colour (for readers without colour vision: common practice, no
    source); no schedule is drawn black or grey (the equilibria, "now") nor dashed or dotted
    like an unstable equilibrium or an infeasible schedule."""
    assert DISTINCT_SCHEDULES >= 12
    styles = [schedule_line(i) for i in range(DISTINCT_SCHEDULES)]
    assert len({(s["color"], s["dash"]) for s in styles}) == DISTINCT_SCHEDULES
    for style in styles:
        assert style["color"].lower() not in {STABLE_COLOUR, UNSTABLE_COLOUR, "#000000"}
        assert style["dash"] not in {"dash", "dot"}
    assert schedule_line(3, feasible=False)["dash"] == "dot"
    symbols = [schedule_marker(i)["symbol"] for i in range(12)]
    assert len(set(symbols)) == 12
