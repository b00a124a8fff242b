"""The error and warning family that users see.

Every problem with a user's input raises a :class:`StudyInputError` (a ``ValueError``) whose
message says what is wrong, where (file, row as a spreadsheet numbers it, column, subgroup) and
what to do. The app and the command line show the message, never a traceback.
"""

from __future__ import annotations


class StudyInputError(ValueError):
    """Bad input from the user: a file, a specification, an option or a decision.

    Parameters
    ----------
    message : str
        What is wrong and what to do about it.
    file, row, column, value : optional
        Where the problem sits. ``row`` is the row number as a spreadsheet shows it
        (the header is row 1). They are prefixed to the message when given.
    """

    def __init__(self, message: str, *, file=None, row=None, column=None, value=None):
        self.file = None if file is None else str(file)
        self.row = row
        self.column = column
        self.value = value
        self.detail = message
        where = []
        if self.file is not None:
            where.append(f"file '{self.file}'")
        if row is not None:
            where.append(f"row {row}")
        if column is not None:
            where.append(f"column '{column}'")
        prefix = ", ".join(where)
        super().__init__(f"{prefix}: {message}" if prefix else message)


class DataFileError(StudyInputError):
    """A measurement file cannot be read as measurements."""


class SpecError(StudyInputError):
    """A specification (limits, target, criteria) is inconsistent."""


class StudyFileError(StudyInputError):
    """A study file is missing, damaged, locked or from a newer version of studykit."""


class AnalysisError(StudyInputError):
    """The data cannot support the requested analysis (too few values, zero spread...)."""


class StudyWarning(UserWarning):
    """A result was computed but should be read with care."""


class FewDataWarning(StudyWarning):
    """Too few values or subgroups for a trustworthy estimate."""


class HeavyRemovalWarning(StudyWarning):
    """Phase I removed a large share of the data."""


class LargeSubgroupWarning(StudyWarning):
    """Subgroups are larger than range-based charts handle well."""
