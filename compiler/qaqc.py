"""QA/QC: general Tier 1 quality-control checks of a compiled inventory.

The checks follow the general (Tier 1) QC procedures of the 2006 IPCC
Guidelines, Vol. 1, Ch. 6, Table 6.1 [1]_ (checks of activity data and
factors, of the arithmetic, of aggregation, of completeness and of time-series
consistency), applied to the tables of an :class:`compiler.InventoryResult`,
plus the insignificance rule for NE of the UNFCCC modalities, procedures and
guidelines [2]_. Each check is one function returning a list of
:class:`compiler.errors.Finding`; :func:`run_checks` runs them all.

>>> from compiler import compile_inventory
>>> from compiler.qaqc import run_checks, findings_table
>>> result = compile_inventory("examples/demo/inventory.toml")   # doctest: +SKIP
>>> findings_table(run_checks(result))                            # doctest: +SKIP

The checks read only the result tables (they open no file), and no Python loop
runs over activity rows: loops run over distinct strata, categories,
overrides, flagged items or checks.

Severities. ``error``: the result contradicts itself (arithmetic, aggregation,
notation keys); it should not be submitted. ``warning``: something a reviewer
will ask about (an unexplained change, an unjustified NE); explain it in the
inventory report or fix the input. ``info``: for the record.

Rules used where the guidance leaves the detail open (our choices, stated in
each check's docstring): conversion allowances in the area checks, the strata
compared year on year, absolute floors below which a large relative change is
only ``info``, and the upper bound used to test an NE against the
insignificance rule.

References
----------
.. [1] IPCC (2006). 2006 IPCC Guidelines for National Greenhouse Gas Inventories, Volume 1:
   General Guidance and Reporting, Chapter 6: Quality Assurance / Quality Control and
   Verification. Table 6.1, general (Tier 1) QC procedures (from memory). Time-series
   consistency: Volume 1, Chapter 5 (from memory). Notation keys: Volume 1, Chapter 8
   (from memory).
.. [2] UNFCCC (2018). Decision 18/CMA.1, annex (modalities, procedures and guidelines for the
   enhanced transparency framework), para. 32: emissions may be considered insignificant when
   below 0.05 % of the national total GHG emissions excluding LULUCF or 500 kt CO2-eq,
   whichever is lower; all such together below 0.1 % (from memory).
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Callable, NamedTuple

import numpy as np
import pandas as pd

from .schema import CELL_KEYS as CELL
from .schema import LAND_KEYS, plain
from .schema import SERIES_KEYS as STRATUM_SERIES_KEYS
from .row_model import ROW_MODELS, by_pathway
from .errors import Finding, InputError, findings_table  # noqa: F401 (findings_table: part of this module's API)
from .factors import QUANTITIES, unit_kind_ok
from .offsite_peat import OFFSITE_PATHWAY
from .readers import MAX_LISTED
from .units import basis_ratio, parse_unit, tonnes_of_gas_per_unit

# 2006 IPCC Guidelines category 3.B Land, or sector 4 of the transparency framework's tables (allocation = "etf"):
# "the land sector" of the insignificance rule
LAND_SECTOR_PREFIX = ("3.B", "4.", "4(")
EVIDENCE = ("measured", "mapped", "statistics", "assumed")
# The area checks follow a stratum through time as LAND_KEYS: its land, without the conversion class, so
# that land passing from "converted" to "remaining" after the transition period does not read as a jump.
REWETTED_WORDS = ("climate_zone", "land_use", "nutrient_status", "drainage_depth", "subtype")
# One series of result rows: a stratum, a fire type and a pathway, over the years.
ROW_SERIES_KEYS = [*STRATUM_SERIES_KEYS, "fire_type", "pathway"]


# --- thresholds ---------------------------------------------------------------------------------


def _threshold(default: float, doc: str):
    return field(default=default, metadata={"doc": doc})


@dataclass(frozen=True)
class QaqcThresholds:
    """Limits of the QA/QC checks; the defaults are listed with each field.

    Rules of thumb unless a source is named (common practice, no source). The lead exposes them as
    the settings section ``[qaqc]``, one key per field (:func:`threshold_schema`).
    """

    # Repository notes (never printed): the percentages, floors and the area tolerance are common practice,
    # no source; the insignificance limits are decision 18/CMA.1 annex para. 32, from memory.
    year_on_year_area_pct: float = _threshold(
        25.0, "year-on-year change of a stratum's area above which it is flagged [%]")
    year_on_year_emission_pct: float = _threshold(
        25.0, "year-on-year change of a category's CO2-eq above which it is flagged [%]")
    year_on_year_area_floor_ha: float = _threshold(
        100.0, "a flagged area change smaller than this is info, not warning [ha]")
    year_on_year_emission_floor_t: float = _threshold(
        1000.0, "a flagged emission change smaller than this is info, not warning [t CO2-eq]")
    area_balance_tolerance_pct: float = _threshold(
        0.5, "change of a region's total organic-soil area (or fall of a rewetted stratum) accepted without a "
             "declared conversion, as a share of the earlier year's area [%] (rounding of area data)")
    sums_relative_tolerance: float = _threshold(
        1e-6, "relative difference accepted between a sum and its parts, and in recomputed row arithmetic [-]")
    insignificance_pct: float = _threshold(
        0.05, "an NE is insignificant below this share of the national total excluding the land sector [%] "
              "(decision 18/CMA.1 annex para. 32)")
    insignificance_kt: float = _threshold(
        500.0, "... and below this size [kt CO2-eq] (decision 18/CMA.1 annex para. 32)")
    insignificance_aggregate_pct: float = _threshold(
        0.1, "all NE taken as insignificant together stay below this share of the national total excluding the "
             "land sector [%] (decision 18/CMA.1 annex para. 32)")

    def __post_init__(self):
        for f in fields(self):
            value = getattr(self, f.name)
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not np.isfinite(value) or value < 0:
                raise ValueError(f"QA/QC threshold {f.name} must be a finite number >= 0, not {value!r}")

    @classmethod
    def from_mapping(cls, values: dict) -> "QaqcThresholds":
        """Thresholds from a settings table such as ``[qaqc]``; an unknown key is an error."""
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(values) - known)
        if unknown:
            raise ValueError(f"unknown QA/QC threshold {', '.join(unknown)}; "
                             f"expected one of {', '.join(sorted(known))}")
        return cls(**values)


def threshold_schema() -> dict[str, tuple[float, str]]:
    """``{key: (default, description)}`` of every threshold, for the settings schema and the report."""
    return {f.name: (f.default, f.metadata["doc"]) for f in fields(QaqcThresholds)}


# --- the list of checks ---------------------------------------------------------------------------


class Check(NamedTuple):
    check: str
    severity: str  # the highest severity the check raises
    description: str
    source: str


# What the outputs print as each check's basis. Repository notes on these references (never printed): the
# chapter and table references of the 2006 IPCC Guidelines, WS2013 Ch. 3 and decision 18/CMA.1 were entered
# from memory; the allowances of area_balance and rewetted_area_shrinks, the upper bound of an NE and the
# evidence and largest-assumed-stratum checks are rules our own; the thresholds, floors and the share of
# assumed emissions are common practice, no source.
TABLE_6_1 = "2006 IPCC Guidelines Vol. 1 Ch. 6 Table 6.1, general QC procedures"
CHECKS: tuple[Check, ...] = (
    Check("area_balance", "warning",
          "a region's total organic-soil area changes between consecutive years by more than the land newly "
          "declared as converted that year plus a tolerance",
          f"{TABLE_6_1}: time-series consistency of activity data; tolerance [qaqc] area_balance_tolerance_pct"),
    Check("rewetted_area_shrinks", "warning",
          "the rewetted area of a region and stratum falls between years (re-drainage?) by more than the land "
          "newly declared as converted from its land use plus a tolerance",
          f"{TABLE_6_1}; 2013 Wetlands Supplement Ch. 3 (re-drained land is drained land again); tolerance "
          "[qaqc] area_balance_tolerance_pct"),
    Check("year_on_year_area", "warning",
          "a stratum's area changes year on year by more than the threshold (info below the absolute floor)",
          f"{TABLE_6_1}: unexplained trends; threshold and floor in the settings ([qaqc])"),
    Check("year_on_year_emissions", "warning",
          "a category's CO2-eq (per gas) changes year on year by more than the threshold (info below the floor)",
          f"{TABLE_6_1}: unexplained trends; threshold and floor in the settings ([qaqc])"),
    Check("implied_emission_factor", "error",
          "a category's implied emission factor (emissions / area) lies outside the range of its strata's",
          f"{TABLE_6_1}: emissions calculated correctly (internal consistency)"),
    Check("row_arithmetic", "error",
          "a stratum row's emission is not area x factor x conversion, its conversion not that of its unit, or "
          "its CO2-eq not emission x GWP",
          f"{TABLE_6_1}: reproduce the emission calculations"),
    Check("override_validity_gaps", "warning",
          "strata that use an override fall back to the default in years between override validity periods",
          "2006 IPCC Guidelines Vol. 1 Ch. 5, time-series consistency"),
    Check("override_partial_series", "info",
          "strata that use an override use the default in years before or after its validity",
          "2006 IPCC Guidelines Vol. 1 Ch. 5, time-series consistency: splice or extend"),
    Check("estimated_ne_with_area", "warning",
          "strata with area carry pathways reported NE; the justification given is shown",
          "2006 IPCC Guidelines Vol. 1 Ch. 8, notation keys"),
    Check("no_with_area", "error",
          "a category and gas is reported NO although strata with area fall in it",
          "2006 IPCC Guidelines Vol. 1 Ch. 8: NO only where the activity does not occur"),
    Check("override_units", "error",
          "a row using an override stores a unit that does not convert to its quantity's unit, or differs from "
          "the override's",
          f"{TABLE_6_1}: units labelled and converted correctly"),
    Check("duplicated_strata", "error",
          "the same year, region, stratum and pathway occurs twice in the emissions",
          f"{TABLE_6_1}: double counting"),
    Check("sums", "error",
          "strata do not add up to categories, or categories to the total (beyond the relative tolerance); a "
          "category cell holds both or neither of a number and a notation key",
          f"{TABLE_6_1}: aggregation from lower to higher reporting levels"),
    Check("factors_not_checked", "info",
          "shipped factors in use that the agency has not yet checked against its copy of the guidance, per "
          "factor table",
          "the factor review log ([inputs] factor_review); see the cautions"),
    Check("completeness", "error",
          "a land use x soil status x pathway x year of the inputs has neither an estimate nor a notation key",
          f"{TABLE_6_1}: completeness"),
    Check("notation_justification", "warning",
          "a notation key (stratum row or category cell) has no reason",
          "2006 IPCC Guidelines Vol. 1 Ch. 8: notation keys explained"),
    Check("ne_insignificance", "warning",
          "an NE is tested against the insignificance rule with an upper bound of its size (the largest upper "
          "95 % limit of the pathway's factors times the area); flagged unless shown insignificant (info)",
          "UNFCCC MPGs (decision 18/CMA.1) para. 32: 0.05 % of national total excluding LULUCF and 500 kt "
          "CO2-eq, aggregate 0.1 %"),
    Check("assumption_evidence", "error",
          "evidence given for an activity row is not one of measured | mapped | statistics | assumed",
          "activity data column evidence (see the input formats)"),
    Check("assumption_share", "info",
          "share of emissions (|CO2-eq|) resting on strata whose area is assumed",
          "2006 IPCC Guidelines Vol. 1 Ch. 6, documentation of assumptions"),
    Check("assumption_largest", "warning",
          "the largest stratum by emissions whose area is assumed",
          "2006 IPCC Guidelines Vol. 1 Ch. 6, documentation of assumptions"),
)
# Not repeated here: override_outside_default_interval (an override outside the 95 % interval of the default
# it replaces) runs at compile time in compiler.pipeline; its warnings are in result.findings.


def checks_table() -> pd.DataFrame:
    """:data:`CHECKS` as a table (check, severity, description, source) for the methods appendix."""
    return pd.DataFrame(CHECKS, columns=list(Check._fields))


# --- helpers ------------------------------------------------------------------------------------


def _files(result) -> dict[str, dict[str, str]]:
    """Input file name as stored in the emissions -> its location as the pipeline's findings give it."""
    settings = result.settings
    out = {Path(settings.activity).name: _activity_where(result)}
    if getattr(settings, "fires", None) is not None:
        out[Path(settings.fires).name] = {"file": str(settings.fires), "sheet": ""}
    return out


