"""Hostile and malformed inputs through the command line.

Every case of :data:`CASES` builds an inventory (a small one from ``conftest.write_inventory``
or a copy of the invented demo region), spoils one input, runs ``histosol compile`` in-process
and checks the promises of the README: exit code 2, a message naming file, sheet, row and
column with what was expected (asserted as an exact substring), no traceback, no output folder
created, a previous output folder left byte-identical, and the input files unchanged (SHA-256).

:data:`ACCEPTED` lists the look-alikes that are read on purpose (a UTF-8 BOM, semicolons with
decimal commas, tabs, ``2020.0`` as a year, a hidden first sheet, a formula with its saved
value): each must give the same emissions as the plain comma-separated file.

The last tests cover entity expansion whatever openpyxl's configuration, Monte Carlo results
repeated for a given seed, inputs never modified, and an output folder that survives a
compile killed half-way. All data are invented.
"""

from __future__ import annotations

import hashlib
import io
import os
import shutil
import signal
import subprocess
import sys
import time
import zipfile
from pathlib import Path

import openpyxl
import pandas as pd
import pytest

from compiler.cli import main
from conftest import ACTIVITY_HEADER, DEMO, write_inventory, stratum

FAST = ["--no-report", "--iterations", "100", "--quiet"]
HEADER = ",".join(ACTIVITY_HEADER)
ROW = "2020,Testvale,temperate,cropland,drained,,,,1.5"


# ---------------------------------------------------------------- builders of spoilt inputs

def csv_text(*rows: str, header: str = HEADER) -> str:
    return "\n".join([header, *rows]) + "\n"


def small(folder: Path, text: str | None = None, data: bytes | None = None, name: str = "activity.csv",
          settings_extra: str = "", extra_inputs: dict | None = None) -> Path:
    """The one-stratum test inventory with its activity file replaced by ``text`` or ``data``."""
    settings = write_inventory(folder, [stratum(area_ha=1.5)], extra_inputs=extra_inputs)
    if text is not None or data is not None:
        (folder / "activity.csv").unlink()
        (folder / name).write_bytes(data if data is not None else text.encode("utf-8"))
        if name != "activity.csv":
            settings.write_text(settings.read_text().replace('"activity.csv"', f'"{name}"'), encoding="utf-8")
    if settings_extra:
        settings.write_text(settings.read_text() + settings_extra, encoding="utf-8")
    return settings


def edit_settings(folder: Path, old: str, new: str, **kw) -> Path:
    settings = small(folder, **kw)
    text = settings.read_text()
    assert old in text
    settings.write_text(text.replace(old, new), encoding="utf-8")
    return settings


def demo(folder: Path, file: str, old: str, new: str, count: int = 1) -> Path:
    """A copy of the demo with one replacement in one input file."""
    shutil.copytree(DEMO, folder)
    path = folder / file
    text = path.read_text(encoding="utf-8")
    assert text.count(old) >= count, (file, old)
    path.write_text(text.replace(old, new, count), encoding="utf-8", newline="")
    return folder / "inventory.toml"


def demo_append(folder: Path, file: str, line: str) -> Path:
    shutil.copytree(DEMO, folder)
    with (folder / file).open("a", encoding="utf-8", newline="") as handle:
        handle.write(line + "\n")
    return folder / "inventory.toml"


def workbook(rows=None, edit=None, title: str = "activity") -> bytes:
    """An XLSX workbook (openpyxl, normal mode) with the activity header and ``rows``."""
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = title
    sheet.append(ACTIVITY_HEADER)
    for row in rows if rows is not None else [[2020, "Testvale", "temperate", "cropland", "drained", None, None,
                                                None, 1.5]]:
        sheet.append(row)
    if edit:
        edit(book)
    buffer = io.BytesIO()
    book.save(buffer)
    return buffer.getvalue()


def rezip(data: bytes, part: str, edit) -> bytes:
    """The archive ``data`` with ``edit(bytes) -> bytes`` applied to one part."""
    source = zipfile.ZipFile(io.BytesIO(data))
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_DEFLATED) as target:
        for info in source.infolist():
            content = source.read(info.filename)
            target.writestr(info.filename, edit(content) if info.filename == part else content)
    return buffer.getvalue()


SHEET = "xl/worksheets/sheet1.xml"
LAUGHS = (b'<?xml version="1.0"?><!DOCTYPE lolz [<!ENTITY lol "lol">'
          + b"".join(b'<!ENTITY lol%d "%s">' % (i, (b"&lol%s;" % (b"" if i == 1 else b"%d" % (i - 1))) * 10)
                     for i in range(1, 10))
          + b"]>")


def billion_laughs(data: bytes) -> bytes:
    """A billion-laughs DOCTYPE in front of the sheet XML and the entity used in a cell (about 3 GB expanded)."""
    def edit(xml: bytes) -> bytes:
        body = xml.split(b"?>", 1)[1] if xml.startswith(b"<?xml") else xml
        return LAUGHS + body.replace(b"<t>Testvale</t>", b"<t>&lol9;</t>", 1)
    return rezip(data, SHEET, edit)


def formula_without_value(book) -> None:
    book.active["I2"] = "=1+0.5"  # openpyxl writes the formula and no saved value


def formula_with_value(data: bytes) -> bytes:
    return rezip(data, SHEET, lambda xml: xml.replace(b"<f>1+0.5</f><v></v>", b"<f>1+0.5</f><v>1.5</v>"))


