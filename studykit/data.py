"""Measurement files in, :class:`Measurements` out: kept so ``studykit.data`` imports keep working.

The reader lives in the :mod:`studykit.io` package (source detection, CSV and XLSX reading, cell
parsing, assembly, value objects); this module re-exports its public names unchanged.
"""

from __future__ import annotations

from studykit.io import (
    DEFAULT_MAX_BYTES,
    LARGE_SUBGROUP,
    XLSX_MAX_MEMBERS,
    XLSX_MAX_RATIO,
    XLSX_MAX_UNPACKED,
    CharacteristicData,
    Measurements,
    parse_header,
    read_measurements,
    read_measurements_bytes,
)

__all__ = [
    "CharacteristicData",
    "Measurements",
    "read_measurements",
    "read_measurements_bytes",
    "parse_header",
    "LARGE_SUBGROUP",
    "DEFAULT_MAX_BYTES",
    "XLSX_MAX_UNPACKED",
    "XLSX_MAX_RATIO",
    "XLSX_MAX_MEMBERS",
]
