"""The reporting tables of a submission, aggregated once from the results table.

Renderers (workbook, CSV, report, methods chapter) take these frames and only
format them; none of them sums an emission of its own.

``organic_soils``
    One row per year, land category, line (peat extraction and rewetted
    wetlands are lines of their own), soil status (drained | rewetted),
    climate zone and nutrient status: the area [kha], the implied emission
    factor of each soil pathway on its factor's basis, and the emissions in
    kt of each gas. The implied emission factor of a pathway is

        IEF = sum(E_basis) / sum(A_basis)

    with E_basis the emission of the estimate rows on the factor's mass basis
    (``emission_basis_t`` where the row's basis is that basis, otherwise the
    emission in t of gas converted by the run's molar masses) and A_basis the
    area the factor multiplies (``area_basis_ha``: the stratum area, or its
    ditch or ditch-free part for CH4). An IEF on zero area is blank.

``gas_series``
    Every year: each gas in kt of gas and in kt CO2-eq, and the total in
    kt CO2-eq, with the trend since the base year [%].

``category_series``
    Every year: each category and gas in kt of gas (or its notation key),
    a total row per gas, and the trend since the base year [%].
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .matching import distinct_codes
from .units import basis_ratio
from .schema import plain

# pathway -> (mass basis of the implied factor, multiplier from t to the unit's mass, unit)
IEF_BASIS = {
    "co2_onsite": ("CO2-C", 1.0, "t CO2-C ha-1 yr-1"),
    "co2_doc": ("CO2-C", 1.0, "t CO2-C ha-1 yr-1"),
    "ch4_soil": ("CH4", 1000.0, "kg CH4 ha-1 yr-1"),
    "ch4_ditch": ("CH4", 1000.0, "kg CH4 ha-1 yr-1"),
    "n2o_soil": ("N2O-N", 1000.0, "kg N2O-N ha-1 yr-1"),
}
GAS_OF_PATHWAY = {"co2_onsite": "CO2", "co2_doc": "CO2", "ch4_soil": "CH4", "ch4_ditch": "CH4", "n2o_soil": "N2O"}
SOIL_PATHWAYS = tuple(IEF_BASIS)
LINE_KEYS = ["year", "land_category_code", "line", "soil_status", "climate_zone", "nutrient_status"]
ORGANIC_SOILS_COLUMNS = [
    *LINE_KEYS[:2], "land_category_name", *LINE_KEYS[2:], "area_kha",
    *(f"ief_{p}" for p in SOIL_PATHWAYS),
    "co2_soil_kt", "co2_offsite_kt", "co2_fire_kt", "co2_kt", "ch4_kt", "n2o_kt", "n2o_reported_under", "qaqc_id", "qaqc_findings",
]
# column -> (unit, description): what the renderers print beside each column
ORGANIC_SOILS_FIELDS = {
    "year": ("", "inventory year"),
    "land_category_code": ("", "land category the strata belong to"),
    "land_category_name": ("", "name of the land category"),
    "line": ("", "line of the table: the land category, or peat extraction / rewetted wetlands / other wetlands"),
    "soil_status": ("", "drained | rewetted"),
    "climate_zone": ("", "climate zone of the strata"),
    "nutrient_status": ("", "rich | poor | blank"),
    "area_kha": ("kha", "area of organic soils in the line"),
    **{f"ief_{p}": (IEF_BASIS[p][2], f"implied emission factor of {p}: emission on the factor's basis / area it "
                    "rests on (blank on zero area)") for p in SOIL_PATHWAYS},
    "co2_soil_kt": ("kt CO2", "on-site CO2 and DOC (co2_onsite + co2_doc)"),
    "co2_offsite_kt": ("kt CO2", "off-site CO2 of the peat extracted for non-energy use (co2_offsite, 2006 GL "
                       "Vol. 4 Section 7.2.1.1), on a line of its own beside the extraction area"),
    "co2_fire_kt": ("kt CO2", "CO2 of organic-soil fires on the line's land category"),
    "co2_kt": ("kt CO2", "CO2 of the line, every pathway (on-site, DOC, off-site peat, fires); blank with no estimate"),
    "ch4_kt": ("kt CH4", "CH4 of the soil and of ditches (ch4_soil + ch4_ditch)"),
    "n2o_kt": ("kt N2O", "N2O of the soil (n2o_soil)"),
    "n2o_reported_under": ("", "category the line's N2O is reported under"),
    "qaqc_id": ("", "QA/QC check of implied emission factors on this land category and year (findings sheet)"),
    "qaqc_findings": ("", "number of findings of that check on this land category and year"),
}
IEF_CHECK = "implied_emission_factor"


@dataclass
class ReportingTables:
    organic_soils: pd.DataFrame
    gas_series: pd.DataFrame
    category_series: pd.DataFrame
    base_year: int
    latest_year: int

    @property
    def year_columns(self) -> list[str]:
        return [str(y) for y in range(self.base_year, self.latest_year + 1)]


def reporting_tables(result) -> ReportingTables:
    """The reporting tables of ``result`` (made once by :func:`compiler.compile_inventory`, which keeps them as
    ``result.reporting_tables``; renderers read that field)."""
    years = list(result.settings.years)
    tables = ReportingTables(
        organic_soils=organic_soils_table(result.emissions, result.library.categories, result.settings.mass_ratios,
                                          result.finding_list),
        gas_series=gas_series(result.aggregates, result.categories["gas"].unique(), result.gwp),
        category_series=category_series(result.categories, years),
        base_year=years[0], latest_year=years[-1])
    return tables


OFFSITE = "co2_offsite"  # compiler.offsite_peat: off-site CO2 of extracted peat (3.B.4.a.i)
RAW_KEYS = ["year", "land_category_code", "land_use", "subtype", "soil_status", "climate_zone", "nutrient_status"]


def _line(frame: pd.DataFrame) -> pd.Series:
    """Peat extraction and rewetted wetlands as lines of their own; any other stratum's line is its land category."""
    line = frame["land_category_name"].astype(object).copy()
    wet = (frame["land_use"] == "wetlands").to_numpy(dtype=bool)
    peat = wet & (frame["subtype"] == "peat_extraction").to_numpy(dtype=bool)
    rewetted = wet & ~peat & (frame["soil_status"] == "rewetted").to_numpy(dtype=bool)
    line[peat] = "peat extraction"
    line[rewetted] = "rewetted wetlands"
    line[wet & ~peat & ~rewetted] = "other wetlands"
    return line


