"""Off-site CO2 of extracted peat (3.B.4.a.i) from peat production statistics.

External reference: 2006 IPCC Guidelines Vol. 4, Chapter 7 (Wetlands), Section 7.2.1.1, the off-site equation
CO2-C = Wt_dry peat x C_fraction (numbered Eq. 7.5 from memory; see the verification note of
factor_tables/offsite_peat_ipcc2006.csv) and the default carbon fractions of air-dry peat by nutrient status
(Table 7.5 from memory: nutrient-poor 0.45, 0.40-0.50; nutrient-rich 0.40, 0.30-0.55). The carbon is converted
to CO2 with 44/12 (the integer masses printed in the IPCC equations). All the places, names and numbers of the
inputs below are invented.
"""

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from compiler import compile_inventory, equations
from compiler.cli import main
from compiler.offsite_peat import DEFAULT_PRODUCTION_PCT, OFFSITE_PATHWAY, PLAUSIBLE_T_PER_HA
from compiler.pipeline import check_inventory
from compiler.recalculations import compare
from compiler.trace import trace_text

ACTIVITY = """year,region,climate_zone,land_use,soil_status,nutrient_status,drainage_depth,subtype,area_ha
2020,Brackenholm,boreal,wetlands,drained,poor,,peat_extraction,400
2021,Brackenholm,boreal,wetlands,drained,poor,,peat_extraction,400
2022,Brackenholm,boreal,wetlands,drained,poor,,peat_extraction,400
2020,Tarnwick,boreal,grassland,drained,,,,250
2021,Tarnwick,boreal,grassland,drained,,,,250
2022,Tarnwick,boreal,grassland,drained,,,,250
"""
HEADER = "year,region,nutrient_status,use,air_dry_peat_t,volume_m3,bulk_density_t_per_m3,moisture_content,production_uncertainty_pct\n"
PRODUCTION = HEADER + """2020,Brackenholm,poor,horticulture,10000,,,0.45,7
2021,Brackenholm,poor,horticulture,10000,,,0.45,7
2022,Brackenholm,poor,horticulture,10000,,,0.45,7
"""
C_TO_CO2 = 44 / 12  # integer masses, as printed in the IPCC equations


def write_inventory(folder: Path, production: str | None = PRODUCTION, factor_set: str = "ipcc2013ws",
                    mass_ratios: str = "integer_masses", extra: str = "") -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "activity.csv").write_text(ACTIVITY, encoding="utf-8")
    inputs = 'activity = "activity.csv"\n'
    if production is not None:
        (folder / "peat_production.csv").write_text(production, encoding="utf-8")
        inputs += 'peat_production = "peat_production.csv"\n'
    temperate = 'ipcc2006_temperate = "cold_temperate"\n' if factor_set == "ipcc2006" else ""
    toml = (f'[inventory]\nname = "Brackenholm (invented)"\nsubmission_year = 2024\nfirst_year = 2020\n'
            f'last_year = 2022\ncompile_date = "2024-03-01"\n\n[method]\nfactor_set = "{factor_set}"\n'
            f'mass_ratios = "{mass_ratios}"\n{temperate}\n[uncertainty]\napproach = "1"\n\n[inputs]\n{inputs}{extra}')
    path = folder / "inventory.toml"
    path.write_text(toml, encoding="utf-8")
    return path


def offsite(result) -> pd.DataFrame:
    em = result.emissions
    return em[em["pathway"] == OFFSITE_PATHWAY].sort_values(["year", "input_row"]).reset_index(drop=True)


def cell(result, year: int, code: str = "3.B.4.a.i", gas: str = "CO2") -> float:
    cats = result.categories
    return float(cats[(cats.category_code == code) & (cats.gas == gas) & (cats.year == year)]["emission_t"].iloc[0])


# --- the equation, by hand ----------------------------------------------------------------------------------


