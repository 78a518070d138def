"""The errors wetmap raises.

Every user-facing failure is a :class:`WetmapError`. Each carries one or more
*problems*: single lines that name the file, the key or argument, the value seen
and what was expected. The CLI prints each problem on its own line and exits
non-zero; a traceback is a bug.

Subclasses also inherit the built-in exception they resemble, so callers that
catch ``ValueError`` or ``FileNotFoundError`` keep working.
"""

from __future__ import annotations

from collections.abc import Iterable

__all__ = [
    "WetmapError",
    "SurveyError",
    "InputFileError",
    "MissingFileError",
    "ProcessingError",
    "OutputError",
]


class WetmapError(Exception):
    """Root of every error wetmap raises on purpose.

    Parameters
    ----------
    problems
        One problem as a string, or several. Each is a complete line.

    Examples
    --------
    >>> err = WetmapError(["a.toml: [camera] emissivity = 1.4: expected 0 < value <= 1"])
    >>> err.problems
    ('a.toml: [camera] emissivity = 1.4: expected 0 < value <= 1',)
    """

    def __init__(self, problems: str | Iterable[str]):
        if isinstance(problems, str):
            problems = [problems]
        self.problems: tuple[str, ...] = tuple(problems)
        super().__init__("\n".join(self.problems))


class SurveyError(WetmapError, ValueError):
    """survey.toml holds a missing, malformed or out-of-range value."""


class InputFileError(WetmapError, ValueError):
    """A user file (raster, vector, CSV) exists but cannot be used as it is."""


class MissingFileError(WetmapError, FileNotFoundError):
    """A file the survey names does not exist."""


class ProcessingError(WetmapError, RuntimeError):
    """The data were valid but the survey cannot be processed as asked."""


class OutputError(WetmapError, ValueError):
    """The results folder cannot be written as asked (it is the survey, holds a user's
    files, is a file, or another run holds its lock); nothing was written."""