class _Coded:
    """A text column held as codes (a small integer per row) that compares like the text: ``coded == text``
    and ``coded.isin(texts)`` give boolean arrays over the rows (a text array of millions of rows is not made)."""

    def __init__(self, column: pd.Series):
        self.codes, names = pd.factorize(column)
        self.index = {str(name): i for i, name in enumerate(names)}

    def __eq__(self, text) -> np.ndarray:  # type: ignore[override]
        return self.codes == self.index.get(text, -2)

    def isin(self, texts) -> np.ndarray:
        return np.isin(self.codes, [self.index[t] for t in texts if t in self.index])

    def __len__(self) -> int:
        return len(self.codes)


def _on_basis(pathway: _Coded, basis: _Coded, emission_t: np.ndarray, basis_t: np.ndarray,
              mass_ratios: str) -> np.ndarray:
    """Each row's emission on the mass basis of its pathway's implied factor [t of that basis] (0 elsewhere)."""
    out = np.zeros(len(pathway))
    for name, (target, _, _) in IEF_BASIS.items():
        at = pathway == name
        if not at.any():
            continue
        ratio = basis_ratio(GAS_OF_PATHWAY[name], target, mass_ratios)
        out[at] = np.where((basis == f"t {target}")[at], basis_t[at], emission_t[at] * ratio)
    return out