@pytest.mark.parametrize("factor_set", ["ipcc2013ws", "ipcc2006"])
@pytest.mark.parametrize("status, c_fraction", [("poor", 0.45), ("rich", 0.40)])
def test_hand_computed_offsite_co2_for_each_nutrient_status(tmp_path, factor_set, status, c_fraction):
    # 2006 GL Vol. 4 Section 7.2.1.1 off-site equation (Eq. 7.5 from memory): CO2 = Wt_dry peat x C_fraction x 44/12,
    # with the Table 7.5 carbon fraction of air-dry peat (from memory). 12,000 t of air-dry peat:
    # poor 12,000 x 0.45 x 44/12 = 19,800 t CO2; rich 12,000 x 0.40 x 44/12 = 17,600 t CO2.
    expected = {"poor": 19_800.0, "rich": 17_600.0}[status]
    assert 12_000 * c_fraction * C_TO_CO2 == pytest.approx(expected)
    production = HEADER + f"2021,Brackenholm,{status},horticulture,12000,,,,\n"
    result = compile_inventory(write_inventory(tmp_path, production, factor_set), analyses=False)
    rows = offsite(result)
    assert len(rows) == 1
    r = rows.iloc[0]
    assert r["emission_t"] == pytest.approx(expected, rel=1e-12)
    assert r["factor_value"] == c_fraction and r["factor_unit"] == "fraction"
    assert r["parameter_value"] == 12_000 and r["emission_basis_t"] == pytest.approx(12_000 * c_fraction)
    assert r["category_code"] == "3.B.4.a.i" and r["gas"] == "CO2" and np.isnan(r["area_ha"])
    assert "7.2.1.1" in r["equation"]
    assert r["factor_id"] in set(result.factors_used["factor_id"])
    # The cell adds the off-site part to the on-site emission of the extraction area.
    onsite = result.emissions.query("year == 2021 and category_code == '3.B.4.a.i' and gas == 'CO2' "
                                    "and pathway != @OFFSITE_PATHWAY and notation_key == ''")["emission_t"].sum()
    assert cell(result, 2021) == pytest.approx(onsite + expected, rel=1e-12)


def test_standard_atomic_weights_use_the_units_ratio(tmp_path):
    # 44.009 / 12.011 (IUPAC abridged standard atomic weights, compiler/units.py) instead of 44/12.
    result = compile_inventory(write_inventory(tmp_path, mass_ratios="standard_atomic_weights"), analyses=False)
    assert offsite(result)["emission_t"].iloc[0] == pytest.approx(10_000 * 0.45 * 44.009 / 12.011, rel=1e-12)


def test_the_equation_function_is_what_runs(tmp_path, monkeypatch):
    settings = write_inventory(tmp_path)
    before = cell(compile_inventory(settings, analyses=False), 2020)
    real = equations.offsite_peat_co2
    monkeypatch.setattr(equations, "offsite_peat_co2", lambda *a, **k: 2.0 * real(*a, **k))
    after = cell(compile_inventory(settings, analyses=False), 2020)
    assert after - before == pytest.approx(10_000 * 0.45 * C_TO_CO2, rel=1e-12)
    assert "Section 7.2.1.1" in real.__doc__ and "44/12" in real.__doc__


# --- uses and volumes ---------------------------------------------------------------------------------------


def test_energy_use_is_left_out_and_reported(tmp_path):
    production = PRODUCTION + "2020,Brackenholm,poor,energy,8000,,,0.5,5\n2021,Brackenholm,poor,Energy,7000,,,,\n"
    result = compile_inventory(write_inventory(tmp_path, production), analyses=False)
    rows = offsite(result)
    assert sorted(rows["input_row"]) == [2, 3, 4]  # the horticulture rows only
    assert rows["parameter_value"].tolist() == [10_000, 10_000, 10_000]
    notes = [f for f in result.finding_list if f.check == "peat_production" and "energy" in f.message]
    assert len(notes) == 1
    note = notes[0]
    assert note.severity == "info" and note.row == 5 and note.column == "use"
    assert "rows 5, 6" in note.message and "15,000 t" in note.message and "energy sector" in note.message


def test_other_non_energy_use_is_estimated(tmp_path):
    production = PRODUCTION + "2020,Brackenholm,poor,other,2000,,,,\n"
    result = compile_inventory(write_inventory(tmp_path, production), analyses=False)
    assert cell(result, 2020) - cell(result, 2021) == pytest.approx(2_000 * 0.45 * C_TO_CO2)


