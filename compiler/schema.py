"""Every column and key list of the compiler, once: name, type, unit and a one-line meaning.

The tidy CSV files' Table Schemas (datapackage.json), the workbook's strata headers and the README's column
list are made from :data:`FIELDS` and the column lists below; no other module spells a column list of its
own. ``python -m compiler.schema`` prints the README's table of emissions.csv columns.
"""

from __future__ import annotations

# --- key lists: what identifies a stratum, a series, a row -------------------------------------------

# The controlled terms that describe a stratum's land (each a vocabulary of compiler.vocabulary).
TERM_KEYS = ["climate_zone", "land_use", "soil_status", "nutrient_status", "drainage_depth", "subtype"]
# What a factor row of factor_tables/ can be specific to (a blank cell is "any").
FACTOR_KEYS = [*TERM_KEYS, "fire_type"]
# A stratum as the area checks follow it through time: its land, without the conversion class.
LAND_KEYS = ["region", *TERM_KEYS]
# The conversion class of a stratum (2006 GL Vol. 4 Ch. 3: land remaining / land converted).
CONVERSION_KEYS = ["remaining_or_converted", "previous_land_use"]
# One area series: a stratum of a region, followed over the years (gap filling, trace, recalculations).
SERIES_KEYS = [*LAND_KEYS, *CONVERSION_KEYS]
# One stratum-year: a row of the activity data.
STRATUM_KEYS = ["year", *SERIES_KEYS]
# One row of the results table: a stratum-year (or fire), a pathway and a gas.
ROW_KEYS = [*STRATUM_KEYS, "fire_type", "pathway", "gas"]
# One cell of the reporting tables.
CELL_KEYS = ["category_code", "gas", "year"]

# column -> (Table Schema type, unit, one-line meaning): every column of the results table, emissions.csv and
# gap_filling.csv, in the order emissions.csv writes them.
FIELDS: dict[str, tuple[str, str, str]] = {
    "year": ("integer", "", "inventory year"),
    "region": ("string", "", "region (district) as given in the activity data"),
    "category_code": ("string", "", "2006 IPCC category the row is reported under"),
    "land_use": ("string", "", "land-use category of the stratum"),
    "climate_zone": ("string", "", "climate zone: boreal | temperate | tropical"),
    "soil_status": ("string", "", "drained | rewetted"),
    "nutrient_status": ("string", "", "rich | poor | blank"),
    "drainage_depth": ("string", "", "deep | shallow | blank"),
    "subtype": ("string", "", "peat_extraction, plantation type, paddy_rice, or blank"),
    "pathway": ("string", "", "co2_onsite | co2_doc | ch4_soil | ch4_ditch | n2o_soil | fire_co2 | fire_ch4 | fire_co | fire_n2o | "
                "co2_offsite (off-site CO2 of extracted peat)"),
    "gas": ("string", "", "CO2 | CH4 | N2O | CO"),
    "area_ha": ("number", "ha", "area of the stratum (burnt area for fire pathways; blank for "
                "co2_offsite, which has a mass of peat instead)"),
    "factor_id": ("string", "", "id of the emission factor in the factor register"),
    "factor_value": ("number", "", "value of the emission factor, in factor_unit"),
    "factor_unit": ("string", "", "unit of factor_value"),
    "tier": ("string", "", "Tier 1 default, or the tier of an override"),
    "emission_t": ("number", "t", "emission in tonnes of the gas (negative: removal)"),
    "co2eq_t": ("number", "t CO2-eq", "emission_t x GWP100 of the run's GWP set; blank for CO"),
    "remaining_or_converted": ("string", "", "remaining | converted"),
    "previous_land_use": ("string", "", "land use before conversion"),
    "fire_type": ("string", "", "wildfire | prescribed (fire pathways)"),
    "land_category_code": ("string", "", "land category of the stratum (differs from category_code for IE rows)"),
    "area_basis_ha": ("number", "ha", "area the factor multiplies: area x (1 - Frac_ditch) for ch4_soil, area x Frac_ditch for ch4_ditch"),
    "parameter_id": ("string", "", "second parameter: Frac_ditch (CH4) or fuel consumption (fires); "
                     "activity:peat_production, the tonnes of air-dry peat extracted (co2_offsite)"),
    "parameter_value": ("number", "", "value of the second parameter, in parameter_unit"),
    "parameter_unit": ("string", "", "unit of parameter_value"),
    "emission_basis": ("string", "", "mass basis the factor is printed on (t CO2-C, t CH4-C, t N2O-N, ...)"),
    "emission_basis_t": ("number", "t", "emission on that basis, before conversion to the gas"),
    "conversion": ("number", "", "multiplier to t of gas: emission_t = area_basis_ha x factor_value x conversion "
                   "(fire rows: area_ha x parameter_value x factor_value x conversion; co2_offsite rows: "
                   "parameter_value x factor_value x conversion)"),
    "default_factor_id": ("string", "", "the Tier 1 default that an override replaced (blank if none)"),
    "notation_key": ("string", "", "NA, NE or IE where the pathway has no estimate; blank otherwise"),
    "notation_reason": ("string", "", "explanation of the notation key"),
    "equation": ("string", "", "equation applied"),
    "activity_source": ("string", "", "reported | interpolated | extrapolated | overlap | surrogate (gap filling); "
                        "co2_offsite rows given as a volume: the conversion to tonnes"),
    "fill_basis": ("string", "", "how a gap-filled area was made: the years interpolated between, the years of the "
                   "trend, or the series, ratio and years of Eq. 5.1 / Eq. 5.2"),
    "input_file": ("string", "", "input file of the stratum or fire row"),
    "input_row": ("integer", "", "row number in that file (header = 1); 0 for a gap-filled stratum-year"),
}
FIELDS["record_id"] = ("integer", "", "index of the activity or fire record the row was computed from (not written)")

