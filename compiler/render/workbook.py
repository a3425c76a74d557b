"""inventory.xlsx: summary, reporting table, strata detail, factors, findings, settings.

openpyxl's write-only mode writes each sheet's head (widths, panes, notes,
header); the rows are streamed as SpreadsheetML by finish_workbook, text in a
shared string table. Every string is stored as a string cell, never as a
formula, whatever it starts with. The file is made byte-identical for
identical inputs: document timestamps and zip entry dates are fixed to the
compile date.
"""

from __future__ import annotations

import datetime as _dt
import io
import re
import zipfile
from pathlib import Path
from typing import NamedTuple

import numpy as np
import pandas as pd
from openpyxl import Workbook
from openpyxl.cell import WriteOnlyCell
from openpyxl.styles import Alignment, Font, PatternFill

from ..categories import NOTATION_KEYS

SHEET_ROW_LIMIT = 1_048_576
HEADER_FONT = Font(bold=True, color="FFFFFF")
HEADER_FILL = PatternFill("solid", fgColor="2F4858")  # our own slate blue
NOTE_FONT = Font(italic=True, color="555555")
FORMATS = {"kt": "#,##0.000", "t": "#,##0.000", "ha": "#,##0.0", "pct": "0.0%", "factor": "0.0####", "int": "0"}


def _cell(ws, value, number_format: str | None = None, font=None):
    if isinstance(value, (float, np.floating)) and (np.isnan(value) or np.isinf(value)):
        value = None
    elif isinstance(value, np.integer):
        value = int(value)
    elif isinstance(value, np.floating):
        value = float(value)
    elif value is pd.NA:
        value = None
    cell = WriteOnlyCell(ws, value=value)
    if isinstance(value, str):
        cell.data_type = "s"  # text from the inputs is never a formula
    if number_format and isinstance(value, (int, float)):
        cell.number_format = number_format
    if font is not None:
        cell.font = font
    return cell


def _header(ws, names):
    row = []
    for name in names:
        c = _cell(ws, name, font=HEADER_FONT)
        c.fill = HEADER_FILL
        c.alignment = Alignment(wrap_text=True, vertical="top")
        row.append(c)
    ws.append(row)


NUMBER_WIDTH_LIMIT = 30  # a numeric column is widened to its longest formatted number, up to this width


def _is_number(value) -> bool:
    return isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, (bool, np.bool_))


def number_width(values, number_format: str | None) -> int:
    """Characters the longest of ``values`` (numbers; NaN and infinities are blank cells) takes when a
    spreadsheet program shows it in ``number_format`` (None: General): an upper bound, from the
    largest magnitude, a minus sign if any value is negative, and the format's thousands separators,
    decimals (optional ``#`` decimals counted in full), percent sign or exponent. 0 if none is finite."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if not v.size:
        return 0
    big = float(np.abs(v).max())
    sign = int(bool((v < 0).any()))
    fmt = number_format or "General"
    if fmt == "General":  # at most 11 characters; decimals are rounded away to fit, the integer part is not
        integer = len(f"{big:.0f}")
        return sign + (integer if (v == np.round(v)).all() else max(integer, min(11, integer + 7)))
    decimals = len(re.sub(r"[^0#]", "", fmt.split(".", 1)[1].split("E")[0])) if "." in fmt else 0
    if "E" in fmt:
        return sign + len(f"{big:.{decimals}E}")
    if "%" in fmt:
        return sign + len(f"{big * 100:{',' if ',' in fmt else ''}.{decimals}f}") + 1
    return sign + len(f"{big:{',' if ',' in fmt else ''}.{decimals}f}")


def _column_width(col, numbers, formats: dict, widths: dict) -> float:
    """The width of a column: the given one (or one from its header), widened so that its longest
    formatted number fits (bounded by NUMBER_WIDTH_LIMIT): a spreadsheet shows ### where it does not."""
    width = widths.get(col, max(10, min(48, len(str(col)) + 4)))
    need = number_width(numbers, formats.get(col)) if len(numbers) else 0
    return max(width, min(NUMBER_WIDTH_LIMIT, need + 2)) if need else width


