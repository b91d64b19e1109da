"""The saved queries, shipped in the wheel as the data package ``sqlrisk.sql``.

pyproject.toml maps this folder to ``sqlrisk.sql``. This file makes it a regular package:
setuptools' editable install cannot import a mapped folder without one (pypa/setuptools#4248).
"""
