"""Synthetic inventories for the benchmarks: valid inputs of a chosen number of stratum-year rows.

Everything here is invented: regions are named ``Synthetic-001``, ``Synthetic-002``, ...; areas
follow smooth random trends (a few percent a year, so that the year-on-year checks stay quiet);
the one override cites an invented monitoring network. The strata are the stratum descriptions
that the Tier 1 tables of the 2013 Wetlands Supplement resolve without an override (the same
kinds of strata as the demo), so every generated file compiles.

The layout: ``YEARS`` (25 years, 2000-2024) x strata, where the strata are regions x the templates
of the region's climate zone (boreal, temperate, tropical in turn). The last region takes only
as many templates as are needed to give exactly the requested number of rows, so the sizes
1e3, 1e4, 1e5 and 1e6 are exact.

>>> from tests.benchmarks.synthetic import write_inventory
>>> settings = write_inventory(tmp_path, 1_000)          # doctest: +SKIP

Output is deterministic for a given size and seed. The same rows are available as a per-parcel
Parquet file (:func:`write_parcels`), whose aggregation gives back the stratum table.
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import pandas as pd

FIRST_YEAR, LAST_YEAR = 2000, 2024
YEARS = np.arange(FIRST_YEAR, LAST_YEAR + 1)
SIZES = (1_000, 10_000, 100_000, 1_000_000)
GENERATOR_VERSION = "1"  # change when the generated data change (invalidates cached files)

# (climate_zone, land_use, soil_status, nutrient_status, drainage_depth, subtype,
#  remaining_or_converted, previous_land_use): each resolves every Tier 1 pathway.
TEMPLATES: dict[str, list[tuple[str, ...]]] = {
    "boreal": [
        ("boreal", "forest_land", "drained", "poor", "", "", "remaining", ""),
        ("boreal", "forest_land", "drained", "rich", "", "", "remaining", ""),
        ("boreal", "forest_land", "drained", "rich", "", "", "converted", "grassland"),
        ("boreal", "grassland", "drained", "", "", "", "remaining", ""),
        ("boreal", "cropland", "drained", "", "", "", "remaining", ""),
        ("boreal", "wetlands", "drained", "poor", "", "peat_extraction", "remaining", ""),
        ("boreal", "wetlands", "rewetted", "poor", "", "", "remaining", ""),
    ],
    "temperate": [
        ("temperate", "cropland", "drained", "", "", "", "remaining", ""),
        ("temperate", "grassland", "drained", "rich", "deep", "", "remaining", ""),
        ("temperate", "grassland", "drained", "rich", "shallow", "", "remaining", ""),
        ("temperate", "grassland", "drained", "poor", "", "", "remaining", ""),
        ("temperate", "forest_land", "drained", "", "", "", "remaining", ""),
        ("temperate", "grassland", "rewetted", "rich", "", "", "remaining", ""),
        ("temperate", "wetlands", "rewetted", "rich", "", "", "converted", "grassland"),
    ],
    "tropical": [
        ("tropical", "forest_land", "drained", "", "", "", "remaining", ""),
        ("tropical", "forest_land", "drained", "", "", "acacia", "remaining", ""),
        ("tropical", "cropland", "drained", "", "", "oil_palm", "remaining", ""),
        ("tropical", "cropland", "drained", "", "", "oil_palm", "converted", "forest_land"),
        ("tropical", "forest_land", "rewetted", "", "", "", "remaining", ""),
    ],
}
ZONES = ("boreal", "temperate", "tropical")
STRATUM_FIELDS = ["climate_zone", "land_use", "soil_status", "nutrient_status", "drainage_depth", "subtype",
                  "remaining_or_converted", "previous_land_use"]
ACTIVITY_FIELDS = ["year", "region", "climate_zone", "land_use", "soil_status", "nutrient_status", "drainage_depth",
                   "subtype", "area_ha", "ditch_fraction", "remaining_or_converted", "previous_land_use",
                   "area_uncertainty_pct"]


def region_name(i: int) -> str:
    return f"Synthetic-{i + 1:03d}" if i < 999 else f"Synthetic-{i + 1:06d}"


def strata(n_strata: int) -> pd.DataFrame:
    """``n_strata`` distinct (region, stratum) rows: regions cycle through the zones' templates."""
    regions, records = [], []
    i = 0
    while len(records) < n_strata:
        zone = ZONES[i % len(ZONES)]
        for template in TEMPLATES[zone]:
            if len(records) == n_strata:
                break
            regions.append(region_name(i))
            records.append(template)
        i += 1
    frame = pd.DataFrame(records, columns=STRATUM_FIELDS)
    frame.insert(0, "region", regions)
    return frame


