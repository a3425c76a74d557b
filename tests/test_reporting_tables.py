"""The submission tables: organic soils by land category, and the time series (compiler/reporting_tables.py)."""

import json

import numpy as np
import openpyxl
import pandas as pd
import pytest

from compiler import compile_inventory
from compiler.reporting_tables import reporting_tables
from conftest import stratum, write_inventory


def test_demo_organic_soils_table_adds_up_to_the_category_totals(demo_result):
    # Every on-site, DOC, soil CH4, ditch CH4, soil N2O and fire CO2 tonne of a land category is in its lines
    # once: the lines' sums equal the categories table cell by cell (2006 IPCC codes, N2O of cropland and
    # grassland under 3.C.4 as n2o_reported_under says).
    o = reporting_tables(demo_result).organic_soils
    cats = demo_result.categories
    est = cats[cats["notation_key"] == ""].set_index(["category_code", "gas", "year"])["emission_t"]
    co2 = (o["co2_soil_kt"].fillna(0) + o["co2_offsite_kt"].fillna(0) + o["co2_fire_kt"].fillna(0)).groupby([o["land_category_code"], o["year"]]).sum()
    ch4 = o["ch4_kt"].fillna(0).groupby([o["land_category_code"], o["year"]]).sum()
    n2o = o[o["n2o_kt"].notna()].groupby(["n2o_reported_under", "year"])["n2o_kt"].sum()
    for (gas, sums) in (("CO2", co2), ("CH4", ch4), ("N2O", n2o)):
        expected = est.xs(gas, level="gas")
        expected = expected[expected.index.get_level_values(0).str.startswith("3.B")
                            | (expected.index.get_level_values(0) == "3.C.4")]
        got = sums.reindex(expected.index, fill_value=0.0) * 1000.0
        diff = np.abs(got.to_numpy() - expected.to_numpy()) / np.maximum(np.abs(expected.to_numpy()), 1.0)
        assert diff.max() < 1e-12, (gas, got[diff.argmax():diff.argmax() + 1], expected.iloc[diff.argmax()])
        assert set(sums[sums != 0].index) <= set(expected.index)
    # The area of the lines is the area of the activity data, every year.
    area = o.groupby("year")["area_kha"].sum() * 1000.0
    given = demo_result.activity.groupby("year")["area_ha"].sum()
    assert np.allclose(area.to_numpy(), given.reindex(area.index).to_numpy(), rtol=1e-12)


def test_demo_peat_extraction_and_rewetted_wetlands_are_lines_of_their_own(demo_result):
    o = reporting_tables(demo_result).organic_soils
    lines = set(o.loc[o["land_category_code"] == "3.B.4.a.i", "line"])
    assert {"peat extraction", "rewetted wetlands"} <= lines


def test_implied_factor_equals_emissions_over_area_for_a_hand_computed_stratum(tmp_path):
    # Implied emission factor IEF = E / A: emissions on the factor's basis over the area the factor
    # multiplies, as the reporting tables' implied emission factors are defined (2006 IPCC Guidelines
    # Vol. 1 Ch. 6 and 8, from memory). Two temperate nutrient-rich drained grassland strata in one line:
    # 100 ha deep-drained and 300 ha shallow-drained. On-site CO2 by WS2013 Eq. 2.3 (E = A x EF):
    # EF 6.1 and 3.6 t CO2-C/ha (WS2013 Table 2.1, as shipped) -> IEF = (100 x 6.1 + 300 x 3.6) / 400
    # = 1690 / 400 = 4.225 t CO2-C/ha. Soil CH4 (WS2013 Eq. 2.6, on the ditch-free area A x (1 - Frac_ditch)
    # with the default ditch fraction): the weighted mean of the two factors on that area.
    rows = [stratum(land_use="grassland", nutrient_status="rich", drainage_depth="deep", area_ha=100.0),
            stratum(land_use="grassland", nutrient_status="rich", drainage_depth="shallow", area_ha=300.0)]
    result = compile_inventory(write_inventory(tmp_path / "inv", rows), analyses=False)
    o = reporting_tables(result).organic_soils
    assert len(o) == 1
    line = o.iloc[0]
    assert line["area_kha"] == pytest.approx(0.4)
    assert line["ief_co2_onsite"] == pytest.approx((100 * 6.1 + 300 * 3.6) / 400, rel=1e-12)
    # N2O-N: WS2013 Table 2.5 as shipped, per ha of the stratum: the area-weighted mean.
    em = result.emissions
    n2o = em[(em["pathway"] == "n2o_soil") & (em["notation_key"] == "")]
    assert line["ief_n2o_soil"] == pytest.approx(1000 * n2o["emission_basis_t"].sum() / n2o["area_basis_ha"].sum())
    ch4 = em[em["pathway"] == "ch4_soil"]
    ef = ch4["factor_value"].to_numpy()  # kg CH4 ha-1 on the ditch-free area
    assert line["ief_ch4_soil"] == pytest.approx((ch4["area_basis_ha"] * ef).sum() / ch4["area_basis_ha"].sum())
    # Emissions in kt of gas: the sum of the strata rows.
    assert line["co2_soil_kt"] * 1000 == pytest.approx(em[em["gas"] == "CO2"]["emission_t"].sum(), rel=1e-12)


