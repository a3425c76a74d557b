"""A reviewer's trace of one reported number: strata, factors, equation, conversions, sum.

Works on the written outputs (emissions.csv and factors.csv of an output
folder), so a reviewer can trace a figure without the inputs.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from .errors import Finding, InputError
from .schema import SERIES_KEYS


def load_outputs(folder: str | Path) -> tuple[pd.DataFrame, pd.DataFrame]:
    folder = Path(folder)
    files = {name: folder / name for name in ("emissions.csv", "factors.csv")}
    missing = [str(p) for p in files.values() if not p.is_file()]
    if missing:
        raise InputError([Finding("error", "trace", "not an output folder of this tool (file missing)",
                                  file=", ".join(missing))], head="nothing to trace: not an output folder.")
    emissions = pd.read_csv(files["emissions.csv"], keep_default_na=False,
                            na_values={c: [""] for c in ("emission_t", "co2eq_t", "factor_value", "parameter_value",
                                                         "area_ha", "area_basis_ha", "conversion", "emission_basis_t")})
    factors = pd.read_csv(files["factors.csv"], keep_default_na=False)
    fills = folder / "gap_filling.csv"  # how each gap-filled area was made (older output folders lack it)
    if fills.is_file():
        emissions.attrs["gap_filling"] = pd.read_csv(fills, keep_default_na=False)
    return emissions, factors


FILL_KEYS = ["year", *SERIES_KEYS]  # what identifies a stratum-year in gap_filling.csv


def _fill_basis(emissions: pd.DataFrame, row) -> str:
    fills = emissions.attrs.get("gap_filling")
    if fills is None or fills.empty:
        return ""
    hit = fills
    for key in FILL_KEYS:
        hit = hit[hit[key].astype(str) == str(row[key])]
    return str(hit["fill_basis"].iloc[0]) if len(hit) else ""


def trace_rows(emissions: pd.DataFrame, category: str, gas: str, year: int, region: str | None = None) -> pd.DataFrame:
    est = emissions[(emissions["category_code"] == category) & (emissions["gas"] == gas)
                    & (emissions["year"] == int(year))]
    if region:
        est = est[est["region"] == region]
    return est


def _fmt(v, digits=6) -> str:
    if v is None or (isinstance(v, float) and np.isnan(v)):
        return ""
    return f"{v:,.{digits}g}" if abs(v) < 1e-3 and v != 0 else f"{v:,.{digits}f}".rstrip("0").rstrip(".")


def _tonnes(v) -> str:
    """Tonnes to a sensible precision: 0.1 t from 1,000 t, 0.001 t from 1 t, four significant digits below."""
    if v is None or (isinstance(v, float) and np.isnan(v)):
        return ""
    size = abs(v)
    if size >= 1000:
        return f"{v:,.1f}"
    if size >= 1:
        return f"{v:,.3f}"
    return "0" if v == 0 else f"{v:.4g}"


def trace_text(emissions: pd.DataFrame, factors: pd.DataFrame, category: str, gas: str, year: int,
               region: str | None = None) -> tuple[str, float]:
    """The trace as text and the total it ends with [t of gas]."""
    rows = trace_rows(emissions, category, gas, year, region)
    where = f"{category} {gas} {year}" + (f", region {region}" if region else "")
    if rows.empty:
        raise InputError([Finding("error", "trace", f"nothing reported for {where}",
                                  expected="a category, gas and year present in emissions.csv")],
                         head=f"nothing to trace: emissions.csv has no row for {where}.")
    est = rows[rows["notation_key"] == ""].copy()
    for column in ("area_ha", "area_basis_ha", "factor_value", "parameter_value", "emission_basis_t", "conversion",
                   "emission_t", "co2eq_t"):  # blank cells (no area for off-site peat rows) read as NaN
        if column in est and not pd.api.types.is_numeric_dtype(est[column]):
            est[column] = pd.to_numeric(est[column].replace("", np.nan), errors="coerce")
    lines = [f"Trace of {where}"]
    if est.empty:
        keys = sorted(set(rows["notation_key"]))
        reasons = "; ".join(sorted(set(rows["notation_reason"])))
        lines.append(f"  no estimate: notation key {'/'.join(keys)} ({reasons})")
        return "\n".join(lines), float("nan")
    f = factors.set_index("factor_id")
    for i, (_, r) in enumerate(est.iterrows(), start=1):
        stratum = ", ".join(x for x in (r["region"], r["climate_zone"], r["land_use"], r["soil_status"],
                                        r["nutrient_status"], r["drainage_depth"], r["subtype"],
                                        r["remaining_or_converted"], r["fire_type"]) if x)
        if r["input_row"]:
            src = f"{r['input_file']} row {r['input_row']}"
        else:
            basis = _fill_basis(emissions, r)
            src = f"{r['activity_source']} (gap filled{': ' + basis if basis else ''})"
        lines.append(f"[{i}] {r['pathway']}: {stratum}; {src}")
        offsite = r["pathway"] == "co2_offsite"  # extracted peat: a mass of peat, no area
        if offsite:
            lines.append(f"    peat extracted {_fmt(r['parameter_value'])} {r['parameter_unit']} "
                         f"({r['activity_source']})")
        else:
            basis_differs = r["area_basis_ha"] != r["area_ha"] and not r["pathway"].startswith("fire")
            lines.append(f"    area {_fmt(r['area_ha'])} ha" + (
                f"; area the factor applies to {_fmt(r['area_basis_ha'])} ha" if basis_differs else ""))
        fac = f.loc[r["factor_id"]] if r["factor_id"] in f.index else None
        source = ""
        if fac is not None:
            source = f"{fac['citation']}; {fac['table']} {fac['row_label']}".strip("; ")
        lines.append(f"    factor {r['factor_id']} = {_fmt(r['factor_value'])} {r['factor_unit']} ({r['tier']}"
                     + (f", agency check: {fac['agency_check']}" if fac is not None and "agency_check" in fac
                        else "") + ")")
        if source:
            lines.append(f"      source: {source}")
        if r["parameter_id"] and not offsite:
            lines.append(f"    parameter {r['parameter_id']} = {_fmt(r['parameter_value'])} {r['parameter_unit']}")
        lines.append(f"    equation {r['equation']}")
        if offsite:
            lines.append(f"    {_fmt(r['parameter_value'])} t air-dry peat x {_fmt(r['factor_value'])} t C per t = "
                         f"{_fmt(r['emission_basis_t'])} {r['emission_basis']}; x {_fmt(r['conversion'], 9)} "
                         f"({r['emission_basis'][2:]} -> {gas}) = {_fmt(r['emission_t'])} t {gas}")
        elif r["pathway"].startswith("fire"):
            lines.append(f"    {_fmt(r['area_ha'])} x {_fmt(r['parameter_value'])} x {_fmt(r['factor_value'])} x "
                         f"{_fmt(r['conversion'], 9)} = {_tonnes(r['emission_t'])} t {gas}")
        else:
            ratio = r["emission_t"] / r["emission_basis_t"] if r["emission_basis_t"] else 1.0
            lines.append(f"    {_fmt(r['area_basis_ha'])} ha x {_fmt(r['factor_value'])} {r['factor_unit']} = "
                         f"{_tonnes(r['emission_basis_t'])} {r['emission_basis']}; x {_fmt(ratio, 9)} "
                         f"({r['emission_basis'][2:]} -> {gas}) = {_tonnes(r['emission_t'])} t {gas}")
    total = float(est["emission_t"].sum())
    co2eq = est["co2eq_t"].sum(min_count=1)
    lines.append(f"Sum of {len(est)} rows: {_tonnes(total)} t {gas}"
                 + ("" if np.isnan(co2eq) else f" = {_tonnes(co2eq)} t CO2-eq"))
    others = rows[rows["notation_key"] != ""]
    if not others.empty:
        lines.append("Also in this cell, without estimate: " + "; ".join(
            sorted({f"{k} ({reason})" for k, reason in zip(others["notation_key"], others["notation_reason"])})))
    return "\n".join(lines), total