def _where(result, input_file: str) -> dict[str, str]:
    return _files(result).get(input_file, {"file": input_file, "sheet": ""})


def _activity_where(result) -> dict[str, str]:
    """file and sheet of the activity data (the sheet of an XLSX file, else blank)."""
    return {"file": str(result.settings.activity), "sheet": result.activity.attrs.get("sheet", "")}


def _years_text(years) -> str:
    """1990, 1991, 1992, 1995 -> '1990-1992, 1995'."""
    ys = sorted({int(y) for y in years})
    if not ys:
        return ""
    parts, start, prev = [], ys[0], ys[0]
    for y in ys[1:] + [None]:
        if y is not None and y == prev + 1:
            prev = y
            continue
        parts.append(f"{start}" if start == prev else f"{start}-{prev}")
        if y is not None:
            start = prev = y
    return ", ".join(parts)


def _describe(row, keys=("climate_zone", "land_use", "soil_status", "nutrient_status", "drainage_depth",
                         "subtype", "remaining_or_converted", "previous_land_use", "fire_type")) -> str:
    """A stratum in words: 'temperate grassland drained rich deep'."""
    words = [str(row[k]) for k in keys if k in row and str(row[k]) not in ("", "nan", "remaining")]
    if "previous_land_use" in row and str(row.get("previous_land_use", "")) not in ("", "nan"):
        words = [w for w in words if w != str(row["previous_land_use"])] + [f"(from {row['previous_land_use']})"]
    return " ".join(words)


def _off(a, b, rel: float) -> np.ndarray:
    """True where a and b differ by more than ``rel`` relative (1e-9 absolute floor); NaN equals NaN."""
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    both_nan = np.isnan(a) & np.isnan(b)
    one_nan = np.isnan(a) != np.isnan(b)
    diff = np.abs(np.nan_to_num(a) - np.nan_to_num(b))
    scale = np.maximum(np.abs(np.nan_to_num(a)), np.abs(np.nan_to_num(b)))
    return ~both_nan & (one_nan | (diff > rel * scale + 1e-9))


def _capped(check: str, severity: str, message: str, frame: pd.DataFrame, make: Callable) -> list[Finding]:
    """One finding per flagged row (at most MAX_LISTED), then one that counts the rest."""
    out = [make(r) for r in frame.head(MAX_LISTED).itertuples(index=False)]
    if len(frame) > MAX_LISTED:
        out.append(Finding(severity, check, f"{message}: {len(frame) - MAX_LISTED} more not listed"))
    return out


def _wide(frame: pd.DataFrame, keys: list[str], value: str, years) -> pd.DataFrame:
    """keys x year table of the sum of ``value``, every inventory year present (0 where no row)."""
    if frame.empty:
        return pd.DataFrame(columns=list(years), index=pd.MultiIndex.from_tuples([], names=keys), dtype=float)
    table = frame.groupby(keys + ["year"])[value].sum().unstack("year")
    return table.reindex(columns=list(years)).fillna(0.0)


def _row_number(value) -> int | None:
    """A spreadsheet row, or None for a record the compiler made (gap filling gives row 0)."""
    return int(value) if pd.notna(value) and int(value) > 0 else None


def _first_input_row(rows: pd.Series) -> float:
    """Smallest spreadsheet row among ``rows``, leaving out made records (row 0); NaN if none."""
    rows = rows[rows > 0]
    return rows.min() if len(rows) else np.nan


def _cell(r) -> dict:
    """The structured fields of a finding about one reporting cell (a row with category_code, gas, year)."""
    return {"category_code": str(r.category_code), "gas": str(r.gas), "years": (int(r.year),)}


def _record(frame: pd.DataFrame) -> str:
    """The column that identifies an input record in the emissions: ``record_id`` where the engine gives it
    (the index of the activity or fire table), else the spreadsheet row."""
    return "record_id" if "record_id" in frame else "input_row"


def _first_rows(activity: pd.DataFrame, keys: list[str]) -> pd.Series:
    """First spreadsheet row of each keys x year (to point a finding at the input); made records left out."""
    return activity[activity["_row"] > 0].groupby(keys + ["year"])["_row"].min()


def _rows_at(rows: pd.Series, keys: pd.Index, years: np.ndarray) -> list[int | None]:
    """First input row of each flagged cell (key, year), else of the year before; None where neither has one.

    One reindex for the years and one for the years before, not a lookup per cell.
    """
    if len(keys) == 0:
        return []
    tuples = [k if isinstance(k, tuple) else (k,) for k in keys]
    out = np.full(len(tuples), np.nan)
    for shift in (1, 0):  # the year before first, then the year itself overwrites where it has a row
        index = pd.MultiIndex.from_tuples([t + (int(y) - shift,) for t, y in zip(tuples, years)],
                                          names=rows.index.names)
        hit = rows.reindex(index).to_numpy(dtype=float)
        out = np.where(np.isnan(hit), out, hit)
    return [None if np.isnan(v) else int(v) for v in out]


def _newly_converted(activity: pd.DataFrame, years) -> pd.DataFrame:
    """Land newly declared as converted each year, per converted stratum [ha].

    The area reported as converted accumulates over the transition period, so the land converted in
    year t is read as the increase of each converted stratum's area from t-1 to t (its positive part).
    """
    keys = ["region", *LAND_KEYS[1:], "previous_land_use"]
    if "conversion_year" in activity and activity["conversion_year"].notna().any():
        from .transition import newly_converted

        return newly_converted(activity, years, keys, _wide)  # by the conversion years given
    conv = activity[activity["remaining_or_converted"] == "converted"]
    stock = _wide(conv, keys, "area_ha", years)
    return stock.diff(axis=1).clip(lower=0.0).fillna(0.0)


# --- 1 and 2: area over time ----------------------------------------------------------------------


