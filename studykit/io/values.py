"""The value objects of a read measurement file: :class:`CharacteristicData`, :class:`Measurements`.

Part of :mod:`studykit.io` (moved unchanged from ``studykit/data.py``).
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from studykit.errors import DataFileError, StudyInputError
from studykit.stats.result import json_float as _json_float

#: Subgroups with more values than this are allowed but warned about (range charts lose
#: efficiency; an S chart is the better choice). Common practice, no source.
LARGE_SUBGROUP = 25


def _frozen_array(a: np.ndarray | None) -> np.ndarray | None:
    if a is None:
        return None
    a = np.asarray(a)
    a.flags.writeable = False
    return a


@dataclass(frozen=True, eq=False)
class CharacteristicData:
    """The values of one characteristic as read from a file.

    Only `name`, `unit` and `values` are required; the other fields are derived when left out
    (individuals labelled ``'1'..'n'``, rows ``2..n+1``), so tests and other modules can build
    one directly.

    Attributes
    ----------
    name : str
        Header name without the unit.
    unit : str or None
        Unit from the header (``[mm]`` or ``(mm)``) or from a unit column.
    values : ndarray of float
        Values in file order; NaN where the cell was empty.
    subgroups : ndarray of str
        Subgroup label of each value, in file order. Individuals (no subgrouping) get their
        position ``'1'..'n'``; subgrouping by a fixed size gives ``'1', '1', ..., '2', ...``.
    times : ndarray or None
        ``datetime64[ns]`` when every time cell could be read as a date/time, otherwise the
        cell text (object array); ``None`` when the file has no time column.
    notes : ndarray of str or None
        Note cell text, object array ('' where empty); ``None`` without a note column.
    rows : ndarray of int
        Spreadsheet row number of each value (the header is row 1).
    n_missing : int
        Number of empty cells (NaN values).
    is_integer : bool
        Every non-missing value is a whole number (counts, lot sizes).
    subgroup_labels : ndarray of str
        Distinct subgroup labels in order of first appearance.
    subgroup_counts : ndarray of int
        Non-missing values per label of `subgroup_labels`.
    subgroup_sizes : dict (property)
        Subgroup label -> number of non-missing values, in order of first appearance.
    """

    name: str
    unit: str | None
    values: np.ndarray
    subgroups: np.ndarray | None = None
    times: np.ndarray | None = None
    notes: np.ndarray | None = None
    rows: np.ndarray | None = None
    n_missing: int | None = None
    is_integer: bool | None = None
    subgroup_labels: np.ndarray | None = None
    subgroup_counts: np.ndarray | None = None
    streams: np.ndarray | None = None

    def __post_init__(self):
        put = object.__setattr__
        values = np.asarray(self.values, dtype=float)
        put(self, "values", values)
        n = values.size
        missing = np.isnan(values)
        if self.subgroups is None:
            put(self, "subgroups", (np.arange(n) + 1).astype(str))
        elif np.asarray(self.subgroups).dtype.kind not in "UO":
            put(self, "subgroups", np.asarray(self.subgroups).astype(str))
        if self.rows is None:
            put(self, "rows", np.arange(2, n + 2, dtype=np.int64))
        if self.streams is not None:
            put(self, "streams", np.asarray(self.streams).astype(str))
        for key in ("subgroups", "rows", "times", "notes", "streams"):
            a = getattr(self, key)
            if a is not None and len(a) != n:
                raise StudyInputError(
                    f"`{key}` has {len(a)} entries but `values` has {n}; they must match.",
                    column=self.name,
                )
        if self.n_missing is None:
            put(self, "n_missing", int(missing.sum()))
        if self.is_integer is None:
            valid = values[~missing]
            put(self, "is_integer", bool(valid.size and np.all(np.floor(valid) == valid)))
        if self.subgroup_labels is None or self.subgroup_counts is None:
            from studykit.io.plain import factorize

            codes, uniq = factorize(np.asarray(self.subgroups))
            counts = np.bincount(codes, weights=(~missing).astype(float), minlength=len(uniq))
            put(self, "subgroup_labels", np.asarray(uniq).astype(str))
            put(self, "subgroup_counts", counts.astype(np.int64))
        for key in (
            "values",
            "subgroups",
            "times",
            "notes",
            "rows",
            "subgroup_labels",
            "subgroup_counts",
            "streams",
        ):
            put(self, key, _frozen_array(getattr(self, key)))

    @cached_property
    def subgroup_sizes(self) -> dict:
        """Subgroup label -> number of non-missing values, in order of first appearance."""
        return dict(zip(self.subgroup_labels.tolist(), self.subgroup_counts.tolist(), strict=True))

    @property
    def n(self) -> int:
        """Number of values including missing ones."""
        return int(self.values.size)

    @property
    def n_valid(self) -> int:
        """Number of non-missing values."""
        return int(self.values.size - self.n_missing)

    @property
    def n_subgroups(self) -> int:
        return int(self.subgroup_labels.size)

    @property
    def label(self) -> str:
        """Name with unit, e.g. ``'Bore diameter [mm]'``."""
        return f"{self.name} [{self.unit}]" if self.unit else self.name

    def valid_values(self) -> np.ndarray:
        """The values without the missing ones (file order kept)."""
        return self.values[~np.isnan(self.values)]

    def check_subgroups(self, *, min_subgroups: int = 2, source: str | None = None) -> None:
        """Raise :class:`DataFileError` when fewer than `min_subgroups` subgroups hold values.

        Call this before a subgrouped analysis (X-bar/R, X-bar/S, within-subgroup sigma).
        """
        filled = int(np.count_nonzero(self.subgroup_counts))
        if filled < min_subgroups:
            raise DataFileError(
                f"'{self.name}' has values in {filled} subgroup(s), but at least "
                f"{min_subgroups} are needed for a subgrouped analysis. Add a subgroup column "
                "that groups the parts (e.g. one subgroup per production hour), give a subgroup "
                "size, or analyse the values as individuals.",
                file=source,
                column=self.name,
                value=filled,
            )

    def summary(self) -> dict:
        """Compact JSON-safe description (no values)."""
        valid = self.valid_values()
        sizes, counts = np.unique(self.subgroup_counts, return_counts=True)
        return {
            "name": self.name,
            "unit": self.unit,
            "n": self.n,
            "n_valid": self.n_valid,
            "n_missing": int(self.n_missing),
            "n_subgroups": self.n_subgroups,
            "subgroup_size_min": int(sizes[0]) if sizes.size else None,
            "subgroup_size_max": int(sizes[-1]) if sizes.size else None,
            "subgroup_size_counts": {
                str(s): int(k) for s, k in zip(sizes.tolist(), counts.tolist(), strict=True)
            },
            "min": _json_float(valid.min()) if valid.size else None,
            "max": _json_float(valid.max()) if valid.size else None,
            "mean": _json_float(valid.mean()) if valid.size else None,
            "is_integer": bool(self.is_integer),
            "first_row": int(self.rows[0]) if self.rows.size else None,
            "last_row": int(self.rows[-1]) if self.rows.size else None,
        }

    def to_dict(self) -> dict:
        """JSON-safe dict with every value (None for missing)."""
        out = self.summary()
        out["values"] = [None if math.isnan(v) else float(v) for v in self.values.tolist()]
        out["subgroups"] = [str(s) for s in self.subgroups.tolist()]
        out["rows"] = [int(r) for r in self.rows.tolist()]
        out["subgroup_sizes"] = {str(k): int(v) for k, v in self.subgroup_sizes.items()}
        if self.times is not None:
            out["times"] = [time_text(t) for t in self.times]
        if self.notes is not None:
            out["notes"] = [str(s) for s in self.notes.tolist()]
        return out


def time_text(t) -> str | None:
    if isinstance(t, np.datetime64):
        return None if np.isnat(t) else str(np.datetime_as_string(t, unit="s"))
    return None if t is None or t == "" else str(t)


@dataclass(frozen=True, eq=False)
class Measurements:
    """Everything read from one measurement file.

    Attributes
    ----------
    source : str
        File name (no directory).
    sha256 : str
        Hex digest of the raw file bytes.
    layout : {'wide', 'long'}
    subgroup_source : {'column', 'size', 'none'}
    characteristics : tuple of CharacteristicData
    warnings : tuple of str
        Things the engineer should look at (missing values, no spread, large subgroups...).
    notes : tuple of str
        What was detected (layout, separator, decimal sign, encoding, sheet, column roles).
    subgroup_column : str or None
    subgroup_size : int or None
    sheet, encoding, separator, decimal : str or None
        How the file was read (sheet for XLSX; encoding, separator and decimal sign for CSV).
    n_rows : int
        Data rows read (after the header, trailing empty rows not counted).
    """

    source: str
    sha256: str
    layout: str
    subgroup_source: str
    characteristics: tuple
    warnings: tuple = ()
    notes: tuple = ()
    subgroup_column: str | None = None
    subgroup_size: int | None = None
    sheet: str | None = None
    encoding: str | None = None
    separator: str | None = None
    decimal: str | None = None
    n_rows: int = 0

    @property
    def names(self) -> tuple[str, ...]:
        """Characteristic names in file order."""
        return tuple(c.name for c in self.characteristics)

    def __len__(self) -> int:
        return len(self.characteristics)

    def __iter__(self) -> Iterator[CharacteristicData]:
        return iter(self.characteristics)

    def get(self, name: str) -> CharacteristicData:
        """The characteristic called `name` (also matches ``'Name [unit]'`` or any case)."""
        for c in self.characteristics:
            if c.name == name or c.label == name:
                return c
        folded = str(name).strip().casefold()
        for c in self.characteristics:
            if c.name.casefold() == folded or c.label.casefold() == folded:
                return c
        raise DataFileError(
            f"there is no characteristic named '{name}'. The file has: "
            + ", ".join(f"'{n}'" for n in self.names)
            + ". Use one of these names exactly as written.",
            file=self.source,
            value=name,
        )

    def check_subgroups(self, *, min_subgroups: int = 2, name: str | None = None) -> None:
        """Raise :class:`DataFileError` if a characteristic (or `name` only) has too few
        subgroups for a subgrouped analysis."""
        chars = [self.get(name)] if name is not None else self.characteristics
        for c in chars:
            c.check_subgroups(min_subgroups=min_subgroups, source=self.source)

    def to_frame(self):
        """Tidy pandas frame: characteristic, subgroup, value, time, note, row."""
        import pandas as pd

        parts = []
        for c in self.characteristics:
            n = c.values.size
            parts.append(
                pd.DataFrame(
                    {
                        "characteristic": np.full(n, c.name, dtype=object),
                        "subgroup": c.subgroups.astype(object),
                        "value": c.values,
                        "time": c.times if c.times is not None else np.full(n, None, dtype=object),
                        "note": c.notes.astype(object)
                        if c.notes is not None
                        else np.full(n, None, dtype=object),
                        "row": c.rows,
                    }
                )
            )
        if not parts:
            return pd.DataFrame(
                columns=["characteristic", "subgroup", "value", "time", "note", "row"]
            )
        return pd.concat(parts, ignore_index=True)

    def summary(self) -> dict:
        """Compact JSON-safe description: how the file was read and each characteristic."""
        return {
            "source": self.source,
            "sha256": self.sha256,
            "layout": self.layout,
            "subgroup_source": self.subgroup_source,
            "subgroup_column": self.subgroup_column,
            "subgroup_size": self.subgroup_size,
            "sheet": self.sheet,
            "encoding": self.encoding,
            "separator": self.separator,
            "decimal": self.decimal,
            "n_rows": int(self.n_rows),
            "characteristics": [c.summary() for c in self.characteristics],
            "warnings": list(self.warnings),
            "notes": list(self.notes),
        }

    def to_dict(self) -> dict:
        """JSON-safe dict including every value of every characteristic."""
        out = self.summary()
        out["characteristics"] = [c.to_dict() for c in self.characteristics]
        return out
