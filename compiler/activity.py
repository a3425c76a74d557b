"""Activity data, fires, overrides and the factor review log: read, validate, tidy.

Each reader maps user-facing headers to internal names in one place
(:data:`HEADER_ALIASES`), checks every cell, and returns a typed table. All
problems of a file are collected and reported at once, each with file,
sheet, row and column, what was found and what was expected.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import Finding, FindingLog
from .factors import KEYS, QUANTITIES, override_weight, unit_kind_ok, check_override_conflicts
from .readers import MAX_LISTED, ROW, read_table
from .settings import Settings
from .vocabulary import TERMS, describe_accepted, normalise_column, normalise_text

HEADER_ALIASES = {
    "area": "area_ha", "area_(ha)": "area_ha", "hectares": "area_ha", "burned_area_ha": "burned_ha",
    "burnt_ha": "burned_ha", "zone": "climate_zone", "landuse": "land_use", "drainage": "soil_status",
    "nutrients": "nutrient_status", "depth": "drainage_depth",
}


@dataclass(frozen=True)
class Column:
    name: str
    kind: str  # "year", "number", "text", "term", "fraction", "percent"
    required: bool = False
    term: str = ""  # vocabulary name for kind "term"
    default: str = ""
    blank_is_any: bool = False  # overrides: a blank stratum key means "any value"


ACTIVITY_COLUMNS = [
    Column("year", "year", True),
    Column("region", "text", True),
    Column("climate_zone", "term", True, "climate_zone"),
    Column("land_use", "term", True, "land_use"),
    Column("soil_status", "term", True, "soil_status"),
    Column("nutrient_status", "term", True, "nutrient_status"),
    Column("drainage_depth", "term", True, "drainage_depth"),
    Column("subtype", "term", True, "subtype"),
    Column("area_ha", "number", True),
    Column("ditch_fraction", "fraction"),
    Column("remaining_or_converted", "term", False, "remaining_or_converted", "remaining"),
    Column("previous_land_use", "term", False, "previous_land_use"),
    Column("area_uncertainty_pct", "percent"),
]
FIRE_COLUMNS = [
    Column("year", "year", True),
    Column("region", "text", True),
    Column("climate_zone", "term", True, "climate_zone"),
    Column("land_use", "term", True, "land_use"),
    Column("soil_status", "term", True, "soil_status"),
    Column("fire_type", "term", True, "fire_type"),
    Column("burned_ha", "number", True),
    Column("remaining_or_converted", "term", False, "remaining_or_converted", "remaining"),
]
OVERRIDE_COLUMNS = [
    Column("quantity", "text", True),
    Column("value", "number", True),
    Column("unit", "text", True),
    Column("source", "text", True),
    Column("override_id", "text"),
    Column("climate_zone", "term", False, "climate_zone", blank_is_any=True),
    Column("land_use", "term", False, "land_use", blank_is_any=True),
    Column("soil_status", "term", False, "soil_status", blank_is_any=True),
    Column("nutrient_status", "term", False, "nutrient_status", blank_is_any=True),
    Column("drainage_depth", "term", False, "drainage_depth", blank_is_any=True),
    Column("subtype", "term", False, "subtype", blank_is_any=True),
    Column("fire_type", "term", False, "fire_type", blank_is_any=True),
    Column("ci_low", "signed"),
    Column("ci_high", "signed"),
    Column("tier", "text", False, default="Tier 2 country-specific"),
    Column("region", "text"),
    Column("first_year", "year"),
    Column("last_year", "year"),
    Column("note", "text"),
]
REVIEW_COLUMNS = [
    Column("factor_id", "text", True),
    Column("checked_by", "text", True),
    Column("checked_on", "text", True),
    Column("against", "text", True),
    Column("result", "text", True),
    Column("note", "text"),
]
REVIEW_LOG_COLUMNS = [
    Column("id", "text", True),
    Column("year_raised", "year", True),
    Column("category_code", "text", True),
    Column("principle", "text", True),
    Column("finding", "text", True),
    Column("response", "text"),
    Column("status", "text", True),
]
PRINCIPLES = ("transparency", "accuracy", "consistency", "comparability", "completeness")
REVIEW_STATUS = ("resolved", "in_progress", "open")
STRATUM_KEYS = ["year", "region", *KEYS[:-1], "remaining_or_converted", "previous_land_use"]


def _header(name: str) -> str:
    norm = normalise_text(name)
    return HEADER_ALIASES.get(norm, norm)


class _Checker:
    """Collects findings for one file, listing at most MAX_LISTED rows per problem."""

    def __init__(self, log: FindingLog, file: str, sheet: str):
        self.log, self.file, self.sheet = log, file, sheet

    def rows(self, severity: str, check: str, message: str, rows: pd.DataFrame, column: str,
             found: pd.Series | None = None, expected: str = "") -> None:
        if rows.empty:
            return
        shown = rows.head(MAX_LISTED)
        for idx, r in shown.iterrows():
            value = "" if found is None else str(found.loc[idx])
            self.log.add(severity, check, message, file=self.file, sheet=self.sheet, row=int(r[ROW]),
                         column=column, found=value, expected=expected)
        if len(rows) > MAX_LISTED:
            self.log.add(severity, check, f"{message}: {len(rows) - MAX_LISTED} more rows not listed",
                         file=self.file, sheet=self.sheet, column=column)

    def one(self, severity: str, check: str, message: str, column: str = "", found: str = "", expected: str = ""):
        self.log.add(severity, check, message, file=self.file, sheet=self.sheet, column=column, found=found,
                     expected=expected)


def _parse_numbers(text: pd.Series, decimal_comma: bool) -> pd.Series:
    cleaned = text.astype(str).str.strip()
    if decimal_comma:
        cleaned = cleaned.str.replace(",", ".", regex=False)
    return pd.to_numeric(cleaned.where(cleaned != "", np.nan), errors="coerce")


def validate_columns(raw: pd.DataFrame, spec: list[Column], check: _Checker, settings: Settings | None,
                     decimal_comma: bool = False) -> pd.DataFrame:
    """Check every cell against ``spec``; return a typed frame (rows with errors are kept but flagged)."""
    header_map = {c: _header(c) for c in raw.columns if c != ROW}
    internal = list(header_map.values())
    duplicated = sorted({h for h in internal if internal.count(h) > 1})
    for h in duplicated:
        check.one("error", "columns", "column appears more than once", column=h, found=h)
    if duplicated:
        return pd.DataFrame()
    raw = raw.rename(columns=header_map)
    names = {c.name for c in spec}
    missing = [c.name for c in spec if c.required and c.name not in raw.columns]
    if missing:
        check.one("error", "columns", "required column missing", column=", ".join(missing),
                  found=", ".join(internal), expected="columns " + ", ".join(c.name for c in spec if c.required))
        return pd.DataFrame()
    extra = [c for c in raw.columns if c not in names and c != ROW]
    if extra:
        check.one("warning", "columns", "column not used by the compiler (kept in your file, ignored here)",
                  column=", ".join(map(str, extra)))
    out = pd.DataFrame({ROW: raw[ROW].to_numpy()}, index=raw.index)
    bad_rows = np.zeros(len(raw), dtype=bool)
    for col in spec:
        if col.name not in raw.columns:
            out[col.name] = col.default if col.kind in ("text", "term") else np.nan
            continue
        text = raw[col.name].astype(str)
        stripped = text.str.strip()
        blank = stripped == ""
        if col.kind == "term":
            values, unknown = normalise_column(stripped.where(~blank, col.default), col.term)
            if col.blank_is_any:
                unknown.pop("", None)
            if unknown:
                bad = values.isin(list(unknown))
                for value, near in unknown.items():
                    rows = raw[(values == value) & bad]
                    expected = describe_accepted(col.term) + (f" (closest: {near})" if near else "")
                    check.rows("error", "vocabulary", f"unknown {col.name}", rows, col.name, text, expected)
                bad_rows |= bad.to_numpy()
            if col.required and "" not in TERMS[col.term]:
                empty = raw[values == ""]
                check.rows("error", "missing", f"{col.name} is blank", empty, col.name, text,
                           describe_accepted(col.term))
                bad_rows |= (values == "").to_numpy()
            out[col.name] = values
        elif col.kind == "text":
            if col.required:
                check.rows("error", "missing", f"{col.name} is blank", raw[blank], col.name, text, "a value")
                bad_rows |= blank.to_numpy()
            control = stripped.str.contains(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]", regex=True)
            check.rows("error", "text", f"{col.name} holds control characters", raw[control], col.name,
                       text.str.encode("unicode_escape").str.decode("ascii"), "printable text")
            bad_rows |= control.to_numpy()
            out[col.name] = stripped.where(~blank, col.default)
        else:
            numbers = _parse_numbers(stripped, decimal_comma)
            not_number = ~blank & numbers.isna()
            check.rows("error", "number", f"{col.name} is not a number", raw[not_number], col.name, text,
                       "a number with '.' as decimal mark and no thousands separator")
            bad_rows |= not_number.to_numpy()
            if col.required:
                check.rows("error", "missing", f"{col.name} is blank", raw[blank], col.name, text, "a number")
                bad_rows |= blank.to_numpy()
            finite = numbers.apply(lambda v: v is not None and not math.isnan(v) and math.isfinite(v)) | numbers.isna()
            infinite = ~finite
            check.rows("error", "number", f"{col.name} is not finite", raw[infinite], col.name, text, "a finite number")
            bad_rows |= infinite.to_numpy()
            if col.kind == "year":
                fractional = numbers.notna() & (numbers != np.floor(numbers.fillna(0)))
                check.rows("error", "year", f"{col.name} is not a whole year", raw[fractional], col.name, text,
                           "a whole year such as 2020")
                bad_rows |= fractional.to_numpy()
                if settings is not None and col.required:
                    out_of_range = numbers.notna() & ((numbers < settings.first_year) | (numbers > settings.last_year))
                    check.rows("error", "year", "year outside the inventory years", raw[out_of_range], col.name, text,
                               f"{settings.first_year} to {settings.last_year} (settings [inventory])")
                    bad_rows |= out_of_range.to_numpy()
            elif col.kind == "number":
                negative = numbers < 0
                check.rows("error", "number", f"{col.name} is negative", raw[negative], col.name, text, ">= 0")
                bad_rows |= negative.to_numpy()
            elif col.kind == "fraction":
                outside = (numbers < 0) | (numbers > 1)
                check.rows("error", "fraction", f"{col.name} is outside [0, 1]", raw[outside], col.name, text,
                           "a fraction from 0 to 1")
                bad_rows |= outside.to_numpy()
            elif col.kind == "percent":
                outside = (numbers < 0) | (numbers > 1000)
                check.rows("error", "number", f"{col.name} is outside 0 to 1000 %", raw[outside], col.name, text,
                           "a 95 % half-width in percent")
                bad_rows |= outside.to_numpy()
            out[col.name] = numbers
    out["_bad"] = bad_rows
    return out


def _load(path: Path, sheet: str, spec: list[Column], log: FindingLog, settings: Settings) -> tuple[pd.DataFrame, str]:
    raw, sheet_name, notes = read_table(path, sheet, settings.max_input_mb)
    log.extend(notes)
    decimal_comma = any("semicolon" in n.message for n in notes)
    check = _Checker(log, str(path), sheet_name)
    frame = validate_columns(raw, spec, check, settings, decimal_comma)
    frame.attrs["file"], frame.attrs["sheet"] = str(path), sheet_name
    return frame, sheet_name


def load_activity(settings: Settings, log: FindingLog) -> pd.DataFrame:
    """The tidy stratum table: one row per year, region and stratum."""
    frame, sheet = _load(settings.activity, settings.activity_sheet, ACTIVITY_COLUMNS, log, settings)
    if frame.empty:
        return frame
    check = _Checker(log, str(settings.activity), sheet)
    good = frame[~frame["_bad"]]
    converted = good["remaining_or_converted"] == "converted"
    no_prev = good[converted & (good["previous_land_use"] == "")]
    check.rows("error", "conversion", "converted land needs previous_land_use", no_prev, "previous_land_use",
               no_prev["previous_land_use"], describe_accepted("land_use"))
    same = good[converted & (good["previous_land_use"] == good["land_use"])]
    check.rows("error", "conversion", "previous_land_use equals land_use on converted land", same,
               "previous_land_use", same["previous_land_use"], "another land use")
    prev_on_remaining = good[~converted & (good["previous_land_use"] != "")]
    check.rows("warning", "conversion", "previous_land_use given on land marked remaining; ignored",
               prev_on_remaining, "previous_land_use", prev_on_remaining["previous_land_use"], "blank")
    frame.loc[~(frame["remaining_or_converted"] == "converted"), "previous_land_use"] = ""
    frame["year"] = frame["year"].astype("Int64")
    keys = frame[~frame["_bad"]]
    dup = keys[keys.duplicated(STRATUM_KEYS, keep=False)]
    check.rows("error", "duplicate", "the same year, region and stratum appear in more than one row", dup,
               "year", dup["region"].astype(str), "one row per year, region and stratum (add the areas together)")
    rewetted_ditch = keys[(keys["soil_status"] == "rewetted") & keys["ditch_fraction"].notna()]
    check.rows("warning", "ditch", "ditch_fraction given on rewetted land is not used (Chapter 3 has no ditch term)",
               rewetted_ditch, "ditch_fraction", rewetted_ditch["ditch_fraction"])
    return frame


def load_fires(settings: Settings, log: FindingLog) -> pd.DataFrame:
    if settings.fires is None:
        return pd.DataFrame()
    frame, sheet = _load(settings.fires, "", FIRE_COLUMNS, log, settings)
    if not frame.empty:
        frame["year"] = frame["year"].astype("Int64")
    return frame


def load_overrides(settings: Settings, log: FindingLog) -> pd.DataFrame:
    if settings.overrides is None:
        return pd.DataFrame()
    frame, sheet = _load(settings.overrides, "", OVERRIDE_COLUMNS, log, settings)
    if frame.empty:
        return frame
    file = str(settings.overrides)
    check = _Checker(log, file, sheet)
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
    fraction_q = known[known["quantity"].map(lambda q: QUANTITIES[q][1] == "fraction")]
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
    frame, sheet = _load(settings.factor_review, "", REVIEW_COLUMNS, log, settings)
    if frame.empty:
        return frame
    check = _Checker(log, str(settings.factor_review), sheet)
    frame["result"] = frame["result"].map(normalise_text)
    bad = frame[~frame["result"].isin(["agrees", "differs"])]
    check.rows("error", "review", "result must be agrees or differs", bad, "result", bad["result"], "agrees | differs")
    unknown = frame[~frame["factor_id"].isin(list(register_ids))]
    check.rows("error", "review", "factor_id is not in the factor register", unknown, "factor_id",
               unknown["factor_id"], "an id listed by 'histosol factors'")
    return frame


def load_review_log(settings: Settings, log: FindingLog, category_codes: set[str]) -> pd.DataFrame:
    """Earlier review findings; an open one raised three or more years before the submission is a warning."""
    if settings.review_log is None:
        return pd.DataFrame()
    raw, sheet, notes = read_table(settings.review_log, "", settings.max_input_mb)
    log.extend(notes)
    check = _Checker(log, str(settings.review_log), sheet)
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