def check_area_balance(result, thresholds: QaqcThresholds) -> list[Finding]:
    """Warning: a region's total organic-soil area changes without a declared conversion.

    Rule (our own): between consecutive inventory years t-1 and t, the change of a region's total area
    (all soil statuses) is explained up to the land newly declared as converted in year t in that
    region (:func:`_newly_converted`) plus ``area_balance_tolerance_pct`` of the area of t-1. A larger
    change is flagged: newly drained land entering the inventory without a land-use change, land
    leaving it, or a data error. A region absent in a year counts as 0 ha. Land passing from
    converted to remaining in the same year as new conversions of the same stratum masks them
    (a false warning at worst).
    """
    act, years = result.activity, list(result.settings.years)
    if act.empty or len(years) < 2:
        return []
    total = _wide(act, ["region"], "area_ha", years)
    new = _newly_converted(act, years).groupby(level="region").sum().reindex(total.index).fillna(0.0)
    prev = total.shift(1, axis=1)
    change = total - prev
    tolerance = thresholds.area_balance_tolerance_pct / 100.0 * prev.where(prev > 0, total)
    allowed = new + tolerance
    flagged = (change.abs() > allowed + 1e-9) & prev.notna()
    rows = _first_rows(act, ["region"])
    where = _activity_where(result)
    i, j = np.nonzero(flagged.to_numpy())  # flagged region-years only
    regions, years_j = flagged.index[i], np.asarray(flagged.columns)[j]
    before_a, after_a = prev.to_numpy()[i, j], total.to_numpy()[i, j]
    new_a, allowed_a = new.to_numpy()[i, j], allowed.to_numpy()[i, j]
    out = []
    for region, year, before, after, newly, limit, row in zip(regions, years_j, before_a, after_a, new_a, allowed_a,
                                                              _rows_at(rows, regions, years_j)):
        word = "grows" if after > before else "shrinks"
        out.append(Finding(
            "warning", "area_balance",
            f"total organic-soil area of {region} {word} from {before:,.1f} ha in {year - 1} to {after:,.1f} ha in "
            f"{year} ({after - before:+,.1f} ha) with {newly:,.1f} ha newly declared as converted: "
            "declare the conversion (remaining_or_converted, previous_land_use), or explain the new drainage or "
            "the data in the inventory report",
            **where, row=row, column="area_ha",
            found=f"{after - before:+,.1f} ha",
            expected=f"within +/-{limit:,.1f} ha (new conversions {newly:,.1f} ha "
                     f"+ {thresholds.area_balance_tolerance_pct:g} % tolerance)"))
    return out


def check_rewetted_area_shrinks(result, thresholds: QaqcThresholds) -> list[Finding]:
    """Warning: the rewetted area of a region and stratum falls between years without a declared conversion.

    Strata are followed as :data:`LAND_KEYS` (without the conversion class). Rule (our own): a fall
    from t-1 to t is explained up to the land newly declared as converted in year t in the region
    with ``previous_land_use`` equal to the stratum's land use, plus ``area_balance_tolerance_pct``
    of the area of t-1. Otherwise rewetted land may have been drained again (it is then drained land,
    WS2013 Ch. 3) or the data are inconsistent.
    """
    act, years = result.activity, list(result.settings.years)
    rewetted = act[act["soil_status"] == "rewetted"]
    if rewetted.empty or len(years) < 2:
        return []
    area = _wide(rewetted, LAND_KEYS, "area_ha", years)
    new = _newly_converted(act, years).groupby(level=["region", "previous_land_use"]).sum()
    index = pd.MultiIndex.from_arrays([area.index.get_level_values("region"), area.index.get_level_values("land_use")])
    explained = new.reindex(index).fillna(0.0).reindex(columns=area.columns).fillna(0.0)
    explained.index = area.index
    prev = area.shift(1, axis=1)
    fall = prev - area
    allowed = explained + thresholds.area_balance_tolerance_pct / 100.0 * prev
    flagged = (fall > allowed + 1e-9) & prev.notna()
    rows = _first_rows(act, LAND_KEYS)
    where = _activity_where(result)
    i, j = np.nonzero(flagged.to_numpy())  # flagged stratum-years only
    keys, years_j = flagged.index[i], np.asarray(flagged.columns)[j]
    before_a, after_a = prev.to_numpy()[i, j], area.to_numpy()[i, j]
    explained_a, allowed_a = explained.to_numpy()[i, j], allowed.to_numpy()[i, j]
    out = []
    for key, year, before, after, newly, limit, row in zip(keys, years_j, before_a, after_a, explained_a, allowed_a,
                                                           _rows_at(rows, keys, years_j)):
        labels = dict(zip(LAND_KEYS, key))
        out.append(Finding(
            "warning", "rewetted_area_shrinks",
            f"rewetted area of {labels['region']} {_describe(labels, REWETTED_WORDS)} falls from "
            f"{before:,.1f} ha in {year - 1} to {after:,.1f} ha in {year} with "
            f"{newly:,.1f} ha newly declared as converted from {labels['land_use']}: "
            "if the land was drained again, report it as drained; otherwise declare the conversion or "
            "correct the areas",
            **where, row=row, column="area_ha",
            found=f"{after - before:+,.1f} ha", expected=f"a fall of at most {limit:,.1f} ha"))
    return out


# --- 3: year on year -------------------------------------------------------------------------------


def _jumps(wide: pd.DataFrame, pct: float, floor: float) -> pd.DataFrame:
    """Consecutive-year changes above ``pct`` % of a keys x year table.

    Returns one row per flagged key and year: the keys, ``year``, ``before``, ``after``, ``change``,
    ``relative`` [%] (inf from 0) and ``severity`` (info where ``|change| < floor``).
    """
    now = wide.to_numpy(dtype=float)
    prev = np.full_like(now, np.nan)
    prev[:, 1:] = now[:, :-1]
    change = now - prev
    with np.errstate(divide="ignore", invalid="ignore"):
        relative = np.where(np.abs(prev) > 0, np.abs(change) / np.abs(prev) * 100.0,
                            np.where(np.abs(change) > 0, np.inf, 0.0))
    # "Above" the threshold: a change of exactly pct % (up to rounding of the division) is not flagged.
    i, j = np.nonzero(~np.isnan(prev) & (relative > pct * (1 + 1e-9)))
    keys = wide.index[i].to_frame(index=False) if len(i) else pd.DataFrame(columns=list(wide.index.names))
    out = keys.reset_index(drop=True).assign(
        year=np.asarray(wide.columns)[j].astype(int), before=prev[i, j], after=now[i, j], change=change[i, j],
        relative=relative[i, j])
    out["severity"] = np.where(np.abs(out["change"]) < floor, "info", "warning")
    return out


def _change_text(verb_up: str, verb_down: str, r) -> str:
    """'appears in 1996', 'disappears in 2015', 'grows by 33 % from 1998 to 1999'."""
    if r.before == 0:
        return f"appears in {r.year}"
    if r.after == 0:
        return f"disappears in {r.year}"
    return f"{verb_up if r.change > 0 else verb_down} by {r.relative:.0f} % from {r.year - 1} to {r.year}"


def check_year_on_year_area(result, thresholds: QaqcThresholds) -> list[Finding]:
    """Warning: a stratum's area changes by more than ``year_on_year_area_pct`` between consecutive years.

    A stratum is :data:`LAND_KEYS` (region and stratum description, without the conversion class);
    appearing (from 0 ha) and disappearing count as changes above any threshold. A change smaller
    than ``year_on_year_area_floor_ha`` is ``info`` (common practice, no source).
    """
    act, years = result.activity, list(result.settings.years)
    if act.empty or len(years) < 2:
        return []
    jumps = _jumps(_wide(act, LAND_KEYS, "area_ha", years), thresholds.year_on_year_area_pct,
                   thresholds.year_on_year_area_floor_ha)
    rows = _first_rows(act, LAND_KEYS)
    where = _activity_where(result)
    out = []
    keys = pd.MultiIndex.from_frame(jumps[LAND_KEYS]) if len(jumps) else pd.Index([])
    found_rows = _rows_at(rows, keys, jumps["year"].to_numpy())
    for r, key, row in zip(jumps.itertuples(index=False), keys, found_rows):  # flagged stratum-years
        labels = dict(zip(LAND_KEYS, key))
        out.append(Finding(
            r.severity, "year_on_year_area",
            f"area of {labels['region']} {_describe(labels)} {_change_text('grows', 'shrinks', r)} "
            f"({r.before:,.1f} -> {r.after:,.1f} ha): explain the change in the inventory report",
            **where, row=row, column="area_ha",
            found=f"{r.change:+,.1f} ha", expected=f"within +/-{thresholds.year_on_year_area_pct:g} % of "
            f"{r.before:,.1f} ha"))
    return out


