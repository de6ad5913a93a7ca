"""The views a result offers a notebook or script user: ``to_frame()``, ``figure()``,
``image()`` and the notebook's HTML view, all built by :mod:`planner.api` (imported on first
use, so that results stay light to import). A result class names its frame and figure builders
and its title."""

from __future__ import annotations

from typing import Any


class ResultViews:
    """Mixed into a result class that sets ``_views = (frame builder, figure builder)`` (names
    of functions in planner.api taking the result) and defines ``_view_title()``."""

    _views: tuple[str, str] = ("", "")

    def _view_title(self) -> str:  # pragma: no cover - every result class overrides it
        return type(self).__name__

    def to_frame(self, *args: Any, **kwargs: Any):
        """A pandas DataFrame with real dtypes (booleans as bool, numbers as float); a result
        with more than one table takes the table's name (``ensemble.to_frame("members")``)."""
        from planner import api

        return getattr(api, self._views[0])(self, *args, **kwargs)

    def figure(self, *args: Any, **kwargs: Any):
        """The plotly figure the CLI report and the app draw for this result."""
        from planner import api

        return getattr(api, self._views[1])(self, *args, **kwargs)

    def image(self, format: str = "png", *args: Any, **kwargs: Any) -> bytes:
        """The figure as PNG, SVG or PDF bytes (:func:`planner.api.figure_image`); further
        arguments choose the figure as in :meth:`figure`."""
        from planner.api import figure_image

        return figure_image(self.figure(*args, **kwargs), format)

    def _repr_html_(self) -> str:
        """The frame and the caution, as a notebook shows this result."""
        from planner.api import notebook_html

        return notebook_html(self.to_frame(), self._view_title())
