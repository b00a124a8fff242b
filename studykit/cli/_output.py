"""Terminal safety of everything the command line prints.

Text read from a measurement or study file (characteristic names, subgroup labels, notes) can
hold control characters: a newline that breaks a one-line message, or an escape sequence that
recolours, clears or retitles the terminal. :class:`EscapingWriter` wraps ``sys.stdout`` and
``sys.stderr`` for the duration of a command and writes every control character except the
line breaks and tabs of our own layout as a ``\\uXXXX`` escape (valid inside JSON strings,
readable in text). Places that print a single cell (``studykit check``'s table, error
messages) escape newlines and tabs as well, with :func:`studykit.errors.printable`.
"""

from __future__ import annotations

import json
import re
import sys

# C0 controls except tab and newline, DEL, C1 controls, Unicode bidi/zero-width/separators
_UNSAFE = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u200b-\u200f\u2028-\u202e\u2060-\u2069]")


def escape_controls(text: str) -> str:
    r"""``text`` with unsafe control characters as ``\uXXXX`` (newlines and tabs kept).

    >>> escape_controls("a\x1b[2Jb\nc")
    'a\\u001b[2Jb\nc'
    """
    return _UNSAFE.sub(lambda m: f"\\u{ord(m.group(0)):04x}", text)


class EscapingWriter:
    """A text stream that escapes control characters before they reach the terminal."""

    def __init__(self, stream):
        self._stream = stream

    def write(self, text: str) -> int:
        self._stream.write(escape_controls(text))
        return len(text)

    def writelines(self, lines) -> None:
        for line in lines:
            self.write(line)

    def __getattr__(self, name):
        return getattr(self._stream, name)


def write_json(obj, *, allow_nan: bool = True) -> None:
    """Print ``obj`` as indented JSON with its non-ASCII text as it is, and a line break (the
    ``--json`` output of every command but ``analyze`` and ``monitor``). ``allow_nan=False``
    refuses a NaN or infinity instead of writing the non-standard ``NaN``."""
    json.dump(obj, sys.stdout, indent=2, ensure_ascii=False, allow_nan=allow_nan)
    sys.stdout.write("\n")


def closing_lines(notes, caution: str | None = None) -> list[str]:
    """The last lines of a plain-text report: its notes as a list, then the caution of a
    safety-critical characteristic (each only when there is one).

    >>> closing_lines(["2 empty cells left out"], "CAUTION")
    ['Notes:', '  - 2 empty cells left out', 'CAUTION']
    >>> closing_lines([])
    []
    """
    lines = ["Notes:", *(f"  - {n}" for n in notes)] if notes else []
    return lines + ([caution] if caution else [])
