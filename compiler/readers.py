"""Reading user tables (CSV or XLSX) into raw text frames, with locations.

This module and :mod:`compiler.settings` are the only places that open user
files. Every cell comes back as text exactly as given, with a ``_row`` column
holding the spreadsheet row number (the header is row 1), so validation can
say where each problem is. Nothing is coerced here.
"""

from __future__ import annotations

import csv
import io
import zipfile
from pathlib import Path

import pandas as pd

from .errors import Finding, InputError

ROW = "_row"
MAX_LISTED = 10  # rows listed per problem before "and N more"


def _error(message: str, file: str, **where) -> InputError:
    return InputError([Finding("error", "read", message, file=file, **where)])


def check_size(path: Path, max_mb: float) -> None:
    size = path.stat().st_size
    if size > max_mb * 1024 * 1024:
        raise _error(f"file is {size / 1024 / 1024:.1f} MiB, above the limit of {max_mb:g} MiB "
                     "(settings [limits] max_input_mb)", str(path))


def read_table(path: Path, sheet: str = "", max_mb: float = 512) -> tuple[pd.DataFrame, str, list[Finding]]:
    """Read ``path`` as text cells. Returns ``(frame, sheet_name, notes)``."""
    path = Path(path)
    check_size(path, max_mb)
    suffix = path.suffix.lower()
    if suffix in (".csv", ".txt", ".tsv"):
        frame, notes = _read_csv(path)
        return frame, "", notes
    if suffix in (".xlsx", ".xlsm"):
        return _read_xlsx(path, sheet)
    raise _error("unsupported file type", str(path), found=suffix or "(none)", expected=".csv or .xlsx")


def _read_csv(path: Path) -> tuple[pd.DataFrame, list[Finding]]:
    fname = str(path)
    data = path.read_bytes()
    if not data.strip():
        raise _error("the file is empty", fname, expected="a header row and at least one data row")
    if data[:4] == b"PK\x03\x04":
        raise _error("this is a workbook (zip) file with a .csv name", fname, expected="a CSV text file, or rename it .xlsx")
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise _error(f"not UTF-8 text (byte {exc.start})", fname,
                     expected="UTF-8 (with or without BOM); in a spreadsheet use 'CSV UTF-8' when saving") from None
    notes: list[Finding] = []
    first = text.splitlines()[0] if text.splitlines() else ""
    delimiter = ","
    if path.suffix.lower() == ".tsv" or ("\t" in first and "," not in first):
        delimiter = "\t"
    elif ";" in first and "," not in first:
        delimiter = ";"
        notes.append(Finding("info", "read", "semicolon-separated file: read with ';' between columns and ',' "
                             "accepted as decimal mark in number columns", file=fname))
    try:
        reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, strict=True)
        rows = list(reader)
    except csv.Error as exc:
        raise _error(f"not a readable CSV file: {exc}", fname) from None
    return _frame_from_rows(rows, fname, ""), notes


def _cell_text(value) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return str(value).upper()
    if isinstance(value, float):
        if value.is_integer():
            return str(int(value))
        return repr(value)
    if hasattr(value, "isoformat"):
        return value.isoformat()
    return str(value)


def _read_xlsx(path: Path, sheet: str) -> tuple[pd.DataFrame, str, list[Finding]]:
    import openpyxl  # openpyxl parses with defusedxml when it is installed (a dependency)

    fname = str(path)
    if not zipfile.is_zipfile(path):
        raise _error("not a readable XLSX workbook (it is not a zip archive: a CSV renamed .xlsx, an old .xls, "
                     "or a password-protected file)", fname, expected="an .xlsx workbook saved without a password")
    try:
        book = openpyxl.load_workbook(path, read_only=True, data_only=True)
    except Exception as exc:  # openpyxl raises many types for a broken archive
        raise _error(f"not a readable XLSX workbook ({type(exc).__name__})", fname,
                     expected="an .xlsx workbook saved without a password") from None
    notes: list[Finding] = []
    try:
        names = book.sheetnames
        if sheet:
            if sheet not in names:
                raise _error("sheet not found", fname, sheet=sheet, found=sheet, expected=" | ".join(names))
            chosen = sheet
        else:
            visible = [n for n in names if book[n].sheet_state == "visible"]
            if not visible:
                raise _error("the workbook has no visible sheet", fname)
            chosen = visible[0]
            if len(names) > 1:
                notes.append(Finding("info", "read", f"read sheet {chosen!r}; other sheets ignored "
                                     f"({', '.join(n for n in names if n != chosen)}); name one with activity_sheet",
                                     file=fname, sheet=chosen))
        ws = book[chosen]
        rows = [[_cell_text(v) for v in row] for row in ws.iter_rows(values_only=True)]
    finally:
        book.close()
    return _frame_from_rows(rows, fname, chosen), chosen, notes


def _frame_from_rows(rows: list[list[str]], fname: str, sheet: str) -> pd.DataFrame:
    # Drop fully empty trailing rows (spreadsheets keep formatted empty rows).
    while rows and not any(str(c).strip() for c in rows[-1]):
        rows.pop()
    if not rows:
        raise _error("the file is empty", fname, sheet=sheet, expected="a header row and at least one data row")
    header = [str(h) for h in rows[0]]
    while header and not header[-1].strip():
        header.pop()
    width = len(header)
    body = rows[1:]
    if not body:
        raise _error("the file has a header but no data rows", fname, sheet=sheet)
    problems = []
    for i, row in enumerate(body):
        extra = row[width:]
        if any(str(c).strip() for c in extra):
            problems.append(Finding("error", "read", "row has more cells than the header", file=fname, sheet=sheet,
                                    row=i + 2, found=str(len(row)), expected=f"{width} cells"))
            if len(problems) >= MAX_LISTED:
                break
    if problems:
        raise InputError(problems)
    padded = [(list(r) + [""] * width)[:width] for r in body]
    frame = pd.DataFrame(padded, columns=header, dtype=object)
    frame[ROW] = range(2, len(body) + 2)
    return frame
