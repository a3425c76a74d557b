"""Generate the invented demo region's input files (deterministic; run from the repository root).

Norrowmoor Province is invented for this demo, as are its districts, its
monitoring network and every number below. The areas follow simple rules so
that a reader can recompute them: drainage spreads until the late 1990s,
peat extraction winds down after 2010, and rewetting grows from 2000 on,
with the total organic-soil area of each district held constant. Orlathmoor's
extraction company reports the peat it takes off site each year (for horticulture, and
until 2009 also milled peat for a district heating plant, which the inventory leaves to
the energy sector); since 2021 it reports volumes with their bulk density.
"""

from __future__ import annotations

import csv
from pathlib import Path

FIRST, LAST = 1990, 2024
HERE = Path(__file__).resolve().parent / "demo"


def ramp(year: int, start: int, end: int, a: float, b: float) -> float:
    """Linear from a (at or before start) to b (at or after end)."""
    if year <= start:
        return a
    if year >= end:
        return b
    return a + (b - a) * (year - start) / (end - start)


def rows():
    """(year, region, zone, land use, status, nutrient, depth, subtype, area, ditch fraction,
    remaining/converted, previous land use, area uncertainty %, survey note)."""
    for y in range(FIRST, LAST + 1):
        # Orlathmoor (boreal): forestry drainage, grassland afforested in the 1990s (converted land
        # for 20 years), a peat extraction area rewetted after 2010.
        extraction = ramp(y, 2010, 2020, 1800.0, 300.0)
        afforested = ramp(y, 1990, 1998, 0.0, 500.0)
        aff_status = "converted" if y < 2010 else "remaining"
        yield y, "Orlathmoor", "boreal", "forest_land", "drained", "poor", "", "", ramp(y, 1990, 1998, 9000, 10500), "", "remaining", "", 15, ""
        yield y, "Orlathmoor", "boreal", "forest_land", "drained", "rich", "", "", 4200.0, "", "remaining", "", 15, ""
        yield y, "Orlathmoor", "boreal", "forest_land", "drained", "rich", "", "", afforested, "", aff_status, "grassland" if aff_status == "converted" else "", 15, ""
        yield y, "Orlathmoor", "boreal", "grassland", "drained", "", "", "", 2600.0 - afforested, "", "remaining", "", 10, ""
        yield y, "Orlathmoor", "boreal", "wetlands", "drained", "poor", "", "peat_extraction", extraction, "", "remaining", "", 5, ""
        yield y, "Orlathmoor", "boreal", "wetlands", "rewetted", "poor", "", "", 1800.0 - extraction, "", "remaining", "", 10, ""
        # Skarrowdale (boreal): drained forest, cropland turned to grassland.
        yield y, "Skarrowdale", "boreal", "forest_land", "drained", "rich", "", "", 6100.0, "", "remaining", "", 15, ""
        yield y, "Skarrowdale", "boreal", "cropland", "drained", "", "", "", ramp(y, 1990, 2005, 1400, 1100), "", "remaining", "", 10, ""
        yield y, "Skarrowdale", "boreal", "grassland", "drained", "", "", "", ramp(y, 1990, 2005, 600, 900), "", "remaining", "", 10, ""
        # Vennmarsh (temperate): intensive grassland and cropland; rewetting from 2000.
        rewet = ramp(y, 2000, 2024, 0.0, 2400.0)
        more_crop = ramp(y, 1990, 1997, 0.0, 700.0)
        yield y, "Vennmarsh", "temperate", "cropland", "drained", "", "", "", 3200.0 + more_crop, "", "remaining", "", 8, "field survey"
        yield y, "Vennmarsh", "temperate", "grassland", "drained", "rich", "deep", "", 5200.0 - more_crop - 0.6 * rewet, "", "remaining", "", 8, ""
        yield y, "Vennmarsh", "temperate", "grassland", "drained", "rich", "shallow", "", 2100.0 - 0.4 * rewet, "", "remaining", "", 8, ""
        yield y, "Vennmarsh", "temperate", "grassland", "drained", "poor", "", "", 700.0, "", "remaining", "", 12, ""
        yield y, "Vennmarsh", "temperate", "forest_land", "drained", "", "", "", 1300.0, "", "remaining", "", 12, ""
        yield y, "Vennmarsh", "temperate", "grassland", "rewetted", "rich", "", "", rewet, "", "remaining", "", 10, ""
        # Quillfen (temperate): a monitored grassland district (country-specific factor and measured
        # ditch fraction), rewetted to wetlands from 2015.
        q_rewet = ramp(y, 2015, 2024, 0.0, 900.0)
        yield y, "Quillfen", "temperate", "grassland", "drained", "rich", "deep", "", 2800.0 - q_rewet, 0.04, "remaining", "", 6, ""
        yield y, "Quillfen", "temperate", "cropland", "drained", "", "", "", 950.0, "", "remaining", "", 8, ""
        yield y, "Quillfen", "temperate", "wetlands", "rewetted", "rich", "", "", q_rewet, "", "converted", "grassland", 10, ""
        # Kelavi Lowlands (tropical): oil palm and acacia spread on drained peat forest; rewetting from 2018.
        palm = ramp(y, 1995, 2012, 0.0, 2600.0)
        acacia = ramp(y, 1990, 2012, 0.0, 400.0)
        k_rewet = ramp(y, 2018, 2024, 0.0, 700.0)
        palm_status = "converted" if y < 2015 else "remaining"
        yield y, "Kelavi Lowlands", "tropical", "forest_land", "drained", "", "", "", 4200.0 - palm - acacia, "", "remaining", "", 25, ""
        yield y, "Kelavi Lowlands", "tropical", "cropland", "drained", "", "", "oil_palm", palm - k_rewet, "", palm_status, "forest_land" if palm_status == "converted" else "", 20, ""
        yield y, "Kelavi Lowlands", "tropical", "forest_land", "drained", "", "", "acacia", acacia, "", "remaining", "", 25, ""
        yield y, "Kelavi Lowlands", "tropical", "forest_land", "rewetted", "", "", "", k_rewet, "", "remaining", "", 25, ""


