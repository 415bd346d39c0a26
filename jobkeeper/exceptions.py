"""The one exception tree of jobkeeper.

::

    JobkeeperError
    ├── CircuitError              bad circuit text (names file, line, column)
    ├── ObservableError           bad observable text (names file, line, column)
    ├── ConfigError               bad configuration, keep directory, option or argument
    ├── BackendError
    │   ├── TransientBackendError retry later (connection, timeout, 5xx, 429, ...)
    │   └── PermanentBackendError fail now, with the reason (4xx, unsupported circuit, ...)
    ├── StoreError
    │   ├── StoreUnavailable      the database could not be reached or opened
    │   │   └── StoreFault        its disk refuses: full, read-only, I/O error, damaged file
    │   ├── JobNotFound           no job matches an id or prefix
    │   ├── AmbiguousJobId        a prefix matches several jobs
    │   └── LeaseLost             a worker's lease was taken over; it must stop
    ├── BudgetExceeded            a submission would pass a spending cap
    ├── JobFailed                 a waited-for job ended failed or cancelled
    └── ProvenanceError
        ├── SigningKeyError       signing key missing, unreadable or too open
        └── VerificationError     a signature, digest or proof does not hold

Each class carries the exit code the command line uses for it (DESIGN §4):
0 success, 1 a job failed or verification found a problem, 2 bad input or usage,
3 a backend or store could not be reached.
"""

from __future__ import annotations


class JobkeeperError(Exception):
    """Something jobkeeper could not do; the message says what and why."""

    exit_code = 2


class _LocatedError(JobkeeperError):
    """Bad input text: the message names file, line and column where known."""

    exit_code = 2

    def __init__(
        self,
        message: str,
        *,
        file: str | None = None,
        line: int | None = None,
        column: int | None = None,
    ) -> None:
        self.message = message
        self.file = file
        self.line = line
        self.column = column
        super().__init__(self.__str__())

    def __str__(self) -> str:
        where = [str(part) for part in (self.file or "<input>", self.line, self.column) if part]
        if self.line is None:
            return f"{self.file or '<input>'}: {self.message}"
        return f"{':'.join(where)}: {self.message}"


class CircuitError(_LocatedError):
    """The circuit text is not valid OpenQASM 2.0 (or cannot be run as asked)."""


class ObservableError(_LocatedError):
    """The observable (a real-weighted sum of Pauli products) is not valid, or does not fit
    the circuit it is measured on."""


class ConfigError(JobkeeperError):
    """A configuration value, option or keep directory is unusable."""

    exit_code = 2


class BackendError(JobkeeperError):
    """A backend refused or could not run a task."""

    exit_code = 3


class TransientBackendError(BackendError):
    """Worth retrying later; ``retry_after`` (seconds) is the backend's own hint, if any."""

    def __init__(self, message: str, *, retry_after: float | None = None) -> None:
        super().__init__(message)
        self.retry_after = retry_after


class PermanentBackendError(BackendError):
    """Retrying cannot help; the message is kept in the job's failure record."""

    exit_code = 1


class StoreError(JobkeeperError):
    """The archive could not do what was asked."""

    exit_code = 3


class StoreUnavailable(StoreError):
    """The database could not be opened or reached."""

    exit_code = 3


class StoreFault(StoreUnavailable):
    """The archive's disk or file refuses the work: the disk is full, the file system is
    read-only, an I/O error, a damaged database file. Waiting does not help; whoever meets
    it stops at once (exit 3) and marks no job failed for it: a job in hand is left to its
    lease and taken up again once the fault is mended."""

    exit_code = 3


class JobNotFound(StoreError):
    """No job matches the given id or prefix."""

    exit_code = 2


class AmbiguousJobId(StoreError):
    """A job id prefix matches more than one job."""

    exit_code = 2


class LeaseLost(StoreError):
    """The worker's lease on a job was taken over; it must stop and archive nothing."""

    exit_code = 1


class DamagedRecord(StoreError):
    """A row of the archive does not hold what it must (unreadable JSON, a seed that is
    no number): altered or damaged. A verification problem, not an unreachable store."""

    exit_code = 1


class BudgetExceeded(JobkeeperError):
    """The submission would exceed a spending cap."""

    exit_code = 2


class ProvenanceError(JobkeeperError):
    """Signing keys, manifests or the log could not be used."""

    exit_code = 1


class SigningKeyError(ProvenanceError):
    """The signing key is missing, unreadable, or readable by others."""

    exit_code = 2


class VerificationError(ProvenanceError):
    """A signature, digest, inclusion or consistency proof does not hold."""

    exit_code = 1


class JobFailed(JobkeeperError):
    """A job ended failed or cancelled while someone waited for its result."""

    exit_code = 1
