"""Reading user tables (CSV or XLSX) into raw text frames, with locations.

This module and :mod:`compiler.settings` are the only places that open user
files. Every cell comes back as text exactly as given, with a ``_row`` column
holding the spreadsheet row number (the header is row 1), so validation can
say where each problem is. Nothing is coerced here.

What is refused before any cell is read, and why:

- a file above ``[limits] max_input_mb`` (for a workbook, also its unpacked size:
  an XLSX is a zip archive, and a small archive can unpack to gigabytes);
- text that is not UTF-8 (UTF-16 "Unicode text" exports, Latin-1 / Windows-1252):
  guessing an encoding can silently change names, so the message says how to export;
- a workbook whose XML declares a DOCTYPE or entities (no spreadsheet program writes
  one; entity expansion can exhaust memory), whatever the XML parser would do;
- password-protected workbooks and old ``.xls`` files (binary containers we do not read);
- merged cells (only the first cell of a merged range holds the value, the others
  would silently read as blank) and formulas without a saved value (the reader
  sees only saved values).
"""

from __future__ import annotations

import csv
import io
import re
import stat
import zipfile
from pathlib import Path

import pandas as pd

from .errors import MAX_LISTED, Finding, InputError  # noqa: F401 (MAX_LISTED: the checks import it from here)

ROW = "_row"
MAX_COLUMNS = 1000  # columns of an input table (the widest input format has 18)
MIB = 1024 * 1024
SNIFF_BYTES = 4096
ZIP_MAGIC = b"PK\x03\x04"
UTF8_BOM = b"\xef\xbb\xbf"
OLE_MAGIC = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"  # compound file: .xls, or an encrypted .xlsx
UTF8_EXPORT = ("UTF-8 text (with or without BOM): in a spreadsheet use 'Save as' > 'CSV UTF-8 (comma delimited)'; "
               "in a text editor save with the encoding UTF-8")
XML_PART_SUFFIXES = (".xml", ".rels", ".vml")
# No spreadsheet program declares a DTD in an Office Open XML part; a declaration is refused
# before openpyxl sees the file (in ASCII/UTF-8 and in UTF-16 either byte order).
_DTD_MARKS = tuple(m.encode(enc).lower() for m in ("<!DOCTYPE", "<!ENTITY")
                   for enc in ("ascii", "utf-16-le", "utf-16-be"))
_FORMULA_TAG = re.compile(rb"<(?:[A-Za-z_][\w.-]*:)?f[\s>/]")
_MERGE_REF = re.compile(rb"<(?:[A-Za-z_][\w.-]*:)?mergeCell\b[^>]*\bref=\"([A-Za-z]+\d+(?::[A-Za-z]+\d+)?)\"")
_CELL_REF = re.compile(r"([A-Za-z]+)(\d+)")
_FIRST_LINE = re.compile("[^\n\r\x0b\x0c\x1c\x1d\x1e\x85\u2028\u2029]*")  # str.splitlines' line ends


def printable(text) -> str:
    """``text`` with control and format characters escaped, so a message cannot drive the terminal."""
    return "".join(c if c.isprintable() else c.encode("unicode_escape").decode("ascii") for c in str(text))


class NoDataRows(InputError):
    """The file has a header and no data rows (an optional input may mean "none" by it)."""


def _error(message: str, file: str, kind: type[InputError] = InputError, **where) -> InputError:
    return kind([Finding("error", "read", message, file=file, **where)])


def check_size(path: Path, max_mb: float) -> None:
    """Refuse a file above the size limit, or one that is not a regular file, before reading it."""
    info = path.stat()
    if not stat.S_ISREG(info.st_mode):
        raise _error("not a regular file", str(path), expected="a CSV or XLSX file")
    size = info.st_size
    if size > max_mb * MIB:
        shown = f"{size:,} bytes" if size < MIB else f"{size / MIB:.1f} MiB"
        raise _error(f"file is {shown}, above the limit of {max_mb:g} MiB "
                     "(settings [limits] max_input_mb); it was not read", str(path))


