"""The outcome of a verification: every problem found, not only the first."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any


@dataclass
class VerifyReport:
    """``ok`` is true when no problem was found; ``checked`` counts the entries examined.

    Problems make verification fail; warnings do not, but say what the check could not
    establish (for example that the keys were taken from the bundle itself).
    """

    checked: int = 0
    problems: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.problems

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (for ``--json`` output)."""
        return {
            "ok": self.ok,
            "checked": self.checked,
            "problems": list(self.problems),
            "warnings": list(self.warnings),
        }