def write_sheet(wb, title, columns, rows, formats=None, widths=None, notes=(), freeze="A2", data=None):
    """A table sheet: optional note lines, a header row, data rows. ``data``: the frame whose rows are
    streamed into the sheet later (rows is then empty), read here for the column widths."""
    ws = wb.create_sheet(title)
    formats = formats or {}
    widths = widths or {}
    rows = list(rows)
    for i, col in enumerate(columns):
        if data is not None:
            numbers = (data[col].to_numpy(dtype=float, na_value=np.nan)
                       if pd.api.types.is_numeric_dtype(data[col]) else [])
        else:
            numbers = [v for v in (r[i] for r in rows) if _is_number(v)]
        ws.column_dimensions[_letter(i)].width = _column_width(col, numbers, formats, widths)
    if notes:
        freeze = f"{freeze[0]}{len(notes) + 2}"
    ws.freeze_panes = freeze  # must precede the first row in write-only mode
    for note in notes:
        ws.append([_cell(ws, note, font=NOTE_FONT)])
    _header(ws, columns)
    streams = getattr(wb, STREAMS, None)
    if streams is not None and rows and _streamable(rows):
        frame = pd.DataFrame(rows, dtype=object)
        streams[len(wb.worksheets)] = _Stream(frame, list(frame.columns), 0, len(frame), top_row=len(notes) + 2,
                                              styles=_style_ids(ws, columns, formats), general=True)
        return ws
    for values in rows:
        ws.append([_cell(ws, v, formats.get(col)) for col, v in zip(columns, values)])
    return ws


# The attribute of a workbook whose table rows finish_workbook streams: {sheet number in the file: _Stream}.
STREAMS = "histosol_streams"
_STREAMED_TYPES = (str, int, float, np.integer, np.floating, type(None), type(pd.NA))


def _streamable(rows) -> bool:
    """Whether every value is text, a number or a blank (what the streamed rows write as openpyxl's
    cells would); anything else (a boolean, a date) goes through openpyxl's cells."""
    kinds = {type(v) for row in rows for v in row}
    return all(issubclass(k, _STREAMED_TYPES) and not issubclass(k, (bool, np.bool_)) for k in kinds)


def _letter(index: int) -> str:
    from openpyxl.utils import get_column_letter

    return get_column_letter(index + 1)


def sheet_records(frame: pd.DataFrame, columns):
    data = frame[columns]
    return data.itertuples(index=False, name=None)