def check_year_on_year_emissions(result, thresholds: QaqcThresholds) -> list[Finding]:
    """Warning: a category's CO2-eq (per gas) changes by more than ``year_on_year_emission_pct``.

    Uses the categories table; a cell with a notation key counts as 0. Gases without a GWP (CO) are
    not compared. A change smaller than ``year_on_year_emission_floor_t`` t CO2-eq is ``info``
    (common practice, no source).
    """
    cats, years = result.categories, list(result.settings.years)
    cats = cats[cats["gas"].isin(list(result.gwp))]
    if cats.empty or len(years) < 2:
        return []
    values = cats.assign(co2eq_t=cats["co2eq_t"].fillna(0.0))
    jumps = _jumps(_wide(values, ["category_code", "gas"], "co2eq_t", years), thresholds.year_on_year_emission_pct,
                   thresholds.year_on_year_emission_floor_t)
    keys = cats.set_index(CELL)["notation_key"]
    out = []
    for r in jumps.itertuples(index=False):
        def shown(value, year):
            key = keys.get((r.category_code, r.gas, year), "")
            return key if key else f"{value:,.1f}"
        out.append(Finding(
            r.severity, "year_on_year_emissions",
            f"{r.category_code} {r.gas} {_change_text('rises', 'falls', r)} "
            f"({shown(r.before, r.year - 1)} -> {shown(r.after, r.year)} t CO2-eq): explain the change in the "
            "inventory report", column="co2eq_t", found=f"{r.change:+,.1f} t CO2-eq",
            expected=f"within +/-{thresholds.year_on_year_emission_pct:g} % of {r.before:,.1f} t CO2-eq",
            category_code=r.category_code, gas=r.gas, years=(int(r.year) - 1, int(r.year))))
    return out


# --- 4: implied emission factors and the row arithmetic ------------------------------------------------


ESTIMATE_COLUMNS_LEFT_OUT = ("notation_reason", "equation", "emission_basis", "emission_basis_t", "tier",
                             "activity_source", "default_factor_id", "land_category_code")


class _Checked:
    """The result as :func:`run_checks` hands it to the checks: every attribute of the result, and the
    estimate rows (:func:`_estimates`) made once for all the checks (nothing is stored on the result)."""

    def __init__(self, result):
        self._result = result
        self.estimates = _estimates(result)

    def __getattr__(self, name: str):
        return getattr(self._result, name)


def _estimates(result) -> pd.DataFrame:
    """The estimate rows, with the columns the checks read: made once per :func:`run_checks`.

    (A filtered copy of the whole results table per check would hold several times its memory at a
    million stratum-years.)
    """
    if isinstance(result, _Checked):
        return result.estimates
    em = result.emissions
    columns = [c for c in em.columns if c not in ESTIMATE_COLUMNS_LEFT_OUT]
    return em.loc[(em["notation_key"] == "").to_numpy(dtype=bool), columns]


def check_implied_emission_factor(result, thresholds: QaqcThresholds) -> list[Finding]:
    """Error: a category's implied emission factor lies outside the range of its strata's.

    For each category, gas and year, the implied emission factor of the cell (``emission_t /
    area_ha`` of the categories table) is an area-weighted mean of the strata rows' implied factors
    (each input row's emission over its pathways of that gas, divided by its area), so it lies
    within their minimum..maximum. Outside (beyond ``sums_relative_tolerance`` of the range), the
    category area or sum is wrong. Rows with no area are left out of the range; a cell with
    emissions but no area, or no strata behind it, is flagged too.
    """
    est = _estimates(result)
    cats = result.categories[result.categories["emission_t"].notna()]
    if cats.empty:
        return []
    # Off-site CO2 of extracted peat has no area (a mass of peat): left out of the cell's implied factor.
    offsite = est["pathway"].to_numpy() == OFFSITE_PATHWAY
    if offsite.any():
        off = est[offsite].groupby(CELL)["emission_t"].sum().rename("_off")
        cats = cats.merge(off, on=CELL, how="left")
        cats = cats.assign(emission_t=cats["emission_t"] - cats["_off"].fillna(0.0)).drop(columns="_off")
        est = est[~offsite]
    per_row = est.groupby(CELL + ["input_file", _record(est)], as_index=False).agg(
        emission_t=("emission_t", "sum"), area_ha=("area_ha", "first"))
    per_row = per_row[per_row["area_ha"] > 0]
    per_row["ief"] = per_row["emission_t"] / per_row["area_ha"]
    envelope = per_row.groupby(CELL)["ief"].agg(low="min", high="max").reset_index()
    cells = cats.merge(envelope, on=CELL, how="left")
    with np.errstate(divide="ignore", invalid="ignore"):
        cells["ief"] = np.where(cells["area_ha"] > 0, cells["emission_t"] / cells["area_ha"], np.nan)
    slack = thresholds.sums_relative_tolerance * np.maximum(cells["low"].abs(), cells["high"].abs()) + 1e-12
    outside = (cells["ief"] < cells["low"] - slack) | (cells["ief"] > cells["high"] + slack)
    no_area = cells["ief"].isna() & (cells["emission_t"] != 0)
    no_strata = cells["low"].isna() & cells["ief"].notna() & (cells["emission_t"] != 0)
    flagged = cells[outside | no_area | no_strata].copy()
    message = "implied emission factor outside the range of its strata"

    def make(r):
        unit = f"t {r.gas} ha-1 yr-1"
        if pd.isna(r.ief):
            text = (f"{r.category_code} {r.gas} {r.year}: {r.emission_t:,.3f} t with no area behind it "
                    f"(area_ha {r.area_ha}): the category area is wrong")
            return Finding("error", "implied_emission_factor", text, column="area_ha", found=str(r.area_ha),
                           expected="the area of the strata behind the cell", **_cell(r))
        if pd.isna(r.low):
            return Finding("error", "implied_emission_factor",
                           f"{r.category_code} {r.gas} {r.year}: {r.emission_t:,.3f} t shown but no stratum with "
                           "area estimated in it", column="emission_t", found=f"{r.emission_t:,.3f} t",
                           expected="the sum of the strata rows behind the cell", **_cell(r))
        return Finding("error", "implied_emission_factor",
                       f"{r.category_code} {r.gas} {r.year}: {message} ({r.ief:.6g} against {r.low:.6g} to "
                       f"{r.high:.6g} {unit}): the category's area or emissions do not match its strata",
                       column="emission_t", found=f"{r.ief:.6g} {unit}", expected=f"{r.low:.6g} to {r.high:.6g} {unit}",
                       **_cell(r))

    return _capped("implied_emission_factor", "error", message, flagged, make)


def check_row_arithmetic(result, thresholds: QaqcThresholds) -> list[Finding]:
    """Error: a stratum row's stored numbers do not reproduce its emission.

    Recomputed on every estimate row, vectorised: ``emission_t = area_basis_ha x factor_value x
    conversion`` (fires: ``area_ha x parameter_value x factor_value x conversion``); outside fires,
    ``conversion`` is the unit's t of gas per (ha x unit) (:func:`compiler.units.tonnes_of_gas_per_unit`)
    and ``area_basis_ha`` is what the pathway's equation gives with a factor of one
    (:meth:`compiler.row_model.RowModel.area_basis`: the area, times (1 - Frac_ditch) for ch4_soil and
    Frac_ditch for ch4_ditch, Eq. 2.6); and ``co2eq_t = emission_t x GWP``.
    """
    est = _estimates(result)
    if est.empty:
        return []
    rel = thresholds.sums_relative_tolerance
    convention = result.settings.mass_ratios
    fire = est["pathway"].str.startswith("fire_").to_numpy()
    area = est["area_ha"].to_numpy(dtype=float)
    param = est["parameter_value"].to_numpy(dtype=float)
    value = est["factor_value"].to_numpy(dtype=float)
    conversion = est["conversion"].to_numpy(dtype=float)
    # The area the factor rests on, from the pathway's own equation (compiler.row_model).
    basis = by_pathway(est["pathway"].to_numpy(), lambda model, rows: model.area_basis(area[rows],
                                                                                     np.nan_to_num(param[rows])))
    # Off-site CO2 of extracted peat: tonnes of air-dry peat (parameter) x carbon fraction x C -> CO2.
    offsite = est["pathway"].to_numpy() == OFFSITE_PATHWAY
    expected_emission = np.where(fire | offsite, np.where(offsite, 1.0, area) * param * value * conversion,
                                 est["area_basis_ha"].to_numpy(dtype=float) * value * conversion)
    units = est["factor_unit"]
    per_unit = {}
    for unit in pd.unique(units[~fire]):  # distinct units: a handful
        try:
            per_unit[unit] = tonnes_of_gas_per_unit(unit, convention)[1]
        except ValueError:
            per_unit[unit] = np.nan
    unit_conversion = np.where(fire, conversion, units.map(per_unit).to_numpy(dtype=float))
    unit_conversion = np.where(offsite, basis_ratio("CO2-C", "CO2", convention), unit_conversion)
    gwp = est["gas"].map(result.gwp).to_numpy(dtype=float)
    expected_co2eq = est["emission_t"].to_numpy(dtype=float) * gwp
    problems = {
        "emission_t": _off(est["emission_t"], expected_emission, rel),
        "conversion": _off(conversion, unit_conversion, rel),
        "area_basis_ha": ~fire & _off(est["area_basis_ha"], basis, rel),
        "co2eq_t": ~np.isnan(gwp) & _off(est["co2eq_t"], expected_co2eq, rel),
    }
    expected = {"emission_t": expected_emission, "conversion": unit_conversion, "area_basis_ha": basis,
                "co2eq_t": expected_co2eq}
    message = "stored numbers do not reproduce the row's emission"
    out = []
    for column, bad in problems.items():  # four recomputations
        if not bad.any():
            continue
        rows = est[bad].assign(recomputed=expected[column][bad])
        out += _capped("row_arithmetic", "error", f"{column}: {message}", rows, lambda r, c=column: Finding(
            "error", "row_arithmetic",
            f"{r.pathway} {r.year} {r.region} {_describe(r._asdict())}: {c} is not what area, factor and unit give",
            **_where(result, r.input_file), row=_row_number(r.input_row), column=c,
            found=f"{getattr(r, c):.9g}", expected=f"{r.recomputed:.9g}"))
    return out


