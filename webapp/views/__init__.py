"""One view per module. Each has ``layout(...)`` pieces and ``register(callback, settings)``,
which registers its callbacks through the ``dash.callback``-style function it is given (the
app's own), so views never import the app."""

from webapp.views import (
    data,
    diagram,
    editor,
    ensemble,
    export,
    frontier,
    scenario_panel,
    series,
    side_by_side,
    sweep,
    table,
)

VIEWS = (
    scenario_panel,
    editor,
    diagram,
    series,
    table,
    side_by_side,
    sweep,
    frontier,
    ensemble,
    data,
    export,
)

__all__ = ["VIEWS"]