def write_workbook(result, path: Path, progress=None) -> None:
    from ..progress import stage

    stage(progress, "writing the workbook")
    s = result.settings
    wb = Workbook(write_only=True)
    setattr(wb, STREAMS, {})  # every table sheet's rows are streamed (write_sheet)
    agg = result.aggregates
    base, latest = agg.base_year, agg.latest_year
    cats = result.categories
    cells = agg.category_cells

    def kt(value):  # a figure in t (or a notation key) as shown in kt
        return value if isinstance(value, str) else value / 1000

    # summary
    # A one-year inventory shows its year once, without a change column.
    shown = [base, latest] if latest != base else [base]
    at = [cells.columns.get_loc(y) for y in shown]
    summary_rows = []
    for row in cells.itertuples(index=False, name=None):  # categories x gases: a few dozen
        code, name, gas, unit = row[:4]
        values = [kt(row[i]) for i in at]
        if len(shown) == 2:
            bv, lv = values
            values.append(agg.change(bv, lv) if isinstance(bv, float) and isinstance(lv, float) else None)
        summary_rows.append((code, name, gas, "k" + unit, *values))
    totals = [float(agg.total_co2eq_t[y]) / 1000 for y in shown]
    summary_rows.append(("Total", "all categories, gases with a GWP", "CO2-eq", "kt CO2-eq", *totals,
                         *([agg.change(*totals)] if len(shown) == 2 else [])))
    span = f"year {base}" if base == latest else f"years {base}-{latest}"
    notes = [f"{s.name} - submission {s.submission_year}, {span}",
             f"Factor set {s.factor_set}; GWP100 set {s.gwp}; molar masses: {s.mass_ratios}; compiled {result.compile_date} "
             f"with histosol {result.version}",
             "Tier 1 defaults are coarse; key categories deserve higher tiers; estimates must pass the national QA/QC plan.",
             "Notation keys: " + "; ".join(f"{k} = {v}" for k, v in NOTATION_KEYS.items())]
    write_sheet(wb, "summary", ["category_code", "category_name", "gas", "unit", *map(str, shown),
                           *(["change"] if len(shown) == 2 else [])],
           summary_rows, {**{str(y): FORMATS["kt"] for y in shown}, "change": FORMATS["pct"]},
           {"category_name": 40, "category_code": 14}, notes)

    # categories x gas x year (kt CO2-eq, notation keys in place)
    years = list(agg.years)
    wide = [(code, name, gas, "k" + unit, *map(kt, values))
            for code, name, gas, unit, *values in cells.itertuples(index=False, name=None)]
    write_sheet(wb, "categories", ["category_code", "category_name", "gas", "unit", *map(str, years)], wide,
           {str(y): FORMATS["kt"] for y in years}, {"category_name": 36}, freeze="E2")

    # reporting cells in tonnes of gas, long form, with notation reasons
    write_sheet(wb, "categories_long", list(cats.columns), sheet_records(cats, list(cats.columns)),
           {"area_ha": FORMATS["ha"], "emission_t": FORMATS["t"], "co2eq_t": FORMATS["t"]},
           {"category_name": 36, "notation_reason": 60})

    # strata detail, split across sheets beyond the sheet row limit
    em = result.emissions
    from ..schema import EXPORT_COLUMNS
    chunk = SHEET_ROW_LIMIT - 1
    fmt = {"area_ha": FORMATS["ha"], "area_basis_ha": FORMATS["ha"], "emission_t": FORMATS["t"],
           "co2eq_t": FORMATS["t"], "emission_basis_t": FORMATS["t"], "factor_value": FORMATS["factor"],
           "parameter_value": FORMATS["factor"], "conversion": FORMATS["factor"], "year": FORMATS["int"],
           "input_row": FORMATS["int"]}
    parts = max(1, int(np.ceil(len(em) / chunk)))
    bulk: dict[int, _Stream] = getattr(wb, STREAMS)  # sheet number -> its data rows, written as XML by finish_workbook
    for i in range(parts):
        title = "strata" if parts == 1 else f"strata_{i + 1}"
        ws = write_sheet(wb, title, EXPORT_COLUMNS, [], fmt, {"notation_reason": 50, "equation": 30},
                         data=em.iloc[i * chunk:(i + 1) * chunk])
        bulk[len(wb.worksheets)] = _Stream(em, EXPORT_COLUMNS, i * chunk, min((i + 1) * chunk, len(em)),
                                           styles=_style_ids(ws, EXPORT_COLUMNS, fmt))

    # trace: every category-gas cell of the base and latest year, linked to its strata and factor rows
    strata_row = pd.Series(np.arange(len(em)) + 2, index=em.index)  # row numbers in the strata sheet
    est = em[(em["notation_key"] == "") & em["year"].isin([base, latest])]
    cell = ["category_code", "gas", "year"]  # each row's cell total is the reporting cell's figure
    cell_total = cats.set_index(cell)["emission_t"].reindex(pd.MultiIndex.from_frame(est[cell])).to_numpy()
    factor_rows = {fid: i + 3 for i, fid in enumerate(result.factors_used["factor_id"])}  # factors sheet: note + header
    trace = pd.DataFrame({
        "category_code": est["category_code"], "gas": est["gas"], "year": est["year"], "cell_total_t": cell_total,
        "region": est["region"], "pathway": est["pathway"], "land_use": est["land_use"],
        "climate_zone": est["climate_zone"], "soil_status": est["soil_status"],
        "nutrient_status": est["nutrient_status"], "drainage_depth": est["drainage_depth"], "subtype": est["subtype"],
        "area_basis_ha": est["area_basis_ha"], "factor_id": est["factor_id"], "factor_value": est["factor_value"],
        "factor_unit": est["factor_unit"], "conversion": est["conversion"], "emission_t": est["emission_t"],
        "strata_sheet_row": strata_row[est.index] if parts == 1 else np.nan,
        "factors_sheet_row": est["factor_id"].astype("str").map(factor_rows),  # the ids as text: map gives numbers
    }).sort_values(["year", "category_code", "gas", "region", "pathway"])
    tcols = list(trace.columns)
    tfmt = {"cell_total_t": FORMATS["t"], "emission_t": FORMATS["t"], "area_basis_ha": FORMATS["ha"],
            "factor_value": FORMATS["factor"], "conversion": FORMATS["factor"], "year": FORMATS["int"],
            "strata_sheet_row": FORMATS["int"], "factors_sheet_row": FORMATS["int"]}
    tnotes = [f"Every category-gas cell of {base} and {latest}: its strata rows (row number in the strata sheet), "
              "factor (row in the factors sheet), and emission_t = area_basis_ha x factor_value x conversion "
              "(fires: burnt area x fuel x factor x conversion); the rows of a cell add up to cell_total_t."]
    ws = write_sheet(wb, "trace", tcols, [], tfmt, {"factor_id": 30}, tnotes, data=trace)
    bulk[len(wb.worksheets)] = _Stream(trace, tcols, 0, len(trace), top_row=len(tnotes) + 2,
                                       styles=_style_ids(ws, tcols, tfmt))

    if result.recalculation is not None:
        rc = result.recalculation["by_cell"]
        rcols = list(rc.columns)
        write_sheet(wb, "recalculations", rcols, sheet_records(rc, rcols), {c: FORMATS["t"] for c in rcols[3:]},
               notes=[f"Current submission minus the previous one ({result.recalculation['file']}), t and t CO2-eq. "
                      "dE = (A1 - A0) x EF0 (activity change) + A1 x (EF1 - EF0) (factor change, including GWP or "
                      "factor-set changes); strata added or removed; allocation change. The parts add up to "
                      "difference_co2eq_t. factor_change is split into gwp_change (A1 x f0 x (GWP1 - GWP0), f in t "
                      "of gas per ha), factor_set_change, shipped_value_change and override_change, which add up "
                      "to it.",
                      f"Trend {base}-latest common year: previous {result.recalculation['previous_trend_pct']:.2f} %, "
                      f"current {result.recalculation['current_trend_pct']:.2f} %."])
    fills = result.gap_fills
    if not fills.empty:
        write_sheet(wb, "gap_filling", list(fills.columns), sheet_records(fills, list(fills.columns)),
               {"area_ha": FORMATS["ha"], "year": FORMATS["int"]}, {"fill_basis": 70},
               notes=[f"{len(fills)} stratum-years not in the activity data, filled by the techniques of 2006 IPCC "
                      "Guidelines Vol. 1 Ch. 5: linear interpolation, trend extrapolation, overlap (Eq. 5.1) or "
                      "surrogate (Eq. 5.2). In the strata sheet these rows have activity_source as here and "
                      "input_row 0."])
    if result.review_log is not None and not result.review_log.empty:
        rl = result.review_log.drop(columns=[c for c in ("_row", "_bad") if c in result.review_log])
        write_sheet(wb, "review_log", list(rl.columns), sheet_records(rl, list(rl.columns)), widths={"finding": 60,
                                                                                             "response": 50})

    _analysis_sheets(wb, result)

    # factors used
    from .tidy import public_factors

    f = public_factors(result.factors_used)
    fcols = ["factor_id", "factor_set", "quantity", "climate_zone", "land_use", "soil_status", "nutrient_status",
             "drainage_depth", "subtype", "fire_type", "value", "unit", "ci_low", "ci_high", "tier", "agency_check",
             "table", "row_label", "page", "citation", "region", "first_year", "last_year",
             "reviewed_by", "reviewed_on", "reviewed_against"]
    write_sheet(wb, "factors", fcols, sheet_records(f, fcols), {"value": FORMATS["factor"], "ci_low": FORMATS["factor"],
                                                     "ci_high": FORMATS["factor"]},
           {"factor_id": 32, "citation": 60, "row_label": 44, "agency_check": 16},
           ["Every factor used in this compile, with its source. agency_check: the agency's check of a shipped "
            "factor against its copy of the guidance (factor review log): agrees, differs or not yet checked; "
            "own factor for an override. The shipped values have not been checked against the published text "
            "by the tool's authors: check them before official use."])

    fd = result.findings
    write_sheet(wb, "findings", list(fd.columns), sheet_records(fd, list(fd.columns)), {"row": FORMATS["int"]},
           {"message": 80, "file": 30, "expected": 40})

    settings_rows = s.as_table() + [(f"input sha256: {k}", v, "") for k, v in sorted(result.input_hashes.items())]
    write_sheet(wb, "settings", ["setting", "value", "description"], settings_rows, widths={"setting": 44, "value": 66,
                                                                                        "description": 60})

    from .submission import add_sheets

    add_sheets(wb, result)  # organic soils and the time series, after the other sheets

    stamp = _dt.datetime.fromisoformat(result.compile_date + "T00:00:00")
    wb.properties.creator = f"histosol {result.version}"
    wb.properties.created = stamp
    buffer = io.BytesIO()
    wb.save(buffer)
    finish_workbook(buffer.getvalue(), stamp, bulk, path)


