"""Errors that the command line turns into one-line messages.

Every problem with the user's input is raised as :class:`InputError`, which
knows the file, the row and the column it concerns, so that the message can
point the user at the exact place.  The command line prints ``str(error)``
and exits with status 1; only ``--debug`` shows a traceback.
"""

from __future__ import annotations

__all__ = ["DriftloopError", "InputError", "ConfigError"]


class DriftloopError(Exception):
    """Base class of all errors raised deliberately by driftloop."""


class InputError(DriftloopError):
    """A problem with an input file, located as precisely as possible.

    Parameters
    ----------
    file : str or None
        The input file (as given by the user).
    message : str
        What was wrong and, where it helps, what was expected.
    row : int or None
        1-based record number in the file (for delimited text the header
        is row 1, so the first data row is row 2; for Parquet and NetCDF the
        first record is row 1; for GPX the line number of the element).
    column : str or None
        The column, variable or XML element concerned.
    """

    def __init__(
        self,
        file: str | None,
        message: str,
        *,
        row: int | None = None,
        column: str | None = None,
    ) -> None:
        self.file = None if file is None else str(file)
        self.row = row
        self.column = column
        self.message = message
        super().__init__(self.__str__())

    def __str__(self) -> str:
        parts = []
        if self.file is not None:
            parts.append(self.file)
        if self.row is not None:
            parts.append(f"row {self.row}")
        if self.column is not None:
            parts.append(f"column {self.column!r}")
        where = ", ".join(parts)
        text = " ".join(self.message.split())  # always one line
        return f"{where}: {text}" if where else text


class ConfigError(DriftloopError):
    """A configuration file or option that cannot be used.

    Parameters
    ----------
    message : str
        What was wrong, naming the key.
    file : str or None
        The configuration file, if the problem came from one.
    """

    def __init__(self, message: str, file: str | None = None) -> None:
        self.file = file
        self.message = " ".join(message.split())
        super().__init__(self.__str__())

    def __str__(self) -> str:
        return f"{self.file}: {self.message}" if self.file else self.message
