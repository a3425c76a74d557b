"""Parcel-level input: DuckDB and Dask give the same stratum table, which compiles as its CSV would.

Regression and behaviour tests (no outside reference): the expected stratum table is the synthetic
one the parcels were split from (tests/benchmarks/synthetic.py), whose parcels add up exactly.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("pyarrow")
pytest.importorskip("duckdb")
pytest.importorskip("dask.dataframe")

import dask  # noqa: E402

from compiler import compile_inventory  # noqa: E402
from compiler.activity import _load  # noqa: E402
from compiler.activity import ACTIVITY_COLUMNS  # noqa: E402
from compiler.errors import FindingLog, InputError  # noqa: E402
from compiler.parcels import STRATUM_COLUMNS, aggregate_parcels, load_parcel_activity, to_activity_csv  # noqa: E402
from compiler.settings import load_settings  # noqa: E402
from tests.benchmarks import synthetic  # noqa: E402

KEYS = ["year", "region", "climate_zone", "land_use", "soil_status", "nutrient_status", "drainage_depth",
        "subtype", "remaining_or_converted", "previous_land_use"]


@pytest.fixture(autouse=True)
def synchronous_dask():
    with dask.config.set(scheduler="synchronous"):
        yield


@pytest.fixture(scope="module")
def strata() -> pd.DataFrame:
    """10 strata x 25 years, sorted as the aggregated table is."""
    return synthetic.activity_table(250).sort_values(KEYS).reset_index(drop=True)


@pytest.fixture(scope="module")
def parcel_file(strata, tmp_path_factory):
    """Three parcels per stratum-year, some terms spelled as users do ("Forest Land", " DRAINED ")."""
    path = tmp_path_factory.mktemp("parcels") / "parcels.parquet"
    return synthetic.write_parcels(path, strata, parcels_per_stratum=3, row_group_size=200)


def write_parquet(path, frame: pd.DataFrame):
    frame.to_parquet(path, index=False)
    return path


def parcel_rows(**changes) -> pd.DataFrame:
    base = {"parcel_id": ["A", "B"], "year": [2020, 2020], "region": ["Synthetic-001"] * 2,
            "climate_zone": ["temperate"] * 2, "land_use": ["cropland"] * 2, "soil_status": ["drained"] * 2,
            "nutrient_status": [""] * 2, "drainage_depth": [""] * 2, "subtype": [""] * 2, "area_ha": [1.0, 3.0]}
    base.update(changes)
    return pd.DataFrame(base)


def test_duckdb_and_dask_give_the_identical_stratum_table(parcel_file):
    by_duckdb = aggregate_parcels(parcel_file, engine="duckdb")
    by_dask = aggregate_parcels(parcel_file, engine="dask")
    pd.testing.assert_frame_equal(by_duckdb, by_dask, check_exact=True)
    assert list(by_duckdb.columns) == STRATUM_COLUMNS + ["parcel_count"]


def test_stratum_table_adds_the_parcels_of_each_stratum_back_up(parcel_file, strata):
    table = aggregate_parcels(parcel_file, engine="duckdb")
    assert len(table) == len(strata)
    assert (table["parcel_count"] == 3).all()
    for col in KEYS[1:]:
        assert table[col].tolist() == strata[col].tolist(), col  # spellings normalised and merged
    assert table["year"].tolist() == strata["year"].tolist()
    for col in ("area_ha", "ditch_fraction", "area_uncertainty_pct"):  # exact: parcels on a 0.01 ha grid
        pd.testing.assert_series_equal(table[col], strata[col], check_exact=True, check_names=False)


def _inventory(folder, activity: pd.DataFrame):
    folder.mkdir(parents=True, exist_ok=True)
    activity[STRATUM_COLUMNS].to_csv(folder / "activity.csv", index=False, lineterminator="\n")
    synthetic.fires_table(activity).to_csv(folder / "fires.csv", index=False, lineterminator="\n")
    (folder / "overrides.csv").write_text(synthetic.OVERRIDES, encoding="utf-8")
    (folder / "inventory.toml").write_text(synthetic.settings_text("Parcel test (invented)"), encoding="utf-8")
    return folder / "inventory.toml"


def test_compiling_the_stratum_table_gives_the_same_emissions_as_the_stratum_csv(parcel_file, strata, tmp_path):
    table = aggregate_parcels(parcel_file, engine="dask")
    direct = compile_inventory(_inventory(tmp_path / "direct", strata), analyses=False)
    settings = _inventory(tmp_path / "parcels", strata)
    to_activity_csv(table, settings.parent / "activity.csv")  # replaces the stratum CSV by the aggregated one
    via_parcels = compile_inventory(settings, analyses=False)
    pd.testing.assert_frame_equal(direct.emissions, via_parcels.emissions, check_exact=True)
    pd.testing.assert_frame_equal(direct.categories, via_parcels.categories, check_exact=True)


def test_parquet_activity_loads_as_the_csv_of_its_stratum_table(parcel_file, strata, tmp_path):
    """What load_activity gets for [inputs] activity = "parcels.parquet" (the lead's integration)."""
    settings_path = _inventory(tmp_path / "inv", strata)
    settings = load_settings(settings_path)
    log = FindingLog()
    from dataclasses import replace

    frame, _ = load_parcel_activity(replace(settings, activity=parcel_file), log)
    csv_frame, _ = _load(settings.activity, "", ACTIVITY_COLUMNS, FindingLog(), settings)
    assert not log.errors
    assert frame.attrs["file"] == str(parcel_file)
    pd.testing.assert_frame_equal(frame.drop(columns="parcel_count"), csv_frame, check_exact=True)


def test_weighted_means_and_partial_values(tmp_path):
    path = write_parquet(tmp_path / "p.parquet", parcel_rows(ditch_fraction=[0.02, 0.06],
                                                             area_uncertainty_pct=[10.0, None]))
    log = FindingLog()
    for engine in ("duckdb", "dask"):
        table = aggregate_parcels(path, engine=engine, log=log)
        assert table["area_ha"].tolist() == [4.0]
        assert table["ditch_fraction"].iloc[0] == pytest.approx((1 * 0.02 + 3 * 0.06) / 4, rel=1e-12)
        assert table["area_uncertainty_pct"].tolist() == [10.0]  # the only value given
        assert table["remaining_or_converted"].tolist() == ["remaining"]  # the default, as in a CSV
    partial = [f for f in log.findings if f.severity == "warning"]
    assert partial[0].message == ("area_uncertainty_pct given for some parcels of a stratum only: the area-weighted "
                                  "mean of those given applies to the whole stratum (strata 2020 Synthetic-001)")
    assert partial[0].column == "area_uncertainty_pct" and partial[0].file == str(path)


@pytest.mark.parametrize("engine", ["duckdb", "dask"])
def test_errors_name_the_file_and_column(tmp_path, engine):
    path = write_parquet(tmp_path / "bad.parquet",
                         parcel_rows(land_use=["cropland", "crop land x"], area_ha=[-1.0, 2.0],
                                     climate_zone=["temperate", ""]))
    with pytest.raises(InputError) as caught:
        aggregate_parcels(path, engine=engine)
    errors = {(f.column, f.message) for f in caught.value.findings if f.severity == "error"}
    assert ("area_ha", "area_ha is negative (1 parcels; strata 2020 Synthetic-001)") in errors
    assert ("climate_zone", "climate_zone is blank (1 parcels; strata 2020 Synthetic-001)") in errors
    unknown = [f for f in caught.value.findings if f.message.startswith("unknown land_use")]
    assert unknown[0].found == "crop land x" and "closest: cropland" in unknown[0].expected
    assert all(f.file == str(path) for f in caught.value.findings)


def test_missing_required_column_is_an_error(tmp_path):
    path = write_parquet(tmp_path / "short.parquet", parcel_rows().drop(columns=["subtype"]))
    with pytest.raises(InputError) as caught:
        aggregate_parcels(path, engine="duckdb")
    finding = caught.value.findings[0]
    assert (finding.message, finding.column, finding.file) == ("required column missing", "subtype", str(path))


def test_headers_are_read_as_the_csv_reader_reads_them(tmp_path):
    frame = parcel_rows().rename(columns={"area_ha": "Area (ha)", "land_use": "Land Use"})
    table = aggregate_parcels(write_parquet(tmp_path / "h.parquet", frame), engine="duckdb")
    assert table["area_ha"].tolist() == [4.0] and table["land_use"].tolist() == ["cropland"]


def test_a_parcel_file_compiles_like_its_stratum_csv(demo_copy):
    # The demo's strata split into two parcels each, as a Parquet file named in the settings:
    # the compiled categories equal those of the stratum CSV (integer-sum arithmetic, see compiler.parcels).
    from compiler import compile_inventory

    folder = demo_copy.parent
    strata = pd.read_csv(folder / "activity.csv", dtype=str, keep_default_na=False).drop(columns=["survey_note"])
    strata.to_csv(folder / "activity.csv", index=False)
    half = strata.assign(area_ha=strata["area_ha"].astype(float) / 2, year=strata["year"].astype(int),
                         ditch_fraction=pd.to_numeric(strata["ditch_fraction"]),
                         area_uncertainty_pct=pd.to_numeric(strata["area_uncertainty_pct"]))
    pd.concat([half, half]).to_parquet(folder / "parcels.parquet", index=False)
    direct = compile_inventory(demo_copy, analyses=False).categories
    demo_copy.write_text(demo_copy.read_text().replace('activity = "activity.csv"', 'activity = "parcels.parquet"'))
    parcels = compile_inventory(demo_copy, analyses=False).categories
    assert np.allclose(direct["emission_t"].fillna(0), parcels["emission_t"].fillna(0), rtol=1e-12, atol=1e-9)
    assert (direct["notation_key"] == parcels["notation_key"]).all()
