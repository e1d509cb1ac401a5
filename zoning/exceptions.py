"""Exception and warning classes of the ``zoning`` package.

Every error class also inherits the builtin it refines, so that
``except ValueError`` in user code keeps working. Messages follow one
pattern: what went wrong, what was received, what was expected, and what to
do about it.
"""

from __future__ import annotations

__all__ = [
    "ZoningError",
    "ProfileFormatError",
    "ModelDomainError",
    "FitError",
    "ProjectError",
    "OutputRefusedError",
    "OutputLockedError",
    "Interrupted",
    "OrientationUncertainError",
    "ZoningWarning",
    "DataQualityWarning",
    "ConvergenceWarning",
    "CalibrationRangeWarning",
]


class ZoningError(Exception):
    """Base class of every error raised on purpose by ``zoning``."""


class ProfileFormatError(ZoningError, ValueError):
    """An input file or table cannot be read as a microprobe traverse.

    The message names the file, and the row or column where possible.
    """


class ModelDomainError(ZoningError, ValueError):
    """A model parameter or input lies outside its physical domain."""


class FitError(ZoningError, RuntimeError):
    """An inversion could not proceed.

    Parameters
    ----------
    message : str
        What went wrong and what to do.
    partial_result : object, optional
        Whatever was computed before the failure, for inspection.
    """

    def __init__(self, message: str, partial_result: object = None):
        super().__init__(message)
        self.partial_result = partial_result


class ProjectError(ZoningError, ValueError):
    """A project file (TOML) or batch request is malformed."""


class OutputRefusedError(ZoningError, PermissionError):
    """An output would replace a file or folder zoning did not write, or cannot be written.

    Raised before any work is done; nothing has been written.
    """


class OutputLockedError(OutputRefusedError):
    """Another run is writing into the same output folder (the message names it)."""


class Interrupted(KeyboardInterrupt):
    """A run was stopped by a signal (SIGINT, SIGTERM or SIGHUP) after cleaning up.

    Parameters
    ----------
    signum : int
        The signal number; the command line exits with ``128 + signum``.
    """

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = int(signum)


class OrientationUncertainError(ZoningError, ValueError):
    """The orientation or core of a traverse is uncertain and was not confirmed.

    Raised before any fitting when the evidence for the orientation is weak
    or disagrees (see :mod:`zoning.orientation`). The message states the
    evidence and the command-line options and project-file keys that
    confirm the orientation.
    """


class ZoningWarning(UserWarning):
    """Base class of every warning issued by ``zoning``."""


class DataQualityWarning(ZoningWarning):
    """Input data are usable but questionable (flagged spots, odd totals)."""


class ConvergenceWarning(ZoningWarning):
    """An optimiser or sampler did not converge well enough to trust."""


class CalibrationRangeWarning(ZoningWarning):
    """A published law is used outside the range it was calibrated on."""
