"""Fixtures shared by several test files."""

from tests.browser_support import browser_type_launch_args, served, shots  # noqa: F401
