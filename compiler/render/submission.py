"""The submission tables as workbook sheets, CSV files with their schemas, and a report section.

The numbers come from ``result.reporting_tables`` (made once by
:func:`compiler.reporting_tables.reporting_tables`); this module formats them and sums nothing.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..categories import NOTATION_KEYS
from ..reporting_tables import ORGANIC_SOILS_COLUMNS, ORGANIC_SOILS_FIELDS

# file name -> (resource name, title); written beside emissions.csv and described in datapackage.json
CSV_FILES = {
    "organic_soils.csv": ("organic_soils", "organic soils by land category: area, implied factors, emissions"),
    "timeseries_gases.csv": ("timeseries_gases", "each gas and the total per year, kt of gas and kt CO2-eq"),
    "timeseries_categories.csv": ("timeseries_categories", "each category and gas per year, kt of gas"),
}
SHEET_NOTES = {
    "organic_soils": [
        "Organic soils by land category and year. area_kha: area of the line [kha]. ief_<pathway>: implied emission "
        "factor = emissions on the factor's basis / area the factor rests on (area_basis_ha): t CO2-C ha-1 yr-1 for "
        "co2_onsite and co2_doc, kg CH4 ha-1 yr-1 for ch4_soil and ch4_ditch (ditch area), kg N2O-N ha-1 yr-1 for "
        "n2o_soil; blank where the area is zero or the pathway is not estimated. Emissions in kt of gas.",
        "qaqc_id names the QA/QC check of implied emission factors for the land category and year (findings sheet); "
        "qaqc_findings counts its findings there.",
    ],
    "timeseries_gases": ["Each gas per year in kt of gas and in kt CO2-eq, the total in kt CO2-eq, and the change "
                         "from the base year to the latest year in percent (blank where the base year is zero)."],
    "timeseries_categories": ["Each category and gas per year in kt of gas; a notation key where the cell has no "
                              "number; total rows per gas; change from the base year in percent."],
}


def _organic_rows(frame: pd.DataFrame):
    return [tuple(None if isinstance(v, float) and np.isnan(v) else v for v in row)
            for row in frame[ORGANIC_SOILS_COLUMNS].itertuples(index=False, name=None)]


def add_sheets(wb, result) -> None:
    """The three submission sheets, appended after the workbook's other sheets."""
    from .workbook import FORMATS, sheet_records, write_sheet

    tables = result.reporting_tables
    o = tables.organic_soils
    fmt = {c: "0.000####" for c in o.columns if c.startswith("ief_")}
    fmt.update({"area_kha": "#,##0.000", "co2_soil_kt": FORMATS["kt"], "co2_fire_kt": FORMATS["kt"],
                "co2_offsite_kt": FORMATS["kt"], "co2_kt": FORMATS["kt"],
                "ch4_kt": "#,##0.000000", "n2o_kt": "#,##0.000000", "year": FORMATS["int"],
                "qaqc_findings": FORMATS["int"]})
    write_sheet(wb, "organic_soils", ORGANIC_SOILS_COLUMNS, _organic_rows(o), fmt,
           {"land_category_name": 32, "line": 30, "qaqc_id": 34}, SHEET_NOTES["organic_soils"])
    years = tables.year_columns
    for title, frame in (("timeseries_gases", tables.gas_series), ("timeseries_categories", tables.category_series)):
        cols = list(frame.columns)
        fmt = {y: "#,##0.000000" for y in years}
        fmt["trend_pct"] = "0.00"
        write_sheet(wb, title, cols, sheet_records(frame, cols), fmt, {"category_name": 34}, SHEET_NOTES[title],
               freeze="E2" if "category_code" in cols else "C2")


def write_csvs(result, folder: Path) -> list[dict]:
    """The submission CSV files in ``folder``; returns their datapackage resources."""
    tables = result.reporting_tables
    frames = {"organic_soils.csv": tables.organic_soils[ORGANIC_SOILS_COLUMNS],
              "timeseries_gases.csv": tables.gas_series,
              "timeseries_categories.csv": tables.category_series}
    resources = []
    for name, frame in frames.items():
        frame.to_csv(folder / name, index=False, lineterminator="\n", encoding="utf-8")
        resources.append(_resource(name, frame, tables.year_columns))
    return resources


def _resource(name: str, frame: pd.DataFrame, years: list[str]) -> dict:
    rname, title = CSV_FILES[name]
    fields = []
    missing = [""]
    for col in frame.columns:
        if col in ORGANIC_SOILS_FIELDS:
            unit, description = ORGANIC_SOILS_FIELDS[col]
        elif col in years:
            unit, description = "", f"value in {col}, in the row's unit"
        elif col == "trend_pct":
            unit, description = "%", "change from the base year to the latest year (blank: base year zero)"
        else:
            unit, description = "", col.replace("_", " ")
        if col == "year" or col == "qaqc_findings":
            ftype = "integer"
        elif col in years or col == "trend_pct" or pd.api.types.is_float_dtype(frame[col].dtype):
            ftype = "number"
        else:
            ftype = "string"
        if col in years:
            keys = {v for v in frame[col] if isinstance(v, str)}
            missing.extend(sorted(keys - set(missing)))
        field = {"name": col, "type": ftype, "description": description + (f" [{unit}]" if unit else "")}
        if unit:
            field["unit"] = unit
        fields.append(field)
    return {"name": rname, "title": title, "path": name, "profile": "tabular-data-resource", "format": "csv",
            "mediatype": "text/csv", "encoding": "utf-8",
            "schema": {"fields": fields, "missingValues": missing}}


def _num(value, digits: int = 3) -> str:
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return ""
    if isinstance(value, str):
        return value
    return f"{value:,.{digits}f}"


def report_context(result) -> dict:
    """What the report's submission section shows: the latest year's organic-soils table and the gas series."""
    tables = result.reporting_tables
    o = tables.organic_soils
    latest = o[o["year"] == tables.latest_year]
    soils = [{
        "code": r["land_category_code"], "line": r["line"], "status": r["soil_status"],
        "zone": ", ".join(v for v in (r["climate_zone"], r["nutrient_status"]) if v),
        "area": _num(r["area_kha"], 2), "ief_onsite": _num(r["ief_co2_onsite"], 2), "ief_doc": _num(r["ief_co2_doc"], 2),
        "ief_ch4": _num(r["ief_ch4_soil"], 1), "ief_ditch": _num(r["ief_ch4_ditch"], 0),
        "ief_n2o": _num(r["ief_n2o_soil"], 2), "co2": _num(r["co2_kt"], 2),
        "ch4": _num(r["ch4_kt"], 3), "n2o": _num(r["n2o_kt"], 4),
    } for r in latest.to_dict("records")]
    g = tables.gas_series
    years = tables.year_columns
    shown = sorted({years[0], *years[::5], years[-1]}, key=years.index)
    gases = [{"quantity": r["quantity"], "unit": r["unit"], "values": [_num(r[y], 2) for y in shown],
              "trend": _num(r["trend_pct"], 1)} for r in g.to_dict("records")]
    from ..methods_chapter import to_html

    return {"methods": to_html(result.methods_chapter), "latest": tables.latest_year, "soils": soils, "gas_years": shown, "gases": gases,
            "files": list(CSV_FILES), "notation_keys": NOTATION_KEYS}
