"""The outcome of a verification: every problem found, not only the first."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any


@dataclass
class VerifyReport:
    """``ok`` is true when no problem was found; ``checked`` counts the entries examined.

    Problems make verification fail; warnings do not, but say what the check could not
    establish (for example that the keys were taken from the bundle itself).

    Trust problems (a signer the verifier has not trusted) are kept apart from the rest,
    so that a record whose signatures all hold but whose signer is unknown can say
    exactly that; they make verification fail all the same. ``integrity_only`` says the
    signers' trust was not checked at all.
    """

    checked: int = 0
    problems: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    trust_problems: list[str] = field(default_factory=list)
    untrusted_signers: list[str] = field(default_factory=list)
    integrity_only: bool = False

    @property
    def ok(self) -> bool:
        return not self.problems and not self.trust_problems

    @property
    def signer_trusted(self) -> bool | None:
        return None if self.integrity_only else not self.trust_problems

    @property
    def only_trust_failed(self) -> bool:
        """Everything holds but who signed: the separate message's case."""
        return not self.problems and bool(self.trust_problems)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (for ``--json`` output)."""
        return {
            "ok": self.ok,
            "checked": self.checked,
            "problems": [*self.problems, *self.trust_problems],
            "warnings": list(self.warnings),
            "signer_trusted": self.signer_trusted,
            "untrusted_signers": list(self.untrusted_signers),
            "integrity_only": self.integrity_only,
        }