def read_table(path: Path, sheet: str = "", max_mb: float = 512,
               columnar: bool = False) -> tuple[pd.DataFrame, str, list[Finding]]:
    """Read ``path`` as text cells. Returns ``(frame, sheet_name, notes)``.

    ``columnar``: a CSV file that the columnar reader can take as it is (see :func:`_columnar_frame`)
    comes back with ``str`` columns instead of ``object`` ones; the cells, column names, row numbers,
    notes and errors are the same as without it. Callers that convert every column with
    ``astype(str)`` (:func:`compiler.activity.validate_columns`) ask for it.
    """
    path = Path(path)
    check_size(path, max_mb)
    suffix = path.suffix.lower()
    if suffix in (".csv", ".txt", ".tsv"):
        frame, notes = read_shipped_csv(path, columnar)
        return frame, "", notes
    if suffix in (".xlsx", ".xlsm"):
        return _read_xlsx(path, sheet, max_mb)
    raise _error("unsupported file type", str(path), found=suffix or "(none)",
                 expected=".csv or .xlsx (save an .xls or .ods workbook as .xlsx)")


def _decode(data: bytes, fname: str) -> str:
    """UTF-8 text (a UTF-8 BOM is dropped); anything else is refused with how to export UTF-8."""
    head = data[:SNIFF_BYTES]
    # UTF-16/32 text of mostly Latin characters: a BOM, or a zero byte in every other position.
    if head.startswith((b"\xff\xfe", b"\xfe\xff")) or head.count(0) * 4 >= len(head):
        raise _error("the file is UTF-16 (a spreadsheet's 'Unicode text' export), not UTF-8 text", fname,
                     expected=UTF8_EXPORT)
    bom = len(UTF8_BOM) if data.startswith(UTF8_BOM) else 0
    try:
        return data[bom:].decode("utf-8")
    except UnicodeDecodeError as exc:
        start = bom + exc.start
        line = data[:start].count(b"\n") + 1
        raise _error(f"not UTF-8 text (byte {start}, on line {line}, is {data[start]:#04x}; the file is "
                     "probably Latin-1 or Windows-1252, an older 'CSV' export)", fname, expected=UTF8_EXPORT) from None


def read_shipped_csv(path: Path, columnar: bool = False) -> tuple[pd.DataFrame, list[Finding]]:
    fname = str(path)
    data = path.read_bytes()
    if not data or data.isspace():  # nothing but ASCII white space (as data.strip() would say, without a copy)
        raise _error("the file is empty", fname, expected="a header row and at least one data row")
    if data[:4] == ZIP_MAGIC:
        raise _error("this is a workbook (zip) file with a .csv name", fname, expected="a CSV text file, or rename it .xlsx")
    if data[:8] == OLE_MAGIC:
        raise _error("this is an Excel 97-2003 (.xls) or password-protected workbook with a .csv name", fname,
                     expected="a CSV text file: " + UTF8_EXPORT)
    text = _decode(data, fname)
    notes: list[Finding] = []
    first = _FIRST_LINE.match(text).group()  # text.splitlines()[0] (or ""), without splitting the whole file
    delimiter = ","
    if path.suffix.lower() == ".tsv" or ("\t" in first and "," not in first):
        delimiter = "\t"
    elif ";" in first and "," not in first:
        delimiter = ";"
        notes.append(Finding("info", "read", "semicolon-separated file: read with ';' between columns and ',' "
                             "accepted as decimal mark in number columns", file=fname, column="(column separator)",
                             found=";"))
    if columnar:
        frame = _columnar_frame(data, delimiter)
        if frame is not None:
            return frame, notes
    try:
        reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, strict=True)
        rows = list(reader)
    except csv.Error as exc:
        raise _error(f"not a readable CSV file: {exc}", fname) from None
    return _frame_from_rows(rows, fname, ""), notes


