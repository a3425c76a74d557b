"""Properties of the loader, the validator and the engine, on generated tables (hypothesis).

- Whatever bytes or cells a table holds, reading and compiling it either succeeds or raises one
  of the compiler's own errors (:class:`compiler.errors.CompilerError`), never anything else.
- Row order does not change a result; emissions scale linearly with area; the area given is the
  area compiled, every year; CO2-eq is gas x GWP100, row by row and in total; splitting a stratum's
  area between two regions leaves the category totals unchanged. (Splitting a stratum into two rows
  of one region is refused on purpose: a duplicate stratum is an input error.)

Example counts are small and there is no deadline: each engine example is a full compile.
All regions are invented.
"""

from __future__ import annotations

import csv
import io
import tempfile
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
from hypothesis import HealthCheck, event, given, settings, strategies as st

from compiler import compile_inventory
from compiler.errors import CompilerError
from compiler.readers import read_table
from conftest import ACTIVITY_HEADER, write_inventory

# Example counts keep the file near 15 s; a deeper run (600 / 150 / 30 examples) found nothing more.
QUICK = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
TABLES = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
ENGINE = settings(max_examples=5, deadline=None, suppress_health_check=[HealthCheck.too_slow])
YEARS = (2020, 2021)
REGIONS = ("Testvale", "Brackenholm", "Mirefield")  # invented
COLUMNS = ACTIVITY_HEADER + ["ditch_fraction", "remaining_or_converted", "previous_land_use", "area_uncertainty_pct"]

# Strata the Tier 1 tables of the 2013 Wetlands Supplement cover (the kinds of the demo region).
STRATA = [
    dict(climate_zone="boreal", land_use="forest_land", soil_status="drained", nutrient_status="poor"),
    dict(climate_zone="boreal", land_use="forest_land", soil_status="drained", nutrient_status="rich"),
    dict(climate_zone="boreal", land_use="grassland", soil_status="drained"),
    dict(climate_zone="boreal", land_use="wetlands", soil_status="drained", nutrient_status="poor",
         subtype="peat_extraction"),
    dict(climate_zone="boreal", land_use="wetlands", soil_status="rewetted", nutrient_status="poor"),
    dict(climate_zone="temperate", land_use="cropland", soil_status="drained"),
    dict(climate_zone="temperate", land_use="grassland", soil_status="drained", nutrient_status="rich",
         drainage_depth="deep"),
    dict(climate_zone="temperate", land_use="grassland", soil_status="drained", nutrient_status="poor"),
    dict(climate_zone="temperate", land_use="grassland", soil_status="rewetted", nutrient_status="rich"),
    dict(climate_zone="temperate", land_use="wetlands", soil_status="rewetted", nutrient_status="rich",
         remaining_or_converted="converted", previous_land_use="grassland"),
    dict(climate_zone="tropical", land_use="forest_land", soil_status="drained", subtype="acacia"),
    dict(climate_zone="tropical", land_use="cropland", soil_status="drained", subtype="oil_palm"),
    dict(climate_zone="tropical", land_use="forest_land", soil_status="rewetted"),
]
KEYS = ["year", "region", "climate_zone", "land_use", "soil_status", "nutrient_status", "drainage_depth", "subtype",
        "remaining_or_converted", "previous_land_use", "pathway", "gas"]
NUMBERS = ["area_ha", "area_basis_ha", "factor_value", "emission_basis_t", "emission_t", "co2eq_t"]


# ---------------------------------------------------------------- strategies

VOCABULARY = {
    "year": ["2020", "2020.0"],
    "region": list(REGIONS),
    "climate_zone": ["boreal", "temperate", "tropical", "Temperate"],
    "land_use": ["forest_land", "cropland", "grassland", "wetlands", "settlements", "Forest Land"],
    "soil_status": ["drained", "rewetted"],
    "nutrient_status": ["", "rich", "poor"],
    "drainage_depth": ["", "deep", "shallow"],
    "subtype": ["", "peat_extraction", "acacia", "oil_palm", "paddy_rice"],
    "area_ha": ["0", "1.5", "1200", "3e4"],
    "ditch_fraction": ["", "0.05", "1"],
    "remaining_or_converted": ["", "remaining", "converted"],
    "previous_land_use": ["", "grassland", "cropland"],
    "area_uncertainty_pct": ["", "10", "250"],
}
NUMBER_TEXT = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(min_value=-10**25, max_value=10**25).map(str),
    st.sampled_from(["1,234", "1 234", "1.234,5", "nan", "-inf", "1e309", "0x10", "1_000", "--1", "+5", " 7 "]),
)
ANY_TEXT = st.text(max_size=30)  # any code point but unpaired surrogates, control characters included


def cell(column: str):
    """Mostly an accepted value, so that some tables reach the engine; else any number text or any text."""
    return st.one_of(*[st.sampled_from(VOCABULARY[column])] * 8, NUMBER_TEXT, ANY_TEXT)


