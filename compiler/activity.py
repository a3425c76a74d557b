"""Activity data, fires, overrides and the factor review log: read, validate, tidy.

Each reader maps user-facing headers to internal names in one place
(:data:`HEADER_ALIASES`), checks every cell, and returns a typed table. All
problems of a file are collected and reported at once, each with file,
sheet, row and column, what was found and what was expected.

Limits that no real table reaches, so that a typing or export slip is an error
rather than a number (each named in its message):

- an area (``area_ha``, ``burned_ha``) above 1e9 ha: the world's peatlands cover
  about 4e8 ha and the Earth's land about 1.5e10 ha; any other number above 1e9 in
  magnitude (a factor in any accepted unit is far smaller);
- a year outside 1900 to 2200 where the settings give no range (activity and fire
  years must lie within the inventory years); a year is a whole number, ``2020.0``
  is read as 2020 and ``2020.5`` refused;
- a name or other short text above 200 characters, a citation or note above 2,000;
  control characters (and, in names, tabs and line breaks) in any text; text that starts with
  ``=``, ``+``, ``-`` or ``@`` (a spreadsheet program would run it as a formula from a CSV we write);
- numbers with thousands separators (``1,234``, ``1 234``; in a semicolon file
  ``1.234``, which could mean either 1234 or 1.234).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import FindingLog
from .factors import QUANTITIES, override_weight, unit_kind_ok, check_override_conflicts
from .readers import MAX_LISTED, ROW, NoDataRows, printable, read_table
from .schema import LAND_KEYS, STRATUM_KEYS
from .settings import Settings
from .textrules import (FORMAT_OR_NONCHARACTER, LINE_CONTROL, MAX_NAME_CHARS, MAX_NOTE_CHARS,  # noqa: F401
                        MULTILINE_CONTROL, NONCHARACTER, SHOWN_CHARS, lookalike_letters, non_ascii_characters,
                        odd_characters, shorten)
from .vocabulary import KEY_COLUMNS, TERMS, describe_accepted, normalise_column, normalise_text

MAX_AREA_HA = 1e9
MAX_MAGNITUDE = 1e9
MAX_TEXT_CHARS = MAX_NAME_CHARS
MISSING_MARKERS = ("nan", "na", "n/a", "null", "none", "-", "--", "#n/a", "missing")
YEAR_RANGE = (1900, 2200)
AREA_COLUMNS = ("area_ha", "burned_ha")
AREA_BOUND_NOTE = " ha (the world's peatlands cover about 4e8 ha)"
# Text that a spreadsheet program evaluates when it opens a CSV file: refused in every text cell (the
# CSV files we write carry names, ids, citations and notes as given, so they never start a formula).
FORMULA_START = r"[=+\-@]"
FORMULA_TEXT = "=, +, - or @"

HEADER_ALIASES = {
    "area": "area_ha", "area_(ha)": "area_ha", "hectares": "area_ha", "burned_area_ha": "burned_ha",
    "burnt_ha": "burned_ha", "zone": "climate_zone", "landuse": "land_use", "drainage": "soil_status",
    "nutrients": "nutrient_status", "depth": "drainage_depth",
}


@dataclass(frozen=True)
class Column:
    name: str
    kind: str  # "year", "number" (>= 0), "signed", "text", "term", "fraction", "percent"
    required: bool = False
    term: str = ""  # vocabulary name for kind "term"
    default: str = ""
    blank_is_any: bool = False  # overrides: a blank stratum key means "any value"
    max_length: int = MAX_TEXT_CHARS  # kind "text"
    multiline: bool = False  # kind "text": tabs and line breaks allowed (citations, notes)
    maximum: float = MAX_MAGNITUDE  # number kinds: largest magnitude accepted


ACTIVITY_COLUMNS = [
    Column("year", "year", True),
    Column("region", "text", True),
    Column("climate_zone", "term", True, "climate_zone"),
    Column("land_use", "term", True, "land_use"),
    Column("soil_status", "term", True, "soil_status"),
    Column("nutrient_status", "term", True, "nutrient_status"),
    Column("drainage_depth", "term", True, "drainage_depth"),
    Column("subtype", "term", True, "subtype"),
    Column("area_ha", "number", True, maximum=MAX_AREA_HA),
    Column("ditch_fraction", "fraction"),
    Column("remaining_or_converted", "term", False, "remaining_or_converted", "remaining"),
    Column("previous_land_use", "term", False, "previous_land_use"),
    Column("area_uncertainty_pct", "percent"),
    Column("evidence", "term", False, "evidence"),
    Column("conversion_year", "year"),  # optional: sets remaining_or_converted by the transition period
]
FIRE_COLUMNS = [
    Column("year", "year", True),
    Column("region", "text", True),
    Column("climate_zone", "term", True, "climate_zone"),
    Column("land_use", "term", True, "land_use"),
    Column("soil_status", "term", True, "soil_status"),
    Column("fire_type", "term", True, "fire_type"),
    Column("burned_ha", "number", True, maximum=MAX_AREA_HA),
    Column("remaining_or_converted", "term", False, "remaining_or_converted", "remaining"),
]
def _any_value_columns(names) -> list[Column]:
    """Optional stratum keys where a blank cell means "any value" (overrides, driver series)."""
    return [Column(name, "term", False, name, blank_is_any=True) for name in names]


OVERRIDE_COLUMNS = [
    Column("quantity", "text", True),
    Column("value", "signed", True),  # removals are negative (e.g. rewetted CO2); bounds by quantity below
    Column("unit", "text", True),
    Column("source", "text", True, max_length=MAX_NOTE_CHARS, multiline=True),
    Column("override_id", "text"),
    *_any_value_columns(KEY_COLUMNS),
    *_any_value_columns(["fire_type"]),
    Column("ci_low", "signed"),
    Column("ci_high", "signed"),
    Column("tier", "text", False, default="Tier 2 country-specific"),
    Column("region", "text"),
    Column("first_year", "year"),
    Column("last_year", "year"),
    Column("note", "text", max_length=MAX_NOTE_CHARS, multiline=True),
]
REVIEW_COLUMNS = [
    Column("factor_id", "text", True),
    Column("checked_by", "text", True),
    Column("checked_on", "text", True),
    Column("against", "text", True, max_length=MAX_NOTE_CHARS, multiline=True),
    Column("result", "text", True),
    Column("note", "text", max_length=MAX_NOTE_CHARS, multiline=True),
]
REVIEW_LOG_COLUMNS = [
    Column("id", "text", True),
    Column("year_raised", "year", True),
    Column("category_code", "text", True),
    Column("principle", "text", True),
    Column("finding", "text", True, max_length=MAX_NOTE_CHARS, multiline=True),
    Column("response", "text", max_length=MAX_NOTE_CHARS, multiline=True),
    Column("status", "text", True),
]
# Driver series for gap filling (2006 GL Vol. 1 Eqs. 5.1 and 5.2): one row per series and year. The stratum
# keys say which strata the series fills (blank = any value); method, unit, source and keys are those of the
# series, so they must be the same on all of its rows.
SURROGATE_COLUMNS = [
    Column("series_id", "text", True),
    Column("method", "text", True),
    Column("year", "year", True),
    Column("value", "number", True),
    Column("unit", "text", True),
    Column("source", "text", True, max_length=MAX_NOTE_CHARS, multiline=True),
    Column("region", "text"),
    *_any_value_columns(KEY_COLUMNS),
    *_any_value_columns(["remaining_or_converted"]),
    Column("note", "text", max_length=MAX_NOTE_CHARS, multiline=True),
]
SURROGATE_METHODS = ("overlap", "surrogate")
SURROGATE_KEYS = [*LAND_KEYS, "remaining_or_converted"]  # what a driver series can be specific to
# Override quantities that cannot be negative (emission factors can: removals, CH4 uptake).
NON_NEGATIVE = ("fuel_consumption", "ef_fire_co2_c", "ef_fire_ch4", "ef_fire_co", "doc_flux_natural",
                "delta_doc_drainage", "frac_ditch", "frac_doc_co2")
PRINCIPLES = ("transparency", "accuracy", "consistency", "comparability", "completeness")
REVIEW_STATUS = ("resolved", "in_progress", "open")


def _header(name: str) -> str:
    norm = normalise_text(name)
    return HEADER_ALIASES.get(norm, norm)


class CellChecker:
    """Collects findings for one file, listing at most MAX_LISTED rows per problem."""

    def __init__(self, log: FindingLog, file: str, sheet: str):
        self.log, self.file, self.sheet = log, file, sheet

    def rows(self, severity: str, check: str, message: str, rows: pd.DataFrame, column: str,
             found: pd.Series | None = None, expected: str = "", cut: bool = True) -> None:
        if rows.empty:
            return
        shown = rows.head(MAX_LISTED)
        for idx, r in shown.iterrows():
            value = "" if found is None else str(found.loc[idx])
            value = shorten(value) if cut else value
            self.log.add(severity, check, message, file=self.file, sheet=self.sheet, row=int(r[ROW]),
                         column=column, found=value, expected=expected)
        if len(rows) > MAX_LISTED:
            self.log.add(severity, check, f"{message}: {len(rows) - MAX_LISTED} more rows not listed",
                         file=self.file, sheet=self.sheet, column=column)

    def one(self, severity: str, check: str, message: str, column: str = "", found: str = "", expected: str = ""):
        self.log.add(severity, check, message, file=self.file, sheet=self.sheet, column=printable(column),
                     found=found, expected=expected)


def _check_characters(raw: pd.DataFrame, stripped: pd.Series, unflagged: pd.Series, col: Column,
                      check: CellChecker) -> np.ndarray:
    """Noncharacters (any text), format characters and look-alike letters (names): rows refused.

    Every character concerned is outside ASCII, so only the non-ASCII cells are searched, and the
    look-alike letters only in their distinct values.
    """
    bad = np.zeros(len(raw), dtype=bool)
    candidates = stripped[unflagged & ~stripped.str.isascii()]
    if candidates.empty:
        return bad
    invisible = candidates.str.contains(NONCHARACTER if col.multiline else FORMAT_OR_NONCHARACTER, regex=True)
    rows = candidates[invisible]
    if not rows.empty:
        found = rows.map(lambda v: f"{shorten(v)} ({odd_characters(v)})")
        check.rows("error", "text", f"{col.name} holds " + ("a noncharacter" if col.multiline else
                                                          "an invisible character or a noncharacter"),
                   raw.loc[rows.index], col.name, found,
                   "text without noncharacters (U+FFFE, U+FFFF, U+FDD0 to U+FDEF)" if col.multiline else
                   "visible text: no format characters (zero-width spaces and joiners, soft hyphens, byte-order "
                   "marks) and no noncharacters (U+FFFE, U+FFFF, U+FDD0 to U+FDEF); retype the name",
                   cut=False)
        bad[raw.index.get_indexer(rows.index)] = True
    if col.multiline:
        return bad
    rest = candidates[~invisible]
    letters = {v: lookalike_letters(v) for v in pd.unique(rest)}
    letters = {v: found for v, found in letters.items() if found}
    if letters:
        rows = rest[rest.isin(list(letters))]
        found = rows.map(lambda v: f"{shorten(v)} ({odd_characters(v, letters[v])})")
        check.rows("error", "text", f"{col.name} mixes alphabets within a word (letters that look alike but are "
                   "others)", raw.loc[rows.index], col.name, found,
                   "each word in one alphabet: retype the letters named", cut=False)
        bad[raw.index.get_indexer(rows.index)] = True
    return bad


class _Distinct:
    """The distinct texts of a column (``values``, in order of first appearance) and each row's code.

    A check made on ``values`` gives the rows' answers by :meth:`rows` (a mask) or :meth:`spread` (a
    series): the same as making it on every cell, once per distinct text.
    """

    def __init__(self, text: pd.Series):
        self.text = text
        self.codes, uniques = pd.factorize(text, use_na_sentinel=False)
        self.values = pd.Series(uniques, dtype=text.dtype)

    def rows(self, mask: pd.Series) -> np.ndarray:
        return mask.to_numpy(dtype=bool)[self.codes]

    def spread(self, values: pd.Series, index: pd.Index) -> pd.Series:
        if values.dtype == self.values.dtype and values.equals(self.values):
            return self.text.set_axis(index)  # every text kept as given (the usual case): the column itself
        return values.take(self.codes).set_axis(index)


def _parse_numbers(text: pd.Series, decimal_comma: bool) -> pd.Series:
    cleaned = text.astype(str).str.strip()
    if decimal_comma:
        cleaned = cleaned.str.replace(",", ".", regex=False)
    return pd.to_numeric(cleaned.where(cleaned != "", np.nan), errors="coerce")


def _short_number(value: float) -> str:
    """1e9 rather than 1e+09 or 1000000000."""
    mantissa, exponent = f"{value:.0e}".split("e")
    return f"{mantissa}e{int(exponent)}"


def _number_expected(decimal_comma: bool) -> str:
    if decimal_comma:
        return ("a number with ',' or '.' as decimal mark and no thousands separator (remove the separators: "
                "1234,5 not 1.234,5 or 1 234,5)")
    return ("a number with '.' as decimal mark and no thousands separator (remove the separators: "
            "1234.5 not 1,234.5 or 1 234.5)")


def validate_columns(raw: pd.DataFrame, spec: list[Column], check: CellChecker, settings: Settings | None,
                     decimal_comma: bool = False) -> pd.DataFrame:
    """Check every cell against ``spec``; return a typed frame (rows with errors are kept but flagged)."""
    given = [c for c in raw.columns if c != ROW]
    header_map = {c: _header(c) for c in given}
    internal = [header_map[c] for c in given]  # one entry per column, even when two headers are spelt alike
    spellings: dict[str, list[str]] = {}
    for c, h in zip(given, internal):  # one pass: linear in the number of columns
        spellings.setdefault(h, []).append(str(c))
    duplicated = sorted(h for h, spelt in spellings.items() if h and len(spelt) > 1)
    for h in duplicated[:MAX_LISTED]:
        spelt = spellings[h]
        check.one("error", "columns", "column appears more than once", column=h,
                  found=shorten(", ".join(spelt[:MAX_LISTED]) + (f" and {len(spelt) - MAX_LISTED:,} more"
                                                                  if len(spelt) > MAX_LISTED else ""), 400),
                  expected="each column once")
    if len(duplicated) > MAX_LISTED:
        check.one("error", "columns", f"{len(duplicated) - MAX_LISTED:,} more columns appear more than once "
                  "(not listed)", expected="each column once")
    if duplicated:
        return pd.DataFrame()
    raw = raw.rename(columns=header_map)
    names = {c.name for c in spec}
    missing = [c.name for c in spec if c.required and c.name not in raw.columns]
    if missing:
        check.one("error", "columns", "required column missing", column=", ".join(missing),
                  found=", ".join(shorten(h, 40) for h in internal),
                  expected="columns " + ", ".join(c.name for c in spec if c.required))
        return pd.DataFrame()
    extra = [c for c in raw.columns if c not in names and c != ROW]
    if extra:
        check.one("warning", "columns", "column not used by the compiler (kept in your file, ignored here)",
                  column=", ".join(shorten(printable(c), 40) for c in extra[:MAX_LISTED])
                  + (f" and {len(extra) - MAX_LISTED:,} more" if len(extra) > MAX_LISTED else ""))
    out = pd.DataFrame({ROW: raw[ROW].to_numpy()}, index=raw.index)
    located = raw[[ROW]]  # the rows a finding names: only their numbers are read
    bad_rows = np.zeros(len(raw), dtype=bool)
    for col in spec:
        if col.name not in raw.columns:
            out[col.name] = col.default if col.kind in ("text", "term") else np.nan
            continue
        text = raw[col.name].astype(str)
        # Every check of a cell depends on its text alone: each is made once per distinct text of the
        # column and spread to the rows by their codes (a column of 1e6 cells holds a few thousand texts).
        cells = _Distinct(text)
        stripped = cells.values.str.strip()
        blank = stripped == ""
        if col.kind == "term":
            values, unknown = normalise_column(stripped.where(~blank, col.default), col.term)
            if col.blank_is_any:
                unknown.pop("", None)
            if unknown:
                bad = values.isin(list(unknown))
                for value, near in unknown.items():
                    rows = located[cells.rows((values == value) & bad)]
                    expected = describe_accepted(col.term) + (f" (closest: {near})" if near else "")
                    # Terms are ASCII: a look-alike or invisible character is named by its code point.
                    odd = non_ascii_characters(value.strip())
                    found = text if not odd else pd.Series(f"{shorten(value.strip())} ({odd})", index=rows.index)
                    check.rows("error", "vocabulary", f"unknown {col.name}", rows, col.name, found, expected,
                               cut=not odd)
                bad_rows |= cells.rows(bad)
            if col.required and "" not in TERMS[col.term]:
                empty = cells.rows(values == "")
                check.rows("error", "missing", f"{col.name} is blank", located[empty], col.name, text,
                           describe_accepted(col.term))
                bad_rows |= empty
            out[col.name] = cells.spread(values, raw.index)
        elif col.kind == "text":
            # One spelling per name: a region typed with a composed or a decomposed accent is one region.
            stripped = stripped.str.normalize("NFC")
            if col.required:
                check.rows("error", "missing", f"{col.name} is blank", located[cells.rows(blank)], col.name, text,
                           "a value")
                bad_rows |= cells.rows(blank)
            long = cells.rows(stripped.str.len() > col.max_length)
            check.rows("error", "text", f"{col.name} is longer than {col.max_length} characters", located[long],
                       col.name, text, f"at most {col.max_length} characters")
            bad_rows |= long
            control = cells.rows(stripped.str.contains(MULTILINE_CONTROL if col.multiline else LINE_CONTROL,
                                                       regex=True))
            check.rows("error", "text", f"{col.name} holds control characters", located[control], col.name, text,
                       "printable text" + ("" if col.multiline else " on one line"))
            bad_rows |= control
            # A cell that starts like a formula would be run by a spreadsheet program that opens a CSV we write.
            formula = cells.rows(stripped.str.match(FORMULA_START))
            check.rows("error", "text", f"{col.name} starts with {FORMULA_TEXT}, which a spreadsheet program runs "
                       "as a formula when it opens a CSV file", located[formula], col.name, text,
                       "text that starts with a letter, a digit or a bracket (reword, or drop the first character)")
            bad_rows |= formula
            bad_rows |= _check_characters(located, cells.spread(stripped, raw.index), pd.Series(~control, raw.index),
                                          col, check)
            out[col.name] = cells.spread(stripped.where(~blank, col.default), raw.index)
        else:
            numbers = _parse_numbers(stripped, decimal_comma)
            if decimal_comma:
                # "1.234" in a decimal-comma file is 1234 with a thousands dot, or 1.234: refuse to guess.
                grouped = stripped.str.fullmatch(r"[+-]?\d{1,3}(\.\d{3})+")
                numbers = numbers.where(~grouped)
            not_number = ~blank & numbers.isna()
            marker = cells.rows(not_number & stripped.str.lower().isin(MISSING_MARKERS))
            not_number = cells.rows(not_number)
            blank = cells.rows(blank)
            numbers = cells.spread(numbers, raw.index)
            if col.kind == "year":
                expected = "a whole year such as 2020"
            else:
                expected = _number_expected(decimal_comma)
            check.rows("error", "number", f"{col.name} is not a number", located[not_number & ~marker], col.name,
                       text, expected)
            check.rows("error", "number", f"{col.name} is not a number", located[marker], col.name, text,
                       "a number; a missing-value marker such as NaN or NA is not accepted (leave an optional cell "
                       "blank; a required one needs its value)")
            bad_rows |= not_number
            if col.required:
                check.rows("error", "missing", f"{col.name} is blank", located[blank], col.name, text, "a number")
                bad_rows |= blank
            infinite = pd.Series(~np.isfinite(numbers.to_numpy(dtype=float)), index=numbers.index) & numbers.notna()
            check.rows("error", "number", f"{col.name} is not finite", located[infinite], col.name, text, "a finite number")
            bad_rows |= infinite.to_numpy()
            numbers = numbers.where(~infinite)
            if col.kind == "year":
                fractional = numbers.notna() & (numbers != np.floor(numbers.fillna(0)))
                check.rows("error", "year", f"{col.name} is not a whole year", located[fractional], col.name, text,
                           "a whole year such as 2020")
                bad_rows |= fractional.to_numpy()
                first, last = YEAR_RANGE
                if settings is not None and col.required:
                    first, last, where = settings.first_year, settings.last_year, "settings [inventory]"
                else:
                    where = "a plausible year"
                out_of_range = numbers.notna() & ~fractional & ((numbers < first) | (numbers > last))
                label = "year outside the inventory years" if where.startswith("settings") else \
                    f"{col.name} outside {YEAR_RANGE[0]} to {YEAR_RANGE[1]}"
                check.rows("error", "year", label, located[out_of_range], col.name, text, f"{first} to {last} ({where})")
                bad_rows |= out_of_range.to_numpy()
                numbers = numbers.where(~(fractional | out_of_range))  # typed as whole years downstream
            else:
                if col.kind == "number":
                    negative = numbers < 0
                    check.rows("error", "number", f"{col.name} is negative", located[negative], col.name, text, ">= 0")
                    bad_rows |= negative.to_numpy()
                elif col.kind == "fraction":
                    outside = (numbers < 0) | (numbers > 1)
                    check.rows("error", "fraction", f"{col.name} is outside [0, 1]", located[outside], col.name, text,
                               "a fraction from 0 to 1")
                    bad_rows |= outside.to_numpy()
                elif col.kind == "percent":
                    outside = (numbers < 0) | (numbers > 1000)
                    check.rows("error", "number", f"{col.name} is outside 0 to 1000 %", located[outside], col.name, text,
                               "a 95 % half-width in percent")
                    bad_rows |= outside.to_numpy()
                huge = numbers.abs() > col.maximum
                check.rows("error", "number", f"{col.name} is above {_short_number(col.maximum)}"
                           + (" ha" if col.name in AREA_COLUMNS else " in magnitude"), located[huge], col.name, text,
                           f"at most {col.maximum:,.0f}" + (AREA_BOUND_NOTE if col.name in AREA_COLUMNS else ""))
                bad_rows |= huge.to_numpy()
            out[col.name] = numbers
    out["_bad"] = bad_rows
    return out


def _load(path: Path, sheet: str, spec: list[Column], log: FindingLog, settings: Settings,
          optional: bool = False) -> tuple[pd.DataFrame, str]:
    """``path`` read and validated against ``spec``. An ``optional`` input (fires, overrides, review, ...) with a
    header and no data rows means "none": an empty frame and a note, not an error."""
    try:
        raw, sheet_name, notes = read_table(path, sheet, settings.max_input_mb, columnar=True)
    except NoDataRows as exc:
        if not optional:
            raise
        finding = exc.findings[0]
        log.add("info", "read", "the file has a header and no data rows: nothing is read from it", file=finding.file,
                sheet=finding.sheet)
        return pd.DataFrame(), finding.sheet
    log.extend(notes)
    decimal_comma = any(n.check == "read" and n.found == ";" for n in notes)  # the reader's delimiter note
    check = CellChecker(log, str(path), sheet_name)
    frame = validate_columns(raw, spec, check, settings, decimal_comma)
    frame.attrs["file"], frame.attrs["sheet"] = str(path), sheet_name
    return frame, sheet_name


def load_optional(path: Path | None, spec: list[Column], log: FindingLog,
                   settings: Settings) -> tuple[pd.DataFrame, "CellChecker | None"]:
    """An optional input file read against ``spec``: (frame, checker), or (empty frame, None) when the file is
    not given or has no usable rows."""
    if path is None:
        return pd.DataFrame(), None
    frame, sheet = _load(path, "", spec, log, settings, optional=True)
    return frame, (None if frame.empty else CellChecker(log, str(path), sheet))


def load_activity(settings: Settings, log: FindingLog) -> pd.DataFrame:
    """The tidy stratum table: one row per year, region and stratum.

    A Parquet activity file holds parcels: they are aggregated to strata out of core first
    (:mod:`compiler.parcels`, engine from ``[inputs] engine``), then checked like a CSV.
    """
    if Path(settings.activity).suffix.lower() == ".parquet":
        from .parcels import load_parcel_activity

        frame, sheet = load_parcel_activity(settings, log)
    else:
        frame, sheet = _load(settings.activity, settings.activity_sheet, ACTIVITY_COLUMNS, log, settings)
    if frame.empty:
        return frame
    check = CellChecker(log, str(settings.activity), sheet)
    from .transition import apply_transition

    apply_transition(frame, settings.transition_years, check)
    good = frame[~frame["_bad"]]
    converted = good["remaining_or_converted"] == "converted"
    no_prev = good[converted & (good["previous_land_use"] == "")]
    check.rows("error", "conversion", "converted land needs previous_land_use", no_prev, "previous_land_use",
               no_prev["previous_land_use"], describe_accepted("land_use"))
    same = good[converted & (good["previous_land_use"] == good["land_use"])]
    check.rows("error", "conversion", "previous_land_use equals land_use on converted land", same,
               "previous_land_use", same["previous_land_use"], "another land use")
    # (a row past its transition period keeps its conversion_year and previous_land_use in the file: no warning)
    dated = good["conversion_year"].notna() if "conversion_year" in good else False
    prev_on_remaining = good[~converted & (good["previous_land_use"] != "") & ~dated]
    check.rows("warning", "conversion", "previous_land_use given on land marked remaining; ignored",
               prev_on_remaining, "previous_land_use", prev_on_remaining["previous_land_use"], "blank")
    frame.loc[~(frame["remaining_or_converted"] == "converted"), "previous_land_use"] = ""
    frame["year"] = frame["year"].astype("Int64")
    keys = frame[~frame["_bad"]]
    _check_duplicates(keys, check)
    _check_region_spellings(keys, check)
    rewetted_ditch = keys[(keys["soil_status"] == "rewetted") & keys["ditch_fraction"].notna()]
    check.rows("warning", "ditch", "ditch_fraction given on rewetted land is not used (Chapter 3 has no ditch term)",
               rewetted_ditch, "ditch_fraction", rewetted_ditch["ditch_fraction"])
    return frame


def _check_duplicates(keys: pd.DataFrame, check: CellChecker) -> None:
    """One row per year, region and stratum; says whether the repeated rows are copies or conflict."""
    # Rows of one stratum converted in different years (conversion_year) are separate parts of it.
    stratum_keys = STRATUM_KEYS + (["conversion_year"] if "conversion_year" in keys else [])
    dup = keys[keys.duplicated(stratum_keys, keep=False)]
    if dup.empty:
        return
    group = dup.groupby(stratum_keys, dropna=False, sort=False)
    gid = group.ngroup()
    copies = group["area_ha"].transform("nunique") <= 1
    found = pd.Series("", index=dup.index, dtype=object)
    for idx in dup.head(MAX_LISTED * 2).index:  # the rows listed: at most MAX_LISTED of each kind
        others = dup.loc[(gid == gid[idx]) & (dup.index != idx), ROW].astype(str)
        found[idx] = f"area_ha {dup.at[idx, 'area_ha']:g}, also in row {', '.join(others.head(5))}"
    message = "the same year, region and stratum appear in more than one row"
    check.rows("error", "duplicate", message, dup[copies], "year", found,
               "one row per year, region and stratum: these rows are copies, delete the repeats (or add the areas "
               "together if they are separate parts of the stratum)")
    check.rows("error", "duplicate", message, dup[~copies], "year", found,
               "one row per year, region and stratum: the areas conflict; add them together if they are parts of "
               "the stratum, otherwise correct the row")


def _check_region_spellings(keys: pd.DataFrame, check: CellChecker) -> None:
    """Regions that differ only in case or spacing are probably one region typed twice: a warning."""
    regions = pd.Series(pd.unique(keys["region"]))
    folded = regions.str.casefold().str.split().str.join(" ")
    clashes = regions[folded.duplicated(keep=False)]
    for _, names in clashes.groupby(folded[clashes.index]).head(MAX_LISTED).groupby(folded[clashes.index]):
        rows = keys[keys["region"].isin(list(names))].drop_duplicates("region")
        check.rows("warning", "region", "regions differ only in case or spacing; they are compiled as separate "
                   "regions", rows, "region", rows["region"], "one spelling per region")


def load_fires(settings: Settings, log: FindingLog) -> pd.DataFrame:
    if settings.fires is None:
        return pd.DataFrame()
    frame, sheet = _load(settings.fires, "", FIRE_COLUMNS, log, settings, optional=True)
    if not frame.empty:
        frame.attrs["file"], frame.attrs["sheet"] = str(settings.fires), sheet
        frame["year"] = frame["year"].astype("Int64")
        keys = ["year", "region", "climate_zone", "land_use", "soil_status", "fire_type", "remaining_or_converted"]
        good = frame[~frame["_bad"]]
        dup = good[good.duplicated(keys, keep=False)]
        CellChecker(log, str(settings.fires), sheet).rows(
            "error", "duplicate", "the same fire (year, region, stratum, fire type) appears in more than one row", dup,
            "year", dup["region"].astype(str), "one row per fire stratum and year (add the burnt areas together)")
    return frame


FIRE_STRATUM = ["year", "region", "climate_zone", "land_use", "soil_status"]


def check_fires_within_strata(fires: pd.DataFrame, activity: pd.DataFrame, log: FindingLog) -> None:
    """A fire burns at most the area of its stratum: burned_ha <= the activity area of its year, region,
    climate zone, land use and soil status (after gap filling; remaining and converted land together, all
    nutrient statuses, drainage depths and subtypes). Each fire row above it is an error naming both figures.
    A fire whose stratum has no activity row is a warning (its area cannot be compared)."""
    if fires is None or fires.empty or activity is None or activity.empty:
        return
    good = fires[~fires["_bad"]]
    if good.empty:
        return
    keys = good[FIRE_STRATUM].astype({"year": "int64"})
    area = activity.assign(year=activity["year"].astype("int64")).groupby(FIRE_STRATUM, sort=False)["area_ha"].sum()
    available = keys.merge(area.rename("stratum_ha").reset_index(), on=FIRE_STRATUM, how="left")["stratum_ha"]
    available = pd.Series(available.to_numpy(), index=good.index)
    # A fire in a stratum without activity rows is computed (an inventory may report fires alone), with a
    # warning: its burnt area is not within any drained or rewetted area of the activity data.
    check = CellChecker(log, fires.attrs.get("file", ""), fires.attrs.get("sheet", ""))
    alone = good[available.isna().to_numpy()]
    check.rows(
        "warning", "fire", "the fire's stratum has no row in the activity data, so its area is not compared",
        alone, "region", alone["region"].astype(str),
        "a row of the activity data for the same year, region, climate zone, land use and soil status")
    over = good[available.notna() & (good["burned_ha"] > available)]
    found = pd.Series([f"burned_ha {b:,.6g} ha; the stratum ({y} {r}, {c}, {lu}, {st}) has {a:,.6g} ha"
                       for b, a, y, r, c, lu, st in zip(over["burned_ha"], available[over.index], over["year"],
                                                         over["region"], over["climate_zone"], over["land_use"],
                                                         over["soil_status"])], index=over.index, dtype=object)
    check.rows(
        "error", "fire", "the fire burns more hectares than its stratum holds", over, "burned_ha", found,
        "at most the stratum's area_ha in the activity data (same year, region, climate zone, land use and soil "
        "status)", cut=False)


def load_overrides(settings: Settings, log: FindingLog) -> pd.DataFrame:
    frame, check = load_optional(settings.overrides, OVERRIDE_COLUMNS, log, settings)
    if check is None:
        return frame
    file, sheet = check.file, check.sheet
    unknown_q = frame[~frame["quantity"].isin(list(QUANTITIES)) & (frame["quantity"] != "")]
    check.rows("error", "override", "unknown quantity", unknown_q, "quantity", unknown_q["quantity"],
               " | ".join(QUANTITIES))
    known = frame[frame["quantity"].isin(list(QUANTITIES))]
    reasons = pd.Series([unit_kind_ok(u, q) for u, q in zip(known["unit"], known["quantity"])], index=known.index,
                        dtype=object)
    bad_unit = known[reasons != ""]
    for idx, row in bad_unit.head(MAX_LISTED).iterrows():
        log.add("error", "override", f"unit cannot be converted for {row['quantity']}: {reasons[idx]}",
                file=file, sheet=sheet, row=int(row[ROW]), column="unit", found=row["unit"],
                expected=QUANTITIES[row["quantity"]][1] + " or a convertible unit")
    bounds = {q: QUANTITIES[q][2] or ((0.0, np.inf) if q in NON_NEGATIVE else (-np.inf, np.inf)) for q in QUANTITIES}
    low = known["quantity"].map(lambda q: bounds[q][0]).astype(float)
    high = known["quantity"].map(lambda q: bounds[q][1]).astype(float)
    outside = known[(known["value"] < low) | (known["value"] > high)]
    for idx, row in outside.head(MAX_LISTED).iterrows():
        lo, hi = bounds[row["quantity"]]
        log.add("error", "override", f"value out of range for {row['quantity']}", file=file, sheet=sheet,
                row=int(row[ROW]), column="value", found=f"{row['value']:g}",
                expected=f">= {lo:g}" if hi == np.inf else f"{lo:g} to {hi:g}")
    # astype(bool): with no known quantity the empty mask must still select rows, not columns
    fraction_q = known[known["quantity"].map(lambda q: QUANTITIES[q][1] == "fraction").astype(bool)]
    not_plain = fraction_q[fraction_q["unit"].str.strip().str.lower() != "fraction"]
    check.rows("error", "override", "give fractions as fractions (0 to 1)", not_plain, "unit", not_plain["unit"],
               "fraction")
    frame["first_year"] = frame["first_year"].fillna(settings.first_year).astype(int)
    frame["last_year"] = frame["last_year"].fillna(settings.last_year).astype(int)
    reversed_years = frame[frame["first_year"] > frame["last_year"]]
    check.rows("error", "override", "first_year is after last_year", reversed_years, "first_year",
               reversed_years["first_year"], "first_year <= last_year")
    lo, hi = frame["ci_low"], frame["ci_high"]
    outside = frame[(lo.notna() & (lo > frame["value"])) | (hi.notna() & (hi < frame["value"]))]
    check.rows("error", "override", "value lies outside its own interval", outside, "value", outside["value"],
               "ci_low <= value <= ci_high")
    # A bounded quantity (a fraction) has its interval inside the same bounds: the Monte Carlo draws from it,
    # and an interval reaching past 0 or 1 would otherwise be cut to a different distribution.
    bounded = known[known["quantity"].map(lambda q: QUANTITIES[q][2] is not None).astype(bool)]
    for end, values in (("ci_low", lo), ("ci_high", hi)):
        rows = bounded[values[bounded.index].notna()]
        low = rows["quantity"].map(lambda q: bounds[q][0]).astype(float)
        high = rows["quantity"].map(lambda q: bounds[q][1]).astype(float)
        rows = rows[(values[rows.index] < low) | (values[rows.index] > high)]
        for idx, row in rows.head(MAX_LISTED).iterrows():
            b_lo, b_hi = bounds[row["quantity"]]
            log.add("error", "override", f"{end} out of range for {row['quantity']}: the interval must lie within "
                    f"the range of the value", file=file, sheet=sheet, row=int(row[ROW]), column=end,
                    found=f"{row[end]:g}", expected=f">= {b_lo:g}" if b_hi == np.inf else f"{b_lo:g} to {b_hi:g}")
    one_sided = frame[lo.isna() != hi.isna()]
    check.rows("error", "override", "give both ci_low and ci_high, or neither", one_sided, "ci_low",
               one_sided["ci_low"])
    frame["override_id"] = np.where(frame["override_id"] == "",
                                    "override-row-" + frame[ROW].astype(str), frame["override_id"])
    dup = frame[frame["override_id"].duplicated(keep=False)]
    check.rows("error", "override", "override_id used twice", dup, "override_id", dup["override_id"], "unique ids")
    frame["_weight"] = override_weight(frame)
    frame["origin"] = Path(file).name
    if not log.errors:
        log.extend(check_override_conflicts(frame, file))
    return frame


def load_review(settings: Settings, log: FindingLog, register_ids: set[str]) -> pd.DataFrame:
    if settings.factor_review is None:
        return pd.DataFrame()
    frame, sheet = _load(settings.factor_review, "", REVIEW_COLUMNS, log, settings, optional=True)
    if frame.empty:
        return frame
    check = CellChecker(log, str(settings.factor_review), sheet)
    frame["result"] = frame["result"].map(normalise_text)
    bad = frame[~frame["result"].isin(["agrees", "differs"])]
    check.rows("error", "review", "result must be agrees or differs", bad, "result", bad["result"], "agrees | differs")
    unknown = frame[~frame["factor_id"].isin(list(register_ids))]
    check.rows("error", "review", "factor_id is not in the factor register", unknown, "factor_id",
               unknown["factor_id"], "an id listed by 'histosol factors'")
    return frame


def load_surrogates(settings: Settings, log: FindingLog) -> pd.DataFrame:
    """Driver series for the overlap (Eq. 5.1) and surrogate (Eq. 5.2) techniques; empty without the input."""
    frame, check = load_optional(settings.surrogates, SURROGATE_COLUMNS, log, settings)
    if check is None:
        return frame
    file = check.file
    frame["method"] = frame["method"].map(normalise_text)
    bad = frame[~frame["method"].isin(SURROGATE_METHODS)]
    check.rows("error", "surrogates", "unknown method", bad, "method", bad["method"], " | ".join(SURROGATE_METHODS))
    for column in ("method", "unit", *SURROGATE_KEYS):
        # A series is one driver for one set of strata: its description may not change from row to row.
        varies = frame.groupby("series_id")[column].transform("nunique") > 1
        rows = frame[varies]
        check.rows("error", "surrogates", f"{column} differs between rows of the same series_id", rows, column,
                   rows[column], f"one {column} per series_id")
    dup = frame[frame.duplicated(["series_id", "year"], keep=False)]
    check.rows("error", "surrogates", "series_id and year given twice", dup, "year", dup["year"],
               "one value per series and year")
    frame["year"] = frame["year"].astype("Int64")
    frame.attrs["file"] = file
    return frame


def load_review_log(settings: Settings, log: FindingLog, category_codes: set[str]) -> pd.DataFrame:
    """Earlier review findings; an open one raised three or more years before the submission is a warning."""
    if settings.review_log is None:
        return pd.DataFrame()
    raw, sheet, notes = read_table(settings.review_log, "", settings.max_input_mb)
    log.extend(notes)
    check = CellChecker(log, str(settings.review_log), sheet)
    frame = validate_columns(raw, REVIEW_LOG_COLUMNS, check, None)
    if frame.empty:
        return frame
    for column, accepted in (("principle", PRINCIPLES), ("status", REVIEW_STATUS)):
        frame[column] = frame[column].map(normalise_text)
        bad = frame[~frame[column].isin(accepted)]
        check.rows("error", "review_log", f"unknown {column}", bad, column, bad[column], " | ".join(accepted))
    unknown = frame[~frame["category_code"].isin(list(category_codes))]
    check.rows("warning", "review_log", "category_code is not a category of this inventory", unknown,
               "category_code", unknown["category_code"], "a code of factor_tables/reporting_categories.csv")
    frame["year_raised"] = frame["year_raised"].astype("Int64")
    stale = frame[(frame["status"] == "open") & (frame["year_raised"] <= settings.submission_year - 3)]
    for _, row in stale.iterrows():  # review items: a handful
        log.add("warning", "review_open", f"review finding {row['id']} ({row['category_code']}, {row['principle']}) "
                f"raised in {row['year_raised']} is still open", file=str(settings.review_log), row=int(row[ROW]),
                column="status", found="open", expected="resolved or in_progress within three years")
    return frame
