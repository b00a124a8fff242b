"""Gauge-study tables: the long table of a crossed gauge R&R study (part, appraiser, trial,
value per row) and the readings of one reference part for a short gauge study.

Read by both ``studykit gauge`` and the workbook's gauge step (moved here from the command line
module so that the workbook need not import it).
"""

from __future__ import annotations

import math
from pathlib import Path

from studykit.errors import DataFileError

__all__ = ["read_frame", "read_gauge_table", "read_reference_readings"]


def read_frame(path, *, sheet: str | None, wanted: dict):
    """The table as text cells, with the spreadsheet row of each kept row; checks the columns."""
    import pandas as pd

    path = Path(path)
    if not path.exists():
        raise DataFileError(f"file '{path}' does not exist; check the path")
    try:
        if path.suffix.lower() in (".xlsx", ".xlsm"):
            frame = pd.read_excel(path, sheet_name=sheet or 0, dtype=object)
        else:
            # blank lines are kept (and dropped below) so that row numbers match the file
            frame = pd.read_csv(
                path,
                sep=_separator(path),
                engine="python",
                dtype=str,
                skipinitialspace=True,
                encoding="utf-8-sig",
                skip_blank_lines=False,
            )
    except (ValueError, OSError, UnicodeDecodeError) as exc:
        raise DataFileError(f"cannot read the table: {exc}", file=path) from None
    frame.columns = [str(c).strip() for c in frame.columns]
    for option, col in wanted.items():
        if col not in frame.columns:
            raise DataFileError(
                f"no column named '{col}' (given with {option}); the columns are: "
                + ", ".join(f"'{c}'" for c in frame.columns),
                file=path,
            )
    given = list(wanted.items())
    for k, (option, col) in enumerate(given):
        for other, col2 in given[k + 1 :]:
            if col == col2:
                raise DataFileError(
                    f"{option} and {other} both name column '{col}'; each role needs its own "
                    "column (parts, appraisers, trials and values)",
                    file=path,
                    column=col,
                )
    # spreadsheet row of each table row (header = row 1); wholly empty rows are left out
    file_rows = [int(i) + 2 for i in range(len(frame))]
    blank = frame.isna().all(axis=1).to_numpy()
    if blank.any():
        frame = frame[~blank]
        file_rows = [r for r, b in zip(file_rows, blank.tolist(), strict=True) if not b]
    return frame, file_rows


def _separator(path: Path):
    """None (let pandas sniff) unless the header has no separator at all: a one-column file.

    The sniffer would otherwise take a letter of the lone header as the separator.
    """
    try:
        with open(path, encoding="utf-8-sig", errors="replace") as fh:
            head = next((line for line in fh if line.strip()), "")
    except OSError:
        return None
    return None if any(c in head for c in ",;\t|") else ","


def _parse_values(frame, file_rows, path, value: str, missing_hint: str) -> list[float]:
    """The value column as floats; a bad cell raises naming file, row and column."""
    values = []
    first_sign: dict[str, int] = {}
    for i, raw in enumerate(frame[value].tolist()):
        text = "" if raw is None or (isinstance(raw, float) and math.isnan(raw)) else str(raw)
        text = text.strip()
        if isinstance(raw, str):
            for sign in (".", ","):
                if sign in text:
                    first_sign.setdefault(sign, file_rows[i])
            if len(first_sign) == 2:
                raise DataFileError(
                    f"'{text}' mixes the decimal signs '.' and ',' with the rest of the column "
                    f"(first '.' in row {first_sign['.']}, first ',' in row {first_sign[',']}); "
                    "use one decimal sign throughout and no thousands separators",
                    file=path,
                    row=file_rows[i],
                    column=value,
                )
        try:
            x = float(text.replace(",", ".")) if "," in text and "." not in text else float(text)
        except ValueError:
            x = math.nan
        if not math.isfinite(x):
            shown = f"'{text}'" if text else "an empty cell"
            raise DataFileError(
                f"{shown} is not a number; {missing_hint}",
                file=path,
                row=file_rows[i],
                column=value,
            )
        values.append(x)
    return values


def read_gauge_table(
    path,
    *,
    part: str,
    appraiser: str,
    value: str,
    trial: str | None = None,
    sheet: str | None = None,
) -> dict:
    """Read the long gauge table; returns ``{"values", "parts", "appraisers", "trials"}``.

    Raises DataFileError naming the file, column and spreadsheet row of each problem.
    """
    path = Path(path)
    wanted = {"--part": part, "--appraiser": appraiser, "--value": value}
    if trial:
        wanted["--trial"] = trial
    frame, file_rows = read_frame(path, sheet=sheet, wanted=wanted)
    values = _parse_values(
        frame,
        file_rows,
        path,
        value,
        "every row needs a measured value (delete the row of a missing measurement from every "
        "appraiser's cell, or re-measure)",
    )
    labels = {}
    for key, col in (("parts", part), ("appraisers", appraiser), ("trials", trial)):
        if col is None:
            labels[key] = None
            continue
        out = []
        for i, raw in enumerate(frame[col].tolist()):
            text = "" if raw is None or (isinstance(raw, float) and math.isnan(raw)) else str(raw)
            text = text.strip()
            if not text:
                raise DataFileError(
                    "empty label; every row needs one", file=path, row=file_rows[i], column=col
                )
            out.append(_natural(text))
        labels[key] = out
    return {"values": values, **labels}


def read_reference_readings(path, *, value: str, sheet: str | None = None) -> list[float]:
    """Read the readings of one reference part (one row per reading, in the order taken).

    Raises DataFileError naming the file, column and spreadsheet row of each problem.
    """
    path = Path(path)
    frame, file_rows = read_frame(path, sheet=sheet, wanted={"--value": value})
    return _parse_values(
        frame,
        file_rows,
        path,
        value,
        "every row needs a reading of the reference part (delete the row or re-measure)",
    )


def _natural(text: str):
    """Whole-number labels sort as numbers (part 10 after part 9); others stay text."""
    try:
        return int(text)
    except ValueError:
        return text
