"""Assembly: strata x factors -> one row per year, region, stratum, pathway and gas.

No loop over activity rows: factors are resolved on distinct strata, then
joined; overrides are applied with one vectorised mask per override row.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .errors import FindingLog
from .factors import KEYS, QUANTITIES, FactorLibrary, apply_overrides, override_rows_to_register, resolve_defaults
from .matching import distinct_codes, missing_distinctions
from .readers import ROW
from .row_model import ROW_MODELS
from .schema import RESULT_COLUMNS, STRATUM_KEYS, compact, plain
from .settings import Settings
from .units import basis_ratio, conversion_factor, tonnes_of_gas_per_unit

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


def _strata(rows: pd.DataFrame, library: FactorLibrary, settings: Settings, cache: dict | None):
    """The match keys of ``rows``: distinct key rows (in order of first appearance) and each row's code.

    The same for every quantity resolved on the same rows, so it is computed once per row set.
    """
    entry = cache.get(id(rows)) if cache is not None else None
    if entry is not None and entry[0] is rows:
        return entry[1], entry[2]
    match = _match_frame(rows, library, settings)
    codes, first = distinct_codes(match, KEYS)
    distinct = plain(match.iloc[first].reset_index(drop=True))
    if cache is not None:
        cache[id(rows)] = (rows, codes, distinct)
    return codes, distinct


def _resolve(rows: pd.DataFrame, quantity: str, library: FactorLibrary, settings: Settings,
             overrides: pd.DataFrame, cache: dict | None = None) -> pd.Series:
    """Factor id per row (NaN where nothing applies): default by stratum, then overrides by row."""
    codes, strata = _strata(rows, library, settings, cache)
    distinct = strata.copy()
    best, ambiguous, _ = resolve_defaults(distinct, library, settings.factor_set, quantity)
    if not ambiguous.empty:
        raise RuntimeError(f"factor table ambiguity for {quantity}: {ambiguous['factor_id'].tolist()}")
    distinct["factor_id"] = distinct.index.map(dict(zip(best["_sid"], best["factor_id"])))
    # The stratum's factor on each row (a gather by stratum code, not a join on the key columns).
    distinct_ids = distinct["factor_id"].to_numpy(dtype=object)
    per_row = distinct_ids[codes] if len(codes) else np.array([], dtype=object)
    default = _coded(pd.Series(distinct_ids, dtype=object).fillna("").to_numpy(dtype=object), codes)
    # apply_overrides reads the stratum keys, region, year and the default factor_id of each row.
    needed = [c for c in rows.columns if c in KEYS or c in ("region", "year")]
    frame = pd.DataFrame({c: rows[c] for c in needed}, index=rows.index)
    frame["factor_id"] = per_row
    if "fire_type" not in frame:
        frame["fire_type"] = ""
    return pd.Series(default, index=rows.index), apply_overrides(frame, overrides, quantity)


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
        if needed:
            key = next(iter(needed))
            message = (f"no {quantity} factor for {described}: the {settings.factor_set} table distinguishes "
                       f"{', '.join(needed)} here")
            expected = "; ".join(f"{k}: {' | '.join(v)}" for k, v in needed.items())
        else:
            key = "land_use"
            message = (f"no {quantity} factor for {described}: the {settings.factor_set} set has no Tier 1 default "
                       f"for this stratum")
            expected = "an override with its source in [inputs] overrides, or another stratum description"
        log.add("error", "factor_missing", message, file=file, row=row_numbers[0], column=key, expected=expected,
                rows=tuple(row_numbers))


def _note_undistinguished(rows: pd.DataFrame, ids: pd.Series, register: pd.DataFrame, quantity: str,
                          log: FindingLog) -> None:
    """Info: a stratum gives a nutrient status, depth or subtype that the matched table row does not use.

    One note per key, value and table, naming the strata (climate zone and land use) concerned.
    """
    codes, uniques = pd.factorize(ids)  # -1 where no factor applies
    info = register.set_index("factor_id").reindex(uniques)
    if info.empty:
        return
    file = rows.attrs.get("file", "")
    present = codes >= 0
    for key in ("nutrient_status", "drainage_depth", "subtype"):
        if key not in rows:
            continue
        # The matched row leaves the key blank (per distinct id), the stratum gives it (per row).
        rule_blank = (info[key] == "").to_numpy(dtype=bool)
        unused = present & rule_blank[np.maximum(codes, 0)] & (rows[key] != "").to_numpy(dtype=bool)
        if not unused.any():
            continue
        sub = rows[unused]
        table_of = info["table"].replace("", "the override")
        # First row of each (value, table, climate zone, land use): one grouped minimum, then a loop over
        # those combinations (a handful).
        firsts = pd.DataFrame({"value": sub[key], "table": _gather(table_of, codes[unused], sub.index),
                               "zone": sub["climate_zone"], "land_use": sub["land_use"], "row": sub[ROW]}
                              ).groupby(["value", "table", "zone", "land_use"])["row"].min()
        for (value, table), part in firsts.groupby(level=["value", "table"]):
            strata = {f"{z} {l.replace('_', ' ')}" for _, _, z, l in part.index}
            entry = log.pending.setdefault((file, key, value), {"tables": set(), "strata": set(), "row": None})
            entry["tables"].add(table)
            entry["strata"] |= strata
            first = int(part.min())
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
    acts = _as_categories(acts, [*STRATUM_KEYS, "fire_type", "activity_source"])
    acts.attrs = activity.attrs
    convention = settings.mass_ratios
    cache: dict = {}  # distinct strata of each row set, shared by its pathways and quantities

    for status in ("drained", "rewetted"):
        rows = acts[acts["soil_status"] == status]
        if rows.empty:
            continue
        rows.attrs = acts.attrs
        for _, cov in coverage[coverage["soil_status"] == status].iterrows():
            pieces.append(_pathway(rows, cov, library, settings, overrides, lookup, register, log, convention,
                                   cache=cache))
    if fires is not None and not fires.empty:
        good = fires[~fires["_bad"]].copy()
        for col in ("nutrient_status", "drainage_depth", "subtype", "previous_land_use"):
            good[col] = _constant("", len(good))
        good = _as_categories(good, [*STRATUM_KEYS, "fire_type", "activity_source"])
        good.attrs = fires.attrs
        for _, cov in coverage[coverage["soil_status"] == "fire"].iterrows():
            pieces.append(_pathway(good, cov, library, settings, overrides, lookup, register, log, convention,
                                   area_column="burned_ha", cache=cache))
    _flush_undistinguished(log)
    pieces = [p for p in pieces if not p.empty]
    emissions = _concat(pieces) if pieces else pd.DataFrame(columns=RESULT_COLUMNS)
    return EngineResult(emissions=emissions[RESULT_COLUMNS], register=register)


# --- the results table's text columns as categoricals (see compiler.schema.compact) ---------------------

def _constant(value: str, n: int) -> pd.Categorical:
    """One text repeated ``n`` times: a code per row into one category."""
    return pd.Categorical.from_codes(np.zeros(n, dtype=np.int8), [value])


def _coded(values: np.ndarray, codes: np.ndarray) -> pd.Categorical:
    """``values`` (one per distinct id, may repeat) taken at ``codes``, as a categorical."""
    value_codes, uniques = pd.factorize(np.asarray(values, dtype=object))
    if len(codes) == 0:
        return pd.Categorical.from_codes(np.zeros(0, dtype=np.int8), uniques)
    return pd.Categorical.from_codes(value_codes[codes], uniques)


def _as_categories(frame: pd.DataFrame, columns: list[str]) -> pd.DataFrame:
    """``frame`` with its text columns among ``columns`` as categoricals (the engine gathers codes, not text)."""
    coded = compact(frame[[c for c in columns if c in frame]])
    return frame.assign(**{c: coded[c] for c in coded.columns})


def _concat(pieces: list[pd.DataFrame]) -> pd.DataFrame:
    """The pathways' pieces as one table: categoricals united (sorted categories), numbers concatenated."""
    from pandas.api.types import union_categoricals

    columns = {}
    for col in RESULT_COLUMNS:
        parts = [p[col] for p in pieces]
        if any(isinstance(part.dtype, pd.CategoricalDtype) or pd.api.types.is_string_dtype(part.dtype)
               or pd.api.types.is_object_dtype(part.dtype) for part in parts):
            cats = [pd.Series(part).astype("category").array for part in parts]
            cats = [pd.Categorical.from_codes(c.codes, c.categories.astype("str")) for c in cats]  # one dtype
            columns[col] = union_categoricals(cats, sort_categories=True)
        else:
            columns[col] = np.concatenate([np.asarray(part) for part in parts])
        for piece in pieces:  # each piece's column is dropped once it is concatenated
            del piece[col]
    return compact(pd.DataFrame(columns))  # the columns compared with one another share their categories


