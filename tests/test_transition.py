"""Transition period: land converted in year Y is converted until Y + T - 1 and remaining from Y + T."""


from compiler import check_inventory, compile_inventory
from conftest import stratum, write_inventory


def _grassland(year, area, conversion_year="", **kw):
    return stratum(year=year, land_use="grassland", climate_zone="boreal", area_ha=area,
                   conversion_year=conversion_year, previous_land_use="cropland" if conversion_year != "" else "",
                   remaining_or_converted="", **kw)


def _status(result, year, conversion_year):
    act = result.activity
    rows = act[(act["year"] == year) & (act["conversion_year"] == conversion_year)]
    return set(rows["remaining_or_converted"])


def test_converted_in_2000_is_remaining_from_2020(tmp_path):
    # 2006 IPCC Guidelines Vol. 4 Ch. 3 (from memory): land stays in "land converted to" for the 20-year
    # default transition period, then is "remaining". Hand-made case: converted in 2000, so converted
    # 2000..2019 (20 years) and remaining from 2020 = 2000 + 20.
    rows = [_grassland(y, 100.0, 2000) for y in range(2000, 2022)]
    result = compile_inventory(write_inventory(tmp_path, rows, first=2000, last=2021), analyses=False)
    assert _status(result, 2000, 2000) == {"converted"}
    assert _status(result, 2019, 2000) == {"converted"}
    assert _status(result, 2020, 2000) == {"remaining"}
    assert _status(result, 2021, 2000) == {"remaining"}
    cats = result.categories
    co2 = cats[cats["gas"] == "CO2"].set_index(["category_code", "year"])["notation_key"]
    assert co2[("3.B.3.b", 2019)] == "" and co2[("3.B.3.b", 2020)] == "NO"
    assert co2[("3.B.3.a", 2019)] == "NO" and co2[("3.B.3.a", 2020)] == ""


def test_transition_years_setting(tmp_path):
    rows = [_grassland(y, 100.0, 2000) for y in range(2000, 2008)]
    result = compile_inventory(write_inventory(tmp_path, rows, first=2000, last=2007,
                                               extra_method="transition_years = 5"), analyses=False)
    assert _status(result, 2004, 2000) == {"converted"}
    assert _status(result, 2005, 2000) == {"remaining"}


def test_area_balance_reads_the_conversion_years(tmp_path):
    # A cohort converted in 2000 leaves the transition period in 2020, the year a second cohort of the
    # same stratum is converted: the converted area stays 100 ha while the region grows by 100 ha. The
    # growth of the converted area (the rule without conversion years) sees no new conversion and warns;
    # the conversion years say 100 ha were converted in 2020, and there is nothing to warn about.
    base = [_grassland(y, 1000.0) for y in range(2018, 2022)]
    first = [_grassland(y, 100.0, 2000) for y in range(2018, 2022)]
    second = [_grassland(y, 100.0, 2020) for y in (2020, 2021)]
    findings = check_inventory(write_inventory(tmp_path / "dated", base + first + second, first=2018, last=2021))
    assert not [f for f in findings if f.check == "area_balance"]
    # The same land with remaining_or_converted kept by hand and no conversion years: a warning for 2020.
    undated = ([_grassland(y, 1000.0) for y in range(2018, 2022)]
               + [stratum(year=y, land_use="grassland", climate_zone="boreal", area_ha=a,
                          remaining_or_converted="converted", previous_land_use="cropland")
                  for y, a in ((2018, 100.0), (2019, 100.0), (2020, 100.0), (2021, 100.0))])
    undated[2]["area_ha"] = 1100.0  # 2020: the first cohort now counted in the remaining stratum
    undated[3]["area_ha"] = 1100.0
    findings = check_inventory(write_inventory(tmp_path / "undated", undated, first=2018, last=2021))
    assert [f for f in findings if f.check == "area_balance"]


def test_conversion_year_after_the_row_is_an_error(tmp_path):
    rows = [_grassland(2020, 100.0, 2021)]
    findings = check_inventory(write_inventory(tmp_path, rows))
    errors = [f for f in findings if f.severity == "error" and f.column == "conversion_year"]
    assert errors and errors[0].row == 2


def test_conversion_year_that_is_not_a_year_names_file_row_and_column(tmp_path):
    rows = [_grassland(2020, 100.0, "last spring")]
    findings = check_inventory(write_inventory(tmp_path, rows))
    errors = [f for f in findings if f.severity == "error" and f.column == "conversion_year"]
    assert errors and errors[0].row == 2 and errors[0].file.endswith("activity.csv")


def test_cohorts_past_their_transition_are_parts_of_the_remaining_stratum(tmp_path):
    # Two cohorts converted in 1990 and 1995 are both remaining by 2018 and stand beside the undated
    # remaining row of the same stratum: three parts of one stratum, not duplicates, and no warning
    # about the previous land use they keep in the file.
    rows = ([_grassland(y, 1000.0) for y in (2018, 2019)] + [_grassland(y, 100.0, 1990) for y in (2018, 2019)]
            + [_grassland(y, 50.0, 1995) for y in (2018, 2019)])
    result = compile_inventory(write_inventory(tmp_path, rows, first=2018, last=2019), iterations=200)
    assert not [f for f in result.finding_list if f.check in ("duplicate", "duplicated_strata", "conversion")]
    cats = result.categories
    area = cats[(cats["category_code"] == "3.B.3.a") & (cats["gas"] == "CO2")].set_index("year")["area_ha"]
    assert area.to_dict() == {2018: 1150.0, 2019: 1150.0}