# --- 5 and 7: overrides ---------------------------------------------------------------------------


def _override_ids(result) -> pd.DataFrame:
    fu = result.factors_used
    return fu[fu["factor_set"] == "override"].set_index("factor_id")


def check_override_validity(result, thresholds: QaqcThresholds) -> list[Finding]:
    """Warning (gaps) and info (edges): strata that use an override use the default in other years.

    Data-driven: a series is one region, stratum and pathway of the emissions. For every series that
    uses an override in some year (main factor or secondary parameter), the years in which it uses a
    shipped default instead are gaps when they lie between years with overrides
    (``override_validity_gaps``, e.g. overrides valid 1990-2000 and 2005-2024 leave 2001-2004 on the
    default) and edges otherwise (``override_partial_series``): the time series mixes methods
    (2006 IPCC Guidelines Vol. 1 Ch. 5, from memory). Overrides that no stratum uses are not seen.
    """
    ov = _override_ids(result)
    if ov.empty:
        return []
    em = result.emissions
    file = str(result.settings.overrides) if result.settings.overrides else ""
    out = []
    for column in ("factor_id", "parameter_id"):  # main factor, secondary parameter
        uses = em.loc[em[column].isin(ov.index).to_numpy(dtype=bool), ROW_SERIES_KEYS]
        if uses.empty:
            continue
        series = uses.drop_duplicates()
        est = _estimates(result)
        rows = est[ROW_SERIES_KEYS + ["year", column]].merge(series, on=ROW_SERIES_KEYS)
        rows["_ov"] = rows[column].isin(ov.index)
        span = rows[rows["_ov"]].groupby(ROW_SERIES_KEYS).agg(
            _lo=("year", "min"), _hi=("year", "max"),
            _ids=(column, lambda s: ", ".join(sorted(set(s))))).reset_index()
        default = rows[~rows["_ov"]].merge(span, on=ROW_SERIES_KEYS)
        if default.empty:
            continue
        default["_gap"] = (default["year"] > default["_lo"]) & (default["year"] < default["_hi"])
        default["_quantity"] = default["_ids"].str.split(", ").str[0].map(ov["quantity"])
        group_keys = ["region", "pathway", "_ids", column, "_gap", "_quantity"]
        for (region, pathway, ids, used, gap, quantity), g in default.groupby(group_keys, sort=True):
            years = _years_text(g["year"])
            strata = sorted({_describe(r) for r in g[ROW_SERIES_KEYS].drop_duplicates().to_dict("records")})
            valid = "; ".join(f"{i} {int(ov.at[i, 'first_year'])}-{int(ov.at[i, 'last_year'])}"
                              for i in ids.split(", "))
            if gap:
                out.append(Finding(
                    "warning", "override_validity_gaps",
                    f"{quantity} for {region} {', '.join(strata)} ({pathway}): override{'s' if ',' in ids else ''} "
                    f"{valid} leave {years} on the default {used}: extend an override over the gap or document "
                    "why the method changes", file=file, column="first_year", found=years,
                    expected="one method over the whole series, or a documented splice"))
            else:
                out.append(Finding(
                    "info", "override_partial_series",
                    f"{quantity} for {region} {', '.join(strata)} ({pathway}): override {valid}; the default "
                    f"{used} is used in {years}: check the time series is consistent (splice or extend)",
                    file=file, column="first_year", found=years, expected="one method over the whole series"))
    return out


def check_override_units(result, thresholds: QaqcThresholds) -> list[Finding]:
    """Error: a row that uses an override stores a unit that does not fit the override.

    The units were validated when the overrides were read; this rechecks the result rows: the stored
    ``factor_unit`` (``parameter_unit`` for a secondary parameter) converts to the unit of the
    override's quantity (:func:`compiler.factors.unit_kind_ok`) and is the override's own unit.
    """
    ov = _override_ids(result)
    if ov.empty:
        return []
    est = _estimates(result)
    file = str(result.settings.overrides) if result.settings.overrides else ""
    out = []
    for id_col, unit_col in (("factor_id", "factor_unit"), ("parameter_id", "parameter_unit")):
        pairs = est.loc[est[id_col].isin(ov.index), [id_col, unit_col]].drop_duplicates()
        for override_id, unit in pairs.itertuples(index=False):  # distinct override and unit pairs
            quantity = ov.at[override_id, "quantity"]
            reason = unit_kind_ok(unit, quantity)
            target = QUANTITIES[quantity][1]
            if reason:
                out.append(Finding("error", "override_units",
                                   f"override {override_id} ({quantity}): rows use unit {unit!r}, which does not "
                                   f"convert to {target}: {reason}", file=file, column="unit", found=unit,
                                   expected=f"{target} or a convertible unit"))
            elif unit != ov.at[override_id, "unit"]:
                out.append(Finding("error", "override_units",
                                   f"override {override_id} ({quantity}): rows store unit {unit!r}, the override "
                                   f"gives {ov.at[override_id, 'unit']!r}", file=file, column="unit", found=unit,
                                   expected=ov.at[override_id, "unit"]))
    return out


# --- 6: notation keys against area ----------------------------------------------------------------------


def check_estimated_ne_with_area(result, thresholds: QaqcThresholds) -> list[Finding]:
    """Warning: strata with area have pathways reported NE; names the justification, or its absence.

    One finding per pathway, land use, soil status, category and reason, with the years and the
    largest area in a year.
    """
    em = result.emissions
    ne = em[(em["notation_key"] == "NE") & (em["area_ha"] > 0)]
    if ne.empty:
        return []
    keys = ["input_file", "pathway", "gas", "land_use", "soil_status", "category_code", "notation_reason"]
    groups = ne.groupby(keys, as_index=False).agg(
        years=("year", lambda s: _years_text(s)), rows=("input_row", "size"), first_row=("input_row", _first_input_row),
        area=("area_ha", "sum"))
    per_year = ne.groupby(keys + ["year"])["area_ha"].sum().groupby(keys).max().rename("peak").reset_index()
    groups = groups.merge(per_year, on=keys)
    out = []
    for r in groups.itertuples(index=False):  # distinct pathway x land use x reason
        why = f"justification: {r.notation_reason}" if r.notation_reason.strip() else "no justification given"
        out.append(Finding(
            "warning", "estimated_ne_with_area",
            f"{r.pathway} ({r.gas}) of {r.land_use} {r.soil_status} ({r.category_code}) is NE on up to "
            f"{r.peak:,.1f} ha a year in {r.years} ({r.rows} strata rows); {why}",
            **_where(result, r.input_file), row=_row_number(r.first_row), column="notation_key", found="NE",
            expected="an estimate, or NE shown insignificant (see ne_insignificance)",
            category_code=r.category_code, gas=r.gas))
    return out


def check_no_with_area(result, thresholds: QaqcThresholds) -> list[Finding]:
    """Error: a category and gas is NO in a year although strata with area fall in it.

    A stratum row with area falls in its ``category_code`` and in its ``land_category_code`` (where a
    gas reported elsewhere makes the land category IE, not NO).
    """
    cats, em = result.categories, result.emissions
    no = cats[cats["notation_key"] == "NO"]
    present = em.loc[(em["area_ha"] > 0).to_numpy(dtype=bool), ["category_code", "land_category_code", "gas", "year",
                                                                 "area_ha"]]
    if no.empty or present.empty:
        return []
    occupied = pd.concat([present[["category_code", "gas", "year", "area_ha"]],
                          present[["land_category_code", "gas", "year", "area_ha"]]
                          .rename(columns={"land_category_code": "category_code"})])
    occupied = occupied.groupby(CELL, as_index=False)["area_ha"].max()
    wrong = no.drop(columns="area_ha").merge(occupied, on=CELL)
    out = []
    for (code, gas), g in wrong.groupby(["category_code", "gas"], sort=True):  # flagged categories
        out.append(Finding(
            "error", "no_with_area",
            f"{code} {gas} is reported NO in {_years_text(g['year'])} although strata with up to "
            f"{g['area_ha'].max():,.1f} ha fall in it", column="notation_key", found="NO",
            expected="the estimate, or NE/NA/IE with its reason"))
    return out


# --- 8 and 9: double counting and sums --------------------------------------------------------------------