def organic_soils_table(emissions: pd.DataFrame, categories: pd.DataFrame, mass_ratios: str,
                        findings=()) -> pd.DataFrame:
    """Organic soils by land category, year, line, soil status, climate zone and nutrient status.

    The rows are numbered by their key combination once (:func:`compiler.matching.distinct_codes`) and
    every measure summed per number by ``np.bincount``; the few combinations are then gathered into lines.
    """
    names = dict(zip(categories["category_code"], categories["category_name"]))
    soil = emissions["pathway"].isin([*SOIL_PATHWAYS, "fire_co2", OFFSITE]).to_numpy(dtype=bool)
    if not soil.any():
        return pd.DataFrame(columns=ORGANIC_SOILS_COLUMNS)
    rows = emissions.loc[soil, RAW_KEYS + ["pathway", "area_ha", "area_basis_ha", "emission_t", "emission_basis",
                                          "emission_basis_t", "notation_key", "category_code"]]
    codes, first = distinct_codes(rows, RAW_KEYS)
    n = len(first)
    pathway = _Coded(rows["pathway"])
    estimate = (rows["notation_key"] == "").to_numpy(dtype=bool)
    emission_t = rows["emission_t"].to_numpy(dtype=float)
    groups = plain(rows[RAW_KEYS].iloc[first].reset_index(drop=True))

    def total(weights: np.ndarray, mask: np.ndarray) -> np.ndarray:
        return np.bincount(codes[mask], weights=weights[mask], minlength=n)

    # Area: every stratum row has an on-site CO2 row (estimate or notation key), counted once.
    groups["area_ha"] = total(rows["area_ha"].to_numpy(dtype=float), pathway == "co2_onsite")
    basis_t = _on_basis(pathway, _Coded(rows["emission_basis"]), emission_t,
                        rows["emission_basis_t"].to_numpy(dtype=float), mass_ratios)
    area_basis = rows["area_basis_ha"].to_numpy(dtype=float)
    for name in SOIL_PATHWAYS:
        at = estimate & (pathway == name)
        groups[f"_e_{name}"] = total(basis_t, at)
        groups[f"_a_{name}"] = total(area_basis, at)
        groups[f"_n_{name}"] = np.bincount(codes[at], minlength=n)  # estimate rows behind the sums
    measures = {"co2_soil_kt": ("co2_onsite", "co2_doc"), "co2_offsite_kt": (OFFSITE,), "co2_fire_kt": ("fire_co2",),
                "ch4_kt": ("ch4_soil", "ch4_ditch"), "n2o_kt": ("n2o_soil",)}
    for column, pathways in measures.items():
        at = estimate & pathway.isin(pathways)
        groups[column] = total(emission_t, at) / 1000.0
        groups[f"_n_{column}"] = np.bincount(codes[at], minlength=n)
    n2o = estimate & (pathway == "n2o_soil")
    reported = np.full(n, "", dtype=object)
    where = rows["category_code"][n2o].to_numpy(dtype=object)
    reported[codes[n2o][::-1]] = where[::-1]  # the category of the first N2O row of each combination
    groups["n2o_reported_under"] = reported

    groups["land_category_name"] = groups["land_category_code"].map(names).fillna("")
    groups["line"] = _line(groups).to_numpy()
    # The off-site CO2 of extracted peat rests on production, not on an area: a line of its own.
    groups.loc[(groups["_n_co2_offsite_kt"] > 0).to_numpy(), "line"] = "peat extraction, off-site CO2 of extracted peat"
    for key in ("soil_status", "climate_zone", "nutrient_status"):
        groups[key] = groups[key].astype(object).fillna("")
    keys = [*LINE_KEYS, "land_category_name"]
    sums = [c for c in groups.columns if c.startswith("_") or c in ("area_ha", *measures)]
    table = groups.groupby(keys, sort=True, dropna=False).agg(
        **{c: (c, "sum") for c in sums},
        n2o_reported_under=("n2o_reported_under", lambda v: ", ".join(sorted(set(v) - {""})))).reset_index()
    table["area_kha"] = table["area_ha"] / 1000.0
    for name, (_, to_unit, _) in IEF_BASIS.items():
        area = table[f"_a_{name}"].to_numpy(dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            table[f"ief_{name}"] = np.where((area > 0) & (table[f"_n_{name}"] > 0),
                                            table[f"_e_{name}"].to_numpy(dtype=float) * to_unit / area, np.nan)
    for column in measures:  # blank where no estimate row lies behind the sum
        table[column] = table[column].where(table[f"_n_{column}"] > 0)
    co2 = ["co2_soil_kt", "co2_offsite_kt", "co2_fire_kt"]
    table["co2_kt"] = table[co2].sum(axis=1, min_count=1)
    table["qaqc_id"] = IEF_CHECK + " " + table["land_category_code"] + " " + table["year"].astype(str)
    counts = _finding_counts(findings)
    table["qaqc_findings"] = [counts.get((c, int(y)), 0) for c, y in zip(table["land_category_code"], table["year"])]
    order = {c: i for i, c in enumerate(categories["category_code"])}
    table["_o"] = table["land_category_code"].map(order)
    table = table.sort_values(["year", "_o", "line", "soil_status", "climate_zone", "nutrient_status"], kind="stable")
    return table[ORGANIC_SOILS_COLUMNS].reset_index(drop=True)


def _finding_counts(findings) -> dict[tuple[str, int], int]:
    """Findings of the implied-emission-factor check per (category, year): its messages open with 'code gas year:'."""
    counts: dict[tuple[str, int], int] = {}
    for f in findings:
        if f.check != IEF_CHECK:
            continue
        head = f.message.split(":", 1)[0].split()
        if len(head) == 3 and head[2].isdigit():
            key = (head[0], int(head[2]))
            counts[key] = counts.get(key, 0) + 1
    return counts


def _trend(first, last) -> float:
    """Change since the base year [%]; blank when the base year is zero or not a number."""
    if not isinstance(first, (int, float)) or not isinstance(last, (int, float)):
        return np.nan
    if np.isnan(first) or np.isnan(last) or first == 0:
        return np.nan
    return (last - first) / abs(first) * 100.0


def gas_series(aggregates, gases, gwp: dict) -> pd.DataFrame:
    """Each gas in kt and kt CO2-eq, and the total in kt CO2-eq, per year (wide) with the trend [%].

    The figures of each gas are those of the aggregate stage (:attr:`Aggregates.gas_t`,
    :attr:`Aggregates.gas_co2eq_t`) in kt; ``gases`` are the gases of the reporting cells. The total is the
    sum of the gas rows shown: it equals :attr:`Aggregates.total_co2eq_t` in kt to the last digit or two
    (the same terms added in another order).
    """
    years = list(aggregates.years)
    cols = [str(y) for y in years]
    rows = []
    gases = [g for g in ("CO2", "CH4", "N2O", "CO") if g in set(gases)]

    def kt(table: pd.DataFrame, gas: str) -> list[float]:
        if gas not in table.columns:
            return [0.0] * len(years)
        return (table[gas].reindex(years).fillna(0.0) / 1000.0).tolist()

    for gas in gases:
        rows.append({"quantity": gas, "unit": f"kt {gas}", **dict(zip(cols, kt(aggregates.gas_t, gas)))})
    total = np.zeros(len(years))
    for gas in gases:
        if gas in gwp:
            values = kt(aggregates.gas_co2eq_t, gas)
            total += np.array(values)  # the gas rows in kt added in this order: the bytes of earlier exports
            rows.append({"quantity": gas, "unit": "kt CO2-eq", **dict(zip(cols, values))})
    rows.append({"quantity": "Total", "unit": "kt CO2-eq", **dict(zip(cols, total.tolist()))})
    frame = pd.DataFrame(rows, columns=["quantity", "unit", *cols])
    frame["trend_pct"] = [_trend(r[cols[0]], r[cols[-1]]) for r in frame.to_dict("records")]
    return frame


def category_series(categories: pd.DataFrame, years) -> pd.DataFrame:
    """Each category and gas in kt of gas per year (a notation key where there is no number), a total row
    per gas, and the trend since the base year [%]."""
    cols = [str(y) for y in years]
    cats = categories.copy()
    cats["cell"] = [k if k else v / 1000.0 for v, k in zip(cats["emission_t"], cats["notation_key"])]
    wide = cats.pivot_table(index=["category_code", "category_name", "gas"], columns="year", values="cell",
                            aggfunc="first", sort=False)
    wide = wide.reindex(columns=list(years))
    wide.columns = cols
    wide = wide.reset_index()
    wide.insert(3, "unit", "kt " + wide["gas"])
    totals = []
    for gas in [g for g in ("CO2", "CH4", "N2O", "CO") if g in set(cats["gas"])]:
        part = cats[(cats["gas"] == gas) & cats["emission_t"].notna()]
        sums = part.groupby("year")["emission_t"].sum().div(1000.0)
        totals.append({"category_code": "Total", "category_name": "All categories", "gas": gas, "unit": f"kt {gas}",
                       **{c: float(sums.get(y, 0.0)) for c, y in zip(cols, years)}})
    frame = pd.concat([wide, pd.DataFrame(totals, columns=wide.columns)], ignore_index=True)
    frame["trend_pct"] = [_trend(r[cols[0]], r[cols[-1]]) for r in frame.to_dict("records")]
    return frame
