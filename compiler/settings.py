"""Inventory settings from a TOML file, validated with clear errors.

Every number-changing choice of a run comes from here (never from the
environment or from the presence of a file) and is printed in the report and
the manifest. Paths are relative to the settings file and may not leave its
folder.
"""

from __future__ import annotations

import datetime as _dt
import difflib
import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import Finding, SettingsError
from .textrules import has_invisible, odd_characters
from .units import MASS_RATIO_CONVENTIONS
from .vocabulary import TERMS

FACTOR_SETS = ("ipcc2013ws", "ipcc2006")
ATTRIBUTE = {"approach": "uncertainty_approach"}  # settings key -> Settings attribute, where they differ
PATH_KEYS = ("activity", "fires", "overrides", "factor_review", "national_totals", "scenarios",
             "previous_submission", "review_log", "surrogates", "peat_production")
GWP_SETS = ("AR5", "AR4", "AR6", "SAR")
IPCC2006_TEMPERATE = ("cold_temperate", "warm_temperate")
ALLOCATION_SCHEMES = ("ipcc2006", "etf")  # factor_tables/reporting_allocation[_etf].csv

# section -> key -> (python types, default, allowed values or None, description)
_REQUIRED = object()
MAX_SETTINGS_BYTES = 1024 * 1024  # a settings file is a few kilobytes; a larger one is not read
COMPILE_DATE_RANGE = ("1980-01-01", "2107-12-31")  # ISO dates compare as text; the range of a zip entry's date
MAX_SETTING_CHARS = 500  # any text value, such as the inventory name or a path
_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069]")
SCHEMA: dict[str, dict[str, tuple]] = {
    "inventory": {
        "name": ((str,), _REQUIRED, None, "inventory name printed on every output"),
        "submission_year": ((int,), _REQUIRED, None, "year of the submission"),
        "first_year": ((int,), _REQUIRED, None, "first inventory year (usually 1990)"),
        "last_year": ((int,), _REQUIRED, None, "last inventory year"),
        "compile_date": ((str, _dt.date), "", None, "date printed on the outputs (YYYY-MM-DD); blank = today"),
    },
    "method": {
        "factor_set": ((str,), "ipcc2013ws", FACTOR_SETS, "edition of the Tier 1 defaults"),
        "gwp": ((str,), "AR5", GWP_SETS, "GWP100 set for CO2 equivalents"),
        "mass_ratios": ((str,), "standard_atomic_weights", MASS_RATIO_CONVENTIONS,
                        "molar masses for C->CO2, CH4-C->CH4, N2O-N->N2O"),
        "ipcc2006_temperate": ((str,), "", IPCC2006_TEMPERATE + ("",),
                               "with factor_set ipcc2006: whether 'temperate' strata are cold or warm temperate"),
        "allocation": ((str,), "ipcc2006", ALLOCATION_SCHEMES,
                       "reporting categories: ipcc2006 (2006 IPCC Guidelines codes) or etf (common reporting tables "
                       "of the Paris Agreement's enhanced transparency framework)"),
        "transition_years": ((int,), 20, None,
                             "years converted land stays converted (2006 IPCC Guidelines Vol. 4 Ch. 3), used with "
                             "the activity column conversion_year"),
    },
    "inputs": {
        "activity": ((str,), _REQUIRED, None, "activity data (CSV or XLSX)"),
        "activity_sheet": ((str,), "", None, "sheet of an XLSX activity file (blank = the first)"),
        "engine": ((str,), "duckdb", ("duckdb", "dask"), "aggregation engine for a Parquet parcel file"),
        "fires": ((str,), "", None, "organic-soil fires (CSV or XLSX)"),
        "overrides": ((str,), "", None, "country- or region-specific factors (CSV or XLSX)"),
        "factor_review": ((str,), "", None, "the agency's check of shipped factors (CSV or XLSX)"),
        "national_totals": ((str,), "", None, "rest of the national inventory by year, category and gas (CSV or XLSX)"),
        "scenarios": ((str,), "", None, "scenario definitions (TOML) for 'histosol scenarios'"),
        "previous_submission": ((str,), "", None, "emissions.csv(.gz) of the previous submission, for recalculations"),
        "review_log": ((str,), "", None, "earlier review findings and their status (CSV or XLSX)"),
        "surrogates": ((str,), "", None, "overlap and surrogate series for gap filling, Eqs. 5.1 and 5.2 (CSV or XLSX)"),
        "peat_production": ((str,), "", None,
                            "peat extracted per year (air-dry tonnes or volume), for the off-site CO2 of 3.B.4.a.i "
                            "(CSV or XLSX)"),
    },
    "uncertainty": {
        "approach": ((str,), "both", ("1", "2", "both"), "Approach 1 (error propagation), 2 (Monte Carlo) or both"),
        "iterations": ((int,), 20000, None, "Monte Carlo iterations"),
        "seed": ((int,), 20130101, None, "seed of the Monte Carlo random numbers"),
        "correlate_activity_across_years": ((bool,), True, None,
                                            "one activity draw per region and stratum, shared by all years"),
        "default_area_pct": ((int, float), 10.0, None,
                             "95 % half-width of area data in percent where the activity row gives none"),
    },
    "timeseries": {
        "fill": ((str,), "none", ("none", "interpolate", "extrapolate", "both"),
                 "gap filling of the area series: none (gaps are errors), interpolate, extrapolate, both"),
        "trend_years": ((int,), 5, None, "known years used for trend extrapolation"),
        "fill_by_region": ((dict,), {}, None, "per-region fill mode, e.g. {\"Quillfen\" = \"both\"}"),
        "fill_by_land_use": ((dict,), {}, None,
                             "per-land-use fill mode, e.g. {cropland = \"interpolate\"} (a region's mode comes first)"),
    },
    "qaqc": {
        "year_on_year_area_pct": ((int, float), 25.0, None, "flag a stratum's area change above this [%]"),
        "year_on_year_emission_pct": ((int, float), 25.0, None, "flag a category's CO2-eq change above this [%]"),
        "year_on_year_area_floor_ha": ((int, float), 100.0, None, "smaller flagged area changes are info [ha]"),
        "year_on_year_emission_floor_t": ((int, float), 1000.0, None, "smaller flagged changes are info [t CO2-eq]"),
        "area_balance_tolerance_pct": ((int, float), 0.5, None, "area change accepted without a declared conversion [%]"),
        "insignificance_pct": ((int, float), 0.05, None, "NE insignificant below this share of the national total [%]"),
        "insignificance_kt": ((int, float), 500.0, None, "... and below this size [kt CO2-eq]"),
        "insignificance_aggregate_pct": ((int, float), 0.1, None, "all insignificant NE together below this share [%]"),
    },
    "limits": {
        "max_input_mb": ((int, float), 512, None, "largest input file read, in MiB"),
    },
}