def _columnar_frame(data: bytes, delimiter: str) -> pd.DataFrame | None:
    """The frame :func:`_frame_from_rows` makes of ``csv.reader``'s rows, parsed by pyarrow's CSV reader
    with ``str`` columns; None when this file needs the row-by-row reader.

    Called with UTF-8 text already checked by :func:`_decode`. Taken only where the two readers agree
    cell for cell: no quote character in the file (so no quoted field, no delimiter or line break
    inside a cell, none of ``csv.reader``'s strict-mode errors), no NUL byte, the same number of cells
    in every row (pyarrow refuses a row with more or fewer, and the row-by-row reader pads short rows
    and names a long one), a header whose names are all given, distinct and not ``_row``, no cell
    above ``csv.field_size_limit()`` characters, and at least one data row after the blank rows at
    the end are dropped. Both split lines at ``\n``, ``\r`` and ``\r\n`` only, and an empty line is
    a row of blank cells in both. Without pyarrow installed every file takes the row-by-row reader.
    """
    if b'"' in data or b"\x00" in data:
        return None
    try:
        import pyarrow as pa
        import pyarrow.compute as pc
        import pyarrow.csv as pa_csv
    except ImportError:
        return None
    bom = len(UTF8_BOM) if data.startswith(UTF8_BOM) else 0
    end = data.find(b"\n")
    head = data[bom:end if end >= 0 else len(data)].split(b"\r")[0]
    width = head.count(delimiter.encode("ascii")) + 1
    if width > MAX_COLUMNS:
        return None
    names = [f"c{i}" for i in range(width)]
    try:
        table = pa_csv.read_csv(
            pa.py_buffer(data)[bom:],
            read_options=pa_csv.ReadOptions(column_names=names, block_size=16 * MIB),
            parse_options=pa_csv.ParseOptions(delimiter=delimiter, quote_char=False, double_quote=False,
                                              escape_char=False, newlines_in_values=False,
                                              ignore_empty_lines=False),
            convert_options=pa_csv.ConvertOptions(column_types={n: pa.string() for n in names}, null_values=[],
                                                  strings_can_be_null=False, quoted_strings_can_be_null=False))
    except (pa.ArrowException, ValueError, OSError):  # rows of different widths, among others: the row-by-row
        return None                                     # reader then says what is wrong, as it always did
    if table.num_rows < 2:
        return None
    limit = csv.field_size_limit()
    if any((pc.max(pc.utf8_length(column)).as_py() or 0) > limit for column in table.columns):
        return None
    header = [table.column(i)[0].as_py() for i in range(width)]
    if not header[-1].strip() or any(not h.strip() for h in header) or len(set(header)) < width:
        return None
    if ROW in (h.strip().lower() for h in header):
        return None
    rows = table.num_rows
    while rows > 1 and not any(table.column(i)[rows - 1].as_py().strip() for i in range(width)):
        rows -= 1  # blank rows at the end, as _frame_from_rows drops them
    if rows < 2:
        return None
    body = table.slice(1, rows - 1)
    frame = pd.DataFrame({n: body.column(n).to_pandas() for n in names})
    frame.columns = pd.Index(header)
    frame[ROW] = range(2, rows + 1)
    return frame


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


def _row_texts(values) -> list[str]:
    """Cell texts of one sheet row without its trailing empty cells (a far-right cell pads the row)."""
    end = len(values)
    while end and values[end - 1] is None:
        end -= 1
    return [_cell_text(v) for v in values[:end]]


def _looks_like_text(head: bytes) -> bool:
    head = head[len(UTF8_BOM):] if head.startswith(UTF8_BOM) else head
    try:
        text = head.decode("utf-8")
    except UnicodeDecodeError as exc:
        if exc.start < len(head) - 4:  # not merely a character cut at the end of the sample
            return False
        text = head[:exc.start].decode("utf-8")
    return bool(text.strip()) and all(c.isprintable() or c in "\t\r\n" for c in text)


def _ole_kind(path: Path) -> str:
    """'encrypted' for a password-protected Office file, else 'xls' (an Excel 97-2003 workbook)."""
    with path.open("rb") as handle:
        data = handle.read(4 * MIB)  # the directory of a small container; the stream names are in UTF-16
    return "encrypted" if "EncryptedPackage".encode("utf-16-le") in data else "xls"


def _has_dtd(archive: zipfile.ZipFile, info: zipfile.ZipInfo) -> bool:
    keep = max(len(m) for m in _DTD_MARKS)
    tail = b""
    with archive.open(info) as part:
        while chunk := part.read(MIB):
            window = (tail + chunk).lower()
            if any(m in window for m in _DTD_MARKS):
                return True
            tail = window[-keep:]
    return False


def _parsed_as_xml(archive: zipfile.ZipFile, info: zipfile.ZipInfo) -> bool:
    """Whether a part could be read as XML: by its name, or by its first bytes, whatever its name.

    A workbook's relationships can point a reader at a part of any name, so a name ending in .bin or
    nothing is no guarantee. An XML document starts, after a byte-order mark and white space, with
    ``<`` (in UTF-8 or UTF-16 either byte order); images and binary parts do not.
    """
    if info.filename.lower().endswith(XML_PART_SUFFIXES):
        return True
    with archive.open(info) as part:
        head = part.read(256)
    for bom in (UTF8_BOM, b"\xff\xfe", b"\xfe\xff"):
        if head.startswith(bom):
            head = head[len(bom):]
            break
    return head.lstrip(b" \t\r\n\x00").startswith(b"<")