def merged(book) -> None:
    sheet = book.active
    sheet.append([2020, "Testvale", "temperate", "grassland", "drained", "poor", None, None, 2.0])
    sheet.merge_cells("B2:B3")


def hidden_first(book) -> None:
    junk = book.active
    junk.title = "notes"
    junk.sheet_state = "hidden"
    data = book.create_sheet("activity")
    data.append(ACTIVITY_HEADER)
    data.append([2020, "Testvale", "temperate", "cropland", "drained", None, None, None, 1.5])


def only_hidden(data: bytes) -> bytes:
    """Every sheet hidden (openpyxl refuses to save that, a crafted or damaged file can hold it)."""
    return rezip(data, "xl/workbook.xml", lambda xml: xml.replace(b'state="visible"', b'state="hidden"'))


def empty_first(book) -> None:
    book.remove(book.active)
    book.create_sheet("blank")


def compound_file(*streams: str) -> bytes:
    """A minimal compound file (the OLE container of .xls files and of encrypted Office packages).

    Header, one FAT sector and one directory sector naming ``streams`` (all empty): enough for a
    reader to recognise the container, which is all the compiler does with it.
    """
    free, end, fat = 0xFFFFFFFF, 0xFFFFFFFE, 0xFFFFFFFD
    header = bytearray(512)
    header[0:8] = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"
    header[24:34] = (0x3E).to_bytes(2, "little") + (3).to_bytes(2, "little") + b"\xfe\xff" + \
        (9).to_bytes(2, "little") + (6).to_bytes(2, "little")
    header[44:48] = (1).to_bytes(4, "little")        # one FAT sector
    header[48:52] = (1).to_bytes(4, "little")        # directory starts at sector 1
    header[56:60] = (4096).to_bytes(4, "little")     # mini stream cutoff
    header[60:64] = end.to_bytes(4, "little")        # no mini FAT
    header[68:72] = end.to_bytes(4, "little")        # no DIFAT sectors
    header[76:80] = (0).to_bytes(4, "little")        # the FAT is sector 0
    header[80:512] = free.to_bytes(4, "little") * 108
    fat_sector = fat.to_bytes(4, "little") + end.to_bytes(4, "little") + free.to_bytes(4, "little") * 126
    entries = b""
    for index, name in enumerate(["Root Entry", *streams]):
        entry = bytearray(128)
        encoded = name.encode("utf-16-le") + b"\0\0"
        entry[0:len(encoded)] = encoded
        entry[64:66] = len(encoded).to_bytes(2, "little")
        entry[66] = 5 if index == 0 else 2  # root storage, then streams
        entry[68:80] = free.to_bytes(4, "little") * 3
        entry[76:80] = (1 if index == 0 and streams else free).to_bytes(4, "little")  # root's child
        if 0 < index < len(streams):
            entry[72:76] = (index + 1).to_bytes(4, "little")  # right sibling
        entry[116:120] = end.to_bytes(4, "little")
        entries += bytes(entry)
    directory = entries.ljust(512, b"\0")
    return bytes(header) + fat_sector + directory


def rewrite_settings(settings: Path, edit) -> Path:
    settings.write_bytes(edit(settings.read_bytes()))
    return settings


def zip_with_csv_name(folder: Path) -> Path:
    return small(folder, data=workbook())


def symlink_outside(folder: Path) -> Path:
    settings = small(folder)
    outside = folder.parent / "elsewhere.csv"
    (folder / "activity.csv").rename(outside)
    os.symlink(outside, folder / "activity.csv")
    return settings


def oversized(folder: Path) -> Path:
    # 2 KiB of Latin-1 text: had it been read, the message would be about the encoding.
    data = csv_text(*[ROW.replace("Testvale", "Testvalé")] * 40).encode("latin-1")
    return small(folder, data=data, settings_extra="[limits]\nmax_input_mb = 0.001\n")


def big_unpacked(folder: Path) -> Path:
    """A workbook of a few KiB that unpacks to about 130 KiB (long, repetitive note cells)."""
    def note(book):
        for row in range(1, 5):
            book.create_sheet("notes")[f"A{row}"] = "x" * 30_000  # a cell holds at most 32,767 characters
    data = workbook(edit=note)
    assert len(data) < 0.05 * 1024 * 1024
    return small(folder, data=data, name="activity.xlsx", settings_extra="[limits]\nmax_input_mb = 0.05\n")