@dataclass(frozen=True)
class Settings:
    """Validated settings of one compile. Paths are absolute."""

    name: str
    submission_year: int
    first_year: int
    last_year: int
    compile_date: str
    factor_set: str
    gwp: str
    mass_ratios: str
    ipcc2006_temperate: str
    activity: Path
    activity_sheet: str = ""
    engine: str = "duckdb"
    fires: Path | None = None
    overrides: Path | None = None
    factor_review: Path | None = None
    national_totals: Path | None = None
    scenarios: Path | None = None
    previous_submission: Path | None = None
    review_log: Path | None = None
    surrogates: Path | None = None
    peat_production: Path | None = None
    uncertainty_approach: str = "both"
    iterations: int = 20000
    seed: int = 20130101
    correlate_activity_across_years: bool = True
    default_area_pct: float = 10.0
    fill: str = "none"
    qaqc: dict = field(default_factory=dict)
    trend_years: int = 5
    fill_by_region: dict = field(default_factory=dict)
    fill_by_land_use: dict = field(default_factory=dict)
    max_input_mb: float = 512
    allocation: str = "ipcc2006"
    transition_years: int = 20
    source: Path | None = None
    raw: dict = field(default_factory=dict, compare=False, repr=False)

    @property
    def years(self) -> range:
        return range(self.first_year, self.last_year + 1)

    def input_paths(self) -> dict[str, Path]:
        out = {"activity": self.activity}
        for key in PATH_KEYS[1:]:
            value = getattr(self, key)
            if value is not None:
                out[key] = value
        return out

    def as_table(self) -> list[tuple[str, str, str]]:
        """(section.key, value, description) for the workbook and report."""
        rows = []
        for section, keys in SCHEMA.items():
            for key, (_, _, _, description) in keys.items():
                value = getattr(self, ATTRIBUTE.get(key, key), self.qaqc.get(key, ""))
                if isinstance(value, Path):
                    value = value.name
                rows.append((f"{section}.{key}", "" if value is None else str(value), description))
        return rows