def test_volume_converts_with_the_given_bulk_density(tmp_path):
    # 40,000 m3 x 0.25 t m-3 = 10,000 t of air-dry peat: the same emission as the tonnes of 2020.
    production = HEADER + "2020,Brackenholm,poor,horticulture,10000,,,,\n2021,Brackenholm,poor,horticulture,,40000,0.25,,\n"
    result = compile_inventory(write_inventory(tmp_path, production), analyses=False)
    rows = offsite(result)
    assert rows["parameter_value"].tolist() == [10_000, 10_000]
    assert rows["emission_t"].iloc[1] == pytest.approx(10_000 * 0.45 * C_TO_CO2, rel=1e-12)
    assert rows["activity_source"].iloc[1] == "reported as volume 40000 m3 x 0.25 t m-3 = 10000 t air-dry peat"
    assert rows["activity_source"].iloc[0] == "reported"
    shown = [f for f in result.finding_list if f.check == "peat_production" and f.column == "volume_m3"]
    assert [(f.severity, f.row, f.found) for f in shown] == [
        ("info", 3, "volume 40000 m3 x 0.25 t m-3 = 10000 t air-dry peat")]


def test_no_production_file_changes_nothing_but_says_so(tmp_path):
    result = compile_inventory(write_inventory(tmp_path, None), analyses=False)
    assert offsite(result).empty
    notes = [f for f in result.finding_list if f.check == "peat_production"]
    assert len(notes) == 1 and notes[0].severity == "info" and "not estimated" in notes[0].message
    assert notes[0].column == "inputs.peat_production"


# --- bad inputs: exit 2 with file, row and column -----------------------------------------------------------

BAD = [
    # numbers
    ("2020,Brackenholm,poor,horticulture,\"10,000\",,,,\n", 2, "air_dry_peat_t"),
    ("2020,Brackenholm,poor,horticulture,-5,,,,\n", 2, "air_dry_peat_t"),
    ("2020,Brackenholm,poor,horticulture,lots,,,,\n", 2, "air_dry_peat_t"),
    ("2020,Brackenholm,poor,horticulture,NaN,,,,\n", 2, "air_dry_peat_t"),
    ("2020,Brackenholm,poor,horticulture,,,,,\n", 2, "air_dry_peat_t"),  # no production at all
    # volume and bulk density
    ("2020,Brackenholm,poor,horticulture,,40000,,,\n", 2, "bulk_density_t_per_m3"),
    ("2020,Brackenholm,poor,horticulture,,40000,0,,\n", 2, "bulk_density_t_per_m3"),
    ("2020,Brackenholm,poor,horticulture,,40000,250,,\n", 2, "bulk_density_t_per_m3"),  # kg m-3 typed
    ("2020,Brackenholm,poor,horticulture,10000,40000,0.25,,\n", 2, "volume_m3"),  # both given
    # controlled terms
    ("2020,Brackenholm,medium,horticulture,10000,,,,\n", 2, "nutrient_status"),
    ("2020,Brackenholm,,horticulture,10000,,,,\n", 2, "nutrient_status"),
    ("2020,Brackenholm,poor,fuel,10000,,,,\n", 2, "use"),
    # years, fractions, percentages, text
    ("2031,Brackenholm,poor,horticulture,10000,,,,\n", 2, "year"),
    ("2020.5,Brackenholm,poor,horticulture,10000,,,,\n", 2, "year"),
    ("2020,Brackenholm,poor,horticulture,10000,,,45,\n", 2, "moisture_content"),  # percent typed
    ("2020,Brackenholm,poor,horticulture,10000,,,,-3\n", 2, "production_uncertainty_pct"),
    ("2020,,poor,horticulture,10000,,,,\n", 2, "region"),
]


@pytest.mark.parametrize("line, row, column", BAD)
def test_bad_production_rows_exit_2_naming_file_row_and_column(tmp_path, capsys, line, row, column):
    settings = write_inventory(tmp_path, HEADER + line)
    code = main(["check", str(settings)])
    out = capsys.readouterr().out
    assert code == 2, out
    errors = [f for f in check_inventory(settings) if f.severity == "error"]
    assert errors and all(Path(f.file).name == "peat_production.csv" for f in errors)
    assert (row, column) in {(f.row, f.column) for f in errors}, [f.render() for f in errors]
    assert f"peat_production.csv, row {row}, column {column}" in out