@pytest.mark.parametrize("last", [2020, 2021, 2022])
def test_one_two_and_three_year_inventories_and_zero_areas(tmp_path, last):
    rows = []
    for year in range(2020, last + 1):
        rows.append(stratum(year=year, area_ha=0.0))
        rows.append(stratum(year=year, land_use="grassland", nutrient_status="poor", area_ha=0.0))
    result = compile_inventory(write_inventory(tmp_path / "inv", rows, last=last), analyses=False)
    t = reporting_tables(result)
    o = t.organic_soils
    assert (o["area_kha"] == 0).all()
    assert o[[c for c in o.columns if c.startswith("ief_")]].isna().all().all()  # no division by zero
    assert t.year_columns == [str(y) for y in range(2020, last + 1)]
    total = t.gas_series[t.gas_series["quantity"] == "Total"].iloc[0]
    assert np.isnan(total["trend_pct"])  # base year zero: no trend
    out = result.write(tmp_path / "out", report=False)
    assert (out / "organic_soils.csv").exists()


def test_time_series_in_kt_of_gas_and_co2eq_with_trend(demo_result):
    t = reporting_tables(demo_result)
    cats = demo_result.categories
    est = cats[cats["notation_key"] == ""]
    g = t.gas_series.set_index(["quantity", "unit"])
    for year in (1990, 2024):
        assert g.loc[("CH4", "kt CH4"), str(year)] == pytest.approx(
            est[(est.gas == "CH4") & (est.year == year)]["emission_t"].sum() / 1000)
        assert g.loc[("Total", "kt CO2-eq"), str(year)] == pytest.approx(
            est[est.year == year]["co2eq_t"].sum() / 1000)
    first, last = g.loc[("Total", "kt CO2-eq"), "1990"], g.loc[("Total", "kt CO2-eq"), "2024"]
    assert g.loc[("Total", "kt CO2-eq"), "trend_pct"] == pytest.approx((last - first) / first * 100)
    c = t.category_series
    assert c[(c.category_code == "3.B.1.b") & (c.gas == "CO2")]["1990"].iloc[0] == "NO"
    total_n2o = c[(c.category_code == "Total") & (c.gas == "N2O")]["2024"].iloc[0]
    assert total_n2o == pytest.approx(g.loc[("N2O", "kt N2O"), "2024"])


def test_demo_outputs_carry_the_submission_tables(demo_output, demo_result):
    wb = openpyxl.load_workbook(demo_output / "inventory.xlsx", read_only=True)
    assert wb.sheetnames[-3:] == ["organic_soils", "timeseries_gases", "timeseries_categories"]
    package = json.loads((demo_output / "datapackage.json").read_text())
    assert {r["path"] for r in package["resources"]} >= {"organic_soils.csv", "timeseries_gases.csv",
                                                        "timeseries_categories.csv"}
    csv = pd.read_csv(demo_output / "organic_soils.csv", keep_default_na=False)
    frame = reporting_tables(demo_result).organic_soils
    assert len(csv) == len(frame)
    assert pd.to_numeric(csv["area_kha"]).sum() == pytest.approx(frame["area_kha"].sum())


def test_demo_off_site_peat_co2_is_a_line_of_its_own(demo_result):
    # 2006 GL Vol. 4 Section 7.2.1.1: the off-site CO2 of extracted peat belongs to 3.B.4.a.i; the table shows it
    # on its own line, with no area (it rests on production), beside the extraction area's on-site line.
    o = reporting_tables(demo_result).organic_soils
    off = o[o["line"] == "peat extraction, off-site CO2 of extracted peat"]
    em = demo_result.emissions
    rows = em[(em["pathway"] == "co2_offsite") & (em["notation_key"] == "")]
    assert not off.empty and set(off["land_category_code"]) == {"3.B.4.a.i"}
    assert (off["area_kha"] == 0).all()
    by_year = rows.groupby("year")["emission_t"].sum() / 1000.0
    assert np.allclose(off.groupby("year")["co2_offsite_kt"].sum().reindex(by_year.index).to_numpy(), by_year.to_numpy(),
                       rtol=1e-12)


def test_gas_series_reads_the_aggregate_stage(demo_result):
    # One home per total: each gas row is the aggregate stage's figure in kt, to the last bit; the total row adds
    # the gas rows shown, which equals the aggregate's total up to the order of the additions.
    agg = demo_result.aggregates
    g = reporting_tables(demo_result).gas_series.set_index(["quantity", "unit"])
    for y in agg.years:
        for gas in ("CO2", "CH4", "N2O"):
            assert g.loc[(gas, f"kt {gas}"), str(y)] == agg.gas_t.at[y, gas] / 1000
            assert g.loc[(gas, "kt CO2-eq"), str(y)] == agg.gas_co2eq_t.at[y, gas] / 1000
        assert g.loc[("Total", "kt CO2-eq"), str(y)] == pytest.approx(agg.total_co2eq_t[y] / 1000, rel=1e-12)