MAX_TOML_DEPTH = 8  # tables and arrays inside one another; the settings use 3, a scenario file 5


def toml_nesting(data: dict, limit: int = MAX_TOML_DEPTH) -> str:
    """The key path of the first value nested more than ``limit`` tables or arrays deep ('' when none).

    Walks the parsed document without recursion, so any depth the parser returned can be checked.
    """
    stack = [(data, "", 1)]
    while stack:
        value, where, depth = stack.pop()
        if depth > limit:
            return where or "(top level)"
        if isinstance(value, dict):
            stack.extend((v, f"{where}.{k}" if where else str(k), depth + 1)
                         for k, v in value.items() if isinstance(v, (dict, list)))
        else:
            stack.extend((v, f"{where}[{i}]", depth + 1) for i, v in enumerate(value) if isinstance(v, (dict, list)))
    return ""


class TomlNestingError(ValueError):
    """A TOML document nested deeper than :data:`MAX_TOML_DEPTH`."""


def parse_toml(text: str) -> dict:
    """``tomllib.loads`` with nesting refused: raises ``ValueError`` with a message for a person.

    The parser recurses once per level of nested arrays or inline tables, so a document nested a few
    thousand levels deep exhausts Python's recursion limit; it is refused like any other invalid TOML.
    """
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ValueError(f"not valid TOML: {exc}") from None
    except RecursionError:
        raise TomlNestingError(f"arrays or tables nested too deeply to read (more than {MAX_TOML_DEPTH} levels are "
                         "refused)") from None
    where = toml_nesting(data)
    if where:
        raise TomlNestingError(f"arrays or tables nested more than {MAX_TOML_DEPTH} levels deep (at "
                         f"{printable_key(where)})")
    return data


def printable_key(text: str, limit: int = 80) -> str:
    text = "".join(c if c.isprintable() else c.encode("unicode_escape").decode("ascii") for c in text)
    return text if len(text) <= limit else text[:limit] + "..."


def _err(message: str, file: str, column: str = "", found: str = "", expected: str = "") -> Finding:
    return Finding("error", "settings", message, file=file, column=column, found=found, expected=expected)


def load_settings(path: str | Path, overrides: dict[str, Any] | None = None) -> Settings:
    """Read and validate a settings file; raise :class:`SettingsError` listing every problem."""
    path = Path(path)
    fname = str(path)
    if not path.is_file():
        raise SettingsError([_err("settings file not found", fname)])
    size = path.stat().st_size
    if size > MAX_SETTINGS_BYTES:
        raise SettingsError([_err(f"the settings file is {size:,} bytes, above the limit of {MAX_SETTINGS_BYTES:,}; "
                                  "it was not read", fname, expected="a settings file (TOML) of a few kilobytes")])
    data = path.read_bytes()
    head = data[:4096]
    if head.startswith((b"\xff\xfe", b"\xfe\xff")) or (head and head.count(0) * 4 >= len(head)):
        raise SettingsError([_err("not valid TOML: the file is UTF-16 text, not UTF-8", fname,
                                  expected="the settings saved as UTF-8 text")])
    bom = 3 if data.startswith(b"\xef\xbb\xbf") else 0  # a BOM, as some editors write, is dropped
    try:
        text = data[bom:].decode("utf-8")
    except UnicodeDecodeError as exc:
        start = bom + exc.start
        line = data[:start].count(b"\n") + 1
        raise SettingsError([_err(f"not valid TOML: the file is not UTF-8 text (byte {start}, on line {line})",
                                  fname, expected="the settings saved as UTF-8 text")]) from None
    try:
        parsed = parse_toml(text)
    except TomlNestingError as exc:
        raise SettingsError([_err(str(exc), fname, expected="a settings file as in the README: sections of keys, "
                                  "at most one table inside a key")]) from None
    except ValueError as exc:
        raise SettingsError([_err(str(exc), fname)]) from None
    return settings_from_dict(parsed, path, overrides)


