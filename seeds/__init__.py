"""The demo data, shipped in the wheel as the data package ``sqlrisk.seeds``.

pyproject.toml maps this folder to ``sqlrisk.seeds``. This file makes it a regular package:
setuptools' editable install cannot import a mapped folder without one (pypa/setuptools#4248).
"""