class _Stream(NamedTuple):
    """Data rows of one sheet, streamed as XML by :func:`finish_workbook` after openpyxl has written its head
    (notes and header): rows ``first:stop`` of ``frame[columns]``, the first on sheet row ``top_row``;
    ``styles`` gives the cell style id of each numeric column (None: no number format); ``general``: see
    :func:`_rows_xml_pieces`."""

    frame: pd.DataFrame
    columns: list
    first: int
    stop: int
    top_row: int = 2
    styles: list | None = None
    general: bool = False  # rows of write_sheet: any column may mix text and numbers, numbers as openpyxl writes them


def _style_ids(ws, columns, formats: dict) -> list:
    """The workbook's cell style id of each column's number format (None where it has none): the id
    openpyxl itself gives a numeric cell with that format, registered in the workbook's styles."""
    ids = []
    for col in columns:
        if col in formats:
            cell = WriteOnlyCell(ws, value=0.0)
            cell.number_format = formats[col]
            ids.append(cell.style_id)
        else:
            ids.append(None)
    return ids


_XML_ESCAPES = [("&", "&amp;"), ("<", "&lt;"), (">", "&gt;")]
_XML_ILLEGAL = r"[\x00-\x08\x0b\x0c\x0e-\x1f]"


ROWS_PER_PIECE = 20_000  # strata rows turned into XML at a time (bounds memory; the bytes do not depend on it)
SPOOL_BYTES = 64 * 1024 * 1024  # a streamed sheet is kept in memory up to this size, then spooled to disk
# zlib level of the streamed sheets: at 1e5 stratum-years the strata sheet (345 MB of XML, shared strings and
# no cell references) deflates at level 2 in 1.0 s CPU to 37 MB; with cell references (493 MB) level 2 took
# 1.85 s to 80 MB, level 3 2.8 s to 75 MB, level 1 1.7 s to 83 MB, level 6 5.7 s to 63 MB (2-core machine).
STREAM_COMPRESSION = 2


