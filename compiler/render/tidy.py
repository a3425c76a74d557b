"""emissions.csv and its Frictionless Table Schema (datapackage.json)."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import numpy as np
import pandas as pd

# column -> (type, unit, description)
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
    "pathway": ("string", "", "co2_onsite | co2_doc | ch4_soil | ch4_ditch | n2o_soil | fire_co2 | fire_ch4 | fire_co | fire_n2o"),
    "gas": ("string", "", "CO2 | CH4 | N2O | CO"),
    "area_ha": ("number", "ha", "area of the stratum (burnt area for fire pathways)"),
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
    "parameter_id": ("string", "", "second parameter: Frac_ditch (CH4) or fuel consumption (fires)"),
    "parameter_value": ("number", "", "value of the second parameter, in parameter_unit"),
    "parameter_unit": ("string", "", "unit of parameter_value"),
    "emission_basis": ("string", "", "mass basis the factor is printed on (t CO2-C, t CH4-C, t N2O-N, ...)"),
    "emission_basis_t": ("number", "t", "emission on that basis, before conversion to the gas"),
    "conversion": ("number", "", "multiplier to t of gas: emission_t = area_basis_ha x factor_value x conversion "
                   "(fire rows: area_ha x parameter_value x factor_value x conversion)"),
    "default_factor_id": ("string", "", "the Tier 1 default that an override replaced (blank if none)"),
    "notation_key": ("string", "", "NA, NE or IE where the pathway has no estimate; blank otherwise"),
    "notation_reason": ("string", "", "explanation of the notation key"),
    "equation": ("string", "", "equation applied"),
    "activity_source": ("string", "", "reported | interpolated | extrapolated | overlap | surrogate (gap filling)"),
    "fill_basis": ("string", "", "how a gap-filled area was made: the years interpolated between, the years of the "
                   "trend, or the series, ratio and years of Eq. 5.1 / Eq. 5.2"),
    "input_file": ("string", "", "input file of the stratum or fire row"),
    "input_row": ("integer", "", "row number in that file (header = 1); 0 for a gap-filled stratum-year"),
}


CSV_ROWS_PER_PIECE = 100_000  # rows formatted at a time (bounds memory; the bytes do not depend on it)


def write_csv(frame: pd.DataFrame, path: Path, columns: list[str] | None = None) -> None:
    """``frame[columns]`` as UTF-8 CSV: the bytes of ``DataFrame.to_csv(index=False, lineterminator="\\n")``.

    Each distinct value of a column is formatted once (floats as pandas formats them, text quoted by
    the csv module as pandas has it quoted) and gathered onto the rows, a piece of rows at a time; no
    copy of the selected columns is made. Columns of other dtypes (object, nullable, dates) go to
    pandas unchanged.
    """
    columns = list(frame.columns) if columns is None else list(columns)
    if not all(_fast_dtype(frame[c].dtype) for c in columns):
        frame[columns].to_csv(path, index=False, lineterminator="\n", encoding="utf-8")
        return
    with open(path, "w", encoding="utf-8", newline="") as handle:
        handle.write(",".join(_csv_fields(columns)) + "\n")
        for start in range(0, len(frame), CSV_ROWS_PER_PIECE):
            part = frame.iloc[start:start + CSV_ROWS_PER_PIECE]
            texts = [_column_fields(part[c]) for c in columns]
            handle.write("\n".join(map(",".join, zip(*texts))) + "\n")


def _fast_dtype(dtype) -> bool:
    return (dtype == np.float64 or dtype == np.int64 or dtype == np.bool_
            or isinstance(dtype, pd.StringDtype))


def _csv_fields(values) -> list[str]:
    """Each value as one CSV field, quoted where the csv module quotes it (QUOTE_MINIMAL, as pandas)."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    out = []
    for value in values:
        buffer.seek(0)
        buffer.truncate()
        writer.writerow([value, ""])  # a second, empty field: a lone empty field would be written ""
        out.append(buffer.getvalue()[:-2])
    return out