def write_series() -> None:
    """Driver series for Skarrowdale's missing early years (invented, as everything here).

    The farm census counts tilled organic soil including field margins (about 15 % more than the peat
    map); the grazing register counts livestock units on organic-soil grassland (about 0.8 per ha).
    """
    header = ["series_id", "method", "year", "value", "unit", "source", "region", "land_use"]
    wobble = [3, -2, 4, -1, 2, -3, 1, 0, -2, 3, -1]
    rows = []
    for i, y in enumerate(range(1990, 2001)):
        tilled = 1.15 * ramp(y, 1990, 2005, 1400, 1100) + wobble[i]
        rows.append(["SKD-census-tilled", "overlap", y, f"{tilled:.0f}", "ha tilled organic soil (farm census)",
                     "Skarrowdale district farm census, tables of tilled land by soil group (invented)",
                     "Skarrowdale", "cropland"])
    for i, y in enumerate(range(1990, 1996)):
        units = 0.8 * ramp(y, 1990, 2005, 600, 900) + wobble[-1 - i]
        rows.append(["SKD-grazing-units", "surrogate", y, f"{units:.0f}", "livestock units on organic-soil grassland",
                     "Skarrowdale district grazing register (invented)", "Skarrowdale", "grassland"])
    with open(HERE / "surrogates.csv", "w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow(header)
        writer.writerows(rows)


def write_peat_production() -> None:
    """Peat taken off Orlathmoor's extraction area: tonnes of air-dry peat, from 2021 a volume and bulk density."""
    header = ["year", "region", "nutrient_status", "use", "air_dry_peat_t", "volume_m3", "bulk_density_t_per_m3",
              "moisture_content", "production_uncertainty_pct", "note"]
    density = 0.22  # t air-dry peat m-3 (invented)
    out = []
    for y in range(FIRST, LAST + 1):
        area = ramp(y, 2010, 2020, 1800.0, 300.0)
        horticulture = round(area * (25.0 + (y % 4)), -1)  # about 25 to 28 t per ha and year
        if y <= 2020:
            out.append([y, "Orlathmoor", "poor", "horticulture", f"{horticulture:.0f}", "", "", "0.45", "5",
                        "extraction company's annual return (invented)"])
        else:
            volume = round(horticulture / density, -2)
            out.append([y, "Orlathmoor", "poor", "horticulture", "", f"{volume:.0f}", f"{density:g}", "0.45", "15",
                        "extraction company's return in cubic metres (invented)"])
        if y <= 2009:
            out.append([y, "Orlathmoor", "poor", "energy", f"{area * 18.0:.0f}", "", "", "0.5", "5",
                        "milled peat for the district heating plant (invented)"])
        if 2005 <= y <= 2012:
            out.append([y, "Orlathmoor", "rich", "horticulture", f"{1500 + 100 * (y - 2005):.0f}", "", "", "0.45", "10",
                        "sedge peat from the lower layer of the old field (invented)"])
    with open(HERE / "peat_production.csv", "w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow(header)
        writer.writerows(out)


def main() -> None:
    HERE.mkdir(parents=True, exist_ok=True)
    header = ["year", "region", "climate_zone", "land_use", "soil_status", "nutrient_status", "drainage_depth",
              "subtype", "area_ha", "ditch_fraction", "remaining_or_converted", "previous_land_use",
              "area_uncertainty_pct", "survey_note"]
    merged: dict[tuple, list] = {}
    for r in rows():
        r = list(r)
        if r[8] <= 0.0:
            continue  # a stratum with no area in a year is left out (not occurring)
        key = tuple(r[:8] + r[10:12])
        if key in merged:  # converted land that has become "remaining" joins its stratum
            merged[key][8] += r[8]
        else:
            merged[key] = r
    # Gaps for the time-series checks: Skarrowdale's statistics for the latest year are not yet in
    # (extrapolated) and its organic-soil map starts in 1993 (1990-1992 filled from the district's farm
    # census by overlap, Eq. 5.1, and from its grazing register as a surrogate, Eq. 5.2; its forest by
    # trend), and one Vennmarsh forest survey year is missing (interpolated).
    gaps = [lambda r: r[1] == "Skarrowdale" and (r[0] == LAST or r[0] < 1993),
            lambda r: r[1] == "Vennmarsh" and r[3] == "forest_land" and r[0] == 2003]
    out = []
    for r in merged.values():
        if any(g(r) for g in gaps):
            continue
        r = list(r)
        r[8] = f"{r[8]:.1f}"
        out.append(r)
    with open(HERE / "activity.csv", "w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow(header)
        writer.writerows(out)
    write_series()
    write_peat_production()
    fires = [
        ["year", "region", "climate_zone", "land_use", "soil_status", "fire_type", "burned_ha"],
        [1997, "Kelavi Lowlands", "tropical", "forest_land", "drained", "wildfire", 120.0],
        [2006, "Skarrowdale", "boreal", "forest_land", "drained", "wildfire", 35.0],
        [2015, "Kelavi Lowlands", "tropical", "cropland", "drained", "wildfire", 210.0],
        [2019, "Kelavi Lowlands", "tropical", "cropland", "drained", "prescribed", 40.0],
    ]
    with open(HERE / "fires.csv", "w", newline="", encoding="utf-8") as handle:
        csv.writer(handle).writerows(fires)
    print(f"wrote {len(out)} activity rows and {len(fires) - 1} fires to {HERE}")


if __name__ == "__main__":
    main()
