"""Exception tree of runup.

Every error a user can cause derives from :class:`RunupError` and from the builtin
exception a Python caller would expect (``ValueError`` for bad data, ``RuntimeError``
for a fit that cannot be made).  The command-line interface catches ``RunupError``,
prints its one-line message and exits with code 2.

Messages say what is wrong, where (file, column, row) and what to do about it.
"""

from __future__ import annotations

__all__ = ["RunupError", "DataFormatError", "UnitError", "FitError"]


class RunupError(Exception):
    """Base of all errors raised deliberately by runup.

    Parameters
    ----------
    message
        What is wrong and, where possible, what to do about it.
    file, column, row
        Where the problem is.  ``row`` is the 1-based data row (the first row after the
        header is row 1).  Each is optional; those given are prefixed to the message.
    """

    def __init__(
        self,
        message: str,
        *,
        file: str | None = None,
        column: str | None = None,
        row: int | None = None,
    ) -> None:
        self.message = message
        self.file = file
        self.column = column
        self.row = row
        super().__init__(self.__str__())

    def __str__(self) -> str:
        where = []
        if self.file is not None:
            where.append(str(self.file))
        if self.column is not None:
            where.append(f"column '{self.column}'")
        if self.row is not None:
            where.append(f"row {self.row}")
        text = " ".join(self.message.split())  # always one line
        return f"{', '.join(where)}: {text}" if where else text


class DataFormatError(RunupError, ValueError):
    """Input data that cannot be read or violates the data model."""


class UnitError(RunupError, ValueError):
    """A unit or amplitude definition that runup does not know."""


class FitError(RunupError, RuntimeError):
    """A fit that cannot be carried out on the data given."""