def activity_table(n_rows: int, seed: int = 1) -> pd.DataFrame:
    """The stratum table of exactly ``n_rows`` rows (``n_rows`` a multiple of len(YEARS))."""
    if n_rows % len(YEARS):
        raise ValueError(f"n_rows must be a multiple of {len(YEARS)} (the years {FIRST_YEAR}-{LAST_YEAR})")
    n_strata = n_rows // len(YEARS)
    base = strata(n_strata)
    rng = np.random.default_rng(seed)
    start = np.round(rng.lognormal(mean=6.0, sigma=1.0, size=n_strata), 1) + 10.0  # ha, about 400 ha typical
    growth = rng.uniform(-0.02, 0.02, size=n_strata)  # a year: smooth, small changes
    t = (YEARS - FIRST_YEAR)[None, :]
    area = np.round(start[:, None] * (1.0 + growth[:, None]) ** t, 2)
    drained = (base["soil_status"] == "drained").to_numpy()
    measured_ditch = drained & (rng.random(n_strata) < 0.1)  # a tenth of the drained strata measured their ditches
    ditch = np.where(measured_ditch, np.round(rng.uniform(0.02, 0.08, size=n_strata), 3), np.nan)
    pct = rng.choice([5.0, 8.0, 10.0, 15.0, 20.0], size=n_strata)
    frame = base.loc[base.index.repeat(len(YEARS))].reset_index(drop=True)
    frame.insert(0, "year", np.tile(YEARS, n_strata))
    frame["area_ha"] = area.ravel()
    frame["ditch_fraction"] = np.repeat(ditch, len(YEARS))
    frame["area_uncertainty_pct"] = np.repeat(pct, len(YEARS))
    return frame[ACTIVITY_FIELDS]


def fires_table(activity: pd.DataFrame) -> pd.DataFrame:
    """A wildfire every fifth year on the drained forest of each tropical and boreal region."""
    drained_forest = activity[(activity["land_use"] == "forest_land") & (activity["soil_status"] == "drained")
                              & (activity["subtype"] == "") & (activity["climate_zone"] != "temperate")
                              & (activity["remaining_or_converted"] == "remaining")
                              & (activity["year"] % 5 == 2)]
    keys = ["year", "region", "climate_zone", "land_use", "soil_status"]
    fires = drained_forest.groupby(keys, as_index=False)["area_ha"].sum()
    fires["fire_type"] = "wildfire"
    fires["burned_ha"] = np.round(fires.pop("area_ha") * 0.01, 2)  # 1 % of the area burnt
    return fires[keys + ["fire_type", "burned_ha"]]


OVERRIDES = (
    "override_id,quantity,climate_zone,land_use,soil_status,nutrient_status,drainage_depth,subtype,value,unit,"
    "ci_low,ci_high,tier,source,region,first_year,last_year,note\n"
    "synthetic-grass-co2,ef_co2_c_onsite,temperate,grassland,drained,rich,deep,,24.5,t CO2 ha-1 yr-1,19.8,29.2,"
    "Tier 2 region-specific,\"Synthetic Monitoring Network (invented for benchmarks), 2021.\",Synthetic-002,2005,2024,"
    "invented\n")


