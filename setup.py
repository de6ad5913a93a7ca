"""The package list, which pyproject.toml cannot give as a search and a mapping at once: every
package under planner/ and webapp/, plus planner.demo_files, the top-level scenarios/ folder
(mapped in pyproject.toml), and its data/ folder, so that a wheel carries the demos and their
monitoring record (with the script that made it) without a second copy of any file."""

from setuptools import find_namespace_packages, setup

DEMOS = ["planner.demo_files", "planner.demo_files.data"]

setup(packages=[*find_namespace_packages(include=["planner*", "webapp*"]), *DEMOS])
