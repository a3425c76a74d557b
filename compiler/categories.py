"""Allocation of pathways to the 2006 IPCC category codes, and notation keys.

The allocation is data (``factor_tables/reporting_allocation.csv``), matched
most-specifically on pathway, land use, subtype and remaining/converted.
Each (category, gas, year) cell of the reporting table holds a sum or a
notation key with its explanation:

NO  not occurring: no organic-soil area (or fire) in the category that year;
NE  not estimated: the factor set has no Tier 1 method (reason given);
NA  not applicable: the activity occurs but Tier 1 takes the gas as nil;
IE  included elsewhere: estimated, and reported under the category named.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .factors import FactorLibrary
from .matching import distinct_codes, most_specific
from .schema import plain

ALLOC_KEYS = ["pathway", "land_use", "subtype", "remaining_or_converted"]
ALLOC_WEIGHTS = {"pathway": 8, "land_use": 4, "subtype": 2, "remaining_or_converted": 1}
NOTATION_KEYS = {
    "NO": "not occurring: no organic-soil area or fire in this category and year",
    "NE": "not estimated",
    "NA": "not applicable",
    "IE": "included elsewhere",
    "C": "confidential",
}
GASES = ("CO2", "CH4", "N2O", "CO")


def allocate(emissions: pd.DataFrame, library: FactorLibrary) -> pd.DataFrame:
    """Add ``category_code`` (where reported) and ``land_category_code`` (the land category of the stratum)."""
    rules = library.allocation
    codes, first = distinct_codes(emissions, ALLOC_KEYS)
    keys = emissions[ALLOC_KEYS].iloc[first].reset_index(drop=True)  # as drop_duplicates(), in that order
    best, ambiguous, unmatched = most_specific(keys, rules.assign(_id=range(len(rules))), ALLOC_KEYS,
                                               ALLOC_WEIGHTS, "_id")
    if not ambiguous.empty or len(unmatched):
        raise RuntimeError("reporting_allocation.csv does not give one category for every stratum")
    keys["category_code"] = keys.index.map(dict(zip(best["_sid"], rules["category_code"].to_numpy()[best["_id"]])))
    land = keys.assign(pathway="")
    best2, _, _ = most_specific(land, rules.assign(_id=range(len(rules))), ALLOC_KEYS, ALLOC_WEIGHTS, "_id")
    keys["land_category_code"] = keys.index.map(dict(zip(best2["_sid"], rules["category_code"].to_numpy()[best2["_id"]])))
    # Each row's codes, gathered by its key combination (what a left merge on the keys gives, in row order).
    out = emissions.reset_index(drop=True)
    for col in ("category_code", "land_category_code"):
        out[col] = pd.Series(keys[col].array.take(codes), index=out.index)
    return out


def category_table(emissions: pd.DataFrame, library: FactorLibrary, years) -> pd.DataFrame:
    """One row per category, gas and year: emission_t, co2eq_t, or a notation key with its reason."""
    cats = library.categories
    grid = [(c, g) for c, gases in zip(cats["category_code"], cats["gases"]) for g in gases.split(";")]
    frame = pd.DataFrame(grid, columns=["category_code", "gas"]).merge(
        pd.DataFrame({"year": list(years)}), how="cross")
    cell = ["category_code", "gas", "year"]
    # Only the columns each step reads are copied out of the (wide) emissions table.
    is_estimate = (emissions["notation_key"] == "").to_numpy(dtype=bool)
    est = emissions.loc[is_estimate, cell + ["emission_t", "co2eq_t", "area_ha", "input_file", "record_id"]]
    sums = est.groupby(cell, as_index=False).agg(
        emission_t=("emission_t", "sum"), co2eq_t=("co2eq_t", lambda s: s.sum(min_count=1)))
    # Area of the strata behind a cell, each stratum row counted once (not once per pathway).
    area = (est.drop_duplicates(cell + ["input_file", "record_id"]).groupby(cell, as_index=False)["area_ha"].sum())
    frame = frame.merge(sums, on=cell, how="left").merge(area, on=cell, how="left")
    # Notation rows, collapsed per cell with their reasons.
    # (Distinct key and reason per cell first: the sets below are the same, the strings far fewer.)
    notes = emissions.loc[~is_estimate, cell + ["notation_key", "notation_reason"]].drop_duplicates()
    reasons = (notes.groupby(["category_code", "gas", "year"])
               .agg(notation_key=("notation_key", lambda s: "/".join(sorted(set(s)))),
                    notation_reason=("notation_reason", lambda s: "; ".join(sorted(set(s))))).reset_index())
    frame = frame.merge(reasons, on=["category_code", "gas", "year"], how="left")
    # IE: a stratum's gas reported under another category (N2O to 3.C.4, fire non-CO2 to 3.C.1).
    moved_rows = (emissions["category_code"] != emissions["land_category_code"]).to_numpy(dtype=bool)
    moved = emissions.loc[moved_rows, ["land_category_code", "gas", "year", "category_code"]].drop_duplicates()
    ie = (moved.groupby(["land_category_code", "gas", "year"])["category_code"]
          .agg(lambda s: ", ".join(sorted(set(s)))).reset_index()
          .rename(columns={"land_category_code": "category_code", "category_code": "_ie_in"}))
    frame = plain(frame.merge(ie, on=["category_code", "gas", "year"], how="left"))
    frame["notation_key"] = frame["notation_key"].fillna("")
    frame["notation_reason"] = frame["notation_reason"].fillna("")
    has_number = frame["emission_t"].notna()
    is_ie = ~has_number & (frame["notation_key"] == "") & frame["_ie_in"].notna()
    frame.loc[is_ie, "notation_key"] = "IE"
    frame.loc[is_ie, "notation_reason"] = "reported under " + frame.loc[is_ie, "_ie_in"]
    none = ~has_number & (frame["notation_key"] == "")
    frame.loc[none, "notation_key"] = "NO"
    frame.loc[none, "notation_reason"] = NOTATION_KEYS["NO"]
    # A cell with a number keeps it; a key that also applies to part of it is explained, not shown.
    frame.loc[has_number, "notation_key"] = ""
    frame = frame.drop(columns="_ie_in")
    frame["category_name"] = frame["category_code"].map(dict(zip(cats["category_code"], cats["category_name"])))
    order = {c: i for i, c in enumerate(cats["category_code"])}
    frame["_o"] = frame["category_code"].map(order)
    gas_order = {g: i for i, g in enumerate(GASES)}
    frame["_g"] = frame["gas"].map(gas_order)
    frame = frame.sort_values(["_o", "_g", "year"]).drop(columns=["_o", "_g"]).reset_index(drop=True)
    return frame[["category_code", "category_name", "gas", "year", "area_ha", "emission_t", "co2eq_t",
                  "notation_key", "notation_reason"]]


def display_value(value: float, key: str) -> str:
    """A reporting-table cell: the notation key, or the number."""
    if key:
        return key
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return ""
    return f"{value:,.3f}"
