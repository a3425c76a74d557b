"""emissions.csv and its Frictionless Table Schema (datapackage.json)."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import numpy as np
import pandas as pd

from ..schema import FACTOR_COLUMNS, FACTOR_NUMBERS, GAP_FILL_COLUMNS, table_schema

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
            or isinstance(dtype, pd.StringDtype)
            or (isinstance(dtype, pd.CategoricalDtype) and isinstance(dtype.categories.dtype, pd.StringDtype)))


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
    if isinstance(values.dtype, pd.CategoricalDtype):  # text categories: each formatted once, taken by code
        return np.array([*_csv_fields(values.cat.categories), ""], dtype=object)[values.cat.codes.to_numpy()]
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


def _datapackage(name: str, columns: list[str], version: str) -> dict:
    fields = table_schema(columns)
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
            "schema": {"fields": table_schema(GAP_FILL_COLUMNS), "missingValues": [""]},
        }, {
            "name": "factors",
            "path": "factors.csv",
            "profile": "tabular-data-resource",
            "format": "csv",
            "mediatype": "text/csv",
            "encoding": "utf-8",
            "schema": {"fields": [{"name": c, "type": "number" if c in FACTOR_NUMBERS else "string"}
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
