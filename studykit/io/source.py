"""The raw source of a measurement file: size limit, hashing, kind (CSV or XLSX) and text encoding.

Part of :mod:`studykit.io` (moved unchanged from ``studykit/data.py``).
"""

from __future__ import annotations

import codecs
import hashlib
import io
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import NoReturn

from studykit.errors import DataFileError

#: Default size limit for uploads through the workbook (bytes). The library itself has no
#: limit unless ``max_bytes`` is given.
DEFAULT_MAX_BYTES = 100 * 1024 * 1024
_SAMPLE_BYTES = 64 * 1024
#: The sample read to find the header grows up to this size when its first lines are longer
#: than _SAMPLE_BYTES (a header of thousands of columns); a first line longer than this is
#: refused with a message that says so.
HEADER_MAX_BYTES = 8 * 1024 * 1024
READ_BLOCK = 1 << 20


def check_size(size: int, max_bytes: int | None, name: str) -> None:
    if max_bytes is not None and size > max_bytes:
        raise DataFileError(
            f"the file is {human_size(size)}, more than the limit of {human_size(max_bytes)}. "
            "Remove columns or rows that the study does not need, or split the file by "
            "characteristic, and load it again.",
            file=name,
            value=size,
        )


def human_size(n: int) -> str:
    if n >= 1024 * 1024:
        return f"{n / (1024 * 1024):.1f} MB"
    if n >= 1024:
        return f"{n / 1024:.1f} kB"
    return f"{n} bytes"


@dataclass
class Source:
    name: str
    path: Path | None
    data: bytes | None
    size: int
    sha256: str = ""
    kind: str = "csv"
    encoding: str | None = None
    encoding_label: str = ""
    sample: str = ""
    sample_truncated: bool = False
    encoding_given: bool = False

    def blocks(self) -> Iterator[bytes]:
        if self.data is not None:
            for i in range(0, len(self.data), READ_BLOCK):
                yield self.data[i : i + READ_BLOCK]
        else:
            with open(self.path, "rb") as fh:
                while True:
                    b = fh.read(READ_BLOCK)
                    if not b:
                        return
                    yield b

    def binary(self):
        return io.BytesIO(self.data) if self.data is not None else open(self.path, "rb")  # noqa: SIM115


_UNDEFINED_CP1252 = (b"\x81", b"\x8d", b"\x8f", b"\x90", b"\x9d")


def inspect(src: Source, encoding: str | None) -> None:
    """One pass over the bytes: digest, kind, encoding and a decoded sample."""
    scan = _scan(src)
    _refuse_empty(src, scan.head)
    src.kind = _kind(src, scan.head)
    if src.kind == "xlsx":
        return
    src.encoding, src.encoding_label = _encoding(src, scan, encoding)
    _decode_sample(src, scan.head)


@dataclass
class _Scan:
    """What one pass over the bytes found: the head (the sample read for the header) and
    whether the whole file is valid UTF-8, holds a NUL byte, or avoids cp1252's undefined bytes."""

    head: bytes
    utf8_ok: bool
    has_nul: bool
    cp1252_ok: bool


def _scan(src: Source) -> _Scan:
    """Read every block once: the SHA-256 (set on ``src``), the head and the encoding clues."""
    digest = hashlib.sha256()
    head = b""
    utf8 = codecs.getincrementaldecoder("utf-8")()
    utf8_ok = True
    has_nul = False
    cp1252_ok = True
    want = _SAMPLE_BYTES
    for block in src.blocks():
        digest.update(block)
        if len(head) < want:
            used = want - len(head)
            head += block[:used]
            if len(head) >= want and want < HEADER_MAX_BYTES and head.count(b"\n") < 3:
                want = HEADER_MAX_BYTES  # a very wide header: read on to its end
                head += block[used : used + want - len(head)]
        if not has_nul and b"\x00" in block:
            has_nul = True
        if block.isascii() and not utf8.getstate()[0]:
            continue  # plain ASCII between whole characters: valid UTF-8 and cp1252 alike
        if utf8_ok:
            try:
                utf8.decode(block)
            except UnicodeDecodeError:
                utf8_ok = False
        if cp1252_ok and any(b in block for b in _UNDEFINED_CP1252):
            cp1252_ok = False
    if utf8_ok:
        try:
            utf8.decode(b"", final=True)
        except UnicodeDecodeError:
            utf8_ok = False
    src.sha256 = digest.hexdigest()
    return _Scan(head, utf8_ok, has_nul, cp1252_ok)


def _refuse_empty(src: Source, head: bytes) -> None:
    if src.size == 0 or not head.strip(b" \t\r\n\x00\xef\xbb\xbf\xff\xfe"):
        raise DataFileError(
            "the file is empty. Export the measurements again: the first row must name the "
            "columns and each following row holds the values of one part.",
            file=src.name,
        )


