"""One small exception hierarchy; the command line maps each class to an exit code.

The library never prints or exits: it raises one of these with a message that names the
problem and where it is (file, row, column, JSON path, cell).
"""

from __future__ import annotations


class SheetNetError(Exception):
    """Base class: a problem the user can fix. Exit code 1 (bad data) unless overridden."""

    exit_code = 1


class UsageError(SheetNetError):
    """Bad flags or settings (e.g. ``--lr 0``), or an output path that cannot be used."""

    exit_code = 2


class DataError(SheetNetError):
    """A data file that cannot be used: unreadable, malformed, wrong columns, bad values."""


class ModelFileError(SheetNetError):
    """A model file that does not follow the schema; the message names the JSON path."""


class TrainingError(SheetNetError):
    """Training cannot go on, e.g. a parameter became non-finite."""


class WorkbookFormatError(SheetNetError):
    """A workbook that cannot be read as a sheetnet workbook, or would break spreadsheet limits."""


class DescriptionError(WorkbookFormatError):
    """The layout description inside a workbook is damaged, altered or disagrees with the workbook.
    ``problems`` lists every problem found (``sheetnet.book.jsoncheck.Problem``)."""

    def __init__(self, message: str, problems: list) -> None:
        super().__init__(message)
        self.problems = problems


class InvalidInputsError(WorkbookFormatError):
    """Input cells hold values the network cannot use (a learning rate of 0, text for a weight...).
    ``invalid`` lists them (``sheetnet.book.read.InvalidInput``)."""

    def __init__(self, message: str, invalid: list) -> None:
        super().__init__(message)
        self.invalid = invalid


class CannotVerifyError(SheetNetError):
    """A workbook that cannot be verified at all (not a sheetnet workbook, unreadable, no engine)."""

    exit_code = 2


class EvaluationError(SheetNetError):
    """A recalculation engine failed or is not available."""


class NotFittedError(ValueError, AttributeError):
    """An estimator method that needs a fitted model was called before ``fit``."""