def settings_text(name: str, iterations: int = 2000, activity: str = "activity.csv", extra_inputs: str = "") -> str:
    return textwrap.dedent(f"""\
        # Invented inventory for benchmarks: no name or number here describes a real place.
        [inventory]
        name = "{name}"
        submission_year = 2026
        first_year = {FIRST_YEAR}
        last_year = {LAST_YEAR}
        compile_date = "2026-04-15"

        [method]
        factor_set = "ipcc2013ws"
        gwp = "AR5"

        [uncertainty]
        approach = "both"
        iterations = {iterations}
        seed = 20130101

        [inputs]
        activity = "{activity}"
        fires = "fires.csv"
        overrides = "overrides.csv"
        {extra_inputs}

        [limits]
        max_input_mb = 2048
        """)


def write_inventory(folder: Path, n_rows: int, seed: int = 1, iterations: int = 2000) -> Path:
    """Write settings, activity, fires and overrides of ``n_rows`` stratum-year rows; return the settings path.

    Files already written by this generator version for the same size and seed are reused.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    stamp = folder / ".synthetic"
    tag = f"{GENERATOR_VERSION} {n_rows} {seed} {iterations}"
    settings = folder / "inventory.toml"
    if stamp.exists() and stamp.read_text() == tag and settings.exists():
        return settings
    activity = activity_table(n_rows, seed)
    activity.to_csv(folder / "activity.csv", index=False, lineterminator="\n")
    fires_table(activity).to_csv(folder / "fires.csv", index=False, lineterminator="\n")
    (folder / "overrides.csv").write_text(OVERRIDES, encoding="utf-8")
    settings.write_text(settings_text(f"Synthetic inventory of {n_rows:,} stratum-years (invented)", iterations),
                        encoding="utf-8")
    stamp.write_text(tag)
    return settings


# --- parcels ---------------------------------------------------------------------------------------


def parcels_table(activity: pd.DataFrame, parcels_per_stratum: int = 3, seed: int = 2,
                  messy_spelling: bool = True) -> pd.DataFrame:
    """Split every stratum-year row into parcels whose aggregation gives the row back.

    Areas split into ``parcels_per_stratum`` parts in whole hundredths of a hectare (the last part
    takes the remainder, so the parts add up to the stratum's area exactly); a ditch fraction is the same on every
    parcel (so its area-weighted mean is the stratum's); the area uncertainty likewise. With
    ``messy_spelling``, a few terms are spelled as a user might ("Forest Land", " drained ").
    """
    rng = np.random.default_rng(seed)
    n = len(activity)
    k = parcels_per_stratum
    shares = rng.dirichlet(np.ones(k), size=n)
    parts = activity.loc[activity.index.repeat(k)].reset_index(drop=True)
    # Whole hundredths of a hectare, the last parcel taking the remainder: the parcels add up exactly.
    cents = np.round(activity["area_ha"].to_numpy() * 100).astype(np.int64)
    split = np.floor(cents[:, None] * shares).astype(np.int64)
    split[:, -1] = cents - split[:, :-1].sum(axis=1)
    parts["area_ha"] = split.ravel() / 100
    parts.insert(0, "parcel_id", [f"P{i:09d}" for i in range(len(parts))])
    if messy_spelling:
        flip = rng.random(len(parts)) < 0.2
        parts.loc[flip, "land_use"] = parts.loc[flip, "land_use"].str.replace("_", " ").str.title()
        flip = rng.random(len(parts)) < 0.1
        parts.loc[flip, "soil_status"] = " " + parts.loc[flip, "soil_status"].str.upper() + " "
    return parts


def write_parcels(path: Path, activity: pd.DataFrame, parcels_per_stratum: int = 3, seed: int = 2,
                  row_group_size: int = 100_000) -> Path:
    """The parcels of ``activity`` as one Parquet file (needs pyarrow)."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    frame = parcels_table(activity, parcels_per_stratum, seed)
    table = pa.Table.from_pandas(frame, preserve_index=False)
    pq.write_table(table, path, row_group_size=row_group_size)
    return Path(path)