def _kind(src: Source, head: bytes) -> str:
    """``"xlsx"`` for a zip package, ``"csv"`` for text; old or misnamed Excel files refused."""
    suffix = Path(src.name).suffix.lower()
    if head.startswith(b"PK\x03\x04"):
        return "xlsx"
    if head.startswith(b"\xd0\xcf\x11\xe0"):
        raise DataFileError(
            "this is an old-style Excel file (.xls) or a password-protected Excel file, which "
            "studykit does not read. Open it in the spreadsheet program, remove the password if "
            "there is one, and save it as an Excel file (.xlsx) or as CSV.",
            file=src.name,
        )
    if suffix in (".xlsx", ".xlsm"):
        raise DataFileError(
            "the file has an Excel name but is not an Excel file (it is not a .xlsx "
            "package). Open it in the spreadsheet program and save it again as .xlsx, or "
            "rename it to .csv if it is a text export.",
            file=src.name,
        )
    return "csv"


def _encoding(src: Source, scan: _Scan, encoding: str | None) -> tuple[str, str]:
    """(codec, label) of a text file: the one given (checked), a BOM, UTF-16 by its NUL bytes,
    UTF-8, cp1252, else Latin-1; a binary file is refused."""
    head = scan.head
    if encoding:
        try:
            codecs.lookup(encoding)
        except LookupError:
            raise DataFileError(
                f"'{encoding}' is not a known text encoding. Use e.g. 'utf-8', 'cp1252' or "
                "'utf-16', or leave the encoding out to have it detected.",
                file=src.name,
                value=encoding,
            ) from None
        src.encoding_given = True
        return encoding, encoding
    if head.startswith(codecs.BOM_UTF8):
        return "utf-8-sig", "UTF-8 with BOM"
    if head.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        return "utf-16", "UTF-16 with BOM"
    if scan.has_nul and _looks_utf16(head):
        return ("utf-16-le" if head[1:2] == b"\x00" else "utf-16-be"), "UTF-16 without BOM"
    if scan.has_nul:
        _raise_binary(src, head.index(b"\x00") if b"\x00" in head else None)
    if scan.utf8_ok:
        return "utf-8", "UTF-8"
    if scan.cp1252_ok:
        return "cp1252", "Windows-1252 (Latin-1)"
    return "latin-1", "Latin-1 (ISO-8859-1)"


def _decode_sample(src: Source, head: bytes) -> None:
    """Decode the head into ``src.sample``; refuse a text that is mostly control characters."""
    dec = codecs.getincrementaldecoder(src.encoding)(errors="replace")
    text = dec.decode(head, final=len(head) >= src.size)
    if text.startswith("\ufeff"):
        text = text[1:]
    src.sample = text
    src.sample_truncated = len(head) < src.size
    bad = sum(1 for ch in text if (ord(ch) < 32 and ch not in "\t\r\n") or ch == "\ufffd")
    if text and (bad > max(2, 0.005 * len(text)) or "\x00" in text):
        first = next(
            i
            for i, ch in enumerate(text)
            if (ord(ch) < 32 and ch not in "\t\r\n") or ch == "\ufffd"
        )
        _raise_binary(src, first)


def _looks_utf16(head: bytes) -> bool:
    n = min(len(head), 400) // 2 * 2
    if n < 4:
        return False
    even = head[0:n:2].count(0)
    odd = head[1:n:2].count(0)
    return max(even, odd) > 0.4 * n / 2 and min(even, odd) < 0.05 * n / 2


def _raise_binary(src: Source, offset) -> NoReturn:
    where = f" (unreadable bytes near byte {offset})" if offset is not None else ""
    raise DataFileError(
        f"the file does not look like a text table{where}. It may be damaged, or a program "
        "file or picture saved with a .csv name. Export the measurements from the spreadsheet "
        "as CSV (comma- or semicolon-separated) or save them as .xlsx, and load that file.",
        file=src.name,
    )


@dataclass
class Table:
    header: list  # header cell texts (stripped)
    header_row: int  # spreadsheet row number of the header
    open_chunks: Callable  # () -> iterator of (rows: int ndarray, columns: list of arrays)
    separator: str | None = None
    decimal: str | None = None
    text_cells: bool = True  # every cell is a str (CSV); XLSX cells are python values
    merged_fill: dict = field(default_factory=dict)  # column index -> list of (r1, r2)
    sheet: str | None = None
    # (float column indices) -> iterator like open_chunks, with those columns already float
    fast_chunks: Callable | None = None
    close: Callable = lambda: None
    title_rows: tuple | None = None  # (first, last) spreadsheet rows skipped above the header


class Fallback(Exception):
    """The fast CSV path met something it cannot judge; read again cell by cell."""
