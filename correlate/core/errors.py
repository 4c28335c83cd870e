"""Errors and warnings of `correlate`.

Every error a user can cause derives from :class:`CorrelateError`; the command line prints its
problems one per line and exits 2. Specific errors also derive from the fitting built-in so that
callers may catch either.
"""

from __future__ import annotations


class CorrelateError(Exception):
    """A problem with the user's input. Carries one or more problem lines.

    Parameters
    ----------
    *problems : str
        One line each: what failed, on which item, expected versus found, what to try.
    """

    def __init__(self, *problems: str) -> None:
        if not problems:
            raise TypeError("CorrelateError needs at least one problem line")
        self.problems: tuple[str, ...] = tuple(problems)
        super().__init__("\n".join(problems))


class StudyError(CorrelateError, ValueError):
    """The study file is malformed or names something that does not exist."""


class ModelError(CorrelateError, ValueError):
    """The model result cannot be read or does not hold what the study names."""


class GaugeError(CorrelateError, ValueError):
    """The gauge map is malformed or a gauge cannot be placed on the model."""


class GaugeOutsideMeshError(GaugeError):
    """A gauge lies farther from the model than the study allows."""


class ReadingsFormatError(CorrelateError, ValueError):
    """The readings file cannot be parsed as microstrain per load step."""


class OutputError(CorrelateError, OSError):
    """An output folder exists or cannot be written."""


class RunFolderError(CorrelateError, ValueError):
    """A folder given to compare is not a run folder, or the two runs cannot be compared."""


class MissingDependencyError(CorrelateError, ImportError):
    """An optional library needed for this input is not installed."""


class CorrelateWarning(UserWarning):
    """Something the analyst should look at; the run goes on."""
