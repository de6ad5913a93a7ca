"""Fixtures and settings shared by several test files."""

from hypothesis import settings

from tests.browser_support import browser_type_launch_args, served, shots  # noqa: F401

# Property tests check results, not speed: a shared two-core CI machine can take far longer than
# hypothesis's default 200 ms for one example (speed lives in benchmarks/).
settings.register_profile("planner", deadline=None)
settings.load_profile("planner")