def test_duplicated_rows_and_missing_columns_exit_2(tmp_path, capsys):
    settings = write_inventory(tmp_path, PRODUCTION + "2021,Brackenholm,poor,horticulture,9000,,,,\n")
    assert main(["check", str(settings)]) == 2
    dup = [f for f in check_inventory(settings) if f.severity == "error"]
    assert {(f.row, f.column) for f in dup} == {(3, "year"), (5, "year")}
    settings = write_inventory(tmp_path, "year,nutrient_status,air_dry_peat_t\n2020,poor,10000\n")
    assert main(["check", str(settings)]) == 2
    missing = [f for f in check_inventory(settings) if f.severity == "error"]
    assert missing[0].column == "region" and Path(missing[0].file).name == "peat_production.csv"
    capsys.readouterr()


# --- QA/QC against the extraction area ------------------------------------------------------------------------


def test_production_per_hectare_outside_the_plausible_range_is_flagged(tmp_path):
    # 400 ha: 10,000 t is 25 t ha-1 (inside 10-200, common practice, no source); 100,000 t is 250 t ha-1 and
    # 2,000 t is 5 t ha-1 (outside).
    assert PLAUSIBLE_T_PER_HA == (10.0, 200.0)
    production = HEADER + ("2020,Brackenholm,poor,horticulture,10000,,,,\n2021,Brackenholm,poor,horticulture,100000,,,,\n"
                           "2022,Brackenholm,poor,horticulture,2000,,,,\n")
    result = compile_inventory(write_inventory(tmp_path, production), analyses=False)
    flagged = [f for f in result.finding_list if f.check == "peat_production" and "per ha" in f.message]
    assert [(f.severity, f.row, f.column) for f in flagged] == [("warning", 3, "air_dry_peat_t"),
                                                                ("warning", 4, "air_dry_peat_t")]
    assert "250.0 t per ha" in flagged[0].message and "5.0 t per ha" in flagged[1].message


def test_production_in_a_region_without_extraction_area_is_flagged(tmp_path):
    production = PRODUCTION + "2021,Tarnwick,rich,horticulture,3000,,,,\n"
    result = compile_inventory(write_inventory(tmp_path, production), analyses=False)
    flagged = [f for f in result.finding_list if f.check == "peat_production" and "Tarnwick" in f.message]
    assert [(f.severity, f.row, f.column) for f in flagged] == [("warning", 5, "region")]
    assert "in any year" in flagged[0].message
    assert len(offsite(result)) == 4  # still estimated: the agency decides where the production belongs


def test_extraction_area_without_production_is_noted(tmp_path):
    production = HEADER + "2020,Brackenholm,poor,horticulture,10000,,,,\n"
    result = compile_inventory(write_inventory(tmp_path, production), analyses=False)
    notes = [f for f in result.finding_list if f.check == "peat_production" and "no peat production" in f.message]
    assert len(notes) == 1 and notes[0].severity == "info" and "2021-2022" in notes[0].message


# --- uncertainty, trace, recalculations, overrides -----------------------------------------------------------


def test_uncertainty_takes_the_production_and_carbon_fraction_intervals(tmp_path):
    # Approach 1 (2006 GL Vol. 1 Eq. 3.1) on one off-site row: activity 7 % (the file), factor 0.05 / 0.45 = 11.1 %
    # (the larger half-width of 0.40-0.50), combined sqrt(7^2 + 11.1^2) = 13.1 %.
    production = PRODUCTION.replace("2022,Brackenholm,poor,horticulture,10000,,,0.45,7",
                                    "2022,Brackenholm,poor,horticulture,10000,,,0.45,")
    result = compile_inventory(write_inventory(tmp_path, production))
    rows = result.uncertainty.approach1.rows
    off = rows[rows["pathway"] == OFFSITE_PATHWAY].set_index("year")
    assert off.loc[2020, "activity_pct"] == pytest.approx(7.0)
    assert off.loc[2022, "activity_pct"] == pytest.approx(DEFAULT_PRODUCTION_PCT)  # none given: the default
    assert off.loc[2020, "factor_pct"] == pytest.approx(0.05 / 0.45 * 100)
    assert off.loc[2020, "uncertainty_pct"] == pytest.approx(np.hypot(7.0, 0.05 / 0.45 * 100))
    notes = [f.message for f in result.finding_list if f.check == "uncertainty_area"]
    assert any("default production uncertainty of 10 %" in m for m in notes)
    assert not any("burnt areas" in m for m in notes)


