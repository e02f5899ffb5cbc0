"""The package's exceptions: every error of a run is a `RatepoolError`."""

from __future__ import annotations

from typing import Optional


class RatepoolError(Exception):
    """A run ended with an error; nothing was written."""


class UsageError(RatepoolError, ValueError):
    """An option is wrong, missing, or does not apply to the model."""


class InputError(RatepoolError, ValueError):
    """The data cannot be used: a missing column (the message names the
    columns present), an empty table, or a bad value. For a bad value, `row`
    is the 1-based data row as the message gives it, `index` its 0-based
    position in the table (what `table.slice(index, 1)` shows), `column` the
    column and `reason` what is wrong."""

    def __init__(
        self,
        message: str,
        row: Optional[int] = None,
        column: Optional[str] = None,
        reason: Optional[str] = None,
    ):
        super().__init__(message)
        self.row = row
        self.index = None if row is None else row - 1
        self.column = column
        self.reason = reason


class FitError(RatepoolError):
    """The data do not allow the model to be fitted."""
