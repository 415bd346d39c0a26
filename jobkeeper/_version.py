"""The version of jobkeeper: a leaf module (it imports nothing), so that any module can
read the version without importing the package's public API and its dependencies.
pyproject.toml reads it from here too (``[tool.setuptools.dynamic]``)."""

__version__ = "0.1.0"