def test_trace_shows_the_production_and_ends_with_the_cell(tmp_path):
    result = compile_inventory(write_inventory(tmp_path), analyses=False)
    text, total = trace_text(result.emissions, result.factors_used, "3.B.4.a.i", "CO2", 2021)
    assert total == pytest.approx(cell(result, 2021), rel=1e-12)
    assert "co2_offsite" in text and "peat_production.csv row 3" in text
    assert "10,000 t air-dry peat x 0.45 t C per t = 4,500 t CO2-C" in text
    assert "16,500 t CO2" in text  # 10,000 x 0.45 x 44/12


def test_a_revised_production_is_an_activity_change(tmp_path):
    before = compile_inventory(write_inventory(tmp_path / "a"), analyses=False)
    after = compile_inventory(write_inventory(tmp_path / "b", PRODUCTION.replace(
        "2021,Brackenholm,poor,horticulture,10000", "2021,Brackenholm,poor,horticulture,12000")), analyses=False)
    est = lambda r: r.emissions[r.emissions["notation_key"] == ""]
    by_cell, _ = compare(est(before), est(after))
    c = by_cell.set_index(["category_code", "gas", "year"]).loc[("3.B.4.a.i", "CO2", 2021)]
    # Recalculation identity: dE = (A1 - A0) x EF0 with A the tonnes of peat: 2,000 x 0.45 x 44/12 = 3,300 t CO2.
    assert c["activity_change"] == pytest.approx(3_300.0, rel=1e-9)
    assert c["factor_change"] == pytest.approx(0.0, abs=1e-6)
    assert c["difference_co2eq_t"] == pytest.approx(c["parts_sum_co2eq_t"], rel=1e-12)


def test_a_national_carbon_fraction_override_is_used(tmp_path):
    overrides = ("quantity,value,unit,source,nutrient_status,ci_low,ci_high\n"
                 "c_fraction_peat,0.42,fraction,Brackenholm peat survey (invented),poor,0.40,0.44\n")
    (tmp_path / "overrides.csv").write_text(overrides, encoding="utf-8")
    result = compile_inventory(write_inventory(tmp_path, extra='overrides = "overrides.csv"\n'), analyses=False)
    rows = offsite(result)
    assert (rows["factor_value"] == 0.42).all() and rows["default_factor_id"].str.endswith("peat-c-poor").all()
    assert rows["emission_t"].iloc[0] == pytest.approx(10_000 * 0.42 * C_TO_CO2, rel=1e-12)


def test_the_demo_reports_the_offsite_part_with_its_source(demo_result):
    rows = demo_result.emissions[demo_result.emissions["pathway"] == OFFSITE_PATHWAY]
    assert set(rows["region"]) == {"Orlathmoor"} and set(rows["category_code"]) == {"3.B.4.a.i"}
    assert rows["year"].nunique() == 35  # 1990-2024; the energy peat of 1990-2009 is left out
    ids = set(rows["factor_id"])
    used = demo_result.factors_used.set_index("factor_id").loc[sorted(ids)]
    assert (used["source_id"] == "ipcc2006_v4_ch7").all() and (used["verification"] == "from_memory").all()


def test_a_workbook_and_a_semicolon_file_are_read_like_the_other_inputs(tmp_path):
    # The production file goes through the shared readers: an XLSX sheet, and a semicolon CSV with decimal commas.
    import openpyxl

    settings = write_inventory(tmp_path)
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(["year", "region", "nutrient_status", "use", "volume_m3", "bulk_density_t_per_m3"])
    sheet.append([2020, "Brackenholm", "Nutrient-poor", "Horticulture", 40000, 0.25])
    book.save(tmp_path / "peat_production.xlsx")
    settings.write_text(settings.read_text().replace("peat_production.csv", "peat_production.xlsx"))
    rows = offsite(compile_inventory(settings, analyses=False))
    assert rows["parameter_value"].tolist() == [10_000] and rows["nutrient_status"].tolist() == ["poor"]
    (tmp_path / "peat_production.csv").write_text("year;region;nutrient_status;air_dry_peat_t\n"
                                                  "2020;Brackenholm;rich;10000,5\n", encoding="utf-8")
    settings.write_text(settings.read_text().replace("peat_production.xlsx", "peat_production.csv"))
    rows = offsite(compile_inventory(settings, analyses=False))
    assert rows["emission_t"].tolist() == pytest.approx([10_000.5 * 0.40 * C_TO_CO2], rel=1e-12)