@st.composite
def raw_tables(draw):
    """A small activity table: mostly valid cells, some numbers of any form, some arbitrary text."""
    dropped = draw(st.lists(st.sampled_from(COLUMNS), max_size=2, unique=True))
    columns = draw(st.permutations([c for c in COLUMNS if c not in dropped]))
    rows = draw(st.lists(st.fixed_dictionaries({c: cell(c) for c in columns}), min_size=1, max_size=4))
    return columns, rows


@st.composite
def spoilt_tables(draw):
    """Valid rows of one year with up to two cells replaced by any number text or any text."""
    chosen = draw(st.lists(st.tuples(st.integers(0, len(STRATA) - 1), st.sampled_from(REGIONS)),
                           min_size=1, max_size=3, unique=True))
    rows = [{c: "" for c in COLUMNS} | {"year": "2020", "region": region, **STRATA[kind],
                                         "area_ha": repr(draw(st.floats(0, 1e6)))} for kind, region in chosen]
    for _ in range(draw(st.integers(0, 2))):
        row = draw(st.sampled_from(rows))
        row[draw(st.sampled_from(COLUMNS))] = draw(st.one_of(NUMBER_TEXT, ANY_TEXT))
    return COLUMNS, rows


@st.composite
def inventories(draw):
    """Valid activity rows: distinct strata (kind x region), each with an area in both years."""
    chosen = draw(st.lists(st.tuples(st.integers(0, len(STRATA) - 1), st.sampled_from(REGIONS)),
                           min_size=1, max_size=5, unique=True))
    area = st.floats(min_value=0.5, max_value=1e5, allow_nan=False, allow_infinity=False)
    rows = []
    for kind, region in chosen:
        for year in YEARS:
            rows.append({"year": year, "region": region, **STRATA[kind], "area_ha": draw(area)})
    return rows


# ---------------------------------------------------------------- helpers

def write_table(folder: Path, columns, rows) -> Path:
    settings = write_inventory(folder, [{}], first=2020, last=2020)
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(columns)
    writer.writerows([[r[c] for c in columns] for r in rows])
    (folder / "activity.csv").write_bytes(buffer.getvalue().encode("utf-8"))
    return settings


def compile_rows(folder: Path, rows: list[dict]):
    frame = pd.DataFrame(rows)
    for column in COLUMNS:
        if column not in frame:
            frame[column] = ""
    settings = write_inventory(folder, [{}], first=YEARS[0], last=YEARS[-1])
    frame[COLUMNS].fillna("").to_csv(folder / "activity.csv", index=False)
    return compile_inventory(settings, analyses=False)


def estimates(result) -> pd.DataFrame:
    em = result.emissions
    em = em[em["notation_key"] == ""]
    return em[KEYS + NUMBERS].sort_values(KEYS).reset_index(drop=True)


def totals(result) -> pd.Series:
    cats = result.categories
    cats = cats[cats["notation_key"] == ""]
    return cats.groupby(["year", "category_code", "gas"])["co2eq_t"].sum().sort_index()


# ---------------------------------------------------------------- loader and validator: only our own errors

@QUICK
@given(data=st.binary(max_size=400), suffix=st.sampled_from([".csv", ".xlsx"]),
       prefix=st.sampled_from([b"", b"PK\x03\x04", b"\xef\xbb\xbf", b"\xff\xfe", b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1",
                               b"year,region\n"]))
def test_reader_raises_only_input_errors_on_any_bytes(data, suffix, prefix):
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / f"table{suffix}"
        path.write_bytes(prefix + data)
        try:
            frame, _, _ = read_table(path)
        except CompilerError:
            return
        cells = frame.drop(columns="_row").to_numpy().ravel()
        assert all(isinstance(v, str) for v in cells)


@TABLES
@given(table=st.one_of(raw_tables(), spoilt_tables()))
def test_compile_of_any_small_table_raises_only_compiler_errors(table):
    columns, rows = table
    with tempfile.TemporaryDirectory() as tmp:
        settings = write_table(Path(tmp), columns, rows)
        try:
            result = compile_inventory(settings, analyses=False)
        except CompilerError as exc:
            first = next((f for f in getattr(exc, "findings", []) if f.severity == "error"), None)
            event(f"refused: {type(exc).__name__} {first.check if first else ''}")
            return
        event("compiled")
        assert np.isfinite(result.emissions["emission_t"].dropna()).all()
        assert (result.emissions["area_ha"].dropna() <= 1e9).all()


CELL_VALUES = st.one_of(st.none(), st.booleans(), st.integers(-10**6, 10**6), st.floats(allow_nan=False,
                                                                                       allow_infinity=False),
                        st.dates(), st.text(alphabet=st.characters(blacklist_categories=("Cc", "Cs")), max_size=20),
                        st.sampled_from(["2020", "Testvale", "temperate", "cropland", "drained", "=1+1", "#REF!"]))


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(rows=st.lists(st.lists(CELL_VALUES, min_size=9, max_size=11), min_size=1, max_size=3))
def test_workbook_of_any_cells_raises_only_compiler_errors(rows):
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        settings = write_inventory(folder, [{}], first=YEARS[0], last=YEARS[-1])
        book = openpyxl.Workbook()
        book.active.append(ACTIVITY_HEADER)
        for row in rows:
            book.active.append(row)
        book.save(folder / "activity.xlsx")
        settings.write_text(settings.read_text().replace('"activity.csv"', '"activity.xlsx"'))
        try:
            compile_inventory(settings, analyses=False)
        except CompilerError:
            pass