def _check_archive(archive: zipfile.ZipFile, fname: str, max_mb: float) -> None:
    infos = archive.infolist()
    unpacked = sum(i.file_size for i in infos)
    if unpacked > max_mb * MIB:
        raise _error(f"the workbook unpacks to {unpacked / MIB:.1f} MiB, above the limit of {max_mb:g} MiB "
                     "(settings [limits] max_input_mb); it was not read", fname)
    if any(i.flag_bits & 0x1 for i in infos):
        raise _error("the workbook's parts are encrypted", fname, expected="an .xlsx workbook saved without a password")
    for info in infos:
        if _parsed_as_xml(archive, info) and _has_dtd(archive, info):
            raise _error(f"the workbook part {printable(info.filename)} declares a DOCTYPE or XML entities; "
                         "refused unread (spreadsheet programs never write one; entity expansion can exhaust memory)",
                         fname,
                         expected="an .xlsx workbook saved by a spreadsheet program")


def _read_xlsx(path: Path, sheet: str, max_mb: float = 512) -> tuple[pd.DataFrame, str, list[Finding]]:
    fname = str(path)
    with path.open("rb") as handle:
        head = handle.read(SNIFF_BYTES)
    if head[:8] == OLE_MAGIC:
        if _ole_kind(path) == "encrypted":
            raise _error("the workbook is password-protected (encrypted); it cannot be read", fname,
                         expected="the workbook saved again without a password (File > Info > Protect Workbook > "
                                  "Encrypt with Password: clear the password)")
        raise _error("this is an Excel 97-2003 workbook (.xls) with an .xlsx name", fname,
                     expected="the workbook saved as 'Excel Workbook (.xlsx)'")
    if not zipfile.is_zipfile(path):
        if _looks_like_text(head):
            raise _error("not a readable XLSX workbook: this is a text (CSV) file with an .xlsx name", fname,
                         expected="the file renamed .csv, or the data saved from a spreadsheet as .xlsx")
        raise _error("not a readable XLSX workbook (it is not a zip archive)", fname,
                     expected="an .xlsx workbook saved without a password")
    try:
        with zipfile.ZipFile(path) as archive:
            _check_archive(archive, fname, max_mb)
            return _read_book(path, archive, sheet)
    except InputError:
        raise
    except Exception as exc:  # openpyxl and zipfile raise many types for a broken archive
        raise _error(f"not a readable XLSX workbook ({type(exc).__name__}: {printable(str(exc)[:120])})", fname,
                     expected="an .xlsx workbook saved without a password") from None