class SharedStrings:
    """The workbook's shared string table (xl/sharedStrings.xml) of the streamed sheets: each distinct
    text once, in the order of first use, cells refer to it by index (``t="s"``). Texts are kept as
    written in the XML (escaped, illegal control characters removed)."""

    def __init__(self) -> None:
        self.index: dict[str, int] = {}
        self.count = 0  # cells that refer to the table

    def ids(self, texts) -> list[int]:
        index = self.index
        out = []
        for t in texts:
            i = index.get(t)
            if i is None:
                i = index[t] = len(index)
            out.append(i)
        return out

    def xml(self) -> bytes:
        body = "".join(f'<si><t xml:space="preserve">{t}</t></si>' for t in self.index)
        return (f'<sst xmlns="{_MAIN_NS}" count="{self.count}" uniqueCount="{len(self.index)}">{body}</sst>'
                ).encode("utf-8")


_MAIN_NS = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
_SST_TYPE = "application/vnd.openxmlformats-officedocument.spreadsheetml.sharedStrings+xml"
_SST_REL = "http://schemas.openxmlformats.org/officeDocument/2006/relationships/sharedStrings"


def _escape(text) -> str:
    t = str(text)
    for a, b in _XML_ESCAPES:
        t = t.replace(a, b)
    return re.sub(_XML_ILLEGAL, "", t)


