"""jobkeeper: submit, keep and prove quantum circuit runs."""

from __future__ import annotations

__version__ = "0.1.0"
