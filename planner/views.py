"""The views a result offers a notebook or script user: ``to_frame()``, ``figure()`` and the
notebook's HTML view, all built by :mod:`planner.api` (imported on first use, so that results
stay light to import). A result class names its frame and figure builders and its title."""

from __future__ import annotations

from typing import Any


class ResultViews:
    """Mixed into a result class that sets ``_views = (frame builder, figure builder)`` (names
    of functions in planner.api taking the result) and defines ``_view_title()``."""

    _views: tuple[str, str] = ("", "")

    def _view_title(self) -> str:  # pragma: no cover - every result class overrides it
        return type(self).__name__

    def to_frame(self):
        """A pandas DataFrame with real dtypes (booleans as bool, numbers as float)."""
        from planner import api

        return getattr(api, self._views[0])(self)

    def figure(self, *args: Any, **kwargs: Any):
        """The plotly figure the CLI report and the app draw for this result."""
        from planner import api

        return getattr(api, self._views[1])(self, *args, **kwargs)

    def _repr_html_(self) -> str:
        """The frame and the caution, as a notebook shows this result."""
        from planner.api import notebook_html

        return notebook_html(self.to_frame(), self._view_title())
