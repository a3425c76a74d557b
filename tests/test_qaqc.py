"""QA/QC checks (compiler/qaqc.py): each check on an input that triggers it and on one that does not.

Sources of the rules, as named in each test:
[T6.1] 2006 IPCC Guidelines Vol. 1 Ch. 6 Table 6.1, general QC procedures (from memory).
[CH5]  2006 IPCC Guidelines Vol. 1 Ch. 5, time-series consistency (from memory).
[CH8]  2006 IPCC Guidelines Vol. 1 Ch. 8, notation keys NO/NE/NA/IE (from memory).
[MPG]  UNFCCC MPGs (decision 18/CMA.1, annex) para. 32: insignificance threshold 0.05 % of national total
       excluding LULUCF and 500 kt CO2-eq (whichever is lower), aggregate 0.1 % (from memory).
Thresholds of the year-on-year and area checks, their floors and the allowance rules: common practice, no
source (our own, documented in compiler/qaqc.py). Expected values are worked by hand from the inputs of
each test, or read from the shipped register where a test says so.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest

from compiler import compile_inventory
from compiler import qaqc as Q
from compiler.errors import SEVERITIES, InputError
from conftest import stratum, write_inventory

CO2_PER_C = 44.0095 / 12.0107  # standard atomic weights (CIAAW), to 4 decimals of the ratio


def only(findings, check):
    return [f for f in findings if f.check == check]


def run(result, **kw):
    return Q.run_checks(result, **kw)


def compile_rows(folder, rows, first=2020, last=2020, **kw):
    return compile_inventory(write_inventory(folder, rows, first=first, last=last, **kw))


def with_tables(result, **tables):
    """A copy of ``result`` with some tables replaced (the tampered ones are copies too)."""
    return dataclasses.replace(result, **tables)


@pytest.fixture(scope="module")
def demo_findings(demo_result):
    return run(demo_result)


# --- the module's contract --------------------------------------------------------------------------------


def test_checks_table_lists_every_check_once_with_severity_and_source(demo_findings):
    ids = [c.check for c in Q.CHECKS]
    assert len(ids) == len(set(ids))
    assert all(c.severity in SEVERITIES and c.description and c.source for c in Q.CHECKS)
    assert {f.check for f in demo_findings} <= set(ids)
    table = Q.checks_table()
    assert list(table.columns) == ["check", "severity", "description", "source"] and len(table) == len(ids)


def test_thresholds_defaults_documented_and_validated():
    schema = Q.threshold_schema()
    assert schema["year_on_year_area_pct"][0] == 25.0 and schema["year_on_year_emission_pct"][0] == 25.0
    assert schema["area_balance_tolerance_pct"][0] == 0.5
    assert schema["insignificance_pct"][0] == 0.05 and schema["insignificance_kt"][0] == 500.0  # [MPG]
    assert schema["insignificance_aggregate_pct"][0] == 0.1  # [MPG]
    assert all(doc for _, doc in schema.values())
    with pytest.raises(ValueError, match="year_on_year_area_pct must be a finite number >= 0, not -1"):
        Q.QaqcThresholds(year_on_year_area_pct=-1)
    with pytest.raises(ValueError, match="unknown QA/QC threshold bogus"):
        Q.QaqcThresholds.from_mapping({"bogus": 1})
    assert Q.QaqcThresholds.from_mapping({"year_on_year_area_pct": 40}).year_on_year_area_pct == 40


def test_findings_table_columns_and_empty():
    columns = ["severity", "check", "file", "sheet", "row", "column", "message", "found", "expected",
               "category_code", "gas", "years"]  # what a finding is about, as data (not in its text)
    empty = Q.findings_table([])
    assert list(empty.columns) == columns and empty.empty
    table = Q.findings_table([Q.Finding("warning", "sums", "x", file="a.csv", row=3)])
    assert list(table.columns) == columns and str(table["row"].dtype) == "Int64" and table["row"].iloc[0] == 3


def test_demo_is_internally_consistent_and_its_findings_are_stable(demo_findings):
    # Regression (our own earlier output): the demo raises no error; counts per check.
    assert not [f for f in demo_findings if f.severity == "error"]
    counts = pd.Series([f.check for f in demo_findings]).value_counts().to_dict()
    # With Orlathmoor's peat production (off-site CO2 of extracted peat in 3.B.4.a.i): one more table of factors
    # not checked by the agency in use (offsite_peat_ipcc2006.csv), and one year-on-year jump of 3.B.4.a.i CO2
    # fewer (its on-site fall as the extraction area shrinks is now a smaller share of the cell).
    # year_on_year_emissions: changes of exactly 25 % (3.B.1.b CH4, 51.6 -> 64.5 t CO2-eq and its like) are no
    # longer flagged, as the README says "above" the threshold.
    assert counts == {"year_on_year_emissions": 48, "year_on_year_area": 26, "area_balance": 8,
                      "factors_not_checked": 4, "estimated_ne_with_area": 2, "ne_insignificance": 2,
                      "override_partial_series": 1}
    order = [c.check for c in Q.CHECKS]
    positions = [order.index(f.check) for f in demo_findings]
    assert positions == sorted(positions)  # findings come in the order of CHECKS


# --- 1 area_balance ---------------------------------------------------------------------------------------


def test_area_balance_flags_an_undeclared_increase(tmp_path):
    # [T6.1] time-series consistency of activity data; allowance rule our own (common practice, no source).
    result = compile_rows(tmp_path, [stratum(year=2020, area_ha=100.0), stratum(year=2021, area_ha=150.0)],
                          last=2021)
    found = only(run(result), "area_balance")
    assert len(found) == 1
    f = found[0]
    assert f.message == ("total organic-soil area of Testvale grows from 100.0 ha in 2020 to 150.0 ha in 2021 "
                         "(+50.0 ha) with 0.0 ha newly declared as converted: declare the conversion "
                         "(remaining_or_converted, previous_land_use), or explain the new drainage or the data in "
                         "the inventory report")
    assert (f.severity, f.row, f.column, f.found) == ("warning", 3, "area_ha", "+50.0 ha")
    assert f.file.endswith("activity.csv")
    assert f.expected == "within +/-0.5 ha (new conversions 0.0 ha + 0.5 % tolerance)"


def test_area_balance_accepts_a_declared_conversion_and_rounding(tmp_path):
    rows = [stratum(year=2020, area_ha=100.0),
            stratum(year=2021, area_ha=100.0),
            stratum(year=2021, land_use="grassland", nutrient_status="poor", area_ha=50.0,
                    remaining_or_converted="converted", previous_land_use="cropland"),
            stratum(year=2022, area_ha=100.4),  # +0.4 ha on 150 ha: 0.27 %, within the 0.5 % tolerance
            stratum(year=2022, land_use="grassland", nutrient_status="poor", area_ha=50.0,
                    remaining_or_converted="converted", previous_land_use="cropland")]
    result = compile_rows(tmp_path, rows, last=2022)
    assert only(run(result), "area_balance") == []  # +50 ha declared in 2021; +0.4 ha in 2022 within 0.5 %


def test_area_balance_on_the_demo_is_orlathmoor_drainage_of_the_1990s(demo_findings):
    # examples/make_demo.py: Orlathmoor's drained poor forest grows 9000 -> 10500 ha over 1990-1998 with no
    # conversion declared (187.5 ha a year, against 62.5 ha a year of declared afforestation).
    found = only(demo_findings, "area_balance")
    assert [f.message.split(" (")[0].split(" to ")[-1] for f in found] == [
        f"{a:,.1f} ha in {y}" for a, y in zip(np.arange(17787.5, 19100.1, 187.5), range(1991, 1999))]
    assert all("Orlathmoor" in f.message for f in found)


# --- 2 rewetted_area_shrinks --------------------------------------------------------------------------------


def _rewetted(**kw):
    return stratum(land_use="grassland", soil_status="rewetted", nutrient_status="rich", **kw)


def test_rewetted_area_falling_without_conversion_is_flagged(tmp_path):
    # Re-drainage: rewetted grassland 100 -> 60 ha, drained grassland 0 -> 40 ha; the total stays (WS2013 Ch. 3:
    # re-drained land is drained land, from memory; rule our own).
    rows = [_rewetted(year=2020, area_ha=100.0), _rewetted(year=2021, area_ha=60.0),
            stratum(year=2021, land_use="grassland", nutrient_status="rich", drainage_depth="deep", area_ha=40.0)]
    findings = run(compile_rows(tmp_path, rows, last=2021))
    found = only(findings, "rewetted_area_shrinks")
    assert len(found) == 1 and only(findings, "area_balance") == []
    assert found[0].message == (
        "rewetted area of Testvale temperate grassland rich falls from 100.0 ha in 2020 to 60.0 ha in 2021 with "
        "0.0 ha newly declared as converted from grassland: if the land was drained again, report it as drained; "
        "otherwise declare the conversion or correct the areas")
    assert (found[0].row, found[0].found, found[0].expected) == (3, "-40.0 ha", "a fall of at most 0.5 ha")


def test_rewetted_area_falling_by_a_declared_conversion_is_accepted(tmp_path):
    rows = [_rewetted(year=2020, area_ha=100.0), _rewetted(year=2021, area_ha=60.0),
            stratum(year=2021, land_use="wetlands", soil_status="rewetted", nutrient_status="rich", area_ha=40.0,
                    remaining_or_converted="converted", previous_land_use="grassland")]
    assert only(run(compile_rows(tmp_path, rows, last=2021)), "rewetted_area_shrinks") == []


def test_rewetted_area_does_not_shrink_in_the_demo(demo_findings):
    assert only(demo_findings, "rewetted_area_shrinks") == []


# --- 3 year on year ---------------------------------------------------------------------------------------


def test_year_on_year_area_and_emissions_above_threshold(tmp_path):
    # [T6.1] unexplained trends; 25 % threshold and floors common practice, no source.
    rows = [stratum(year=2020, area_ha=1000.0), stratum(year=2021, area_ha=2000.0)]
    findings = run(compile_rows(tmp_path, rows, last=2021))
    area = only(findings, "year_on_year_area")
    assert len(area) == 1 and area[0].severity == "warning"
    assert area[0].message == ("area of Testvale temperate cropland drained grows by 100 % from 2020 to 2021 "
                               "(1,000.0 -> 2,000.0 ha): explain the change in the inventory report")
    assert (area[0].row, area[0].found) == (3, "+1,000.0 ha")
    emissions = only(findings, "year_on_year_emissions")
    cells = sorted(f.message.split(" rises")[0] for f in emissions)
    assert cells == ["3.B.2.a CH4", "3.B.2.a CO2", "3.C.4 N2O"]  # every gas doubles with the area
    assert all(f.severity == "warning" and "by 100 % from 2020 to 2021" in f.message for f in emissions)


def test_year_on_year_below_threshold_or_raised_threshold_is_silent(tmp_path):
    rows = [stratum(year=2020, area_ha=1000.0), stratum(year=2021, area_ha=1200.0)]  # +20 %
    result = compile_rows(tmp_path / "a", rows, last=2021)
    findings = run(result)
    assert only(findings, "year_on_year_area") == [] and only(findings, "year_on_year_emissions") == []
    doubled = compile_rows(tmp_path / "b", [stratum(year=2020, area_ha=1000.0), stratum(year=2021, area_ha=2000.0)],
                           last=2021)
    loose = Q.QaqcThresholds(year_on_year_area_pct=150, year_on_year_emission_pct=150)
    findings = run(doubled, thresholds=loose)
    assert only(findings, "year_on_year_area") == [] and only(findings, "year_on_year_emissions") == []


def test_year_on_year_small_changes_are_info(tmp_path):
    # 10 -> 20 ha: +100 %, but 10 ha < the 100 ha floor and about 370 t CO2-eq < the 1000 t floor.
    rows = [stratum(year=2020, area_ha=10.0), stratum(year=2021, area_ha=20.0)]
    findings = run(compile_rows(tmp_path, rows, last=2021))
    flagged = only(findings, "year_on_year_area") + only(findings, "year_on_year_emissions")
    assert len(flagged) == 4 and {f.severity for f in flagged} == {"info"}


def test_year_on_year_names_appearing_strata_and_fire_years_in_the_demo(demo_findings):
    area = [f.message for f in only(demo_findings, "year_on_year_area")]
    assert ("area of Kelavi Lowlands tropical cropland drained oil_palm appears in 1996 (0.0 -> 152.9 ha): "
            "explain the change in the inventory report") in area
    emissions = [f.message for f in only(demo_findings, "year_on_year_emissions")]
    assert any(m.startswith("3.B.1.a CO2 rises by 43 % from 1996 to 1997") for m in emissions)  # the 1997 fire
    assert any(m.startswith("3.C.1.a CH4 appears in 1997 (NO -> ") for m in emissions)


# --- 4 implied emission factor and row arithmetic ---------------------------------------------------------------


def test_implied_emission_factor_outside_its_strata_is_an_error(demo_result):
    # [T6.1] emissions calculated correctly: a cell's IEF is an area-weighted mean of its strata's.
    cats = demo_result.categories.copy()
    cell = (cats["category_code"] == "3.B.2.a") & (cats["gas"] == "CO2") & (cats["year"] == 1990)
    cats.loc[cell, "area_ha"] = cats.loc[cell, "area_ha"] / 2
    found = only(run(with_tables(demo_result, categories=cats)), "implied_emission_factor")
    assert len(found) == 1 and found[0].severity == "error"
    assert found[0].message.startswith("3.B.2.a CO2 1990: implied emission factor outside the range of its strata (")
    cats.loc[cell, "area_ha"] = np.nan
    found = only(run(with_tables(demo_result, categories=cats)), "implied_emission_factor")
    assert len(found) == 1 and "with no area behind it" in found[0].message


def test_implied_emission_factor_within_range_in_the_demo(demo_findings):
    assert only(demo_findings, "implied_emission_factor") == []


def test_row_arithmetic_recomputes_every_row(demo_result):
    # [T6.1] reproduce the calculations: emission = area basis x factor x conversion; CO2-eq = emission x GWP.
    assert only(run(demo_result), "row_arithmetic") == []
    em = demo_result.emissions.copy()
    target = em.index[(em["notation_key"] == "") & (em["pathway"] == "co2_onsite")][0]
    em.loc[target, "emission_t"] *= 1.01
    found = only(run(with_tables(demo_result, emissions=em)), "row_arithmetic")
    columns = sorted(f.column for f in found)
    assert columns == ["co2eq_t", "emission_t"]  # the stored CO2-eq no longer matches the changed emission either
    f = [f for f in found if f.column == "emission_t"][0]
    assert f.row == int(em.loc[target, "input_row"]) and f.file.endswith("activity.csv")
    assert "co2_onsite" in f.message and f.message.endswith("emission_t is not what area, factor and unit give")


# --- 5 overrides -----------------------------------------------------------------------------------------------


def _override_inventory(folder, periods):
    rows = [stratum(year=y, area_ha=100.0) for y in range(2020, 2025)]
    settings = write_inventory(folder, rows, first=2020, last=2024, extra_inputs={"overrides": "overrides.csv"})
    base = {"quantity": "ef_co2_c_onsite", "climate_zone": "temperate", "land_use": "cropland",
            "soil_status": "drained", "unit": "t CO2-C ha-1 yr-1", "tier": "Tier 2",
            "source": "Invented study (test)"}
    pd.DataFrame([{**base, "override_id": name, "value": 7.0 + i, "first_year": a, "last_year": b}
                  for i, (name, a, b) in enumerate(periods)]).to_csv(folder / "overrides.csv", index=False)
    return compile_inventory(settings)


def test_override_validity_gap_is_a_warning(tmp_path):
    # [CH5] one method over the time series; overrides valid 2020 and 2023-2024 leave 2021-2022 on the default.
    findings = run(_override_inventory(tmp_path, [("early", 2020, 2020), ("late", 2023, 2024)]))
    found = only(findings, "override_validity_gaps")
    assert len(found) == 1 and found[0].severity == "warning"
    assert found[0].message == (
        "ef_co2_c_onsite for Testvale temperate cropland drained (co2_onsite): overrides early 2020-2020; late "
        "2023-2024 leave 2021-2022 on the default ws13-t2.1-tem-crop: extend an override over the gap or document "
        "why the method changes")
    assert found[0].found == "2021-2022" and found[0].file.endswith("overrides.csv")
    assert only(findings, "override_partial_series") == []


def test_override_periods_without_gap_are_silent(tmp_path):
    findings = run(_override_inventory(tmp_path, [("early", 2020, 2021), ("late", 2022, 2024)]))
    assert only(findings, "override_validity_gaps") == [] and only(findings, "override_partial_series") == []


def test_override_covering_part_of_the_series_is_info(tmp_path, demo_findings):
    findings = run(_override_inventory(tmp_path, [("late", 2023, 2024)]))
    assert only(findings, "override_validity_gaps") == []
    found = only(findings, "override_partial_series")
    assert len(found) == 1 and found[0].severity == "info" and found[0].found == "2020-2022"
    demo = only(demo_findings, "override_partial_series")
    assert len(demo) == 1 and demo[0].message.startswith(
        "ef_co2_c_onsite for Quillfen temperate grassland drained rich deep (co2_onsite): override "
        "quillfen-grass-co2 2005-2024; the default ws13-t2.1-tem-grass-rich-deep is used in 1990-2004")


def test_override_units_recheck(demo_result):
    # [T6.1] units labelled correctly and converted.
    assert only(run(demo_result), "override_units") == []
    em = demo_result.emissions.copy()
    uses = em["factor_id"] == "quillfen-grass-co2"
    em.loc[uses, "factor_unit"] = "kg N2O-N ha-1 yr-1"
    found = only(run(with_tables(demo_result, emissions=em)), "override_units")
    assert len(found) == 1 and found[0].severity == "error"
    assert found[0].message.startswith("override quillfen-grass-co2 (ef_co2_c_onsite): rows use unit "
                                       "'kg N2O-N ha-1 yr-1', which does not convert to t CO2-C ha-1 yr-1: ")
    em.loc[uses, "factor_unit"] = "t CO2-C ha-1 yr-1"  # convertible, but not the override's unit
    found = only(run(with_tables(demo_result, emissions=em)), "override_units")
    assert [f.message for f in found] == ["override quillfen-grass-co2 (ef_co2_c_onsite): rows store unit "
                                          "'t CO2-C ha-1 yr-1', the override gives 't CO2 ha-1 yr-1'"]


# --- 6 notation keys against area --------------------------------------------------------------------------


def test_estimated_ne_with_area_names_the_justification(demo_findings):
    # [CH8] NE needs its explanation; the demo's fires have no Tier 1 N2O factor (WS2013 Table 2.7).
    found = only(demo_findings, "estimated_ne_with_area")
    assert len(found) == 2 and {f.severity for f in found} == {"warning"}
    forest = [f for f in found if "3.C.1.a" in f.message][0]
    assert forest.message == ("fire_n2o (N2O) of forest_land drained (3.C.1.a) is NE on up to 120.0 ha a year in "
                              "1997, 2006 (2 strata rows); justification: Table 2.7 gives no Tier 1 N2O factor for "
                              "organic-soil fires")
    assert forest.file.endswith("fires.csv") and forest.row == 2 and forest.column == "notation_key"


def test_no_ne_without_fires_in_the_2013_set(tmp_path):
    findings = run(compile_rows(tmp_path, [stratum()]))
    assert only(findings, "estimated_ne_with_area") == [] and only(findings, "ne_insignificance") == []


def test_ne_without_reason_is_unjustified(demo_result):
    em = demo_result.emissions.copy()
    em.loc[em["notation_key"] == "NE", "notation_reason"] = ""
    findings = run(with_tables(demo_result, emissions=em))
    assert all(f.message.endswith("no justification given") for f in only(findings, "estimated_ne_with_area"))
    found = only(findings, "notation_justification")
    assert sorted(f.message for f in found) == [
        "fire_n2o of cropland drained is NE without a reason in 2015, 2019",
        "fire_n2o of forest_land drained is NE without a reason in 1997, 2006"]


def test_no_with_area_is_an_error(demo_result):
    # [CH8] NO only where the activity does not occur.
    assert only(run(demo_result), "no_with_area") == []  # the demo has NO cells, none with area
    cats = demo_result.categories.copy()
    cell = (cats["category_code"] == "3.B.2.a") & (cats["gas"] == "CO2") & (cats["year"] == 1990)
    area = cats.loc[cell, "area_ha"].iloc[0]
    cats.loc[cell, ["emission_t", "co2eq_t", "area_ha"]] = np.nan
    cats.loc[cell, ["notation_key", "notation_reason"]] = ["NO", "not occurring"]
    found = only(run(with_tables(demo_result, categories=cats)), "no_with_area")
    assert len(found) == 1 and found[0].severity == "error"
    largest = demo_result.emissions.query("category_code == '3.B.2.a' and gas == 'CO2' and year == 1990")["area_ha"]
    assert found[0].message == (f"3.B.2.a CO2 is reported NO in 1990 although strata with up to {largest.max():,.1f} "
                                "ha fall in it")
    assert largest.max() < area  # the largest stratum, not the cell's area


# --- 8 and 9 double counting and sums ---------------------------------------------------------------------------


def _fire(**kw):
    row = {"year": 2020, "region": "Testvale", "climate_zone": "temperate", "land_use": "cropland",
           "soil_status": "drained", "fire_type": "wildfire", "burned_ha": 5.0}
    row.update(kw)
    return row


def test_duplicated_fire_rows_are_an_error(tmp_path):
    # [T6.1] double counting. The fire reader refuses the same fire twice (an input error); the check
    # guards the result table itself, so it is shown here on a result whose fire rows were doubled.
    settings = write_inventory(tmp_path, [stratum(area_ha=100.0)], extra_inputs={"fires": "fires.csv"})
    pd.DataFrame([_fire(), _fire()]).to_csv(tmp_path / "fires.csv", index=False)
    with pytest.raises(InputError, match="the same fire"):
        compile_inventory(settings)
    pd.DataFrame([_fire()]).to_csv(tmp_path / "fires.csv", index=False)
    result = compile_inventory(settings, analyses=False)
    fires = result.emissions[result.emissions["pathway"].str.startswith("fire")]
    twin = fires.assign(record_id=fires["record_id"] + 1000, input_row=3)
    result = with_tables(result, emissions=pd.concat([result.emissions, twin], ignore_index=True))
    found = only(run(result), "duplicated_strata")
    assert len(found) == 1 and found[0].severity == "error"
    assert "appear more than once: 2020 Testvale temperate cropland drained wildfire in rows 2, 3" in found[0].message
    assert found[0].file.endswith("fires.csv") and found[0].row == 2


def test_distinct_fire_rows_are_not_duplicates(tmp_path, demo_findings):
    settings = write_inventory(tmp_path, [stratum(area_ha=100.0)], extra_inputs={"fires": "fires.csv"})
    pd.DataFrame([_fire(), _fire(fire_type="prescribed", climate_zone="tropical")]).to_csv(
        tmp_path / "fires.csv", index=False)
    # a tropical prescribed fire in a temperate inventory is odd but legal here
    assert only(run(compile_inventory(settings)), "duplicated_strata") == []
    assert only(demo_findings, "duplicated_strata") == []


@pytest.mark.parametrize("fire, row", [
    (_fire(climate_zone="tropical", fire_type="prescribed"), 3),  # another climate zone than the stratum
    (_fire(region="Otherdale"), 3),  # a region without activity rows
])
def test_fire_without_an_activity_stratum_is_a_warning(tmp_path, fire, row):
    # Common practice, no source: a burnt area of organic soil should lie within the drained or rewetted area
    # reported for its stratum; where the activity data has no such stratum it cannot be compared, so the
    # fire is computed and flagged for the compiler to look at.
    settings = write_inventory(tmp_path, [stratum(area_ha=100.0)], extra_inputs={"fires": "fires.csv"})
    pd.DataFrame([_fire(), fire]).to_csv(tmp_path / "fires.csv", index=False)
    result = compile_inventory(settings, analyses=False)
    alone = [f for f in result.finding_list if f.check == "fire"]
    assert [(f.severity, f.row, f.column) for f in alone] == [("warning", row, "region")]
    assert "no row in the activity data" in alone[0].message
    fires = result.emissions[result.emissions["pathway"].astype(str).str.startswith("fire_")]
    assert set(fires["input_row"]) == {2, 3}  # both fires are still computed


def test_sums_strata_to_categories_to_total(demo_result):
    # [T6.1] aggregation from lower to higher reporting levels correct.
    assert only(run(demo_result), "sums") == []
    cats = demo_result.categories.copy()
    cell = (cats["category_code"] == "3.B.2.a") & (cats["gas"] == "CO2") & (cats["year"] == 1990)
    cats.loc[cell, "emission_t"] += 1.0
    messages = [f.message for f in only(run(with_tables(demo_result, categories=cats)), "sums")]
    assert messages == ["3.B.2.a CO2 1990: category emission_t is not the sum of its strata",
                        "1990 CO2: categories do not add up to the total"]
    dropped = demo_result.categories[~cell]
    messages = [f.message for f in only(run(with_tables(demo_result, categories=dropped)), "sums")]
    assert ("3.B.2.a CO2 1990: category emission_t is not the sum of its strata (the cell is missing from the "
            "categories table)") in messages
    mixed = demo_result.categories.copy()
    mixed.loc[cell, "notation_key"] = "NO"
    messages = [f.message for f in only(run(with_tables(demo_result, categories=mixed)), "sums")]
    assert messages == ["3.B.2.a CO2 1990: a category cell holds both or neither of a number and a notation key"]


def test_sums_tolerance_is_relative(demo_result):
    cats = demo_result.categories.copy()
    cell = (cats["category_code"] == "3.B.2.a") & (cats["gas"] == "CO2") & (cats["year"] == 1990)
    cats.loc[cell, "emission_t"] *= 1 + 1e-8  # below 1e-6 relative
    assert only(run(with_tables(demo_result, categories=cats)), "sums") == []


# --- 10 provenance --------------------------------------------------------------------------------------------


def test_factors_the_agency_has_not_checked_listed_per_table(demo_result, demo_findings):
    found = only(demo_findings, "factors_not_checked")
    fu = demo_result.factors_used
    expected = fu[(fu["agency_check"] == "not yet checked") & (fu["factor_set"] != "override")].groupby("origin").size()
    assert [f.file for f in found] == [f"factor_tables/{o}" for o in expected.index]
    assert [int(f.message.split()[0]) for f in found] == list(expected)
    assert all(f.severity == "info" for f in found)
    assert not any("ws13-t2.1-tem-crop" in f.message for f in found)  # the demo's review log: agrees
    checked = fu.assign(agency_check="agrees")
    assert only(run(with_tables(demo_result, factors_used=checked)), "factors_not_checked") == []


# --- 11 completeness and insignificance -----------------------------------------------------------------------------


def test_completeness_missing_pathway_is_an_error(demo_result, demo_findings):
    # [T6.1] completeness: every input row has each pathway of its soil status estimated or keyed.
    assert only(demo_findings, "completeness") == [] and only(demo_findings, "notation_justification") == []
    em = demo_result.emissions
    row = int(em.loc[(em["land_use"] == "cropland") & (em["year"] == 1990), "input_row"].iloc[0])
    gone = em[~((em["input_row"] == row) & (em["pathway"] == "ch4_soil") & (em["input_file"] == "activity.csv"))]
    found = only(run(with_tables(demo_result, emissions=gone)), "completeness")
    assert [f.message for f in found] == [
        "cropland drained ch4_soil has neither an estimate nor a notation key in 1990 (1 rows)"]
    assert found[0].row == row and found[0].file.endswith("activity.csv")
    blank = em.copy()
    blank.loc[(blank["input_row"] == row) & (blank["pathway"] == "ch4_soil"), "emission_t"] = np.nan
    assert len(only(run(with_tables(demo_result, emissions=blank)), "completeness")) == 1


def test_completeness_finds_a_fire_row_and_a_pathway_gone_everywhere(demo_result):
    # [T6.1] the same rule for fire records, and for a pathway with no row left at all (what a merge of
    # expected and present rows would find; the check matches them on integer keys).
    em = demo_result.emissions
    fire = em[em["pathway"] == "fire_co2"].iloc[0]
    gone = em[~((em["record_id"] == fire["record_id"]) & (em["pathway"] == "fire_co2")
                & (em["input_file"] == fire["input_file"]))]
    found = only(run(with_tables(demo_result, emissions=gone)), "completeness")
    assert len(found) == 1 and "fire fire_co2" in found[0].message and "(1 rows)" in found[0].message
    nowhere = em[em["pathway"] != "co2_doc"]
    found = only(run(with_tables(demo_result, emissions=nowhere)), "completeness")
    assert found and all(" co2_doc has neither" in f.message for f in found)
    rows = sum(int(f.message.rsplit("(", 1)[1].split()[0]) for f in found)
    assert rows == int(((em["pathway"] == "co2_doc") & (em["input_file"] == "activity.csv")).sum())


def test_category_notation_key_without_reason_is_flagged(demo_result):
    cats = demo_result.categories.copy()
    cell = (cats["category_code"] == "3.B.5.a") & (cats["gas"] == "CO2")
    cats.loc[cell, "notation_reason"] = ""
    found = only(run(with_tables(demo_result, categories=cats)), "notation_justification")
    assert [f.message for f in found] == ["3.B.5.a CO2 is NO without a reason in 1990-2024"]


def _ipcc2006(folder, area_ha=100.0):
    # The 2006 set has no Tier 1 DOC or CH4 method for drained organic soils: NE with reasons.
    return compile_rows(folder, [stratum(area_ha=area_ha)], factor_set="ipcc2006",
                        extra_method='ipcc2006_temperate = "warm_temperate"')


def _national(total_t, year=2020, code="1.A", gas="CO2"):
    return pd.DataFrame({"year": [year], "category_code": [code], "gas": [gas], "co2eq_t": [total_t]})


def _register_upper(library, quantity, zone="temperate", status="drained"):
    """Largest upper 95 % limit of the shipped rows (any set) that could apply (read from the register)."""
    reg = library.register
    rows = reg[(reg["quantity"] == quantity) & reg["climate_zone"].isin([zone, ""])
               & reg["soil_status"].isin([status, ""])]
    return rows, np.maximum(rows["value"], rows["ci_high"].fillna(-np.inf))


def test_ne_upper_bound_is_the_largest_shipped_factor(tmp_path):
    # Our rule: bound = area x largest upper 95 % limit among shipped factors of the pathway (any factor set).
    result = _ipcc2006(tmp_path)
    lib = result.library
    _, upper = _register_upper(lib, "ef_co2_c_doc")
    value, how = Q.ne_upper_bound_per_ha("co2_doc", {"climate_zone": "temperate", "soil_status": "drained"}, lib)
    assert value == pytest.approx(upper.max() * CO2_PER_C, rel=1e-4) and "(upper 95 % limit, ipcc2013ws)" in how
    rows, upper = _register_upper(lib, "ef_ch4_ditch")
    assert set(rows["unit"]) == {"kg CH4 ha-1 yr-1"}
    value, _ = Q.ne_upper_bound_per_ha("ch4_ditch", {"climate_zone": "temperate", "soil_status": "drained"}, lib)
    assert value == pytest.approx(upper.max() / 1000)
    # Fires: largest fuel consumption (t dm/ha) x largest factor (g/kg dm = kg/t dm).
    fire = {"climate_zone": "tropical", "soil_status": "drained", "fire_type": "wildfire"}
    reg = lib.register
    fuel = reg[(reg["quantity"] == "fuel_consumption") & (reg["climate_zone"] == "tropical")
               & (reg["fire_type"] == "wildfire")]["ci_high"].max()
    ch4 = reg[(reg["quantity"] == "ef_fire_ch4") & (reg["climate_zone"] == "tropical")]["ci_high"].max()
    assert Q.ne_upper_bound_per_ha("fire_ch4", fire, lib)[0] == pytest.approx(fuel * ch4 / 1000)
    value, how = Q.ne_upper_bound_per_ha("fire_n2o", fire, lib)
    assert np.isnan(value) and how == "no shipped factor for fire_n2o in any factor set"


def test_ne_not_shown_insignificant_without_national_totals(tmp_path):
    found = only(run(_ipcc2006(tmp_path)), "ne_insignificance")
    assert len(found) == 2 and {f.severity for f in found} == {"warning"}
    assert all("not shown insignificant (give national_totals to test it against the 0.05 % / 500 kt rule)"
               in f.message for f in found)


def test_ne_insignificant_against_a_large_national_total(tmp_path):
    # [MPG] below 0.05 % of the national total excluding LULUCF and below 500 kt; all together below 0.1 %.
    found = only(run(_ipcc2006(tmp_path), national_totals=_national(1e9)), "ne_insignificance")
    assert len(found) == 2 and {f.severity for f in found} == {"info"}
    ch4 = [f for f in found if "3.B.2.a CH4" in f.message][0]
    assert ch4.message.startswith("NE of 3.B.2.a CH4 (ch4_ditch, ch4_soil) in 2020: insignificant, upper bound ")
    assert "below the limit of 500,000.0 t CO2-eq in 2020" in ch4.message  # 0.05 % of 1e9 t = 500 kt


def test_ne_not_insignificant_against_a_small_national_total(tmp_path):
    # The national total excluding the land sector is the given 1e5 t plus this inventory's categories outside
    # 3.B (here 3.C.4 N2O); 0.05 % of it is about 50 t, below the bounds (about 170 t CO2 and 5,800 t CO2-eq CH4).
    result = _ipcc2006(tmp_path)
    cats = result.categories
    ours = cats.loc[~cats["category_code"].str.startswith("3.B"), "co2eq_t"].sum()
    assert ours > 0
    limit = 0.0005 * (1e5 + ours)
    found = only(run(result, national_totals=_national(1e5)), "ne_insignificance")
    assert len(found) == 2 and {f.severity for f in found} == {"warning"}
    assert all("not insignificant" in f.message and f"reaches the limit of {limit:,.1f} t CO2-eq in 2020" in f.message
               for f in found)


def test_ne_500_kt_cap_applies_when_lower(tmp_path):
    # [MPG] "whichever is lower": 0.05 % of 1e13 t is 5,000 Mt, so the 500 kt cap decides.
    found = only(run(_ipcc2006(tmp_path, area_ha=100000.0), national_totals=_national(1e13)), "ne_insignificance")
    ch4 = [f for f in found if "3.B.2.a CH4" in f.message][0]
    assert ch4.severity == "warning" and "reaches the limit of 500,000.0 t CO2-eq" in ch4.message


def test_ne_land_sector_is_left_out_of_the_national_total(tmp_path):
    # [MPG] the national total excludes LULUCF: a huge 3.B row does not make the NE insignificant.
    national = pd.concat([_national(1e5), _national(1e12, code="3.B.1.a")], ignore_index=True)
    found = only(run(_ipcc2006(tmp_path), national_totals=national), "ne_insignificance")
    assert {f.severity for f in found} == {"warning"} and all("not insignificant" in f.message for f in found)


def test_ne_national_rows_repeating_our_categories_are_left_out(tmp_path):
    # A national 3.C.4 N2O row would count this inventory's organic-soil N2O twice: ours is used instead
    # (as compiler.key_categories does), so the huge national 3.C.4 row does not rescue the NE.
    national = pd.concat([_national(1e5), _national(1e12, code="3.C.4", gas="N2O")], ignore_index=True)
    found = only(run(_ipcc2006(tmp_path), national_totals=national), "ne_insignificance")
    assert {f.severity for f in found} == {"warning"} and all("not insignificant" in f.message for f in found)


def test_ne_aggregate_limit(tmp_path):
    # [MPG] aggregate: each NE below its own limit, all together above the aggregate limit (set equal to the
    # single limit here so one national total can show it).
    result = _ipcc2006(tmp_path)
    strict = Q.QaqcThresholds(insignificance_aggregate_pct=0.05)
    bounds = {}
    for f in only(run(result, national_totals=_national(1e9)), "ne_insignificance"):
        bounds[f.message.split(" (")[0]] = float(f.found.split()[0].replace(",", ""))
    largest, total = max(bounds.values()), sum(bounds.values())
    national = (largest + total) / 2 / 0.0005  # largest < 0.05 % of it <= total
    found = only(run(result, thresholds=strict, national_totals=_national(national)), "ne_insignificance")
    assert len(found) == 2 and all("all NE together exceed 0.05 % of the national total" in f.message
                                   for f in found)


def test_ne_year_missing_from_national_totals(tmp_path):
    found = only(run(_ipcc2006(tmp_path), national_totals=_national(1e9, year=2019)), "ne_insignificance")
    assert all("national_totals has no total for these years" in f.message for f in found)


def test_national_totals_need_their_columns(tmp_path):
    with pytest.raises(InputError, match="required column missing"):
        run(_ipcc2006(tmp_path), national_totals=pd.DataFrame({"year": [2020], "co2eq_t": [1.0]}))


def test_ne_that_cannot_be_bounded_stays_flagged(demo_result):
    national = pd.DataFrame({"year": list(range(1990, 2025)), "category_code": "1.A", "gas": "CO2", "co2eq_t": 1e12})
    found = only(run(demo_result, national_totals=national), "ne_insignificance")
    assert len(found) == 2 and all(f.message.endswith(
        "its size cannot be bounded (no shipped factor for fire_n2o in any factor set): justify it with an estimate")
        for f in found)


# --- 12 evidence behind the areas ------------------------------------------------------------------------------


def _two_strata(folder):
    rows = [stratum(area_ha=100.0), stratum(land_use="grassland", nutrient_status="poor", area_ha=300.0)]
    return compile_rows(folder, rows)


def test_assumed_share_and_largest_assumed_stratum(tmp_path):
    # 2006 IPCC Guidelines Vol. 1 Ch. 6, documentation of assumptions (from memory); share: common practice.
    result = _two_strata(tmp_path)
    evidence = pd.Series(["measured", "assumed"], index=result.activity.index)
    findings = run(result, evidence=evidence)
    est = result.emissions[(result.emissions["notation_key"] == "") & result.emissions["co2eq_t"].notna()]
    grass = est.loc[est["input_row"] == 3, "co2eq_t"].abs().sum()
    share = grass / est["co2eq_t"].abs().sum()
    info = only(findings, "assumption_share")
    assert [f.message for f in info] == [
        f"{share:.1%} of emissions (|CO2-eq|, all years) rest on strata whose area is assumed ({share:.1%} in 2020); "
        "0.0% have no evidence given"]
    warning = only(findings, "assumption_largest")
    assert len(warning) == 1 and warning[0].row == 3 and warning[0].message.startswith(
        f"largest stratum on assumed area: Testvale temperate grassland drained poor in 2020, {grass:,.1f} t CO2-eq")


def test_no_assumed_strata_gives_only_the_share(tmp_path):
    result = _two_strata(tmp_path)
    findings = run(result, evidence=pd.Series(["measured", "statistics"], index=result.activity.index))
    assert only(findings, "assumption_largest") == []
    assert only(findings, "assumption_share")[0].message.startswith("0.0% of emissions")
    assert only(run(result), "assumption_share") == []  # no evidence, no assumption findings


def test_evidence_values_and_alignment(tmp_path):
    result = _two_strata(tmp_path)
    found = only(run(result, evidence=pd.Series(["measured", "guess"], index=result.activity.index)),
                 "assumption_evidence")
    assert [(f.row, f.found, f.message) for f in found] == [
        (3, "guess", "evidence is not one of measured | mapped | statistics | assumed")]
    with pytest.raises(ValueError, match="evidence is not aligned with result.activity"):
        run(result, evidence=pd.Series(["assumed"], index=[99]))


def test_evidence_reaches_gap_filled_records_of_the_demo(demo_result):
    # The demo's gap-filled stratum-years (activity_source interpolated/extrapolated, spreadsheet row 0) are tied
    # to their evidence by record_id, so only the fires and the off-site CO2 of the peat production rows (not
    # activity rows) are left without evidence.
    act = demo_result.activity
    assert (act["_row"] == 0).any()
    findings = run(demo_result, evidence=pd.Series("statistics", index=act.index))
    est = demo_result.emissions[(demo_result.emissions["notation_key"] == "")
                                & demo_result.emissions["co2eq_t"].notna()]
    fires = (est.loc[est["input_file"].isin(["fires.csv", "peat_production.csv"]), "co2eq_t"].abs().sum()
             / est["co2eq_t"].abs().sum())
    assert only(findings, "assumption_share")[0].message.endswith(f"; {fires:.1%} have no evidence given")
    assert only(findings, "assumption_largest") == []
    assert all(f.row != 0 for f in findings)  # made records are never pointed at as row 0


def test_compile_with_a_qaqc_error_exits_1_and_writes_nothing(tmp_path, capsys, monkeypatch):
    # A QA/QC error (here: a deliberately broken sum) blocks the compile: exit code 1, nothing written.
    from compiler import qaqc as qaqc_module
    from compiler.cli import main
    from compiler.errors import Finding

    monkeypatch.setattr(qaqc_module, "CHECK_FUNCTIONS",
                        (lambda result, thresholds: [Finding("error", "sums", "strata do not add up (test)")],))
    settings = write_inventory(tmp_path / "inv", [stratum()])
    out = tmp_path / "out"
    code = main(["compile", str(settings), "--out", str(out), "--no-report"])
    err = capsys.readouterr().err
    assert code == 1 and "QA/QC error" in err and "strata do not add up (test)" in err
    assert not out.exists()


def test_a_change_of_exactly_the_threshold_is_not_flagged():
    # The README: changes "above" the [qaqc] thresholds are flagged; 25 % of 1.2 is 0.3 (float division 25.000...04).
    wide = pd.DataFrame([[100.0, 125.0], [1.2, 1.5], [100.0, 125.1]], columns=[2020, 2021],
                        index=pd.Index(["a", "b", "c"], name="key"))
    assert list(Q._jumps(wide, 25.0, 0.0)["key"]) == ["c"]