# (case id, build(folder) -> settings path, expected text in the message)
CASES = [
    # text files: encodings and structure
    ("empty file", lambda f: small(f, data=b""),
     "activity.csv: the file is empty; expected a header row and at least one data row"),
    ("blank lines only", lambda f: small(f, data=b"\n \n\r\n"), "activity.csv: the file is empty"),
    ("header only", lambda f: small(f, text=HEADER + "\n"), "activity.csv: the file has a header but no data rows"),
    ("UTF-16 with BOM", lambda f: small(f, data=csv_text(ROW).encode("utf-16")),
     "activity.csv: the file is UTF-16 (a spreadsheet's 'Unicode text' export), not UTF-8 text; expected UTF-8 text "
     "(with or without BOM): in a spreadsheet use 'Save as' > 'CSV UTF-8 (comma delimited)'"),
    ("UTF-16 without BOM", lambda f: small(f, data=csv_text(ROW).encode("utf-16-le")),
     "activity.csv: the file is UTF-16 (a spreadsheet's 'Unicode text' export), not UTF-8 text"),
    ("latin-1", lambda f: small(f, data=csv_text(ROW.replace("Testvale", "Testvalé")).encode("latin-1")),
     "activity.csv: not UTF-8 text (byte 105, on line 2, is 0xe9; the file is probably Latin-1 or Windows-1252, an "
     "older 'CSV' export); expected UTF-8 text (with or without BOM): in a spreadsheet use 'Save as' > 'CSV UTF-8"),
    ("workbook named .csv", zip_with_csv_name,
     "activity.csv: this is a workbook (zip) file with a .csv name; expected a CSV text file, or rename it .xlsx"),
    ("old .xls named .csv", lambda f: small(f, data=compound_file("Workbook")),
     "activity.csv: this is an Excel 97-2003 (.xls) or password-protected workbook with a .csv name"),
    ("unclosed quote", lambda f: small(f, text=csv_text('2020,"Testvale,temperate,cropland,drained,,,,1.5')),
     "activity.csv: not a readable CSV file: unexpected end of data"),
    ("more cells than header", lambda f: small(f, text=csv_text(ROW + ",7")),
     "activity.csv, row 2: row has more cells than the header; found '10'; expected 9 cells"),
    ("column twice", lambda f: small(f, text=csv_text(ROW + ",2", header=HEADER + ",Area")),
     "activity.csv, column area_ha: column appears more than once; found 'area_ha, Area'; expected each column once"),
    ("reserved column name", lambda f: small(f, text=csv_text(ROW + ",x", header=HEADER + ",_row")),
     "activity.csv, row 1, column _row: the column name _row is reserved"),
    # numbers
    ("thousands comma", lambda f: small(f, text=csv_text(ROW.replace("1.5", '"1,234"'))),
     "activity.csv, row 2, column area_ha: area_ha is not a number; found '1,234'; expected a number with '.' as "
     "decimal mark and no thousands separator (remove the separators: 1234.5 not 1,234.5 or 1 234.5)"),
    ("thousands space", lambda f: small(f, text=csv_text(ROW.replace("1.5", "1 234"))),
     "activity.csv, row 2, column area_ha: area_ha is not a number; found '1 234'; expected a number with '.' as "
     "decimal mark and no thousands separator (remove the separators"),
    ("semicolon, thousands dot", lambda f: small(f, text=csv_text(ROW.replace(",", ";").replace("1.5", "1.234"),
                                                                   header=HEADER.replace(",", ";"))),
     "activity.csv, row 2, column area_ha: area_ha is not a number; found '1.234'; expected a number with ',' or '.' "
     "as decimal mark and no thousands separator (remove the separators: 1234,5 not 1.234,5 or 1 234,5)"),
    ("semicolon, both separators", lambda f: small(f, text=csv_text(ROW.replace(",", ";").replace("1.5", "1.234,5"),
                                                                     header=HEADER.replace(",", ";"))),
     "activity.csv, row 2, column area_ha: area_ha is not a number; found '1.234,5'"),
    ("NaN", lambda f: small(f, text=csv_text(ROW.replace("1.5", "NaN"))),
     "activity.csv, row 2, column area_ha: area_ha is not a number; found 'NaN'; expected a number; a missing-value "
     "marker such as NaN or NA is not accepted"),
    ("inf", lambda f: small(f, text=csv_text(ROW.replace("1.5", "inf"))),
     "activity.csv, row 2, column area_ha: area_ha is not finite; found 'inf'; expected a finite number"),
    ("-inf", lambda f: small(f, text=csv_text(ROW.replace("1.5", "-inf"))),
     "activity.csv, row 2, column area_ha: area_ha is not finite; found '-inf'"),
    ("negative area", lambda f: small(f, text=csv_text(ROW.replace("1.5", "-0.5"))),
     "activity.csv, row 2, column area_ha: area_ha is negative; found '-0.5'; expected >= 0"),
    ("huge area", lambda f: small(f, text=csv_text(ROW.replace("1.5", "1e300"))),
     "activity.csv, row 2, column area_ha: area_ha is above 1e9 ha; found '1e300'; expected at most 1,000,000,000 ha"),
    ("blank area", lambda f: small(f, text=csv_text(ROW.replace("1.5", ""))),
     "activity.csv, row 2, column area_ha: area_ha is blank; expected a number"),
    ("huge burned area", lambda f: demo(f, "fires.csv", "wildfire,120.0", "wildfire,2e9"),
     "fires.csv, row 2, column burned_ha: burned_ha is above 1e9 ha; found '2e9'"),
    ("override fraction below 0", lambda f: demo_append(
        f, "overrides.csv", "neg-ditch,frac_ditch,temperate,grassland,drained,,,,-0.1,fraction,,,Tier 2,"
                            "Invented note for a test,,,,"),
     "overrides.csv, row 3, column value: value out of range for frac_ditch; found '-0.1'; expected 0 to 1"),
    # years
    ("year 2020.5", lambda f: small(f, text=csv_text(ROW.replace("2020", "2020.5"))),
     "activity.csv, row 2, column year: year is not a whole year; found '2020.5'; expected a whole year such as 2020"),
    ("year as word", lambda f: small(f, text=csv_text(ROW.replace("2020", "twenty"))),
     "activity.csv, row 2, column year: year is not a number; found 'twenty'; expected a whole year such as 2020"),
    ("year out of range", lambda f: small(f, text=csv_text(ROW.replace("2020", "2021"))),
     "activity.csv, row 2, column year: year outside the inventory years; found '2021'; expected 2020 to 2020 "
     "(settings [inventory])"),
    ("year 1e20", lambda f: small(f, text=csv_text(ROW.replace("2020", "1e20"))),
     "activity.csv, row 2, column year: year outside the inventory years; found '1e20'"),
    ("override first_year 1800", lambda f: demo(f, "overrides.csv", ",2005,2024,", ",1800,2024,"),
     "overrides.csv, row 2, column first_year: first_year outside 1900 to 2200; found '1800'; expected 1900 to 2200"),
    ("review log year 1e20", lambda f: demo(f, "review_log.csv", "R-2021-03,2021,", "R-2021-03,1e20,"),
     "review_log.csv, row 2, column year_raised: year_raised outside 1900 to 2200; found '1e20'"),
    # driver series for gap filling
    ("series value as word", lambda f: demo(f, "surrogates.csv", "overlap,1990,1613,", "overlap,1990,lots,"),
     "surrogates.csv, row 2, column value: value is not a number; found 'lots'"),
    ("series method unknown", lambda f: demo(f, "surrogates.csv", "overlap,1990,", "splice,1990,"),
     "surrogates.csv, row 2, column method: unknown method; found 'splice'; expected overlap | surrogate"),
    ("series year twice", lambda f: demo(f, "surrogates.csv", "overlap,1991,", "overlap,1990,"),
     "surrogates.csv, row 2, column year: series_id and year given twice; found '1990'"),
    ("series region changes", lambda f: demo(f, "surrogates.csv", "(invented)\",Skarrowdale,cropland",
                                             "(invented)\",Vennmarsh,cropland"),
     "surrogates.csv, row 2, column region: region differs between rows of the same series_id; found 'Vennmarsh'"),
    ("series missing column", lambda f: demo(f, "surrogates.csv", "series_id,method,", "series,method,"),
     "surrogates.csv, column series_id: required column missing; found 'series, method, year, value, unit, source, "
     "region, land_use'; expected columns series_id, method, year, value, unit, source"),
    # duplicated and conflicting rows
    ("duplicated row", lambda f: small(f, text=csv_text(ROW, ROW)),
     "activity.csv, row 2, column year: the same year, region and stratum appear in more than one row; found "
     "'area_ha 1.5, also in row 3'; expected one row per year, region and stratum: these rows are copies, delete the "
     "repeats"),
    ("conflicting rows", lambda f: small(f, text=csv_text(ROW, ROW.replace("1.5", "2.5"))),
     "activity.csv, row 3, column year: the same year, region and stratum appear in more than one row; found "
     "'area_ha 2.5, also in row 2'; expected one row per year, region and stratum: the areas conflict"),
    # vocabulary
    ("unknown land use", lambda f: small(f, text=csv_text(ROW.replace("cropland", "peatbog"))),
     "activity.csv, row 2, column land_use: unknown land_use; found 'peatbog'; expected forest_land | cropland | "
     "grassland | wetlands | settlements | other_land"),
    ("misspelt climate zone", lambda f: small(f, text=csv_text(ROW.replace("temperate", "temprate"))),
     "activity.csv, row 2, column climate_zone: unknown climate_zone; found 'temprate'; expected boreal | temperate | "
     "tropical (closest: temperate)"),
    ("misspelt fire soil status", lambda f: demo(f, "fires.csv", "forest_land,drained,wildfire,120.0",
                                                 "forest_land,drianed,wildfire,120.0"),
     "fires.csv, row 2, column soil_status: unknown soil_status; found 'drianed'; expected drained | rewetted "
     "(closest: drained)"),
    ("unknown override quantity", lambda f: demo(f, "overrides.csv", ",ef_co2_c_onsite,", ",ef_co2_onsite,"),
     "overrides.csv, row 2, column quantity: unknown quantity; found 'ef_co2_onsite'"),
    # text
    ("region of 10,000 characters", lambda f: small(f, text=csv_text(ROW.replace("Testvale", "x" * 10_000))),
     "activity.csv, row 2, column region: region is longer than 200 characters; found 'xxxxxxxxxxxxxxxxxxxxxxxxxxxxxx"
     "xxxxxxxxxxxxxxxxxxxxxxxxxxxxxx... (10,000 characters)'; expected at most 200 characters"),
    ("bell in region", lambda f: small(f, text=csv_text(ROW.replace("Testvale", "Test\avale"))),
     "activity.csv, row 2, column region: region holds control characters; found 'Test\\x07vale'; expected printable "
     "text on one line"),
    ("line break in region", lambda f: small(f, text=csv_text(ROW.replace("Testvale", '"Test\nvale"'))),
     "activity.csv, row 2, column region: region holds control characters; found 'Test\\nvale'"),
    ("bidi override in region", lambda f: small(f, text=csv_text(ROW.replace("Testvale", "Test\u202evale"))),
     "activity.csv, row 2, column region: region holds control characters; found 'Test\\u202evale'"),
    ("terminal escape in land use", lambda f: small(f, text=csv_text(ROW.replace("cropland", "crop\x1b[2Jland"))),
     "activity.csv, row 2, column land_use: unknown land_use; found 'crop\\x1b[2Jland'"),
    # workbooks
    ("merged cells", lambda f: small(f, data=workbook(edit=merged), name="activity.xlsx"),
     "activity.xlsx, sheet activity, row 2, column region: merged cells B2:B3: only the first cell of a merged range "
     "holds the value, the others read as blank; expected no merged cells: unmerge them and fill every cell"),
    ("formula without saved value", lambda f: small(f, data=workbook(edit=formula_without_value), name="activity.xlsx"),
     "activity.xlsx, sheet activity, row 2, column area_ha: cell I2 holds a formula without a saved value (the file "
     "was written by a program that does not calculate); expected values: open and save the workbook in a "
     "spreadsheet program, or paste the cells as values"),
    ("empty first sheet", lambda f: small(f, data=workbook(edit=empty_first), name="activity.xlsx"),
     "activity.xlsx, sheet blank: the sheet is empty; expected a header row and at least one data row"),
    ("only hidden sheets", lambda f: small(f, data=only_hidden(workbook()), name="activity.xlsx"),
     "activity.xlsx: the workbook has no visible sheet with cells"),
    ("named sheet missing", lambda f: small(f, data=workbook(), name="activity.xlsx",
                                            extra_inputs={"activity_sheet": "Sheet9"}),
     "activity.xlsx, sheet Sheet9: sheet not found; found 'Sheet9'; expected activity"),
    ("date in year column", lambda f: small(f, data=workbook(rows=[[pd.Timestamp("2020-01-01").to_pydatetime(),
                                                                    "Testvale", "temperate", "cropland", "drained",
                                                                    None, None, None, 1.5]]), name="activity.xlsx"),
     "activity.xlsx, sheet activity, row 2, column year: year is not a number; found '2020-01-01T00:00:00'"),
    ("password-protected workbook", lambda f: small(f, data=compound_file("EncryptionInfo", "EncryptedPackage"),
                                                    name="activity.xlsx"),
     "activity.xlsx: the workbook is password-protected (encrypted); it cannot be read; expected the workbook saved "
     "again without a password"),
    ("old .xls named .xlsx", lambda f: small(f, data=compound_file("Workbook"), name="activity.xlsx"),
     "activity.xlsx: this is an Excel 97-2003 workbook (.xls) with an .xlsx name"),
    ("truncated workbook", lambda f: small(f, data=workbook()[:-200], name="activity.xlsx"),
     "activity.xlsx: not a readable XLSX workbook"),
    ("corrupt sheet XML", lambda f: small(f, data=rezip(workbook(), SHEET, lambda x: x[: len(x) // 2]),
                                          name="activity.xlsx"),
     "activity.xlsx: not a readable XLSX workbook (ParseError"),
    ("CSV renamed .xlsx", lambda f: small(f, data=csv_text(ROW).encode(), name="activity.xlsx"),
     "activity.xlsx: not a readable XLSX workbook: this is a text (CSV) file with an .xlsx name; expected the file "
     "renamed .csv"),
    ("billion laughs", lambda f: small(f, data=billion_laughs(workbook()), name="activity.xlsx"),
     "activity.xlsx: the workbook part xl/worksheets/sheet1.xml declares a DOCTYPE or XML entities; refused unread"),
    ("workbook unpacks above the limit", big_unpacked,
     "activity.xlsx: the workbook unpacks to 0.1 MiB, above the limit of 0.05 MiB (settings [limits] max_input_mb); "
     "it was not read"),
    # size
    ("file over the size limit", oversized,
     "activity.csv: file is 2,013 bytes, above the limit of 0.001 MiB (settings [limits] max_input_mb); it was not "
     "read"),
    # settings
    ("settings: text for a year", lambda f: edit_settings(f, "first_year = 2020", 'first_year = "2020"'),
     "inventory.toml, setting inventory.first_year: wrong type; found \"'2020'\"; expected int"),
    ("settings: text for a limit", lambda f: small(f, settings_extra='[limits]\nmax_input_mb = "big"\n'),
     "inventory.toml, setting limits.max_input_mb: wrong type; found \"'big'\"; expected int or float"),
    ("settings: nan limit", lambda f: small(f, settings_extra="[limits]\nmax_input_mb = nan\n"),
     "inventory.toml, setting limits.max_input_mb: not a finite number; found 'nan'; expected a finite number"),
    ("settings: misspelt key", lambda f: small(f, settings_extra="[limits]\nmax_input_mib = 5\n"),
     "inventory.toml, setting limits.max_input_mib: unknown key; found 'max_input_mib'; expected one of max_input_mb "
     "(did you mean max_input_mb?)"),
    ("settings: misspelt section", lambda f: small(f, settings_extra="[limit]\nmax_input_mb = 5\n"),
     "inventory.toml, column [limit]: unknown section; found 'limit'"),
    ("settings: missing input file", lambda f: edit_settings(f, '"activity.csv"', '"activity-2020.csv"'),
     "inventory.toml, setting inputs.activity: input file not found; found 'activity-2020.csv'"),
    ("settings: path up and out", lambda f: edit_settings(f, '"activity.csv"', '"../activity.csv"'),
     "inventory.toml, setting inputs.activity: path leaves the settings folder; found '../activity.csv'; expected a "
     "path inside the folder of the settings file"),
    ("settings: absolute path", lambda f: edit_settings(f, '"activity.csv"', '"/etc/hostname"'),
     "inventory.toml, setting inputs.activity: path leaves the settings folder; found '/etc/hostname'"),
    ("settings: symbolic link out", symlink_outside,
     "inventory.toml, setting inputs.activity: path leaves the settings folder; found 'activity.csv'"),
    ("settings: NUL in a path", lambda f: edit_settings(f, '"activity.csv"', '"activity\\u0000.csv"'),
     "inventory.toml, setting inputs.activity: holds control characters; found 'activity\\x00.csv'"),
    ("settings: escape in the name", lambda f: edit_settings(f, 'name = "Test inventory"',
                                                             'name = "Test \\u001b[2J inventory"'),
     "inventory.toml, setting inventory.name: holds control characters; found 'Test \\x1b[2J inventory'"),
    ("settings: Latin-1",
     lambda f: rewrite_settings(small(f), lambda b: b.replace(b"Test inventory", b"Pr\xe9fecture")),
     "inventory.toml: not valid TOML: the file is not UTF-8 text (byte 22, on line 2); expected the settings saved as "
     "UTF-8 text"),
    ("settings: UTF-16", lambda f: rewrite_settings(small(f), lambda b: b.decode().encode("utf-16")),
     "inventory.toml: not valid TOML: the file is UTF-16 text, not UTF-8"),
    ("settings: not TOML", lambda f: rewrite_settings(small(f), lambda b: b"inventory: Test\nfirst_year: 2020\n"),
     "inventory.toml: not valid TOML: Expected '=' after a key in a key/value pair (at line 1, column 10)"),
]


# ---------------------------------------------------------------- the checks

def digest(folder: Path) -> dict[str, str]:
    """SHA-256 of every file below ``folder``, by relative path."""
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def compile_cli(capsys, settings: Path, out: Path, *options: str) -> tuple[int, str, str]:
    code = main(["compile", str(settings), "--out", str(out), *(options or FAST)])
    stdout, stderr = capsys.readouterr()
    return code, stdout, stderr


@pytest.fixture(scope="module")
def previous_output(tmp_path_factory) -> Path:
    """A complete output folder of the small test inventory, to be copied where a case needs one."""
    folder = tmp_path_factory.mktemp("previous")
    settings = small(folder / "inputs")
    out = folder / "out"
    assert main(["compile", str(settings), "--out", str(out), *FAST]) == 0
    return out


def test_at_least_forty_cases():
    assert len(CASES) >= 40 and len({c[0] for c in CASES}) == len(CASES)


@pytest.mark.parametrize("case, build, expected", CASES, ids=[c[0] for c in CASES])
def test_hostile_input(case, build, expected, tmp_path, capsys, previous_output):
    check_refused(build, expected, tmp_path, capsys, previous_output)


def national_totals(folder: Path, value: str = "5", limit: str = "") -> Path:
    settings = small(folder, extra_inputs={"national_totals": "national.csv"}, settings_extra=limit)
    lines = ["year,category_code,gas,co2eq_t", f"2020,1.A.1,CO2,{value}"] + [f"2020,2.A.{i},CO2,5" for i in range(60)]
    (folder / "national.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    return settings


def previous_submission(folder: Path, edit) -> Path:
    shutil.copytree(DEMO, folder)
    settings = folder / "inventory.toml"
    path = folder / "previous" / "emissions.csv.gz"
    path.write_bytes(edit(path))
    return settings


def bad_previous_year(path: Path) -> bytes:
    frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    frame.loc[0, "year"] = "19x0"
    buffer = io.BytesIO()
    frame.to_csv(buffer, index=False, compression={"method": "gzip", "mtime": 0})
    return buffer.getvalue()


# Inputs read outside readers.py / activity.py (national totals, the previous submission), refused by their own loaders.
ELSEWHERE = [
    pytest.param("national totals over the size limit",
                 lambda f: national_totals(f, limit="[limits]\nmax_input_mb = 0.001\n"),
                 "national.csv: file is 1,", id="national totals over the size limit"),
    pytest.param("national total inf", lambda f: national_totals(f, value="inf"),
                 "national.csv, row 2, column co2eq_t: co2eq_t is not finite", id="national total inf"),
    pytest.param("previous submission not gzip", lambda f: previous_submission(f, lambda p: b"not gzip"),
                 "emissions.csv.gz: not a readable emissions.csv", id="previous submission not gzip"),
    pytest.param("previous submission year as text", lambda f: previous_submission(f, bad_previous_year),
                 "emissions.csv.gz", id="previous submission year as text"),
]


@pytest.mark.parametrize("case, build, expected", ELSEWHERE)
def test_hostile_input_read_elsewhere(case, build, expected, tmp_path, capsys, previous_output):
    check_refused(build, expected, tmp_path, capsys, previous_output)


def check_refused(build, expected, tmp_path, capsys, previous_output):
    settings = build(tmp_path / "inputs")
    inputs = digest(settings.parent)

    fresh = tmp_path / "runs" / "out"
    code, _, err = compile_cli(capsys, settings, fresh)
    assert code == 2, err
    assert expected in err, err
    assert "Traceback" not in err and "nothing was written" in err
    assert "\x1b" not in err and "\a" not in err and "\u202e" not in err  # found values are shown escaped
    assert not (tmp_path / "runs").exists()  # neither the folder nor a temporary one beside it

    kept = tmp_path / "kept" / "out"
    shutil.copytree(previous_output, kept)
    before = digest(kept)
    code, _, err = compile_cli(capsys, settings, kept)
    assert code == 2 and expected in err, err
    assert digest(kept) == before
    assert [p.name for p in kept.parent.iterdir()] == ["out"]

    assert digest(settings.parent) == inputs


def test_oversized_file_is_not_opened(tmp_path, capsys, monkeypatch):
    settings = oversized(tmp_path / "inputs")
    opened = []
    real_read_bytes, real_open = Path.read_bytes, Path.open

    def read_bytes(self):
        opened.append(self.name)
        return real_read_bytes(self)

    def open_(self, *args, **kw):
        opened.append(self.name)
        return real_open(self, *args, **kw)

    monkeypatch.setattr(Path, "read_bytes", read_bytes)
    monkeypatch.setattr(Path, "open", open_)
    code, _, err = compile_cli(capsys, settings, tmp_path / "out")
    assert code == 2 and "above the limit of 0.001 MiB" in err
    assert "activity.csv" not in opened and "inventory.toml" in opened


# ---------------------------------------------------------------- look-alikes that are read on purpose

REFERENCE = csv_text("2020,Testvale,temperate,cropland,drained,,,,1234.5",
                     "2020,Testvale,temperate,grassland,drained,poor,,,0.25")


def semicolons(text: str) -> str:
    return text.replace(",", ";").replace("1234.5", "1234,5").replace("0.25", "0,25")


def reference_book(edit=None) -> bytes:
    return workbook(rows=[[2020, "Testvale", "temperate", "cropland", "drained", None, None, None, 1234.5],
                          [2020, "Testvale", "temperate", "grassland", "drained", "poor", None, None, 0.25]],
                    edit=edit)


def with_hidden_first_sheet(book) -> None:
    sheet = book.active
    junk = book.create_sheet("scratch", 0)
    junk.sheet_state = "hidden"
    junk.append(["not", "the", "data"])
    book.active = 1
    sheet["I2"] = "=1234+0.5"  # saved below with its value, as a spreadsheet program would


def saved_formula(data: bytes) -> bytes:
    return rezip(data, "xl/worksheets/sheet2.xml",
                 lambda xml: xml.replace(b"<f>1234+0.5</f><v></v>", b"<f>1234+0.5</f><v>1234.5</v>"))


ACCEPTED = [
    ("UTF-8 BOM", lambda f: small(f, data=b"\xef\xbb\xbf" + REFERENCE.encode()), ""),
    ("semicolons and decimal commas", lambda f: small(f, text=semicolons(REFERENCE)), "semicolon-separated file"),
    ("tab-separated", lambda f: small(f, text=REFERENCE.replace(",", "\t")), ""),
    ("Windows line ends", lambda f: small(f, data=REFERENCE.replace("\n", "\r\n").encode()), ""),
    ("year written 2020.0", lambda f: small(f, text=REFERENCE.replace("2020,", "2020.0,")), ""),
    ("settings with a BOM", lambda f: rewrite_settings(small(f, text=REFERENCE), lambda b: b"\xef\xbb\xbf" + b), ""),
    ("hidden first sheet, saved formula",
     lambda f: small(f, data=saved_formula(reference_book(with_hidden_first_sheet)), name="activity.xlsx"),
     "read sheet 'activity', the first visible one; other sheets ignored (scratch); hidden: scratch"),
]


def emissions_without_file(out: Path) -> pd.DataFrame:
    frame = pd.read_csv(out / "emissions.csv", dtype=str, keep_default_na=False)
    return frame.drop(columns=["input_file"])


@pytest.fixture(scope="module")
def reference_output(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("reference")
    out = folder / "out"
    assert main(["compile", str(small(folder / "inputs", text=REFERENCE)), "--out", str(out), *FAST]) == 0
    return out


@pytest.mark.parametrize("case, build, note", ACCEPTED, ids=[c[0] for c in ACCEPTED])
def test_accepted_variant_gives_the_same_emissions(case, build, note, tmp_path, capsys, reference_output):
    settings = build(tmp_path / "inputs")
    code, out, err = compile_cli(capsys, settings, tmp_path / "out")
    assert code == 0, err
    if settings.read_text(encoding="utf-8-sig").count('"activity.csv"'):
        assert (tmp_path / "out" / "emissions.csv").read_bytes() == (reference_output / "emissions.csv").read_bytes()
    else:
        pd.testing.assert_frame_equal(emissions_without_file(tmp_path / "out"),
                                      emissions_without_file(reference_output))
    if note:
        findings = pd.read_excel(tmp_path / "out" / "inventory.xlsx", sheet_name="findings", dtype=str)
        assert findings.apply(lambda r: note in " ".join(r.fillna("")), axis=1).any(), findings


def test_zero_area_is_accepted(tmp_path, capsys):
    settings = small(tmp_path / "inputs", text=csv_text(ROW.replace("1.5", "0")))
    code, _, err = compile_cli(capsys, settings, tmp_path / "out")
    assert code == 0, err
    emissions = pd.read_csv(tmp_path / "out" / "emissions.csv")
    estimated = emissions[emissions["notation_key"].isna()]
    assert not estimated.empty and (estimated["area_ha"] == 0).all() and (estimated["emission_t"] == 0).all()


def test_negative_override_value_is_accepted(tmp_path, capsys):
    # A measured net removal on rewetted land: emission factors may be negative (Table 3.1 has such rows).
    settings = write_inventory(tmp_path / "inputs", [stratum(soil_status="rewetted", nutrient_status="rich")],
                               extra_inputs={"overrides": "overrides.csv"})
    pd.DataFrame([{"quantity": "ef_co2_c_onsite", "climate_zone": "temperate", "soil_status": "rewetted",
                   "value": -0.2, "unit": "t CO2-C ha-1 yr-1",
                   "source": "Invented monitoring note for a test (no real site)"}]).to_csv(
        tmp_path / "inputs" / "overrides.csv", index=False)
    code, _, err = compile_cli(capsys, settings, tmp_path / "out")
    assert code == 0, err
    emissions = pd.read_csv(tmp_path / "out" / "emissions.csv")
    onsite = emissions[emissions["pathway"] == "co2_onsite"]
    assert len(onsite) == 1 and onsite["emission_t"].iloc[0] < 0


# ---------------------------------------------------------------- XML safety, determinism, inputs, atomic outputs

def test_entity_expansion_refused_whatever_openpyxl_is_told(tmp_path):
    # OPENPYXL_DEFUSEDXML=False makes openpyxl parse without defusedxml; the reader's own check still refuses.
    settings = small(tmp_path / "inputs", data=billion_laughs(workbook()), name="activity.xlsx")
    env = dict(os.environ, OPENPYXL_DEFUSEDXML="False")
    proc = subprocess.run([sys.executable, "-m", "compiler", "check", str(settings)], capture_output=True, text=True,
                          env=env)
    assert proc.returncode == 2, proc.stderr
    assert "declares a DOCTYPE or XML entities; refused unread" in proc.stdout + proc.stderr
    assert "Traceback" not in proc.stderr


def monte_carlo_values(out: Path) -> list[tuple]:
    book = openpyxl.load_workbook(out / "inventory.xlsx", read_only=True, data_only=True)
    try:
        return [row for row in book["monte_carlo"].iter_rows(values_only=True)]
    finally:
        book.close()


def test_monte_carlo_repeats_for_a_seed(tmp_path, capsys):
    # Four strata in two regions, drained and rewetted, two years: small, but every kind of draw.
    rows = [stratum(year=year, region=region, **kind, area_ha=area)
            for year in (2020, 2021)
            for region, kind, area in [("Testvale", {}, 120.0),
                                       ("Testvale", {"land_use": "grassland", "nutrient_status": "poor"}, 40.5),
                                       ("Brackenholm", {"soil_status": "rewetted", "nutrient_status": "rich"}, 15.0),
                                       ("Brackenholm", {"climate_zone": "boreal", "land_use": "forest_land",
                                                        "nutrient_status": "rich"}, 300.0)]]
    settings = write_inventory(tmp_path / "inputs", rows, first=2020, last=2021)
    options = ["--no-report", "--quiet", "--iterations", "500", "--seed", "3"]
    runs = []
    for name in ("first", "second"):
        code, _, err = compile_cli(capsys, settings, tmp_path / name, *options)
        assert code == 0, err
        runs.append(monte_carlo_values(tmp_path / name))
    assert runs[0] == runs[1]
    numbers = [v for row in runs[0] for v in row if isinstance(v, float)]
    assert len(numbers) > 10 and any(v != 0 for v in numbers)


def test_inputs_never_modified(demo_copy, tmp_path, capsys):
    folder = demo_copy.parent
    before = digest(folder)
    code, _, err = compile_cli(capsys, demo_copy, tmp_path / "out")
    assert code == 0, err
    assert digest(folder) == before
    activity = folder / "activity.csv"
    activity.write_bytes(activity.read_bytes().replace(b"9000.0", b'"9,000"', 1))
    before = digest(folder)
    code, _, err = compile_cli(capsys, demo_copy, tmp_path / "out")
    assert code == 2 and "area_ha is not a number; found '9,000'" in err
    assert digest(folder) == before


def test_killed_compile_leaves_the_previous_output(demo_copy, demo_output, tmp_path):
    out = tmp_path / "out"
    shutil.copytree(demo_output, out)
    before = digest(out)
    # Change an input, so that a compile that did complete would change the folder.
    activity = demo_copy.parent / "activity.csv"
    activity.write_bytes(activity.read_bytes().replace(b"9000.0", b"9100.0", 1))
    command = [sys.executable, "-m", "compiler", "compile", str(demo_copy), "--out", str(out), "--no-report",
               "--quiet", "--iterations", "100"]
    for _attempt in range(3):
        proc = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        temporary = []
        while proc.poll() is None and not temporary:
            temporary = list(tmp_path.glob(".out.tmp-*"))
            time.sleep(0.002)
        if temporary and proc.poll() is None:
            proc.send_signal(signal.SIGKILL)
            proc.wait()
            break
        proc.wait()  # finished before the poll saw its temporary folder: put the old folder back, try again
        shutil.rmtree(out)
        shutil.copytree(demo_output, out)
    else:
        pytest.fail("the compile finished three times before it could be killed")
    assert proc.returncode == -signal.SIGKILL
    assert digest(out) == before
    # What a killed run leaves is its temporary folder, named after the output folder, and its lock file
    # (an empty file, which no longer blocks: the lock ended with the process).
    leftovers = sorted(p.name for p in tmp_path.iterdir() if p.name not in ("out", "demo"))
    assert all(name.startswith(".out.tmp-") or name == ".out.lock" for name in leftovers), leftovers
    completed = subprocess.run(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    assert completed.returncode == 0, completed.stderr