def check_duplicated_strata(result, thresholds: QaqcThresholds) -> list[Finding]:
    """Error: the same year, region, stratum and pathway occurs more than once in the emissions.

    One finding per duplicated stratum and year, naming the pathways and input rows concerned.
    """
    em = result.emissions
    # Off-site peat rows are one per production row (several uses may share a stratum); the production
    # reader refuses its own duplicates.
    em = em[(em["pathway"] != OFFSITE_PATHWAY).to_numpy(dtype=bool)]
    keys = ["year", *ROW_SERIES_KEYS]
    dup = em[em.duplicated(keys, keep=False)]
    if dup.empty:
        return []
    from .transition import apart_by_conversion_year

    dup = apart_by_conversion_year(result, dup, keys)  # parts of a stratum converted in different years
    if dup.empty:
        return []
    stratum_keys = [k for k in keys if k != "pathway"]
    groups = dup.groupby(stratum_keys + ["input_file"], sort=True, as_index=False).agg(
        rows=("input_row", lambda s: ", ".join(map(str, sorted(set(s))))), first=("input_row", _first_input_row),
        pathways=("pathway", lambda s: ", ".join(sorted(set(s)))), n=("input_row", "nunique"))
    message = "the same year, region, stratum and pathway appear more than once"
    return _capped("duplicated_strata", "error", message, groups, lambda r: Finding(
        "error", "duplicated_strata",
        f"{message}: {r.year} {r.region} {_describe(r._asdict())} in rows {r.rows} ({r.pathways}); the area "
        "is counted twice", **_where(result, r.input_file), row=_row_number(r.first), column="year",
        found=f"{r.n} rows", expected="one row per year, region, stratum and pathway (add the areas together)"))


def check_sums(result, thresholds: QaqcThresholds) -> list[Finding]:
    """Error: strata do not add up to the categories, or categories to the total.

    Strata -> categories: the estimate rows summed per category, gas and year against the categories
    table (``emission_t`` and ``co2eq_t``). Categories -> total: the categories summed per year and
    gas against :attr:`InventoryResult.totals`, and per year in CO2-eq against the estimate rows.
    Relative tolerance ``sums_relative_tolerance``. A category cell must hold exactly one of a
    number and a notation key.
    """
    rel = thresholds.sums_relative_tolerance
    est = _estimates(result)
    cats = result.categories
    out = []
    parts = est.groupby(CELL, as_index=False).agg(
        emission_t=("emission_t", "sum"), co2eq_t=("co2eq_t", lambda s: s.sum(min_count=1)))
    both = cats.merge(parts, on=CELL, how="outer", suffixes=("", "_strata"), indicator="presence")
    for column in ("emission_t", "co2eq_t"):
        # A cell without strata sums to nothing: its number must be blank (a notation key) or 0.
        shown, strata = both[column], both[f"{column}_strata"]
        if column == "emission_t":
            shown, strata = shown.fillna(0.0), strata.fillna(0.0)
        bad = both[_off(shown, strata, rel) | ((both["presence"] == "right_only") & (column == "emission_t"))]
        message = f"category {column} is not the sum of its strata"
        out += _capped("sums", "error", message, bad, lambda r, c=column: Finding(
            "error", "sums",
            f"{r.category_code} {r.gas} {r.year}: {message}"
            + (" (the cell is missing from the categories table)" if r.presence == "right_only" else ""),
            column=c, found=f"{getattr(r, c)}", expected=f"{getattr(r, c + '_strata')}", **_cell(r)))
    number = cats["emission_t"].notna()
    key = cats["notation_key"] != ""
    mixed = cats[number == key]
    message = "a category cell holds both or neither of a number and a notation key"
    out += _capped("sums", "error", message, mixed, lambda r: Finding(
        "error", "sums", f"{r.category_code} {r.gas} {r.year}: {message}", column="notation_key",
        found=f"{r.emission_t} / {r.notation_key!r}", expected="a number, or a notation key with its reason",
        **_cell(r)))
    # Categories -> total, per gas and in CO2-eq.
    by_gas = cats.groupby(["year", "gas"])["emission_t"].sum()
    totals = result.totals.rename_axis(columns="gas").reset_index().melt(id_vars="year", var_name="gas",
                                                                         value_name="total")
    joined = pd.concat([by_gas.rename("categories"), totals.set_index(["year", "gas"])["total"]],
                       axis=1).fillna(0.0).reset_index()
    with_gwp = est[est["gas"].isin(list(result.gwp))]
    co2eq = pd.concat([cats.groupby("year")["co2eq_t"].sum().rename("categories"),
                       with_gwp.groupby("year")["co2eq_t"].sum().rename("total")], axis=1).fillna(0.0).reset_index()
    co2eq["gas"] = "CO2-eq"
    joined = pd.concat([joined, co2eq], ignore_index=True)
    bad = joined[_off(joined["categories"], joined["total"], rel)]
    message = "categories do not add up to the total"
    out += _capped("sums", "error", message, bad, lambda r: Finding(
        "error", "sums", f"{r.year} {r.gas}: {message}", column="emission_t", found=f"{r.categories:.9g}",
        expected=f"{r.total:.9g}"))
    return out


# --- 10: provenance -------------------------------------------------------------------------------------


def check_factors_not_checked(result, thresholds: QaqcThresholds) -> list[Finding]:
    """Info: shipped factors in use that the agency has not checked (factor review log), one finding per table.

    The agency's status is ``factors_used.agency_check`` (compiler.pipeline): a factor whose review log entry
    says ``agrees`` is not listed; overrides are the agency's own.
    """
    fu = result.factors_used
    status = fu["agency_check"] if "agency_check" in fu else pd.Series("not yet checked", index=fu.index)
    unchecked = fu[(status == "not yet checked") & (fu["factor_set"] != "override")]
    out = []
    for origin, g in unchecked.groupby("origin", sort=True):  # factor tables: a handful
        ids = sorted(g["factor_id"])
        out.append(Finding(
            "info", "factors_not_checked",
            f"{len(ids)} shipped factors in use from {origin} have not yet been checked by the agency against its "
            f"copy of the guidance: check each before official use and record the result in the factor review log "
            f"([inputs] factor_review) ({', '.join(ids)})", file=f"factor_tables/{origin}",
            found="not yet checked", expected="agrees"))
    return out


# --- 11: completeness and the insignificance of NE ------------------------------------------------------------


def _expected_pathways(result):
    """Every input record x the pathways its soil status needs in the factor set (pathway_coverage.csv).

    Yields ``(records, pathway)``: a table of input records (``input_file``, the record column, ``input_row``,
    ``year``, ``land_use``, ``soil_status``) and one pathway each of them needs. Activity records come from
    ``result.activity``, fire records from the fire rows of the results table.
    """
    coverage = result.library.coverage
    coverage = coverage[coverage["factor_set"] == result.settings.factor_set][["soil_status", "pathway"]]
    act, em = result.activity, result.emissions
    record = _record(em)
    soil = pd.DataFrame({
        "input_file": Path(result.settings.activity).name,
        record: act.index.to_numpy() if record == "record_id" else act["_row"].to_numpy(),
        "input_row": act["_row"].to_numpy(), "year": act["year"].to_numpy(),
        "land_use": act["land_use"].to_numpy(dtype=object), "soil_status": act["soil_status"].to_numpy(dtype=object)})
    fire_rows = plain(em[em["pathway"].str.startswith("fire_")][
        list(dict.fromkeys(["input_file", record, "input_row", "year", "land_use"]))].drop_duplicates())
    fire = fire_rows.assign(soil_status="fire").reset_index(drop=True)
    for records in (soil, fire):
        status = records["soil_status"].to_numpy(dtype=object)
        for soil_status, pathway in coverage.itertuples(index=False):
            at = np.flatnonzero(status == soil_status)
            if len(at):
                yield records.iloc[at], pathway


def check_completeness(result, thresholds: QaqcThresholds) -> list[Finding]:
    """Error: an input row's pathway has neither an estimate nor a notation key.

    Expected: each activity row times the pathways of its soil status in the factor set's coverage
    (``factor_tables/pathway_coverage.csv``), and each fire row times the fire pathways. Present: an
    estimate row with a finite ``emission_t``, or a notation row. One finding per land use, soil
    status and pathway, with the years.

    Expected and present rows are matched on one integer key per (input file, record, pathway): a
    sorted search, not a merge of two tables of every stratum-year and pathway.
    """
    em = result.emissions
    record = _record(em)
    file_codes, files = pd.factorize(em["input_file"])
    path_codes, pathways = pd.factorize(em["pathway"])
    file_of = {f: i for i, f in enumerate(files)}
    path_of = {p: i for i, p in enumerate(pathways)}
    records = em[record].to_numpy(dtype=np.int64)
    span = int(records.max()) + 2 if len(records) else 1
    width = len(pathways) + 1

    def key(file_code, record_values, pathway_code):
        return (np.asarray(file_code, dtype=np.int64) * span + record_values) * width + pathway_code

    present = key(file_codes, records, path_codes)
    bad = (em["notation_key"] == "").to_numpy(dtype=bool) & ~np.isfinite(em["emission_t"].to_numpy(dtype=float))
    every, failed = np.sort(present), np.sort(present[bad])

    def found(keys, among):
        at = np.minimum(np.searchsorted(among, keys), max(len(among) - 1, 0))
        return among[at] == keys if len(among) else np.zeros(len(keys), dtype=bool)

    missing = []
    for rows, pathway in _expected_pathways(result):
        if pathway not in path_of:  # no row of the pathway at all: every record misses it
            missing.append(rows.assign(pathway=pathway))
            continue
        codes, names = pd.factorize(rows["input_file"])  # one file, or a few
        file_code = np.array([file_of.get(f, len(files)) for f in names], dtype=np.int64)[codes]
        keys = key(file_code, rows[record].to_numpy(dtype=np.int64), path_of[pathway])
        lacking = ~found(keys, every) | found(keys, failed)
        if lacking.any():
            missing.append(rows[lacking].assign(pathway=pathway))
    if not missing:
        return []
    missing = pd.concat(missing, ignore_index=True)
    out = []
    keys = ["input_file", "land_use", "soil_status", "pathway"]
    for (file, land_use, soil_status, pathway), g in missing.groupby(keys, sort=True):  # flagged combinations
        out.append(Finding(
            "error", "completeness",
            f"{land_use} {soil_status} {pathway} has neither an estimate nor a notation key in "
            f"{_years_text(g['year'])} ({len(g)} rows)", **_where(result, file),
            row=_row_number(_first_input_row(g["input_row"])),
            column="land_use", expected="an estimate, or NO/NE/NA/IE with its reason"))
    return out