def settings_from_dict(data: dict, path: Path, overrides: dict[str, Any] | None = None) -> Settings:
    fname = str(path)
    problems: list[Finding] = []
    values: dict[str, Any] = {}
    for section in data:
        if section not in SCHEMA:
            near = difflib.get_close_matches(section, list(SCHEMA), n=1)
            problems.append(_err("unknown section", fname, column=f"[{section}]", found=section,
                                 expected=f"one of {', '.join(SCHEMA)}" + (f" (did you mean [{near[0]}]?)" if near else "")))
        elif not isinstance(data[section], dict):
            problems.append(_err("must be a table of keys", fname, column=f"[{section}]"))
    for section, keys in SCHEMA.items():
        given = data.get(section, {}) if isinstance(data.get(section, {}), dict) else {}
        for key in given:
            if key not in keys:
                near = difflib.get_close_matches(key, list(keys), n=1)
                problems.append(_err("unknown key", fname, column=f"{section}.{key}", found=key,
                                     expected=f"one of {', '.join(keys)}" + (f" (did you mean {near[0]}?)" if near else "")))
        for key, (types, default, allowed, _) in keys.items():
            value = given.get(key, default)
            if overrides and key in overrides and overrides[key] is not None:
                value = overrides[key]
            if value is _REQUIRED:
                problems.append(_err("required key missing", fname, column=f"{section}.{key}"))
                continue
            if (isinstance(value, bool) and bool not in types) or not isinstance(value, types):
                problems.append(_err("wrong type", fname, column=f"{section}.{key}", found=repr(value),
                                     expected=" or ".join(t.__name__ for t in types)))
                continue
            if isinstance(value, float) and not math.isfinite(value):
                problems.append(_err("not a finite number", fname, column=f"{section}.{key}", found=repr(value),
                                     expected="a finite number"))
                continue
            if isinstance(value, str) and len(value) > MAX_SETTING_CHARS:
                problems.append(_err(f"longer than {MAX_SETTING_CHARS} characters", fname, column=f"{section}.{key}",
                                     found=f"{value[:60]}... ({len(value):,} characters)",
                                     expected=f"at most {MAX_SETTING_CHARS} characters"))
                continue
            if isinstance(value, str) and _CONTROL.search(value):
                problems.append(_err("holds control characters", fname, column=f"{section}.{key}", found=value,
                                     expected="printable text on one line"))
                continue
            if isinstance(value, str) and has_invisible(value):
                problems.append(_err("holds an invisible character or a noncharacter", fname,
                                     column=f"{section}.{key}", found=f"{value} ({odd_characters(value)})",
                                     expected="visible text: no format characters (zero-width spaces and joiners, "
                                              "soft hyphens, byte-order marks) and no noncharacters (U+FFFE, "
                                              "U+FFFF, U+FDD0 to U+FDEF)"))
                continue
            if allowed is not None and value not in allowed:
                near = difflib.get_close_matches(str(value), [a for a in allowed if a], n=1)
                problems.append(_err("value not accepted", fname, column=f"{section}.{key}", found=str(value),
                                     expected=" | ".join(a for a in allowed if a) + (f" (did you mean {near[0]}?)" if near else "")))
                continue
            values[key] = value
    if problems:
        raise SettingsError(problems)

    # Cross-key rules.
    if not 1900 <= values["first_year"] <= values["last_year"] <= 2200:
        problems.append(_err("years out of order or out of range", fname, column="inventory.first_year/last_year",
                             found=f"{values['first_year']}..{values['last_year']}",
                             expected="1900 <= first_year <= last_year <= 2200"))
    if values["last_year"] > values["submission_year"]:
        problems.append(_err("last_year is after the submission year", fname, column="inventory.last_year",
                             found=str(values["last_year"]), expected=f"<= {values['submission_year']}"))
    if values["iterations"] < 100 or values["iterations"] > 10_000_000:
        problems.append(_err("iterations out of range", fname, column="uncertainty.iterations",
                             found=str(values["iterations"]), expected="100 to 10,000,000"))
    if values["seed"] < 0:
        problems.append(_err("must be zero or positive", fname, column="uncertainty.seed", found=str(values["seed"])))
    if not 0 <= values["default_area_pct"] <= 1000:
        problems.append(_err("out of range", fname, column="uncertainty.default_area_pct",
                             found=str(values["default_area_pct"]), expected="0 to 1000 (percent)"))
    for table in ("fill_by_region", "fill_by_land_use"):
        for key, mode in values[table].items():
            if mode not in ("none", "interpolate", "extrapolate", "both"):
                problems.append(_err("value not accepted", fname, column=f"timeseries.{table}.{key}",
                                     found=str(mode), expected="none | interpolate | extrapolate | both"))
    land_uses = TERMS["land_use"]
    for key in values["fill_by_land_use"]:
        if key not in land_uses:
            problems.append(_err("unknown land use", fname, column=f"timeseries.fill_by_land_use.{key}", found=key,
                                 expected=" | ".join(t for t in land_uses if t)))
    if not 1 <= values["transition_years"] <= 100:
        problems.append(_err("out of range", fname, column="method.transition_years",
                             found=str(values["transition_years"]), expected="1 to 100"))
    if not 2 <= values["trend_years"] <= 50:
        problems.append(_err("out of range", fname, column="timeseries.trend_years", found=str(values["trend_years"]),
                             expected="2 to 50"))
    for key in SCHEMA["qaqc"]:
        if values[key] < 0:
            problems.append(_err("must be zero or positive", fname, column=f"qaqc.{key}", found=str(values[key])))
    if values["max_input_mb"] <= 0:
        problems.append(_err("must be positive", fname, column="limits.max_input_mb", found=str(values["max_input_mb"])))
    compile_date = values["compile_date"]
    if isinstance(compile_date, _dt.datetime):  # a TOML date-time: the date is what outputs print
        compile_date = compile_date.date().isoformat()
    elif isinstance(compile_date, _dt.date):
        compile_date = compile_date.isoformat()
    elif compile_date:
        try:
            compile_date = _dt.date.fromisoformat(compile_date).isoformat()
        except ValueError:
            problems.append(_err("not a date", fname, column="inventory.compile_date", found=compile_date,
                                 expected="YYYY-MM-DD"))
            compile_date = ""
    if compile_date and not COMPILE_DATE_RANGE[0] <= compile_date <= COMPILE_DATE_RANGE[1]:
        # The date stamps the workbook's and archive's zip entries: a zip entry holds 1980 to 2107 only.
        problems.append(_err("compile_date outside the dates a workbook (zip) file can hold", fname,
                             column="inventory.compile_date", found=compile_date,
                             expected=f"a date from {COMPILE_DATE_RANGE[0]} to {COMPILE_DATE_RANGE[1]}"))
    base = path.resolve().parent
    paths: dict[str, Path | None] = {}
    for key in PATH_KEYS:
        text = values[key]
        if not text:
            paths[key] = None
            continue
        try:
            candidate = (base / text).resolve()
            inside = candidate.is_relative_to(base)
            is_file = inside and candidate.is_file()
        except (OSError, ValueError) as exc:  # a name too long for the file system, an embedded NUL
            problems.append(_err(f"not a usable path ({exc.strerror if isinstance(exc, OSError) else exc})", fname,
                                 column=f"inputs.{key}", found=text[:60] + ("..." if len(text) > 60 else ""),
                                 expected="a path inside the folder of the settings file"))
            continue
        if not inside:
            problems.append(_err("path leaves the settings folder", fname, column=f"inputs.{key}", found=text,
                                 expected="a path inside the folder of the settings file"))
            continue
        if not is_file:
            problems.append(_err("input file not found", fname, column=f"inputs.{key}", found=text,
                                 expected=f"a file at {candidate}"))
            continue
        paths[key] = candidate
    if problems:
        raise SettingsError(problems)

    return Settings(
        name=values["name"], submission_year=values["submission_year"], first_year=values["first_year"],
        last_year=values["last_year"], compile_date=compile_date, factor_set=values["factor_set"],
        gwp=values["gwp"], mass_ratios=values["mass_ratios"], ipcc2006_temperate=values["ipcc2006_temperate"],
        activity=paths["activity"], activity_sheet=values["activity_sheet"], engine=values["engine"], fires=paths["fires"],
        overrides=paths["overrides"], factor_review=paths["factor_review"],
        national_totals=paths["national_totals"], scenarios=paths["scenarios"],
        previous_submission=paths["previous_submission"], review_log=paths["review_log"],
        surrogates=paths["surrogates"], peat_production=paths["peat_production"], uncertainty_approach=values["approach"], iterations=values["iterations"],
        seed=values["seed"],
        correlate_activity_across_years=values["correlate_activity_across_years"],
        default_area_pct=float(values["default_area_pct"]),
        fill=values["fill"], trend_years=values["trend_years"],
        qaqc={k: float(values[k]) for k in SCHEMA["qaqc"]}, fill_by_region=dict(values["fill_by_region"]),
        fill_by_land_use=dict(values["fill_by_land_use"]),
        max_input_mb=values["max_input_mb"], allocation=values["allocation"],
        transition_years=values["transition_years"], source=path.resolve(), raw=data,
    )
