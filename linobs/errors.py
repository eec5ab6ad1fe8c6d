"""Errors a user can cause.

Every error a user can trigger (a bad file, a bad name, a model that fails at a
point) is a :class:`LinobsError` subclass whose message says what was wrong and
what to do.  The command line prints the message on one line and exits with
:attr:`LinobsError.exit_code` (1 for model or data problems, 2 for usage).
"""

from __future__ import annotations


class LinobsError(Exception):
    """Base class of all errors a user can cause."""

    exit_code: int = 1


class UsageError(LinobsError):
    """The request itself is malformed (bad option, unknown name, bad value)."""

    exit_code = 2


class ModelError(LinobsError):
    """The FMU file or its binary cannot be used as asked."""


class FMUFileError(ModelError):
    """The FMU archive or its model description is unusable."""


class UnsupportedFMUError(ModelError):
    """The FMU is valid but offers nothing linobs can drive (e.g. co-simulation only)."""


class PlatformBinaryError(ModelError):
    """The FMU holds no binary for this platform, or the binary cannot be loaded."""


class InstantiationError(ModelError):
    """The FMU refused to instantiate or initialize."""


class StudyError(UsageError):
    """A study file that is missing, not TOML, or malformed (one problem per line)."""


class UnknownVariableError(UsageError):
    """A variable name that the model does not declare."""


class OutOfBoundsError(UsageError):
    """A value outside a variable's declared min/max."""


class EvaluationError(ModelError):
    """The FMU returned an error status or non-finite values at a point."""

    def __init__(self, message: str, *, point: dict[str, float] | None = None,
                 status: int | None = None, log: list[str] | None = None) -> None:
        super().__init__(message)
        self.point = point or {}
        self.status = status
        self.log = log or []


class BuildError(ModelError):
    """Compiling a C-source FMU failed."""


class CompilerNotFoundError(BuildError):
    """No C compiler could be found to build a source FMU."""