def check_notation_justification(result, thresholds: QaqcThresholds) -> list[Finding]:
    """Warning: a notation key without its reason, on a stratum row or on a category cell."""
    em, cats = result.emissions, result.categories
    out = []
    rows = em[(em["notation_key"] != "") & (em["notation_reason"].str.strip() == "")]
    for (file, key, pathway, land_use, soil_status), g in rows.groupby(
            ["input_file", "notation_key", "pathway", "land_use", "soil_status"], sort=True):
        out.append(Finding(
            "warning", "notation_justification",
            f"{pathway} of {land_use} {soil_status} is {key} without a reason in {_years_text(g['year'])}",
            **_where(result, file), row=_row_number(_first_input_row(g["input_row"])), column="notation_reason",
            found=key,
            expected="the reason for the notation key"))
    cells = cats[(cats["notation_key"] != "") & (cats["notation_reason"].str.strip() == "")]
    for (code, gas, key), g in cells.groupby(["category_code", "gas", "notation_key"], sort=True):
        out.append(Finding(
            "warning", "notation_justification",
            f"{code} {gas} is {key} without a reason in {_years_text(g['year'])}", column="notation_reason",
            found=key, expected="the reason for the notation key"))
    return out


def _largest(register: pd.DataFrame, quantity: str, stratum: dict) -> pd.DataFrame:
    """Shipped rows of ``quantity`` (any factor set) that could apply to the stratum; all rows if none match."""
    rows = register[register["quantity"] == quantity]
    mask = pd.Series(True, index=rows.index)
    for key in ("climate_zone", "soil_status", "fire_type"):
        given = stratum.get(key, "")
        if given and key in rows:
            mask &= (rows[key] == "") | (rows[key] == given)
    return rows[mask] if mask.any() else rows


def _upper(rows: pd.DataFrame) -> pd.Series:
    """Upper end of each row's 95 % interval, or its value where no interval is printed."""
    return np.maximum(rows["value"].astype(float), rows["ci_high"].astype(float).fillna(-np.inf))


def ne_upper_bound_per_ha(pathway: str, stratum: dict, library,
                          convention: str = "standard_atomic_weights") -> tuple[float, str]:
    """Upper bound of an NE pathway's emission per ha of the stratum [t of gas ha-1 yr-1], and how it was got.

    Rule (our own): the largest upper 95 % limit (the value where none is printed) of the pathway's
    factor among the shipped rows of every factor set that could apply to the stratum (same or
    blank climate zone, soil status, fire type; any land use), times the whole area (for the ditch
    term, Frac_ditch taken as 1). Fires: largest fuel consumption times largest emission factor.
    NaN when no shipped table has a factor for the pathway (e.g. N2O of organic-soil fires).
    ``convention`` is the run's ``[method] mass_ratios``.
    """
    gas, quantity = ROW_MODELS[pathway].gas, ROW_MODELS[pathway].factor_quantity
    register = library.register
    if not quantity or quantity not in set(register["quantity"]):
        return np.nan, f"no shipped factor for {pathway} in any factor set"
    rows = _largest(register, quantity, stratum)
    if pathway.startswith("fire_"):
        fuel_rows = _largest(register, "fuel_consumption", stratum)
        if fuel_rows.empty:
            return np.nan, "no shipped fuel consumption"
        # 'g X kg-1 dm' -> t X per t dm is the unit's mass in kg; then X -> gas.
        per_dm = [float(u) * parse_unit(unit).mass_kg * basis_ratio(parse_unit(unit).species, gas, convention)
                  for u, unit in zip(_upper(rows), rows["unit"])]
        fuel = [float(u) * parse_unit(unit).mass_kg / 1e3 / parse_unit(unit).area_ha
                for u, unit in zip(_upper(fuel_rows), fuel_rows["unit"])]
        i, j = int(np.argmax(per_dm)), int(np.argmax(fuel))
        return max(fuel) * max(per_dm), (f"fuel {fuel_rows['factor_id'].iloc[j]} x factor "
                                         f"{rows['factor_id'].iloc[i]} (upper 95 % limits)")
    per_ha = [float(u) * tonnes_of_gas_per_unit(unit, convention)[1] for u, unit in zip(_upper(rows), rows["unit"])]
    i = int(np.argmax(per_ha))
    return per_ha[i], f"factor {rows['factor_id'].iloc[i]} (upper 95 % limit, {rows['factor_set'].iloc[i]})"


def _national_excluding_land(result, national_totals: pd.DataFrame) -> pd.Series:
    """National total excluding the land sector per year [t CO2-eq].

    The rows of ``national_totals`` outside 3.B plus this inventory's categories outside 3.B (e.g.
    3.C.4 N2O). Where both give a category and gas that this inventory estimates, the national rows
    are left out and this inventory's value used, as :mod:`compiler.key_categories` does; that can
    only lower the total, so the insignificance test errs on the strict side.
    """
    cats = result.categories[result.categories["gas"].isin(list(result.gwp))]
    ours = cats[~cats["category_code"].str.startswith(LAND_SECTOR_PREFIX)]
    estimated = cats[(cats["notation_key"] == "") & cats["co2eq_t"].notna()]
    pairs = pd.MultiIndex.from_frame(estimated[["category_code", "gas"]].drop_duplicates())
    nat = national_totals[~national_totals["category_code"].astype(str).str.startswith(LAND_SECTOR_PREFIX)]
    nat = nat[~pd.MultiIndex.from_frame(nat[["category_code", "gas"]]).isin(pairs)]
    total = nat.groupby("year")["co2eq_t"].sum()
    return total.add(ours.groupby("year")["co2eq_t"].sum(), fill_value=0.0).reindex(total.index)


def _check_national_totals(national_totals: pd.DataFrame) -> pd.DataFrame:
    missing = [c for c in ("year", "category_code", "gas", "co2eq_t") if c not in national_totals]
    if missing:
        raise InputError([Finding("error", "national_totals", "required column missing", column=", ".join(missing),
                                  expected="year, category_code, gas, co2eq_t")])
    out = national_totals.copy()
    out["year"] = pd.to_numeric(out["year"]).astype(int)
    out["co2eq_t"] = pd.to_numeric(out["co2eq_t"]).astype(float)
    return out