class _Piece(dict):
    """One pathway's result columns (arrays of one length ``n``, keyed by column): a DataFrame is made once,
    from all pathways together (a frame per pathway would consolidate and copy its columns twice)."""

    def __init__(self, columns: dict, n: int, index: pd.Index):
        super().__init__(columns)
        self.n, self.index = n, index

    @property
    def empty(self) -> bool:
        return self.n == 0


def _base_frame(rows: pd.DataFrame, cov: pd.Series, pathway: str, gas: str, area_column: str) -> _Piece:
    """The stratum, trace and blank result columns of one pathway, one row per row of ``rows``."""
    n = len(rows)
    columns = {c: rows[c] if c in rows else _constant("", n) for c in STRATUM_KEYS}
    columns["fire_type"] = rows["fire_type"] if "fire_type" in rows else _constant("", n)
    columns["pathway"], columns["gas"] = _constant(pathway, n), _constant(gas, n)
    columns["area_ha"] = rows[area_column].astype(float)
    columns["input_file"] = _constant(rows.attrs.get("file", ""), n)
    columns["input_row"] = rows[ROW].astype(int)
    columns["record_id"] = rows.index.to_numpy()
    columns["activity_source"] = rows["activity_source"] if "activity_source" in rows else _constant("reported", n)
    columns["equation"] = _constant(cov["equation"], n)
    for col in ("factor_id", "default_factor_id", "factor_unit", "tier", "parameter_id", "parameter_unit", "emission_basis",
                "notation_key", "notation_reason"):
        columns[col] = _constant("", n)
    for col in ("factor_value", "parameter_value", "emission_basis_t", "emission_t", "area_basis_ha", "conversion"):
        columns[col] = np.full(n, np.nan)
    columns = {c: (v.array if isinstance(v, pd.Series) else v) for c, v in columns.items()}
    return _Piece(columns, n, rows.index)