# ---------------------------------------------------------------- engine: invariances

@ENGINE
@given(rows=inventories(), order=st.randoms(use_true_random=False),
       factor=st.sampled_from([0.5, 3.0, 1000.0]))
def test_row_order_linearity_area_balance_and_co2eq(rows, order, factor):
    with tempfile.TemporaryDirectory() as tmp:
        base = compile_rows(Path(tmp) / "base", rows)
        shuffled = rows[:]
        order.shuffle(shuffled)
        permuted = compile_rows(Path(tmp) / "permuted", shuffled)
        scaled = compile_rows(Path(tmp) / "scaled", [{**r, "area_ha": r["area_ha"] * factor} for r in rows])

    # Row order: the same rows and the same totals.
    pd.testing.assert_frame_equal(estimates(base), estimates(permuted))
    pd.testing.assert_series_equal(totals(base), totals(permuted), rtol=1e-12)

    # Linear in area: every emission and every total times the factor.
    one, many = estimates(base), estimates(scaled)
    pd.testing.assert_frame_equal(one[KEYS], many[KEYS])
    np.testing.assert_allclose(many["emission_t"], one["emission_t"] * factor, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(totals(scaled), totals(base) * factor, rtol=1e-9, atol=1e-9)

    # Area in = area out, every year, for a pathway every stratum has.
    given_area = pd.DataFrame(rows).groupby("year")["area_ha"].sum()
    em = base.emissions
    out_area = em[em["pathway"] == "co2_onsite"].groupby("year")["area_ha"].sum()
    np.testing.assert_allclose(out_area.reindex(given_area.index), given_area, rtol=1e-12)
    assert list(out_area.index) == list(YEARS)

    # CO2-eq = tonnes of gas x GWP100, row by row and per year.
    gwp = base.gwp
    rated = em[em["notation_key"] == ""]
    np.testing.assert_allclose(rated["co2eq_t"], rated["emission_t"] * rated["gas"].astype(str).map(gwp), rtol=1e-12)
    by_gas = rated.groupby(["year", "gas"])["emission_t"].sum().unstack("gas")
    expected = sum(by_gas[gas].fillna(0.0) * gwp[gas] for gas in by_gas.columns)
    cats = base.categories[base.categories["notation_key"] == ""]
    np.testing.assert_allclose(cats.groupby("year")["co2eq_t"].sum().reindex(expected.index), expected, rtol=1e-9)


@ENGINE
@given(rows=inventories(), share=st.floats(min_value=0.05, max_value=0.95))
def test_splitting_a_stratum_between_two_regions_keeps_the_totals(rows, share):
    # All strata in one region, then each area split between that region and a fourth (invented) one.
    one_region = [{**r, "region": "Testvale"} for r in rows]
    one_region = list({(r["year"], _kind(r)): r for r in one_region}.values())  # one row per kind and year
    split = []
    for r in one_region:
        split.append({**r, "area_ha": r["area_ha"] * share})
        split.append({**r, "region": "Fennick Reach", "area_ha": r["area_ha"] * (1 - share)})
    with tempfile.TemporaryDirectory() as tmp:
        whole = compile_rows(Path(tmp) / "whole", one_region)
        parts = compile_rows(Path(tmp) / "parts", split)
    pd.testing.assert_series_equal(totals(whole), totals(parts), rtol=1e-9, atol=1e-9)


def _kind(row: dict) -> tuple:
    return tuple(sorted((k, v) for k, v in row.items() if k not in ("area_ha", "year", "region")))


# --- every inventory length, all-zero areas: the whole compile and every output (issue of the hardening round)

@settings(max_examples=4, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(first=st.integers(1990, 2030), span=st.sampled_from([0, 1, 2]),
       strata=st.lists(st.sampled_from(range(len(STRATA))), min_size=1, max_size=3, unique=True),
       zero=st.booleans())
def test_any_length_and_all_zero_areas_compile_and_write(first, span, strata, zero):
    # One-, two- and three-year inventories starting in any year, with areas that may all be zero, compile with
    # every analysis and write every output, the report included.
    rows = [dict(year=y, region=REGIONS[0], area_ha=0.0 if zero else 10.0 + i, **STRATA[s])
            for y in range(first, first + span + 1) for i, s in enumerate(strata)]
    with tempfile.TemporaryDirectory() as tmp:
        settings_path = write_inventory(Path(tmp) / "inv", rows, first=first, last=first + span)
        result = compile_inventory(settings_path, iterations=200)
        assert result.aggregates.years == tuple(range(first, first + span + 1))
        if zero:
            assert result.aggregates.total_co2eq_t.abs().sum() == 0
        result.write(Path(tmp) / "out", report=True)
        assert (Path(tmp) / "out" / "report.pdf").exists()