# The results table as the engine makes it (compiler.engine), one row per stratum-year, pathway and gas.
RESULT_COLUMNS = [*STRATUM_KEYS, "fire_type", "pathway", "gas", "area_ha", "area_basis_ha", "factor_id",
                  "default_factor_id", "factor_value", "factor_unit", "tier", "parameter_id", "parameter_value",
                  "parameter_unit", "emission_basis", "emission_basis_t", "emission_t", "conversion", "notation_key",
                  "notation_reason", "equation", "activity_source", "input_file", "input_row", "record_id"]
# emissions.csv and the workbook's strata sheets: the reporting columns first, then the trace columns.
EXPORT_COLUMNS = [
    "year", "region", "category_code", "land_use", "climate_zone", "soil_status", "nutrient_status",
    "drainage_depth", "subtype", "pathway", "gas", "area_ha", "factor_id", "factor_value", "factor_unit", "tier",
    "emission_t", "co2eq_t",
    "remaining_or_converted", "previous_land_use", "fire_type", "land_category_code", "area_basis_ha",
    "parameter_id", "parameter_value", "parameter_unit", "emission_basis", "emission_basis_t", "conversion",
    "default_factor_id", "notation_key", "notation_reason", "equation", "activity_source", "input_file", "input_row",
]
# gap_filling.csv: every gap-filled stratum-year.
GAP_FILL_COLUMNS = [*SERIES_KEYS, "year", "area_ha", "activity_source", "fill_basis"]
# factors.csv: every factor used, with its source and locator (what a reviewer's trace reads).
FACTOR_COLUMNS = ["factor_id", "factor_set", "quantity", *FACTOR_KEYS, "value", "unit", "ci_low", "ci_high", "tier",
                  "agency_check", "source_id", "citation", "table", "row_label", "page",
                  "region", "first_year", "last_year", "reviewed_by", "reviewed_on", "reviewed_against"]
FACTOR_NUMBERS = ("value", "ci_low", "ci_high")
# The findings table (workbook, check).
FINDING_COLUMNS = ["severity", "check", "file", "sheet", "row", "column", "message", "found", "expected",
                   "category_code", "gas", "years"]


# Text columns of the results table that are compared with one another: each group shares one set of
# categories, so that the comparison is of codes.
SHARED_CATEGORIES = [("category_code", "land_category_code"), ("factor_id", "default_factor_id", "parameter_id")]


def compact(frame):
    """``frame`` with every text column as a pandas categorical with sorted text categories (so that codes
    sort as the text sorts); the columns of each :data:`SHARED_CATEGORIES` group share one category set.

    The results table repeats a few dozen distinct texts per column over millions of rows; as categoricals
    each cell is a small integer code into the column's categories. Columns that are categorical already
    are recoded (cheap), not rebuilt from text.
    """
    import pandas as pd

    def as_category(col):
        column = frame[col]
        if not isinstance(column.dtype, pd.CategoricalDtype):
            column = column.astype("category")
        if column.cat.categories.dtype != "str":
            column = column.cat.rename_categories(column.cat.categories.astype("str"))
        return column

    def is_text(col):
        dtype = frame[col].dtype
        return isinstance(dtype, pd.CategoricalDtype) or pd.api.types.is_string_dtype(dtype) or pd.api.types.is_object_dtype(dtype)

    out = {}
    for group in SHARED_CATEGORIES:
        present = [c for c in group if c in frame and is_text(c)]
        for c in present:
            out[c] = as_category(c)
        if present:
            union = pd.Index(sorted(set().union(*(out[c].cat.categories for c in present))), dtype="str")
            for c in present:
                out[c] = out[c].cat.set_categories(union)
    for col in frame.columns:
        if col not in out and is_text(col):
            column = as_category(col)
            if not column.cat.categories.is_monotonic_increasing:
                column = column.cat.reorder_categories(sorted(column.cat.categories))
            out[col] = column
    return frame.assign(**out) if out else frame


def plain(frame):
    """``frame`` with its categorical columns as text again: for the small tables derived from the results
    table (a group-by or merge on its categorical columns keeps them categorical)."""
    import pandas as pd

    cats = {c: frame[c].astype(frame[c].cat.categories.dtype) for c in frame.columns
            if isinstance(frame[c].dtype, pd.CategoricalDtype)}
    return frame.assign(**cats) if cats else frame


def table_schema(columns: list[str]) -> list[dict]:
    """Frictionless Table Schema fields of ``columns`` (type, description with unit, unit)."""
    fields = []
    for col in columns:
        ftype, unit, description = FIELDS[col]
        field = {"name": col, "type": ftype, "description": description + (f" [{unit}]" if unit else "")}
        if unit:
            field["unit"] = unit  # an extra property, ignored by validators
        fields.append(field)
    return fields


def markdown_columns(columns: list[str] = EXPORT_COLUMNS) -> str:
    """The README's table of the columns of emissions.csv."""
    lines = ["| column | type | unit | meaning |", "|---|---|---|---|"]
    for col in columns:
        ftype, unit, description = FIELDS[col]
        meaning = description.replace("|", "\\|")
        lines.append(f"| `{col}` | {ftype} | {unit} | {meaning} |")
    return "\n".join(lines)


if __name__ == "__main__":  # pragma: no cover - prints the README's table
    print(markdown_columns())