def _column_cells(values: pd.Series, style, strings: SharedStrings, general: bool = False
                  ) -> tuple[np.ndarray, list[str], np.ndarray]:
    """The cells of one column: ``codes`` (one per row), the distinct cells they point to (XML, without
    a reference: the cell's place in its row gives its column), and a mask of the rows that have a cell.

    Numbers: ``repr`` of the float (integer columns without ".0"), or with ``general`` the text openpyxl
    writes ("%.16g"); computed once per distinct value (by bit pattern, so -0.0 stays "-0.0"), with the
    column's style id ``style`` if it has one. Text: an index into the shared string table ``strings``
    (XML-escaped, illegal control characters removed; with ``general`` cut at 32,767 characters as
    openpyxl cuts it). With ``general`` an object column may mix text and numbers. A missing or
    non-finite number, a missing or empty text is an absent cell.
    """
    attr = f' s="{style}"' if style else ""
    if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values):
        if not general and isinstance(values.dtype, np.dtype) and values.dtype.kind in "iu":
            # repr of the float without ".0" is the integer's own text below 1e16 (years, row numbers)
            codes, uniques = pd.factorize(values.to_numpy())
            if len(uniques) and np.abs(uniques).max() < 10 ** 16:
                return codes, [f'<c{attr}><v>{v}</v></c>' for v in uniques.tolist()], np.ones(len(values), bool)
        floats = values.astype(float).to_numpy()
        present = values.notna().to_numpy() & np.isfinite(floats)
        codes, uniques = pd.factorize(floats.view(np.int64))
        numbers = uniques.view(np.float64).tolist()
        if general:
            return codes, [f'<c{attr}><v>{"%.16g" % v}</v></c>' for v in numbers], present
        if pd.api.types.is_integer_dtype(values):
            texts = [repr(v) for v in numbers]
            return codes, [f'<c{attr}><v>{t[:-2] if t.endswith(".0") else t}</v></c>' for t in texts], present
        return codes, [f'<c{attr}><v>{v!r}</v></c>' for v in numbers], present
    codes, uniques = pd.factorize(values)  # a missing value -> -1
    tails, absent = [], []
    for i, v in enumerate(uniques):
        if isinstance(v, str) or not general:
            t = _escape(v[:32767] if general else v)
            if t:
                tails.append(f'<c t="s"><v>{strings.ids([t])[0]}</v></c>')
                continue
        elif np.isfinite(v):
            tails.append(f'<c{attr}><v>{"%.16g" % v}</v></c>')
            continue
        tails.append("")
        absent.append(i)
    present = codes >= 0
    if absent:
        present &= ~np.isin(codes, absent)
    if tails:
        text = np.array(['t="s"' in t for t in tails], dtype=bool)
        strings.count += int((present & text[codes]).sum())
    return codes, tails, present


def _rows_xml_pieces(frame: pd.DataFrame, first_row: int, rows_per_piece: int = ROWS_PER_PIECE,
                     styles: list | None = None, strings: SharedStrings | None = None, general: bool = False):
    """Rows of a sheet as SpreadsheetML, ``rows_per_piece`` rows at a time (UTF-8 bytes).

    Text goes into the shared string table ``strings`` (``t="s"`` cells, never formulas), numbers
    are written as numbers (with the column's style id where ``styles`` gives one). Each row holds
    every column in order, without cell references (``r`` is optional in SpreadsheetML: a cell's place
    gives its column), a blank as an empty ``<c/>``. A row's cells are laid out in an object array, one
    entry per distinct value of each column, and the rows are joined once: no string operation per
    cell. The concatenated pieces do not depend on ``rows_per_piece``. ``general``: the rows of
    :func:`write_sheet` (object columns of text and numbers), written with the cell values openpyxl's
    cells would have.
    """
    strings = strings if strings is not None else SharedStrings()
    width = len(frame.columns)
    styles = styles or [None] * width
    for a in range(0, len(frame), rows_per_piece):
        part = frame.iloc[a:a + rows_per_piece]
        cells = np.empty((len(part), width + 2), dtype=object)
        cells[:, 0] = [f'<row r="{i}">' for i in range(first_row + a, first_row + a + len(part))]
        for j, (col, style) in enumerate(zip(part.columns, styles)):
            codes, tails, present = _column_cells(part[col], style, strings, general)
            if not present.all():
                codes = np.where(present, codes, -1)
            cells[:, j + 1] = np.array([*tails, "<c/>"], dtype=object)[codes]
        cells[:, -1] = "</row>"
        yield "".join(cells.ravel().tolist()).encode("utf-8")


