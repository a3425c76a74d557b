"""Assembly: strata x factors -> one row per year, region, stratum, pathway and gas.

No loop over activity rows: factors are resolved on distinct strata, then
joined; overrides are applied with one vectorised mask per override row.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from . import equations
from .errors import FindingLog
from .factors import KEYS, QUANTITIES, FactorLibrary, apply_overrides, override_rows_to_register, resolve_defaults
from .matching import missing_distinctions
from .readers import MAX_LISTED, ROW
from .settings import Settings
from .units import basis_ratio, conversion_factor, tonnes_of_gas_per_unit

# pathway -> (gas, main quantity, secondary quantity or "")
PATHWAYS: dict[str, tuple[str, str, str]] = {
    "co2_onsite": ("CO2", "ef_co2_c_onsite", ""),
    "co2_doc": ("CO2", "ef_co2_c_doc", ""),
    "ch4_soil": ("CH4", "ef_ch4_soil", "frac_ditch"),
    "ch4_ditch": ("CH4", "ef_ch4_ditch", "frac_ditch"),
    "n2o_soil": ("N2O", "ef_n2o_n_soil", ""),
    "fire_co2": ("CO2", "ef_fire_co2_c", "fuel_consumption"),
    "fire_ch4": ("CH4", "ef_fire_ch4", "fuel_consumption"),
    "fire_co": ("CO", "ef_fire_co", "fuel_consumption"),
    "fire_n2o": ("N2O", "", ""),
}
STRATUM_COLUMNS = ["year", "region", "climate_zone", "land_use", "soil_status", "nutrient_status", "drainage_depth",
                   "subtype", "remaining_or_converted", "previous_land_use"]
RESULT_COLUMNS = [*STRATUM_COLUMNS, "fire_type", "pathway", "gas", "area_ha", "area_basis_ha", "factor_id",
                  "default_factor_id", "factor_value", "factor_unit", "tier", "parameter_id", "parameter_value", "parameter_unit",
                  "emission_basis", "emission_basis_t", "emission_t", "conversion", "notation_key", "notation_reason", "equation",
                  "activity_source", "input_file", "input_row", "record_id"]


@dataclass
class EngineResult:
    emissions: pd.DataFrame  # estimates and notation rows
    register: pd.DataFrame  # defaults + overrides (all rows that could be used)


def _match_frame(rows: pd.DataFrame, library: FactorLibrary, settings: Settings) -> pd.DataFrame:
    """The keys used to match factor rows: the stratum keys, with the 2006 climate zone where needed."""
    m = pd.DataFrame({k: rows[k] if k in rows else "" for k in KEYS}, index=rows.index)
    if settings.factor_set == "ipcc2006":
        cmap = library.climate_2006
        setting = settings.ipcc2006_temperate
        cmap = cmap[(cmap["ipcc2006_temperate"] == "") | (cmap["ipcc2006_temperate"] == setting)]
        lookup = dict(zip(zip(cmap["climate_zone"], cmap["land_use"]), cmap["ipcc2006_zone"]))
        pairs = pd.Series(list(zip(m["climate_zone"], m["land_use"])), index=m.index, dtype=object)
        m["climate_zone"] = pairs.map(lookup).fillna("")
    return m


def _resolve(rows: pd.DataFrame, quantity: str, library: FactorLibrary, settings: Settings,
             overrides: pd.DataFrame) -> pd.Series:
    """Factor id per row (NaN where nothing applies): default by stratum, then overrides by row."""
    match = _match_frame(rows, library, settings)
    distinct = match.drop_duplicates().reset_index(drop=True)
    best, ambiguous, _ = resolve_defaults(distinct, library, settings.factor_set, quantity)
    if not ambiguous.empty:
        raise RuntimeError(f"factor table ambiguity for {quantity}: {ambiguous['factor_id'].tolist()}")
    distinct["factor_id"] = distinct.index.map(dict(zip(best["_sid"], best["factor_id"])))
    joined = match.reset_index().merge(distinct, on=KEYS, how="left").set_index("index")
    frame = rows.copy()
    frame["factor_id"] = joined.loc[rows.index, "factor_id"].to_numpy(dtype=object)
    if "fire_type" not in frame:
        frame["fire_type"] = ""
    return frame["factor_id"], apply_overrides(frame, overrides, quantity)


def _report_missing(rows: pd.DataFrame, missing: np.ndarray, quantity: str, library: FactorLibrary,
                    settings: Settings, log: FindingLog) -> None:
    """One error per distinct stratum that has no factor, naming what the table would need."""
    lacking = rows[missing]
    match = _match_frame(lacking, library, settings)
    rules = library.register[(library.register["factor_set"] == settings.factor_set)
                             & (library.register["quantity"] == quantity)]
    file = rows.attrs.get("file", "")
    for _, group in match.groupby(KEYS, sort=True):
        stratum = group.iloc[0]
        sample = lacking.loc[group.index]
        described = ", ".join(f"{k}={stratum[k]}" for k in KEYS if stratum[k] != "" and k != "fire_type") or "(all blank)"
        needed = missing_distinctions(stratum, rules, KEYS)
        row_numbers = sample[ROW].astype(int).tolist()
        listed = ", ".join(map(str, row_numbers[:MAX_LISTED])) + (f" and {len(row_numbers) - MAX_LISTED} more"
                                                                  if len(row_numbers) > MAX_LISTED else "")
        if needed:
            key = next(iter(needed))
            message = (f"no {quantity} factor for {described}: the {settings.factor_set} table distinguishes "
                       f"{', '.join(needed)} here (rows {listed})")
            expected = "; ".join(f"{k}: {' | '.join(v)}" for k, v in needed.items())
        else:
            key = "land_use"
            message = (f"no {quantity} factor for {described}: the {settings.factor_set} set has no Tier 1 default "
                       f"for this stratum (rows {listed})")
            expected = "an override with its source in [inputs] overrides, or another stratum description"
        log.add("error", "factor_missing", message, file=file, row=row_numbers[0], column=key, expected=expected)


def _note_undistinguished(rows: pd.DataFrame, ids: pd.Series, register: pd.DataFrame, quantity: str,
                          log: FindingLog) -> None:
    """Info: a stratum gives a nutrient status, depth or subtype that the matched table row does not use.

    One note per key, value and table, naming the strata (climate zone and land use) concerned.
    """
    info = register.set_index("factor_id").reindex(ids.dropna().unique())
    if info.empty:
        return
    file = rows.attrs.get("file", "")
    present = ids.notna()
    for key in ("nutrient_status", "drainage_depth", "subtype"):
        if key not in rows:
            continue
        rule_value = ids[present].map(info[key])
        given = rows.loc[present, key]
        unused = (given != "") & (rule_value == "")
        if not unused.any():
            continue
        sub = rows.loc[unused[unused].index]
        tables = ids[sub.index].map(info["table"]).replace("", "the override")
        for (value, table), group in sub.groupby([sub[key], tables]):
            strata = {f"{z} {l.replace('_', ' ')}" for z, l in zip(group["climate_zone"], group["land_use"])}
            entry = log.pending.setdefault((file, key, value), {"tables": set(), "strata": set(), "row": None})
            entry["tables"].add(table)
            entry["strata"] |= strata
            first = int(group[ROW].min())
            entry["row"] = first if entry["row"] is None else min(entry["row"], first)


def _flush_undistinguished(log: FindingLog) -> None:
    """One note per key and value, naming the tables that do not use it and the strata concerned."""
    for (file, key, value), entry in sorted(log.pending.items()):
        tables = ", ".join(sorted(entry["tables"]))
        log.add("info", "not_distinguished",
                f"{key} '{value}' is not distinguished by {tables} for {', '.join(sorted(entry['strata']))}; "
                "the value is accepted and the undistinguished factor used", file=file, row=entry["row"],
                column=key, found=value)
    log.pending.clear()


def compute(activity: pd.DataFrame, fires: pd.DataFrame, overrides: pd.DataFrame, library: FactorLibrary,
            settings: Settings, log: FindingLog) -> EngineResult:
    """Emissions and notation rows for every stratum, year and pathway."""
    register = library.register[library.register["factor_set"] == settings.factor_set]
    if overrides is not None and not overrides.empty:
        register = pd.concat([register, override_rows_to_register(overrides)], ignore_index=True)
    lookup = register.set_index("factor_id")
    coverage = library.coverage[library.coverage["factor_set"] == settings.factor_set]
    pieces: list[pd.DataFrame] = []
    acts = activity[~activity["_bad"]].copy() if not activity.empty else activity
    acts.attrs = activity.attrs
    convention = settings.mass_ratios

    for status in ("drained", "rewetted"):
        rows = acts[acts["soil_status"] == status]
        if rows.empty:
            continue
        rows.attrs = acts.attrs
        for _, cov in coverage[coverage["soil_status"] == status].iterrows():
            pieces.append(_pathway(rows, cov, library, settings, overrides, lookup, register, log, convention))
    if fires is not None and not fires.empty:
        good = fires[~fires["_bad"]].copy()
        good.attrs = fires.attrs
        for col in ("nutrient_status", "drainage_depth", "subtype", "previous_land_use"):
            good[col] = ""
        for _, cov in coverage[coverage["soil_status"] == "fire"].iterrows():
            pieces.append(_pathway(good, cov, library, settings, overrides, lookup, register, log, convention,
                                   area_column="burned_ha"))
    _flush_undistinguished(log)
    pieces = [p for p in pieces if not p.empty]
    emissions = pd.concat(pieces, ignore_index=True) if pieces else pd.DataFrame(columns=RESULT_COLUMNS)
    return EngineResult(emissions=emissions[RESULT_COLUMNS], register=register)


def _pathway(rows: pd.DataFrame, cov: pd.Series, library: FactorLibrary, settings: Settings,
             overrides: pd.DataFrame, lookup: pd.DataFrame, register: pd.DataFrame, log: FindingLog,
             convention: str, area_column: str = "area_ha") -> pd.DataFrame:
    pathway = cov["pathway"]
    gas, main_q, second_q = PATHWAYS[pathway]
    out = pd.DataFrame({c: rows[c] if c in rows else "" for c in STRATUM_COLUMNS}, index=rows.index)
    out["fire_type"] = rows["fire_type"] if "fire_type" in rows else ""
    out["pathway"], out["gas"] = pathway, gas
    out["area_ha"] = rows[area_column].astype(float)
    out["input_file"] = rows.attrs.get("file", "")
    out["input_row"] = rows[ROW].astype(int)
    out["record_id"] = rows.index.to_numpy()
    out["activity_source"] = rows["activity_source"] if "activity_source" in rows else "reported"
    out["equation"] = cov["equation"]
    for col in ("factor_id", "default_factor_id", "factor_unit", "tier", "parameter_id", "parameter_unit", "emission_basis",
                "notation_key", "notation_reason"):
        out[col] = ""
    for col in ("factor_value", "parameter_value", "emission_basis_t", "emission_t", "area_basis_ha", "conversion"):
        out[col] = np.nan
    if cov["status"] != "estimated":
        out["notation_key"], out["notation_reason"] = cov["status"], cov["reason"]
        return out

    default_ids, ids = _resolve(rows, main_q, library, settings, overrides)
    out["default_factor_id"] = default_ids.fillna("")
    missing = ids.isna().to_numpy().copy()
    if missing.any():
        _report_missing(rows, missing, main_q, library, settings, log)
    _note_undistinguished(rows, ids, register, main_q, log)
    use_secondary = bool(second_q) and not (second_q == "frac_ditch" and cov["soil_status"] == "rewetted")
    if use_secondary:
        _, sec_ids = _resolve(rows, second_q, library, settings, overrides)
        if second_q == "frac_ditch" and "ditch_fraction" in rows:
            given = rows["ditch_fraction"].notna()
            sec_ids = sec_ids.astype(object).where(~given, "activity:ditch_fraction")
        sec_missing = sec_ids.isna().to_numpy()
        if sec_missing.any():
            _report_missing(rows, sec_missing, second_q, library, settings, log)
        missing |= sec_missing
    if missing.all():
        return out.iloc[0:0]
    out = out[~missing]
    ids = ids[~missing]
    out["factor_id"] = ids
    out["factor_value"] = ids.map(lookup["value"]).astype(float)
    out["factor_unit"] = ids.map(lookup["unit"])
    out["tier"] = ids.map(lookup["tier"])
    area = out["area_ha"].to_numpy()

    if use_secondary:
        sec = sec_ids[~missing]
        from_activity = (sec == "activity:ditch_fraction").to_numpy()
        sec_value = sec.map(lookup["value"]).astype(float).to_numpy().copy()
        sec_unit = sec.map(lookup["unit"]).to_numpy(dtype=object).copy()
        if from_activity.any():
            sec_value[from_activity] = rows.loc[out.index[from_activity], "ditch_fraction"].to_numpy(dtype=float)
            sec_unit[from_activity] = "fraction"
        out["parameter_id"], out["parameter_value"], out["parameter_unit"] = sec, sec_value, sec_unit
        target = QUANTITIES[second_q][1]
        scale = _unit_scale(pd.Series(sec_unit, index=out.index), target, convention)
        second = sec_value * scale
    else:
        second = np.zeros(len(out))

    values = out["factor_value"].to_numpy()
    units = out["factor_unit"]
    if pathway.startswith("fire_"):
        species_unit = QUANTITIES[main_q][1]  # e.g. g CO2-C kg-1 dm
        gef = values * _unit_scale(units, species_unit, convention)
        basis_t = equations.fire_emission(area, second, gef)
        basis_species = species_unit.split()[1]
        out["area_basis_ha"] = area
        out["emission_basis"] = f"t {basis_species}"
        out["emission_basis_t"] = basis_t
        to_gas = basis_ratio(basis_species, gas, convention)
        out["emission_t"] = basis_t * to_gas
        # emission_t = area_ha x parameter_value (fuel) x factor_value x conversion
        fuel_scale = second / np.where(out["parameter_value"].to_numpy() == 0, 1.0, out["parameter_value"].to_numpy())
        out["conversion"] = 1e-3 * _unit_scale(units, species_unit, convention) * fuel_scale * to_gas
        return out

    if pathway == "ch4_soil":
        frac = second if use_secondary else np.zeros(len(out))
        area_basis = area * (1.0 - frac)
    elif pathway == "ch4_ditch":
        area_basis = area * second
    else:
        area_basis = area
    out["area_basis_ha"] = area_basis
    # t of gas per (ha x factor unit), and the element basis the factor is printed on.
    per_unit = {u: tonnes_of_gas_per_unit(u, convention) for u in units.unique()}
    to_gas = units.map(lambda u: per_unit[u][1]).to_numpy(dtype=float)
    basis_name = units.map(lambda u: u.split()[1]).to_numpy(dtype=object)
    to_basis = units.map(lambda u: tonnes_of_gas_per_unit(u, convention)[1]
                         / basis_ratio(u.split()[1], gas, convention)).to_numpy(dtype=float)
    product = area_basis * values
    out["emission_basis"] = "t " + pd.Series(basis_name, index=out.index)
    out["emission_basis_t"] = product * to_basis
    out["emission_t"] = product * to_gas
    out["conversion"] = to_gas  # emission_t = area_basis_ha x factor_value x conversion
    return out


def _unit_scale(units: pd.Series, target: str, convention: str) -> np.ndarray:
    """Per-row multiplier from each row's unit to ``target`` (computed once per distinct unit)."""
    scale = {u: conversion_factor(u, target, convention) for u in pd.unique(units)}
    return units.map(scale).to_numpy(dtype=float)
