"""The demo scenarios (invented lakes) and their synthetic monitoring record in data/.

An installed planner carries this folder as the data package ``planner.demo_files``
(pyproject.toml maps it); ``planner.demos`` finds it, and ``planner demos`` lists or copies it.
"""