def _table(wb, title, frame: pd.DataFrame, notes=(), widths=None):
    frame = frame.reset_index(drop=True)
    cols = [str(c) for c in frame.columns]
    frame.columns = cols
    fmt = {c: FORMATS["t"] for c in cols if pd.api.types.is_float_dtype(frame[c])}
    write_sheet(wb, title, cols, sheet_records(frame, cols), fmt, widths, list(notes))


def _analysis_sheets(wb, result) -> None:
    """Uncertainty (Approach 1, Monte Carlo, distributions) and key categories."""
    unc = result.uncertainty
    if unc is not None:
        from ..uncertainty import METHOD_RULES

        if unc.approach1 is not None:
            a1 = unc.approach1
            _table(wb, "uncertainty_approach1", a1.cells,
                   ["Approach 1 (2006 IPCC Guidelines Vol. 1 Eq. 3.1 and 3.2): 95 % half-widths per category, gas "
                    "and year; activity_pct and factor_pct are the combined relative uncertainties of the cell.",
                    "Rule for asymmetric intervals: " + METHOD_RULES.get("asymmetric_interval", "")])
            _table(wb, "uncertainty_total", a1.total,
                   ["Approach 1 uncertainty of the total (t CO2-eq): uncertainty_pct treats categories as "
                    "independent (Table 3.2); the _shared_inputs columns add rows that share a factor linearly."])
            _table(wb, "uncertainty_trend", a1.trend_table,
                   ["Approach 1 trend uncertainty (Vol. 1 Table 3.2): type A and type B sensitivities; factor "
                    "uncertainty fully correlated between years, activity uncertainty uncorrelated (sqrt 2 on type B)."])
        if unc.monte_carlo is not None:
            mc = unc.monte_carlo
            _table(wb, "monte_carlo", mc.summary,
                   [f"Approach 2 Monte Carlo: {mc.iterations} iterations, seed {mc.seed}; one draw per factor per "
                    "iteration shared by every stratum, region and year that uses it; percentiles as -x % / +y % of "
                    "the estimate."])
            _table(wb, "monte_carlo_trend", mc.trend, ["Trend base year -> latest year, percent, with its 95 % interval."])
            _table(wb, "distributions", mc.distributions, ["Distribution fitted to each factor's 95 % interval."],
                   {"factor_id": 30, "rule": 50})
            _table(wb, "convergence", mc.convergence, ["Percentiles from the first and second half of the draws."])
    kc = result.key_categories
    if kc is not None:
        _table(wb, "key_categories", kc.table, [kc.note], {"assessments": 40, "message": 50})


def _set_compression(entry: zipfile.ZipInfo, level: int) -> None:
    """The zlib level of one entry (``compress_level`` from Python 3.13, ``_compresslevel`` before)."""
    if hasattr(entry, "compress_level"):
        entry.compress_level = level
    else:
        entry._compresslevel = level