def _column_fields(values: pd.Series) -> np.ndarray:
    """CSV field text of every value of one column (object array); a missing value is an empty field."""
    if isinstance(values.dtype, pd.StringDtype):
        codes, uniques = pd.factorize(values)  # missing -> -1 -> the appended empty field
        return np.array([*_csv_fields(uniques), ""], dtype=object)[codes]
    raw = np.ascontiguousarray(values.to_numpy())
    if raw.dtype == np.float64:
        # By bit pattern, so that -0.0 keeps its sign; NaN is an empty field, as pandas writes it.
        codes, uniques = pd.factorize(raw.view(np.int64))
        numbers = uniques.view(np.float64)
        texts = numbers.astype(str).astype(object)
        texts[np.isnan(numbers)] = ""
    else:  # int64, bool
        codes, uniques = pd.factorize(raw)
        texts = np.asarray(uniques).astype(str).astype(object)
    return texts[codes] if len(texts) else np.empty(len(raw), dtype=object)


def datapackage(name: str, columns: list[str], version: str) -> dict:
    package = _datapackage(name, columns, version)
    package["resources"].reverse()  # emissions first, then factors and the gap-filled stratum-years
    return package


def _fields(columns: list[str]) -> list[dict]:
    fields = []
    for col in columns:
        ftype, unit, description = FIELDS[col]
        field = {"name": col, "type": ftype, "description": description + (f" [{unit}]" if unit else "")}
        if unit:
            field["unit"] = unit  # an extra property, ignored by validators
        fields.append(field)
    return fields


def _datapackage(name: str, columns: list[str], version: str) -> dict:
    from ..pipeline import GAP_FILL_COLUMNS

    fields = _fields(columns)
    return {
        "name": "organic-soils-inventory",
        "title": f"{name}: emissions and removals of organic soils",
        "profile": "tabular-data-package",
        "created_with": f"histosol {version}",
        "resources": [{
            "name": "gap_filling",
            "path": "gap_filling.csv",
            "profile": "tabular-data-resource",
            "format": "csv",
            "mediatype": "text/csv",
            "encoding": "utf-8",
            "schema": {"fields": _fields(GAP_FILL_COLUMNS), "missingValues": [""]},
        }, {
            "name": "factors",
            "path": "factors.csv",
            "profile": "tabular-data-resource",
            "format": "csv",
            "mediatype": "text/csv",
            "encoding": "utf-8",
            "schema": {"fields": [{"name": c, "type": "number" if c in ("value", "ci_low", "ci_high") else "string"}
                                  for c in FACTOR_COLUMNS], "missingValues": [""]},
        }, {
            "name": "emissions",
            "path": "emissions.csv",
            "profile": "tabular-data-resource",
            "format": "csv",
            "mediatype": "text/csv",
            "encoding": "utf-8",
            "schema": {"fields": fields, "missingValues": [""]},
        }],
    }


def write_datapackage(package: dict, path: Path) -> None:
    path.write_text(json.dumps(package, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")


FACTOR_COLUMNS = ["factor_id", "factor_set", "quantity", "climate_zone", "land_use", "soil_status", "nutrient_status",
                  "drainage_depth", "subtype", "fire_type", "value", "unit", "ci_low", "ci_high", "tier",
                  "agency_check", "source_id", "citation", "table", "row_label", "page",
                  "region", "first_year", "last_year", "reviewed_by", "reviewed_on", "reviewed_against"]


def public_factors(factors: pd.DataFrame) -> pd.DataFrame:
    """The factor table as the outputs show it: a page the shipped table did not record is left blank."""
    frame = factors.copy()
    if "page" in frame:
        frame["page"] = frame["page"].astype(str).replace({"not recorded": ""})
    return frame


def write_factors_csv(factors: pd.DataFrame, path: Path) -> None:
    """factors.csv: every factor used, with its source and locator (what a reviewer's trace reads)."""
    frame = public_factors(factors)
    for col in FACTOR_COLUMNS:
        if col not in frame:
            frame[col] = ""
    frame[FACTOR_COLUMNS].sort_values("factor_id").to_csv(path, index=False, lineterminator="\n", encoding="utf-8")