def _read_book(path: Path, archive: zipfile.ZipFile, sheet: str) -> tuple[pd.DataFrame, str, list[Finding]]:
    import openpyxl  # after _check_archive: no DTD reaches the XML parser, whatever openpyxl's configuration

    fname = str(path)
    book = openpyxl.load_workbook(path, read_only=True, data_only=True)
    notes: list[Finding] = []
    try:
        names = book.sheetnames
        shown = {n: printable(n) for n in names}
        tables = [n for n in names if hasattr(book[n], "iter_rows")]  # chart sheets hold no cells
        if sheet:
            if sheet not in names:
                raise _error("sheet not found", fname, sheet=printable(sheet), found=sheet,
                             expected=" | ".join(shown[n] for n in tables))
            if sheet not in tables:
                raise _error("this sheet is a chart, not a table", fname, sheet=shown[sheet],
                             expected=" | ".join(shown[n] for n in tables))
            chosen = sheet
            if book[sheet].sheet_state != "visible":
                notes.append(Finding("info", "read", f"sheet {shown[sheet]!r} is hidden; read because the settings "
                                     "name it", file=fname, sheet=shown[sheet]))
        else:
            visible = [n for n in tables if book[n].sheet_state == "visible"]
            if not visible:
                raise _error("the workbook has no visible sheet with cells", fname,
                             expected="a visible sheet, or name one with activity_sheet")
            chosen = visible[0]
            if len(names) > 1:
                hidden = [n for n in names if book[n].sheet_state != "visible"]
                notes.append(Finding("info", "read", f"read sheet {shown[chosen]!r}, the first visible one; other "
                                     f"sheets ignored ({', '.join(shown[n] for n in names if n != chosen)})"
                                     + (f"; hidden: {', '.join(shown[n] for n in hidden)}" if hidden else "")
                                     + "; name one with activity_sheet", file=fname, sheet=shown[chosen]))
        ws = book[chosen]
        xml = archive.read(ws._worksheet_path.lstrip("/"))
        ws.reset_dimensions()  # a declared dimension of A1:XFD1048576 would pad every row and column
        rows = [_row_texts(row) for row in ws.iter_rows(values_only=True)]
        blank_formulas = _blank_formulas(path, chosen, rows) if _FORMULA_TAG.search(xml) else []
    finally:
        book.close()
    frame = _frame_from_rows(rows, fname, shown[chosen])
    header = [c for c in frame.columns if c != ROW]
    problems = []
    for ref in _MERGE_REF.findall(xml)[:MAX_LISTED]:
        ref = ref.decode("ascii")
        col, row = _position(ref.split(":")[0])
        problems.append(Finding("error", "read", f"merged cells {ref}: only the first cell of a merged range holds "
                                "the value, the others read as blank", file=fname, sheet=shown[chosen], row=row,
                                column=printable(header[col]) if col < len(header) else ref.split(":")[0],
                                expected="no merged cells: unmerge them and fill every cell"))
    for row, col, ref in blank_formulas[:MAX_LISTED]:
        problems.append(Finding("error", "read", f"cell {ref} holds a formula without a saved value (the file was "
                                "written by a program that does not calculate)", file=fname, sheet=shown[chosen],
                                row=row,
                                column=printable(header[col]) if col < len(header) else ref,
                                expected="values: open and save the workbook in a spreadsheet program, or paste the "
                                         "cells as values"))
    if len(blank_formulas) > MAX_LISTED:
        problems.append(Finding("error", "read", f"{len(blank_formulas) - MAX_LISTED} more formulas without a saved "
                                "value not listed", file=fname, sheet=shown[chosen]))
    if problems:
        raise InputError(problems)
    return frame, shown[chosen], notes


def _position(ref: str) -> tuple[int, int]:
    """(0-based column index, 1-based row) of a cell reference such as ``B7``."""
    letters, digits = _CELL_REF.fullmatch(ref).groups()
    index = 0
    for letter in letters.upper():
        index = index * 26 + ord(letter) - ord("A") + 1
    return index - 1, int(digits)


def _blank_formulas(path: Path, sheet: str, rows: list[list[str]]) -> list[tuple[int, int, str]]:
    """Cells that hold a formula but no saved value: openpyxl's saved-value view shows them as blank."""
    import openpyxl

    book = openpyxl.load_workbook(path, read_only=True, data_only=False)
    found = []
    try:
        ws = book[sheet]
        ws.reset_dimensions()
        for r, cells in enumerate(ws.iter_rows(), start=1):
            for cell in cells:
                if getattr(cell, "data_type", "") != "f":
                    continue
                c = cell.column - 1
                saved = rows[r - 1][c] if r - 1 < len(rows) and c < len(rows[r - 1]) else ""
                if saved == "":
                    found.append((r, c, cell.coordinate))
    finally:
        book.close()
    return found


def _frame_from_rows(rows: list[list[str]], fname: str, sheet: str) -> pd.DataFrame:
    # Drop fully empty trailing rows (spreadsheets keep formatted empty rows).
    while rows and not any(str(c).strip() for c in rows[-1]):
        rows.pop()
    if not rows:
        raise _error("the sheet is empty" if sheet else "the file is empty", fname, sheet=sheet,
                     expected="a header row and at least one data row")
    header = [str(h) for h in rows[0]]
    while header and not header[-1].strip():
        header.pop()
    if not header:
        raise _error("the header row (row 1) is blank", fname, sheet=sheet, row=1, expected="column names in row 1")
    if len(header) > MAX_COLUMNS:
        raise _error(f"the header row has {len(header):,} columns, above the limit of {MAX_COLUMNS:,}", fname,
                     sheet=sheet, row=1, expected=f"at most {MAX_COLUMNS:,} columns (the input tables use about 15; "
                                                  "move other data to another file)")
    if ROW in (h.strip().lower() for h in header):
        raise _error(f"the column name {ROW} is reserved", fname, sheet=sheet, row=1, column=ROW,
                     expected="another column name")
    width = len(header)
    body = rows[1:]
    if not body:
        raise _error("the file has a header but no data rows", fname, NoDataRows, sheet=sheet)
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