def finish_workbook(data: bytes, stamp: _dt.datetime, bulk: dict[int, _Stream] | None, path: Path) -> None:
    """Write the workbook to ``path`` with the same bytes for the same content: fixed entry dates and
    document timestamps; the strata rows streamed into their sheets, a piece at a time.

    A streamed sheet is first spooled (in memory up to SPOOL_BYTES, then on disk) so that its size is
    known before its entry is opened: the zip header (ZIP64 or not) is then the one ``writestr`` writes.
    A spooled sheet is deflated into the file by a second thread while this one makes the XML of the
    next (zlib and file writes release the GIL); entries still go into the file in their order, one at
    a time, so the bytes are those of a serial write.
    """
    import tempfile
    from concurrent.futures import ThreadPoolExecutor

    src = zipfile.ZipFile(io.BytesIO(data))
    iso = stamp.strftime("%Y-%m-%dT%H:%M:%SZ")
    strings = SharedStrings()  # the text of the streamed sheets, written after the sheets (before the styles)
    shared = False
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as dst, ThreadPoolExecutor(1) as writer:
        pending = None  # the entry being written by the second thread (the executor waits for it on exit)

        def wait() -> None:
            nonlocal pending
            if pending is not None:
                done, pending = pending, None
                done.result()  # re-raises what the writer raised

        for info in src.infolist():
            content = src.read(info.filename)
            entry = zipfile.ZipInfo(info.filename, date_time=stamp.timetuple()[:6])
            entry.compress_type = zipfile.ZIP_DEFLATED
            entry.external_attr = 0o600 << 16
            sheet = re.fullmatch(r"xl/worksheets/sheet(\d+)\.xml", info.filename)
            split = content.find(b"</row></sheetData>") if sheet and bulk and int(sheet.group(1)) in bulk else -1
            if split < 0:
                if info.filename == "docProps/core.xml":
                    content = re.sub(rb"(<dcterms:modified[^>]*>)[^<]*(</dcterms:modified>)",
                                     rb"\g<1>" + iso.encode() + rb"\g<2>", content)
                wait()
                if info.filename == "xl/styles.xml" and strings.index:
                    sst = zipfile.ZipInfo("xl/sharedStrings.xml", date_time=stamp.timetuple()[:6])
                    sst.compress_type, sst.external_attr = zipfile.ZIP_DEFLATED, 0o600 << 16
                    dst.writestr(sst, strings.xml())
                    shared = True
                elif shared and info.filename == "xl/_rels/workbook.xml.rels":
                    content = _add_relationship(content)
                elif shared and info.filename == "[Content_Types].xml":
                    content = content.replace(b"</Types>", f'<Override PartName="/xl/sharedStrings.xml" '
                                                           f'ContentType="{_SST_TYPE}"/></Types>'.encode())
                dst.writestr(entry, content)
                continue
            stream = bulk[int(sheet.group(1))]
            split += len(b"</row>")
            spool = tempfile.SpooledTemporaryFile(max_size=SPOOL_BYTES)
            try:
                spool.write(content[:split])
                for a in range(stream.first, stream.stop, ROWS_PER_PIECE):
                    part = stream.frame.iloc[a:min(a + ROWS_PER_PIECE, stream.stop)][stream.columns]
                    for piece in _rows_xml_pieces(part, stream.top_row + a - stream.first, styles=stream.styles,
                                                  strings=strings, general=stream.general):
                        spool.write(piece)
                spool.write(content[split:])
                entry.file_size = spool.tell()
                _set_compression(entry, STREAM_COMPRESSION)
                wait()
            except BaseException:
                spool.close()
                raise
            pending = writer.submit(_deflate_spool, dst, entry, spool)
        wait()


def _add_relationship(rels: bytes) -> bytes:
    """The workbook's relationships with the shared string table added (the next free ``rId``)."""
    taken = [int(n) for n in re.findall(rb'Id="rId(\d+)"', rels)]
    rel = f'<Relationship Type="{_SST_REL}" Target="sharedStrings.xml" Id="rId{max(taken, default=0) + 1}"/>'
    return rels.replace(b"</Relationships>", rel.encode() + b"</Relationships>")


def _deflate_spool(dst: zipfile.ZipFile, entry: zipfile.ZipInfo, spool) -> None:
    """Copy a spooled sheet into its zip entry (deflated), then drop the spool."""
    import shutil

    try:
        spool.seek(0)
        with dst.open(entry, "w") as out:
            shutil.copyfileobj(spool, out, 1 << 20)
    finally:
        spool.close()
