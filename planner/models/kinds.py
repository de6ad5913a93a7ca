"""The built-in model kinds and their plain metadata, by kind (no sympy: the scenario schema
validates files with it; :mod:`planner.models.library` adds the equations)."""

from __future__ import annotations

from collections.abc import Mapping
from types import MappingProxyType
from typing import TYPE_CHECKING

from planner.models import internal_load, recycling, recycling_sediment, retention
from planner.models.info import ModelInfo

if TYPE_CHECKING:
    import sympy

_MODULES = MappingProxyType(
    {
        module.INFO.kind: module
        for module in (recycling, recycling_sediment, retention, internal_load)
    }
)

BUILTIN_INFO: Mapping[str, ModelInfo] = MappingProxyType(
    {kind: module.INFO for kind, module in _MODULES.items()}
)
"""Variables and parameters (with meanings and physical bounds) of each built-in kind."""


def builtin_equations(kind: str) -> tuple[sympy.Expr, ...]:
    """The right-hand sides of a built-in kind as sympy expressions (imports sympy)."""
    return _MODULES[kind].equations()
