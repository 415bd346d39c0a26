"""Collects the console examples of README.md and DEVELOPERS.md (tests/docs_console.py).

At the repository root because pytest offers a file to a conftest's hooks only below it.
"""

from tests.docs_console import documents

pytest_collect_file = documents().pytest()