def check_ne_insignificance(result, thresholds: QaqcThresholds,
                            national_totals: pd.DataFrame | None = None) -> list[Finding]:
    """Warning unless shown insignificant (then info): every NE on strata with area.

    The size of an NE is unknown; it is bounded from above by the stratum's area times
    :func:`ne_upper_bound_per_ha` times the gas's GWP, summed per category, gas and year (an NE
    inside a cell that also holds a number counts as well). Without ``national_totals`` every NE is
    flagged "not shown insignificant". With them (the rest of the national inventory, ``year,
    category_code, gas, co2eq_t``), the national total excluding the land sector (categories 3.B) is
    those rows outside 3.B plus this inventory's categories outside 3.B, and an NE is insignificant in
    a year when its bound is below ``insignificance_pct`` of that total and below
    ``insignificance_kt``, and the bounds of all NE that year together stay below
    ``insignificance_aggregate_pct`` (decision 18/CMA.1 annex para. 32, from memory). An NE that
    cannot be bounded, or a year without a national total, is flagged. Gases without a GWP (CO) are
    not assessed. One finding per category, gas and outcome.
    """
    em = result.emissions
    ne = plain(em[(em["notation_key"] == "NE") & (em["area_ha"] > 0) & em["gas"].isin(list(result.gwp))])
    if ne.empty:
        return []
    strata = ["pathway", "climate_zone", "soil_status", "fire_type"]
    distinct = ne[strata].drop_duplicates().reset_index(drop=True)
    # distinct pathway x stratum keys: a handful
    bounds = [ne_upper_bound_per_ha(r["pathway"], r, result.library, result.settings.mass_ratios)
              for r in distinct.to_dict("records")]
    distinct["per_ha"] = [b[0] for b in bounds]
    distinct["how"] = [b[1] for b in bounds]
    ne = ne.merge(distinct, on=strata, how="left")
    ne["bound_t"] = ne["area_ha"] * ne["per_ha"] * ne["gas"].map(result.gwp)
    cells = ne.groupby(CELL, as_index=False).agg(
        bound_t=("bound_t", lambda s: s.sum() if s.notna().all() else np.nan),
        how=("how", lambda s: "; ".join(sorted(set(s)))), pathways=("pathway", lambda s: ", ".join(sorted(set(s)))))
    if national_totals is None:
        cells["outcome"] = "no national totals"
    else:
        national = _national_excluding_land(result, _check_national_totals(national_totals))
        cells["national_t"] = cells["year"].map(national)
        cells["limit_t"] = np.minimum(thresholds.insignificance_pct / 100.0 * cells["national_t"],
                                      thresholds.insignificance_kt * 1000.0)
        year_sum = cells.groupby("year")["bound_t"].sum(min_count=1)
        year_bounded = cells.groupby("year")["bound_t"].apply(lambda s: s.notna().all())
        aggregate_ok = (year_bounded & (year_sum < thresholds.insignificance_aggregate_pct / 100.0
                                        * national.reindex(year_sum.index))).reindex(cells["year"]).to_numpy()
        cells["outcome"] = np.select(
            [cells["bound_t"].isna(), cells["national_t"].isna(), cells["bound_t"] >= cells["limit_t"],
             ~aggregate_ok],
            ["unbounded", "no national total for the year", "not insignificant", "aggregate above the limit"],
            default="insignificant")
    out = []
    for (code, gas, outcome), g in cells.groupby(["category_code", "gas", "outcome"], sort=True):
        years = _years_text(g["year"])
        worst = g.loc[g["bound_t"].idxmax()] if g["bound_t"].notna().any() else g.iloc[0]
        bound = f"{worst['bound_t']:,.1f} t CO2-eq" if pd.notna(worst["bound_t"]) else "no bound"
        head = f"NE of {code} {gas} ({', '.join(sorted(set(g['pathways'])))}) in {years}"
        severity, expected = "warning", "an estimate, or NE shown insignificant"
        if outcome == "no national totals":
            size = (f"upper bound {bound} from {worst['how']}" if pd.notna(worst["bound_t"])
                    else f"its size cannot be bounded ({worst['how']})")
            text = (f"{head}: not shown insignificant (give national_totals to test it against the "
                    f"{thresholds.insignificance_pct:g} % / {thresholds.insignificance_kt:g} kt rule); {size}")
        elif outcome == "unbounded":
            text = f"{head}: its size cannot be bounded ({worst['how']}): justify it with an estimate"
        elif outcome == "no national total for the year":
            text = f"{head}: national_totals has no total for these years; upper bound {bound}"
        elif outcome == "not insignificant":
            text = (f"{head}: not insignificant, upper bound {bound} ({worst['how']}) reaches the limit of "
                    f"{worst['limit_t']:,.1f} t CO2-eq in {int(worst['year'])}: estimate it")
        elif outcome == "aggregate above the limit":
            text = (f"{head}: below the limit alone (upper bound {bound}) but all NE together exceed "
                    f"{thresholds.insignificance_aggregate_pct:g} % of the national total excluding the land sector")
        else:
            severity, expected = "info", ""
            text = (f"{head}: insignificant, upper bound {bound} ({worst['how']}) below the limit of "
                    f"{worst['limit_t']:,.1f} t CO2-eq in {int(worst['year'])}, and all NE together below "
                    f"{thresholds.insignificance_aggregate_pct:g} %")
        out.append(Finding(severity, "ne_insignificance", text, column="notation_key", found=bound,
                           expected=expected))
    return out


# --- 12: evidence behind the areas ---------------------------------------------------------------------------


def check_assumptions(result, thresholds: QaqcThresholds, evidence: pd.Series | None = None) -> list[Finding]:
    """Info: the share of emissions (|CO2-eq|) resting on assumed strata; warning: the largest of them.

    ``evidence`` is one of :data:`EVIDENCE` (or blank) per activity row, indexed like
    ``result.activity``. Emission rows are tied to their activity record by ``record_id`` (the
    activity index; ``input_row`` where the engine gives no ``record_id``); fire rows
    and rows without evidence count in the total but not as assumed. Shares over all years and in
    the last year. Raises ``ValueError`` when the index does not align with ``result.activity``.
    """
    if evidence is None:
        return []
    act = result.activity
    extra = evidence.index.difference(act.index)
    if len(extra):
        raise ValueError(f"evidence is not aligned with result.activity: {len(extra)} index labels not in it "
                         f"(first {list(extra[:3])})")
    given = evidence.reindex(act.index)
    text = given.astype(object).where(given.notna(), "").astype(str).str.strip().str.lower()
    where = _activity_where(result)
    bad = pd.DataFrame({"row": act["_row"], "given": given.astype(str)})[(text != "") & ~text.isin(EVIDENCE)]
    bad = bad.assign(row=bad["row"].map(_row_number))
    message = "evidence is not one of " + " | ".join(EVIDENCE)
    out = _capped("assumption_evidence", "error", message, bad, lambda r: Finding(
        "error", "assumption_evidence", message, **where, row=r.row, column="evidence", found=r.given,
        expected=" | ".join(EVIDENCE)))
    est = _estimates(result)
    est = est[est["co2eq_t"].notna()]
    record = _record(est)
    by_record = pd.Series(text.to_numpy(), index=act.index if record == "record_id" else act["_row"].to_numpy())
    by_record = by_record[~by_record.index.duplicated()]
    from_activity = est["input_file"] == Path(result.settings.activity).name
    kind = est[record].map(by_record).where(from_activity, "").fillna("")
    magnitude = est["co2eq_t"].abs()
    total = magnitude.sum()
    assumed = kind == "assumed"
    last = est["year"] == result.settings.last_year
    share = magnitude[assumed].sum() / total if total else 0.0
    share_last = magnitude[assumed & last].sum() / magnitude[last].sum() if magnitude[last].sum() else 0.0
    unknown = magnitude[kind == ""].sum() / total if total else 0.0
    out.append(Finding(
        "info", "assumption_share",
        f"{share:.1%} of emissions (|CO2-eq|, all years) rest on strata whose area is assumed "
        f"({share_last:.1%} in {result.settings.last_year}); {unknown:.1%} have no evidence given",
        **where, column="evidence", found=f"{share:.4%}"))
    if assumed.any():
        keys = list(STRATUM_SERIES_KEYS)
        sized = est[assumed].assign(_m=magnitude[assumed]).groupby(keys, as_index=False).agg(
            size=("_m", "sum"), first_row=("input_row", _first_input_row), years=("year", lambda s: _years_text(s)))
        top = sized.loc[sized["size"].idxmax()]
        out.append(Finding(
            "warning", "assumption_largest",
            f"largest stratum on assumed area: {top['region']} {_describe(top)} in {top['years']}, "
            f"{top['size']:,.1f} t CO2-eq (|CO2-eq|, all years; {top['size'] / total:.1%} of the inventory): "
            "give it measured, mapped or statistical area data first", **where, row=_row_number(top["first_row"]),
            column="evidence", found="assumed", expected="measured | mapped | statistics"))
    return out


# --- running them all -----------------------------------------------------------------------------------------


CHECK_FUNCTIONS: tuple[Callable, ...] = (
    check_area_balance, check_rewetted_area_shrinks, check_year_on_year_area, check_year_on_year_emissions,
    check_implied_emission_factor, check_row_arithmetic, check_override_validity, check_estimated_ne_with_area,
    check_no_with_area, check_override_units, check_duplicated_strata, check_sums, check_factors_not_checked,
    check_completeness, check_notation_justification,
)


def run_checks(result, thresholds: QaqcThresholds | None = None, national_totals: pd.DataFrame | None = None,
               evidence: pd.Series | None = None) -> list[Finding]:
    """Run every QA/QC check on a compiled inventory; return the findings in the order of :data:`CHECKS`.

    Parameters
    ----------
    result : InventoryResult
        A compiled inventory (:func:`compiler.compile_inventory`).
    thresholds : QaqcThresholds, optional
        Limits of the checks; default :class:`QaqcThresholds` ().
    national_totals : pandas.DataFrame, optional
        The rest of the national inventory, ``year, category_code, gas, co2eq_t`` [t CO2-eq], for the
        insignificance test of NE. Read it with ``compiler.key_categories.load_national_totals``.
    evidence : pandas.Series, optional
        Per activity row (index of ``result.activity``): measured | mapped | statistics | assumed.

    Returns
    -------
    list of Finding
        A failed check is a finding, never an exception; an error finding means the result contradicts
        itself and should not be submitted.

    Raises
    ------
    compiler.errors.InputError
        ``national_totals`` lacks one of its columns.
    ValueError
        ``evidence`` has index labels that are not in ``result.activity``.
    """
    thresholds = thresholds or QaqcThresholds()
    findings: list[Finding] = []
    checked = _Checked(result)  # the estimate rows, made once and shared by the checks, dropped after
    for check in CHECK_FUNCTIONS:
        findings += check(checked, thresholds)
    findings += check_ne_insignificance(checked, thresholds, national_totals)
    findings += check_assumptions(checked, thresholds, evidence)
    order = {c.check: i for i, c in enumerate(CHECKS)}
    return sorted(findings, key=lambda f: order.get(f.check, len(order)))  # stable: keeps each check's order
