"""The peer baseline: what a plain pandas script does with the same activity file.

It reads the activity CSV, merges one factor per stratum and pathway (the same Tier 1 factors the
compiler resolves, taken from a compile of a small sample so that nothing here re-implements the
matching), multiplies area x factor x conversion, groups to category, gas and year, and writes the
rows as CSV. No validation, no notation keys, no trace, no analyses: the least any tool must do.
``histosol compile --no-report`` against this script, in CPU seconds, is the ratio the benchmark
prints (the project's target: <= 3 at 1e5 stratum-years; no source).

Run alone::

    python -m tests.benchmarks.peer_baseline ACTIVITY.csv FACTORS.csv OUT.csv
"""

from __future__ import annotations

import sys
from pathlib import Path

import pandas as pd

KEYS = ["climate_zone", "land_use", "soil_status", "nutrient_status", "drainage_depth", "subtype",
        "remaining_or_converted", "previous_land_use"]


def factor_rows(settings: Path, sample_rows: int = 2000) -> pd.DataFrame:
    """One row per stratum description and pathway: category, gas, factor x conversion (t gas per ha)."""
    from compiler import compile_inventory

    result = compile_inventory(settings, analyses=False)
    est = result.emissions[(result.emissions["notation_key"] == "") & (result.emissions["input_file"] != "")]
    est = est[~est["pathway"].str.startswith("fire_")]
    per_ha = est["area_basis_ha"] / est["area_ha"].where(est["area_ha"] != 0)
    table = est.assign(t_per_ha=per_ha * est["factor_value"] * est["conversion"])
    return table.drop_duplicates(KEYS + ["pathway"])[KEYS + ["pathway", "category_code", "gas", "t_per_ha"]]


def run(activity: Path, factors: Path, out: Path) -> None:
    """Read, merge, multiply, group, write."""
    text = {k: str for k in KEYS}
    rows = pd.read_csv(activity, dtype=text, keep_default_na=False)
    rows["area_ha"] = rows["area_ha"].astype(float)
    table = pd.read_csv(factors, dtype=text, keep_default_na=False)
    merged = rows.merge(table, on=KEYS, how="inner")
    merged["emission_t"] = merged["area_ha"] * merged["t_per_ha"].astype(float)
    merged.groupby(["category_code", "gas", "year"], as_index=False)["emission_t"].sum()
    merged.to_csv(out, index=False)


if __name__ == "__main__":
    run(Path(sys.argv[1]), Path(sys.argv[2]), Path(sys.argv[3]))