def _gather(column: pd.Series, codes: np.ndarray, index: pd.Index) -> pd.Series:
    """``column`` (one value per distinct id) taken at ``codes``, keeping its dtype: a vectorised map."""
    return pd.Series(column.array.take(codes), index=index)


def _pathway(rows: pd.DataFrame, cov: pd.Series, library: FactorLibrary, settings: Settings,
             overrides: pd.DataFrame, lookup: pd.DataFrame, register: pd.DataFrame, log: FindingLog,
             convention: str, area_column: str = "area_ha", cache: dict | None = None) -> _Piece:
    pathway = cov["pathway"]
    model = ROW_MODELS[pathway]
    gas, main_q, second_q = model.gas, model.factor_quantity, model.parameter_quantity
    if cov["status"] != "estimated":
        out = _base_frame(rows, cov, pathway, gas, area_column)
        out["notation_key"], out["notation_reason"] = _constant(cov["status"], out.n), _constant(cov["reason"], out.n)
        return out

    default_ids, ids = _resolve(rows, main_q, library, settings, overrides, cache)
    missing = ids.isna().to_numpy().copy()
    if missing.any():
        _report_missing(rows, missing, main_q, library, settings, log)
    _note_undistinguished(rows, ids, register, main_q, log)
    use_secondary = bool(second_q) and not (second_q == "frac_ditch" and cov["soil_status"] == "rewetted")
    if use_secondary:
        _, sec_ids = _resolve(rows, second_q, library, settings, overrides, cache)
        if second_q == "frac_ditch" and "ditch_fraction" in rows:
            given = rows["ditch_fraction"].notna()
            sec_ids = sec_ids.astype(object).where(~given, "activity:ditch_fraction")
        sec_missing = sec_ids.isna().to_numpy()
        if sec_missing.any():
            _report_missing(rows, sec_missing, second_q, library, settings, log)
        missing |= sec_missing
    if missing.all():
        return _base_frame(rows.iloc[0:0], cov, pathway, gas, area_column)
    keep = ~missing
    if missing.any():
        rows, ids, default_ids = rows[keep], ids[keep], default_ids[keep]
        if use_secondary:
            sec_ids = sec_ids[keep]
    out = _base_frame(rows, cov, pathway, gas, area_column)
    out["default_factor_id"] = default_ids
    # Factor value, unit and tier of each row: looked up once per distinct id, then gathered by code.
    codes, uniques = pd.factorize(ids)
    info = lookup[["value", "unit", "tier"]].reindex(uniques)
    out["factor_id"] = pd.Categorical.from_codes(codes, uniques)
    out["factor_value"] = info["value"].astype(float).to_numpy()[codes]
    out["factor_unit"] = _coded(info["unit"].to_numpy(dtype=object), codes)
    out["tier"] = _coded(info["tier"].to_numpy(dtype=object), codes)
    area = np.asarray(out["area_ha"], dtype=float)

    if use_secondary:
        sec = sec_ids
        from_activity = (sec == "activity:ditch_fraction").to_numpy()
        sec_codes, sec_uniques = pd.factorize(sec)
        sec_info = lookup[["value", "unit"]].reindex(sec_uniques)
        sec_value = sec_info["value"].astype(float).to_numpy()[sec_codes]
        sec_unit = sec_info["unit"].to_numpy(dtype=object)[sec_codes]
        if from_activity.any():
            sec_value[from_activity] = rows.loc[out.index[from_activity], "ditch_fraction"].to_numpy(dtype=float)
            sec_unit[from_activity] = "fraction"
        out["parameter_id"] = pd.Categorical.from_codes(sec_codes, sec_uniques)
        out["parameter_value"], out["parameter_unit"] = sec_value, pd.Categorical(sec_unit)
        target = QUANTITIES[second_q][1]
        scale = _unit_scale(pd.Series(sec_unit, index=out.index), target, convention)
        second = sec_value * scale
    else:
        second = np.zeros(out.n)

    values = out["factor_value"]
    units = pd.Series(out["factor_unit"])
    if model.fire:
        species_unit = QUANTITIES[main_q][1]  # e.g. g CO2-C kg-1 dm
        gef = values * _unit_scale(units, species_unit, convention)
        basis_t = model.evaluate(area, second, gef)  # Eq. 2.8
        basis_species = species_unit.split()[1]
        out["area_basis_ha"] = area
        out["emission_basis"] = _constant(f"t {basis_species}", out.n)
        out["emission_basis_t"] = basis_t
        to_gas = basis_ratio(basis_species, gas, convention)
        out["emission_t"] = basis_t * to_gas
        # emission_t = area_ha x parameter_value (fuel) x factor_value x conversion
        fuel_scale = second / np.where(out["parameter_value"] == 0, 1.0, out["parameter_value"])
        per_unit_inputs = model.evaluate(1.0, 1.0, 1.0)  # Eq. 2.8 on one of each input: the 10^-3 (g kg-1 -> t t-1)
        out["conversion"] = per_unit_inputs * _unit_scale(units, species_unit, convention) * fuel_scale * to_gas
        return out

    # The pathway's equation (Eq. 2.3-2.7): with a factor of one it gives the area the factor rests on.
    area_basis = model.area_basis(area, second)
    out["area_basis_ha"] = area_basis
    # t of gas per (ha x factor unit), and the element basis the factor is printed on: computed once per
    # distinct unit (a handful), then gathered onto the rows by unit code.
    unit_codes, unit_uniques = pd.factorize(units)
    per_unit = np.array([tonnes_of_gas_per_unit(u, convention)[1] for u in unit_uniques], dtype=float)
    to_gas = per_unit[unit_codes]
    to_basis = np.array([t / basis_ratio(u.split()[1], gas, convention) for u, t in zip(unit_uniques, per_unit)],
                        dtype=float)[unit_codes]
    basis_name = "t " + pd.Series(np.array([u.split()[1] for u in unit_uniques], dtype=object))
    product = model.evaluate(area, second, values)
    out["emission_basis"] = _coded(basis_name.to_numpy(dtype=object), unit_codes)
    out["emission_basis_t"] = product * to_basis
    out["emission_t"] = product * to_gas
    out["conversion"] = to_gas  # emission_t = area_basis_ha x factor_value x conversion
    return out


def _unit_scale(units: pd.Series, target: str, convention: str) -> np.ndarray:
    """Per-row multiplier from each row's unit to ``target`` (computed once per distinct unit)."""
    codes, uniques = pd.factorize(units)
    scale = np.array([conversion_factor(u, target, convention) for u in uniques], dtype=float)
    return scale[codes]
