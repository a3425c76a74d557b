"""The aggregate stage: every total, share, trend and cross-table that an output shows, computed once.

Renderers (workbook, report, console, manifest) take these tables and only format and place them; none
of them sums the results table itself. Each table is built from the reporting cells
(:attr:`InventoryResult.categories`, one row per category, gas and year) or from the activity data, so
every output shows the same figure for the same cell. Which output shows which table is listed in the
contributor guide (DEVELOPERS.md, "Which output shows which aggregate").

Units: tonnes of gas (``*_t``) and tonnes CO2-eq (``co2eq_t``); renderers convert to kt where they show kt.
A base year equal to the latest year (a one-year inventory) is allowed everywhere: changes are then 0.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .offsite_peat import OFFSITE_PATHWAY

GASES_WITH_GWP = ("CO2", "CH4", "N2O")
REGIONS_SHOWN = 30  # regions listed one by one in the report; the rest are one line (the workbook has them all)
CATEGORY = ["category_code", "category_name", "gas"]


@dataclass(frozen=True)
class Aggregates:
    """The aggregated tables of one compile (see the module docstring)."""

    base_year: int
    latest_year: int
    years: tuple[int, ...]
    # net CO2-eq of all gases with a GWP, per year [t CO2-eq]: index year
    total_co2eq_t: pd.Series
    # per year and gas [t CO2-eq] (gases with a GWP) and [t of gas] (every gas): index year, columns gas
    gas_co2eq_t: pd.DataFrame
    gas_t: pd.DataFrame
    # per category and gas, every year: the reported figure (t CO2-eq; t CO for CO) or the notation key
    category_cells: pd.DataFrame  # columns category_code, category_name, gas, unit_t, then one column per year
    # per category (all gases with a GWP), every year [t CO2-eq]: index (category_code, category_name)
    category_co2eq_t: pd.DataFrame
    # per region, every year [t CO2-eq]: index region
    region_co2eq_t: pd.DataFrame
    # per year and pathway / land use, from the results rows [t CO2-eq]: index year (years with an estimate),
    # columns the pathways / land uses estimated (the report's stacked charts)
    pathway_co2eq_t: pd.DataFrame
    land_use_co2eq_t: pd.DataFrame
    # organic-soil area per year and soil status [ha]: index year, columns drained / rewetted
    area_ha: pd.DataFrame
    # organic-soil area per year, all statuses [ha]: index year
    area_total_ha: pd.Series
    # off-site CO2 of extracted peat per category, gas and year [t CO2-eq]: index (category_code, gas, year)
    offsite_co2eq_t: pd.Series
    # organic-soil area of each category per year [ha]: the largest area of its gas cells (a category's gases
    # rest on the same land, except where a pathway covers part of it); index category_code, columns year
    category_area_ha: pd.DataFrame

    def largest_regions(self, shown: int = REGIONS_SHOWN) -> tuple[pd.DataFrame, pd.Series | None, int]:
        """The ``shown`` regions of largest absolute latest-year emissions (in their order), and the rest
        summed per year with their count (None and 0 when every region is shown) [t CO2-eq]."""
        table = self.region_co2eq_t
        if len(table) <= shown:
            return table, None, 0
        order = table[self.latest_year].abs().sort_values(ascending=False, kind="stable").index
        top = table.loc[sorted(order[:shown])]
        rest = table.drop(index=order[:shown])
        return top, rest.sum(), len(rest)

    def change(self, base: float, latest: float) -> float | None:
        """Relative change from the base to the latest year [fraction]; None where the base is zero."""
        return (latest - base) / abs(base) if base else None

    @property
    def category_change_co2eq_t(self) -> pd.Series:
        """Change of each category from the base to the latest year [t CO2-eq]: index as category_co2eq_t."""
        table = self.category_co2eq_t
        return table[self.latest_year] - table[self.base_year]

    def gross_share(self, category: tuple[str, str], year: int) -> float:
        """A category's share of the gross total of a year (the sum of every category's absolute value)
        [fraction]; 0 where that sum is zero."""
        column = self.category_co2eq_t[year]
        gross = column.abs().sum()
        return abs(column[category]) / gross if gross else 0.0

    @property
    def total_base_t(self) -> float:
        return float(self.total_co2eq_t.get(self.base_year, 0.0))

    @property
    def total_latest_t(self) -> float:
        return float(self.total_co2eq_t.get(self.latest_year, 0.0))


def aggregate(categories: pd.DataFrame, emissions: pd.DataFrame, activity: pd.DataFrame,
              years) -> Aggregates:
    """Build every aggregated table from the reporting cells, the results rows and the activity data."""
    years = tuple(int(y) for y in years)
    base, latest = years[0], years[-1]
    estimated = categories[categories["notation_key"] == ""]
    with_gwp = estimated[estimated["co2eq_t"].notna()]

    total = with_gwp.groupby("year")["co2eq_t"].sum().reindex(years, fill_value=0.0)
    gas_co2eq = (with_gwp.groupby(["year", "gas"])["co2eq_t"].sum().unstack("gas")
                 .reindex(index=years, columns=list(GASES_WITH_GWP)).fillna(0.0))
    gas_t = (estimated.groupby(["year", "gas"])["emission_t"].sum().unstack("gas").reindex(index=years)
             .fillna(0.0))
    category_co2eq = (with_gwp.groupby(["category_code", "category_name", "year"])["co2eq_t"].sum()
                      .unstack("year").reindex(columns=list(years)).fillna(0.0))

    # One row per category and gas: the figure shown (CO has no GWP: tonnes of CO) or the key.
    shown = np.where(categories["gas"] == "CO", categories["emission_t"], categories["co2eq_t"])
    value = pd.Series(shown, index=categories.index, dtype=object)
    keyed = categories["notation_key"] != ""
    value[keyed.to_numpy()] = categories.loc[keyed, "notation_key"].to_numpy()
    cells = categories[CATEGORY + ["year"]].assign(value=value)
    wide = cells.pivot(index=CATEGORY, columns="year", values="value")
    order = categories[CATEGORY].drop_duplicates()
    wide = wide.reindex(pd.MultiIndex.from_frame(order)).reindex(columns=list(years))
    wide.columns = [int(c) for c in wide.columns]
    wide = wide.reset_index()
    wide.insert(3, "unit_t", np.where(wide["gas"] == "CO", "t CO", "t CO2-eq"))

    rows = emissions[(emissions["notation_key"] == "") & emissions["co2eq_t"].notna()]
    region = (rows.groupby(["region", "year"])["co2eq_t"].sum().unstack("year")
              .reindex(columns=list(years)).fillna(0.0))
    by_pathway, by_land_use = (rows.pivot_table(index="year", columns=column, values="co2eq_t", aggfunc="sum",
                                                fill_value=0.0) for column in ("pathway", "land_use"))
    area = (activity.groupby(["year", "soil_status"])["area_ha"].sum().unstack("soil_status")
            .reindex(index=years, columns=["drained", "rewetted"]).fillna(0.0))
    area_total = activity.groupby("year")["area_ha"].sum()
    offsite = emissions[(emissions["notation_key"] == "") & (emissions["pathway"] == OFFSITE_PATHWAY)]
    offsite_co2eq = offsite.groupby(["category_code", "gas", "year"])["co2eq_t"].sum()
    category_area = (categories.groupby(["category_code", "year"], sort=False)["area_ha"].max().unstack("year")
                     .reindex(columns=list(years)))
    return Aggregates(base_year=base, latest_year=latest, years=years, total_co2eq_t=total,
                      gas_co2eq_t=gas_co2eq, gas_t=gas_t, category_cells=wide, category_co2eq_t=category_co2eq,
                      region_co2eq_t=region, pathway_co2eq_t=by_pathway,
                      land_use_co2eq_t=by_land_use, area_ha=area, area_total_ha=area_total,
                      offsite_co2eq_t=offsite_co2eq, category_area_ha=category_area)
