"""Off-site CO2 of extracted peat (3.B.4.a.i), from peat production statistics.

Peat taken off an extraction site and used in horticulture (or another non-energy use)
decomposes off site; the 2006 IPCC Guidelines (Vol. 4, Ch. 7, Section 7.2.1.1) count all its
carbon as emitted in the year of extraction:

    CO2 = Wt_dry peat x C_fraction x 44/12

with Wt_dry peat the air-dry tonnes extracted in the year and C_fraction the carbon fraction of
air-dry peat by nutrient status (``factor_tables/offsite_peat_ipcc2006.csv``; the equation is
:func:`compiler.equations.offsite_peat_co2`). Peat burnt for energy is reported in the energy
sector and is left out here, with a note per row.

Input: the optional ``[inputs] peat_production`` file, one row per year, region, nutrient status
and use (:data:`PEAT_COLUMNS`). A volume with its air-dry bulk density is converted to tonnes,
and the conversion is shown on the row (``activity_source``) and in an info finding.

Output: estimate rows with the columns of the engine's (:data:`compiler.engine.RESULT_COLUMNS`),
pathway ``co2_offsite``, allocated to 3.B.4.a.i (``reporting_allocation.csv``). A row has no
area: ``area_ha`` and ``area_basis_ha`` are blank, the production is the row's parameter
(``parameter_id`` ``activity:peat_production``, ``parameter_value`` in t air-dry peat), and

    emission_t = parameter_value x factor_value x conversion     (conversion = 44/12)

The uncertainty model takes the production as the row's activity (its 95 % half-width from
``production_uncertainty_pct``, else :data:`DEFAULT_PRODUCTION_PCT`) and the carbon fraction's
interval from the factor register; recalculations take the production as the activity.

QA/QC (:func:`check_production`): production per hectare of drained peat-extraction area per
year against :data:`PLAUSIBLE_T_PER_HA`, production in a region and year without extraction
area, and extraction area without production.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from . import equations
from .activity import MAX_NOTE_CHARS, Column, CellChecker, load_optional
from .schema import RESULT_COLUMNS
from .errors import FindingLog
from .factors import KEYS, FactorLibrary, apply_overrides, resolve_defaults
from .readers import MAX_LISTED, ROW
from .settings import Settings
from .units import basis_ratio
from .vocabulary import normalise_text

OFFSITE_PATHWAY = "co2_offsite"
QUANTITY = "c_fraction_peat"
USES = ("horticulture", "energy", "other")
ESTIMATED_USES = ("horticulture", "other")
PARAMETER_ID = "activity:peat_production"
PARAMETER_UNIT = "t air-dry peat yr-1"
# The equation's number is not checked against the published text: see factor_tables/offsite_peat_ipcc2006.csv.
EQUATION = "2006 GL Vol. 4 Section 7.2.1.1 off-site CO2-C = Wt_dry peat x C_fraction, x 44/12"
# The stratum the carbon fractions are matched on (and the allocation to 3.B.4.a.i).
STRATUM = {"climate_zone": "", "land_use": "wetlands", "soil_status": "drained", "drainage_depth": "",
           "subtype": "peat_extraction", "remaining_or_converted": "remaining", "previous_land_use": "",
           "fire_type": ""}
# 95 % half-width of production statistics where the file gives none [%]; common practice, no source.
DEFAULT_PRODUCTION_PCT = 10.0
# Air-dry peat per hectare of drained extraction area and year [t ha-1 yr-1]: milled-peat fields
# yield some tens to a little over a hundred tonnes; the inventory area also holds fields being
# prepared or worked out. Outside the range the units or the area are probably wrong.
# Common practice, no source.
PLAUSIBLE_T_PER_HA = (10.0, 200.0)
# A bulk density above this is not peat (mineral soil is about 1.2 to 1.6 t m-3); common practice, no source.
MAX_BULK_DENSITY = 1.5
# Air-dry peat as traded holds roughly 35 to 55 % water; above this the tonnes are probably of wet
# peat. Common practice, no source.
MAX_AIR_DRY_MOISTURE = 0.6

PEAT_COLUMNS = [
    Column("year", "year", True),
    Column("region", "text", True),
    Column("nutrient_status", "term", True, "nutrient_status"),
    Column("air_dry_peat_t", "number"),
    Column("volume_m3", "number"),
    Column("bulk_density_t_per_m3", "number"),
    Column("moisture_content", "fraction"),
    Column("use", "text", False, default="horticulture"),
    Column("production_uncertainty_pct", "percent"),
    Column("note", "text", max_length=MAX_NOTE_CHARS, multiline=True),
]


def load_peat_production(settings: Settings, log: FindingLog) -> pd.DataFrame:
    """The production table, validated: one row per year, region, nutrient status and use.

    Adds ``peat_t`` (air-dry tonnes, from the volume where one is given), ``conversion_text``
    (the volume conversion, blank otherwise) and ``estimated`` (not bad, not energy use). Empty
    without the input.
    """
    frame, check = load_optional(settings.peat_production, PEAT_COLUMNS, log, settings)
    if check is None:
        return frame
    bad = frame["_bad"].to_numpy().copy()

    def flag(severity, message, mask, column, found, expected=""):
        mask = pd.Series(mask, index=frame.index) & ~pd.Series(bad, index=frame.index)
        check.rows(severity, "peat_production", message, frame[mask], column, found, expected)
        return mask.to_numpy()

    blank = (frame["nutrient_status"] == "").to_numpy()
    bad |= flag("error", "nutrient_status is blank", blank, "nutrient_status", frame["nutrient_status"],
                "rich | poor (the carbon fraction of the peat depends on it)")
    frame["use"] = frame["use"].map(normalise_text)
    unknown = ~frame["use"].isin(USES).to_numpy()
    bad |= flag("error", "unknown use", unknown, "use", frame["use"], " | ".join(USES))

    tonnes, volume, density = frame["air_dry_peat_t"], frame["volume_m3"], frame["bulk_density_t_per_m3"]
    neither = (tonnes.isna() & volume.isna()).to_numpy()
    bad |= flag("error", "no production given", neither, "air_dry_peat_t", tonnes,
                "air_dry_peat_t, or volume_m3 with bulk_density_t_per_m3")
    both = (tonnes.notna() & volume.notna()).to_numpy()
    bad |= flag("error", "both air_dry_peat_t and volume_m3 given", both, "volume_m3", volume,
                "one of them: the tonnes of air-dry peat, or a volume with its bulk density")
    no_density = (volume.notna() & density.isna()).to_numpy()
    bad |= flag("error", "volume_m3 needs bulk_density_t_per_m3 to be converted to tonnes", no_density,
                "bulk_density_t_per_m3", density, "the air-dry bulk density of the peat as measured for the volume "
                "[t m-3]")
    out_of_range = (volume.notna() & density.notna() & ((density <= 0) | (density > MAX_BULK_DENSITY))).to_numpy()
    bad |= flag("error", f"bulk_density_t_per_m3 is not above 0 and at most {MAX_BULK_DENSITY:g} t m-3",
                out_of_range, "bulk_density_t_per_m3", density,
                f"above 0 and at most {MAX_BULK_DENSITY:g} t m-3 (air-dry peat; give kg m-3 divided by 1000)")
    unused = (tonnes.notna() & volume.isna() & density.notna()).to_numpy()
    flag("warning", "bulk_density_t_per_m3 given without volume_m3; not used", unused, "bulk_density_t_per_m3",
         density, "blank where the tonnes are given")
    wet = (frame["moisture_content"] > MAX_AIR_DRY_MOISTURE).to_numpy()
    flag("warning", f"moisture_content above {MAX_AIR_DRY_MOISTURE:g}: the tonnes may be of wet peat, not air-dry",
         wet, "moisture_content", frame["moisture_content"],
         "tonnes of air-dry peat (the carbon fractions are per tonne of air-dry peat)")

    frame["year"] = frame["year"].astype("Int64")
    keys = ["year", "region", "nutrient_status", "use"]
    dup = (frame.duplicated(keys, keep=False) & ~pd.Series(bad, index=frame.index)).to_numpy()
    bad |= flag("error", "the same year, region, nutrient status and use appear in more than one row", dup,
                "year", frame["region"].astype(str), "one row per year, region, nutrient status and use (add the "
                "tonnes together)")
    frame["_bad"] = bad

    from_volume = volume.notna().to_numpy() & ~bad
    frame["peat_t"] = np.where(from_volume, volume * density, tonnes)
    text = [f"volume {v:g} m3 x {d:g} t m-3 = {v * d:g} t air-dry peat" if f else ""
            for v, d, f in zip(volume, density, from_volume)]
    frame["conversion_text"] = pd.Series(text, index=frame.index, dtype=object)
    converted = frame[from_volume]
    check.rows("info", "peat_production", "volume converted to tonnes of air-dry peat with the row's bulk density",
               converted, "volume_m3", converted["conversion_text"])
    energy = frame[(frame["use"] == "energy").to_numpy() & ~bad]
    if not energy.empty:  # one note for all energy rows, naming them
        listed = energy[ROW].astype(int).tolist()
        shown = ", ".join(map(str, listed[:MAX_LISTED])) + (f" and {len(listed) - MAX_LISTED} more"
                                                            if len(listed) > MAX_LISTED else "")
        log.add("info", "peat_production",
                f"{len(listed)} rows of peat used for energy ({energy['peat_t'].sum():,.0f} t air-dry peat in "
                f"{_years_text(energy['year'])}; rows {shown}) are left out of 3.B.4.a.i: the CO2 of peat burnt "
                "for energy is reported in the energy sector (fuel combustion)", file=check.file, sheet=check.sheet,
                row=listed[0], column="use", found="energy", expected="horticulture | other for 3.B.4.a.i")
    frame["estimated"] = ~bad & frame["use"].isin(ESTIMATED_USES).to_numpy()
    return frame


def offsite_rows(peat: pd.DataFrame, library: FactorLibrary, register: pd.DataFrame, overrides: pd.DataFrame,
                 settings: Settings, log: FindingLog) -> pd.DataFrame:
    """Estimate rows of the off-site CO2 of the estimated production rows (columns of RESULT_COLUMNS)."""
    if peat.empty or not peat["estimated"].any():
        return pd.DataFrame(columns=RESULT_COLUMNS)
    rows = peat[peat["estimated"].to_numpy(dtype=bool)]
    match = pd.DataFrame({k: STRATUM.get(k, "") for k in KEYS}, index=rows.index)
    match["nutrient_status"] = rows["nutrient_status"]
    strata = match.drop_duplicates().reset_index(drop=True)
    best, ambiguous, _ = resolve_defaults(strata, library, settings.factor_set, QUANTITY)
    if not ambiguous.empty:
        raise RuntimeError(f"factor table ambiguity for {QUANTITY}: {ambiguous['factor_id'].tolist()}")
    strata["factor_id"] = strata.index.map(dict(zip(best["_sid"], best["factor_id"])))
    default = match.merge(strata, on=KEYS, how="left")["factor_id"].to_numpy(dtype=object)
    frame = match.assign(region=rows["region"], year=rows["year"].astype(int), factor_id=default)
    ids = apply_overrides(frame, overrides, QUANTITY)
    missing = ids.isna().to_numpy()
    check = CellChecker(log, peat.attrs.get("file", ""), peat.attrs.get("sheet", ""))
    check.rows("error", "factor_missing", f"no {QUANTITY} factor for this nutrient status in the "
               f"{settings.factor_set} set", rows[missing], "nutrient_status", rows["nutrient_status"],
               "an override of c_fraction_peat with its source in [inputs] overrides")
    rows, ids, default = rows[~missing], ids[~missing], default[~missing]
    if rows.empty:
        return pd.DataFrame(columns=RESULT_COLUMNS)
    info = register.drop_duplicates("factor_id").set_index("factor_id").reindex(ids.to_numpy())
    c_fraction = info["value"].to_numpy(dtype=float)
    peat_t = rows["peat_t"].to_numpy(dtype=float)
    convention = settings.mass_ratios
    to_co2 = basis_ratio("CO2-C", "CO2", convention)
    out = pd.DataFrame({
        "year": rows["year"].astype(int).to_numpy(), "region": rows["region"].to_numpy(),
        "nutrient_status": rows["nutrient_status"].to_numpy(),
        **{k: v for k, v in STRATUM.items()},
        "pathway": OFFSITE_PATHWAY, "gas": "CO2", "area_ha": np.nan, "area_basis_ha": np.nan,
        "factor_id": ids.to_numpy(dtype=object), "default_factor_id": pd.Series(default).fillna("").to_numpy(),
        "factor_value": c_fraction, "factor_unit": info["unit"].to_numpy(dtype=object),
        "tier": info["tier"].to_numpy(dtype=object),
        "parameter_id": PARAMETER_ID, "parameter_value": peat_t, "parameter_unit": PARAMETER_UNIT,
        "emission_basis": "t CO2-C", "emission_basis_t": peat_t * c_fraction,
        "emission_t": equations.offsite_peat_co2(peat_t, c_fraction, convention),
        "conversion": to_co2, "notation_key": "", "notation_reason": "", "equation": EQUATION,
        "activity_source": np.where(rows["conversion_text"] != "", "reported as " + rows["conversion_text"],
                                    "reported"),
        "input_file": peat.attrs.get("file", ""), "input_row": rows[ROW].astype(int).to_numpy(),
        "record_id": rows.index.to_numpy(),
    })
    return out[RESULT_COLUMNS]


def _years_text(years) -> str:
    """1990-1994, 2001 (runs of consecutive years)."""
    years = sorted(int(y) for y in set(years))
    runs, start = [], None
    for i, y in enumerate(years):
        if start is None:
            start = y
        if i + 1 == len(years) or years[i + 1] != y + 1:
            runs.append(str(start) if start == y else f"{start}-{y}")
            start = None
    return ", ".join(runs)


def check_production(peat: pd.DataFrame, activity: pd.DataFrame, settings: Settings, log: FindingLog) -> None:
    """QA/QC of the production against the drained peat-extraction area of the activity data.

    - warning: production (all uses: the area yields the energy peat too) per hectare of extraction
      area of a region and year outside :data:`PLAUSIBLE_T_PER_HA`;
    - warning: production in a region and year with no extraction area;
    - info: extraction area in years without production (their off-site CO2 is not estimated), or
      extraction area and no production file at all.
    """
    act = activity[~activity["_bad"]] if "_bad" in activity else activity
    act = act[(act["subtype"] == "peat_extraction") & (act["soil_status"] == "drained")]
    area = act.assign(year=act["year"].astype(int)).groupby(["region", "year"])["area_ha"].sum()
    area = area[area > 0]
    if peat.empty:
        if len(area) and settings.peat_production is None:
            regions = ", ".join(sorted(set(area.index.get_level_values(0))))
            log.add("info", "peat_production",
                    f"the activity data hold drained peat-extraction area ({regions}) "
                    "but no peat production is given: the off-site CO2 of extracted peat (3.B.4.a.i) is not "
                    "estimated", column="inputs.peat_production", file=str(settings.source or ""),
                    expected="[inputs] peat_production with the tonnes extracted per year, or a note in the "
                             "inventory report that no peat is taken off site")
        return
    check = CellChecker(log, peat.attrs.get("file", ""), peat.attrs.get("sheet", ""))
    good = peat[~peat["_bad"]].copy()
    if good.empty:
        return
    good["year"] = good["year"].astype(int)
    produced = good.groupby(["region", "year"]).agg(peat_t=("peat_t", "sum"), row=(ROW, "min"))
    joined = produced.join(area.rename("area_ha"), how="left")
    regions_with_area = set(area.index.get_level_values(0)) if len(area) else set()
    no_area = joined[joined["area_ha"].isna() & (joined["peat_t"] > 0)]
    shown = 0
    for (region, year), r in no_area.iterrows():
        if shown == MAX_LISTED:
            log.add("warning", "peat_production", f"production without extraction area: {len(no_area) - MAX_LISTED} "
                    "more region-years not listed", file=check.file, sheet=check.sheet, column="region")
            break
        where = ("has no drained peat-extraction area in the activity data in any year" if region not in
                 regions_with_area else f"has no drained peat-extraction area in the activity data in {year}")
        log.add("warning", "peat_production", f"peat production reported for {region} {year}, but {region} {where}",
                file=check.file, sheet=check.sheet, row=int(r["row"]), column="region",
                found=f"{r['peat_t']:,.1f} t air-dry peat", expected="drained wetlands with subtype peat_extraction in "
                "the same region and year, or the production in the region that holds the extraction area")
        shown += 1
    low, high = PLAUSIBLE_T_PER_HA
    both = joined[joined["area_ha"].notna()].copy()
    both["per_ha"] = both["peat_t"] / both["area_ha"]
    odd = both[(both["per_ha"] < low) | (both["per_ha"] > high)]
    for i, ((region, year), r) in enumerate(odd.iterrows()):
        if i == MAX_LISTED:
            log.add("warning", "peat_production", f"production per hectare outside {low:g} to {high:g} t ha-1 yr-1: "
                    f"{len(odd) - MAX_LISTED} more region-years not listed", file=check.file, sheet=check.sheet,
                    column="air_dry_peat_t")
            break
        log.add("warning", "peat_production",
                f"peat production of {region} {year} is {r['per_ha']:,.1f} t per ha of extraction area, outside "
                f"{low:g} to {high:g} t ha-1 yr-1: check the units (tonnes of air-dry peat) and the extraction area",
                file=check.file, sheet=check.sheet, row=int(r["row"]), column="air_dry_peat_t",
                found=f"{r['peat_t']:,.1f} t on {r['area_ha']:,.1f} ha",
                expected=f"{low:g} to {high:g} t of air-dry peat per ha of extraction area and year")
    missing = area[~area.index.isin(produced.index)]
    for region, years in missing.groupby(level="region"):
        log.add("info", "peat_production",
                f"{region} has drained peat-extraction area but no peat production in "
                f"{_years_text(years.index.get_level_values('year'))}: the off-site CO2 of those years is not "
                "estimated", file=check.file, sheet=check.sheet, column="year",
                expected="a production row (tonnes, or 0 where no peat was taken off site) for every year with "
                         "extraction area")


def extend(emissions: pd.DataFrame, activity: pd.DataFrame, overrides: pd.DataFrame, library: FactorLibrary,
           register: pd.DataFrame, settings: Settings, log: FindingLog) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The pipeline's hook: read the production, check it, add its off-site CO2 rows to ``emissions``.

    Returns ``(emissions with the co2_offsite rows appended, the validated production table)``; errors
    go to ``log`` (the caller raises them).
    """
    peat = load_peat_production(settings, log)
    check_production(peat, activity, settings, log)
    if peat.empty or log.errors:
        return emissions, peat
    rows = offsite_rows(peat, library, register, overrides, settings, log)
    if rows.empty:
        return emissions, peat
    rows = rows.astype({c: emissions[c].dtype for c in ("year", "input_row") if c in emissions})
    return pd.concat([emissions, rows], ignore_index=True), peat


