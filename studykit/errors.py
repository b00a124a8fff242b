"""The error and warning family that users see.

Every problem with a user's input raises a :class:`StudyInputError` (a ``ValueError``) whose
message says what is wrong, where (file, row as a spreadsheet numbers it, column, subgroup) and
what to do. The app and the command line show the message, never a traceback.
"""

from __future__ import annotations

import re

# C0 and C1 control characters (newlines, tabs, the escape that starts a terminal sequence),
# DEL, and the Unicode format characters that reorder or hide text (bidi overrides and isolates,
# zero-width marks, line/paragraph separators)
_UNPRINTABLE = re.compile("[\x00-\x1f\x7f-\x9f\u200b-\u200f\u2028-\u202e\u2060-\u2069\ufeff]")


def printable(text) -> str:
    r"""``text`` on one line with every control character written as an escape.

    Cell text from a file goes into messages and terminal output; a newline, carriage return
    or terminal escape sequence in a cell must not break the one-line message or move the
    terminal's cursor. Printable text (including accents and other scripts) is unchanged.

    Examples
    --------
    >>> printable("Bore\ndiameter")
    'Bore\\ndiameter'
    >>> printable("\x1b[31mred\x1b[0m")
    '\\x1b[31mred\\x1b[0m'
    >>> printable("Durchmesser Ø")
    'Durchmesser Ø'
    """
    text = str(text)
    if not _UNPRINTABLE.search(text):
        return text

    def esc(m):
        ch = m.group(0)
        named = {"\n": "\\n", "\r": "\\r", "\t": "\\t"}.get(ch)
        if named:
            return named
        code = ord(ch)
        return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}"

    return _UNPRINTABLE.sub(esc, text)


class StudyInputError(ValueError):
    """Bad input from the user: a file, a specification, an option or a decision.

    Parameters
    ----------
    message : str
        What is wrong and what to do about it.
    file, sheet, row, column, value : optional
        Where the problem sits. ``row`` is the row number as a spreadsheet shows it
        (the header is row 1). They are prefixed to the message when given.

    The message is always one line: control characters from file content (newlines, terminal
    escape sequences) are written as escapes (:func:`printable`).
    """

    def __init__(self, message: str, *, file=None, row=None, column=None, value=None, sheet=None):
        self.file = None if file is None else str(file)
        self.sheet = None if sheet is None else str(sheet)
        self.row = row
        self.column = column
        self.value = value
        message = printable(message)
        self.detail = message
        where = []
        if self.file is not None:
            where.append(f"file '{printable(self.file)}'")
        if self.sheet is not None:
            where.append(f"sheet '{printable(self.sheet)}'")
        if row is not None:
            where.append(f"row {row}")
        if column is not None:
            where.append(f"column '{printable(column)}'")
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
