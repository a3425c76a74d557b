"""The engine: conservation, invariances, overrides and their precedence, the 2006 factor set."""

import numpy as np
import pandas as pd
import pytest

from compiler import compile_inventory
from compiler.errors import InputError
from compiler.schema import plain
from conftest import pick, stratum, write_inventory


def test_area_in_equals_area_out_every_year(demo_result):
    given = demo_result.activity.groupby("year")["area_ha"].sum()
    em = demo_result.emissions
    for pathway in ("co2_onsite", "co2_doc"):
        out = em[(em["pathway"] == pathway) & (em["input_file"] == "activity.csv")].groupby("year")["area_ha"].sum()
        pd.testing.assert_series_equal(given, out, check_names=False)
    assert list(given.index) == list(range(1990, 2025))


def test_categories_sum_to_strata(demo_result):
    em = plain(demo_result.emissions[demo_result.emissions["notation_key"] == ""])  # text keys, as the categories
    cats = demo_result.categories
    by_cell = em.groupby(["category_code", "gas", "year"])["emission_t"].sum()
    shown = cats[cats["notation_key"] == ""].set_index(["category_code", "gas", "year"])["emission_t"]
    pd.testing.assert_series_equal(by_cell.sort_index(), shown.sort_index(), check_names=False,
                                   check_index_type=False)


def test_row_order_does_not_matter(tmp_path, demo_copy):
    activity = demo_copy.parent / "activity.csv"
    first = compile_inventory(demo_copy).categories
    frame = pd.read_csv(activity, dtype=str, keep_default_na=False)
    frame.sample(frac=1.0, random_state=7).to_csv(activity, index=False)
    second = compile_inventory(demo_copy).categories
    pd.testing.assert_frame_equal(first, second)


def test_emissions_scale_linearly_with_area(tmp_path):
    one = compile_inventory(write_inventory(tmp_path / "a", [stratum(area_ha=10.0)])).emissions
    ten = compile_inventory(write_inventory(tmp_path / "b", [stratum(area_ha=100.0)])).emissions
    est = one["notation_key"] == ""
    assert np.allclose(ten.loc[est, "emission_t"].to_numpy(), 10 * one.loc[est, "emission_t"].to_numpy())


def _overrides(folder, rows):
    pd.DataFrame(rows).to_csv(folder / "overrides.csv", index=False)


def test_region_override_beats_national_beats_default(tmp_path):
    rows = [stratum(region="North"), stratum(region="South"), stratum(region="East")]
    settings = write_inventory(tmp_path, rows, extra_inputs={"overrides": "overrides.csv"})
    base = {"quantity": "ef_co2_c_onsite", "climate_zone": "temperate", "land_use": "cropland",
            "soil_status": "drained", "unit": "t CO2-C ha-1 yr-1", "tier": "Tier 2"}
    _overrides(tmp_path, [
        {**base, "override_id": "national", "value": 7.0, "source": "Invented national study (demo)", "region": ""},
        {**base, "override_id": "north", "value": 8.5, "source": "Invented regional study (demo)", "region": "North"},
    ])
    em = compile_inventory(settings).emissions
    onsite = em[em["pathway"] == "co2_onsite"].set_index("region")
    assert onsite.loc["North", "factor_id"] == "north"
    assert onsite.loc["South", "factor_id"] == "national" and onsite.loc["East", "factor_id"] == "national"
    assert onsite.loc["South", "default_factor_id"] == "ws13-t2.1-tem-crop"


def test_override_outside_default_interval_is_a_warning(tmp_path):
    settings = write_inventory(tmp_path, [stratum()], extra_inputs={"overrides": "overrides.csv"})
    _overrides(tmp_path, [{"quantity": "ef_co2_c_onsite", "land_use": "cropland", "value": 12.0,
                           "unit": "t CO2-C ha-1 yr-1", "source": "Invented study (demo)"}])
    result = compile_inventory(settings)
    warnings = result.findings[result.findings["check"] == "override_outside_default_interval"]
    assert len(warnings) == 1 and "6.5 to 9.4" in warnings["message"].iloc[0]


def test_conflicting_overrides_are_an_error(tmp_path):
    settings = write_inventory(tmp_path, [stratum()], extra_inputs={"overrides": "overrides.csv"})
    row = {"quantity": "ef_co2_c_onsite", "land_use": "cropland", "unit": "t CO2-C ha-1 yr-1", "source": "x"}
    _overrides(tmp_path, [{**row, "value": 7.0}, {**row, "value": 8.0}])
    with pytest.raises(InputError, match="overlap in years"):
        compile_inventory(settings)


def test_review_differs_blocks_until_overridden(tmp_path):
    settings = write_inventory(tmp_path, [stratum()], extra_inputs={"factor_review": "review.csv"})
    pd.DataFrame([{"factor_id": "ws13-t2.1-tem-crop", "checked_by": "Invented reviewer", "checked_on": "2026-01-01",
                   "against": "agency copy, p. x", "result": "differs"}]).to_csv(tmp_path / "review.csv", index=False)
    with pytest.raises(InputError, match="found to differ"):
        compile_inventory(settings)


def test_missing_distinction_names_what_is_missing(tmp_path):
    settings = write_inventory(tmp_path, [stratum(land_use="grassland")])
    with pytest.raises(InputError) as err:
        compile_inventory(settings)
    text = str(err.value)
    assert "distinguishes nutrient_status" in text and "poor | rich" in text


def test_undistinguished_value_is_accepted_and_noted(tmp_path):
    result = compile_inventory(write_inventory(tmp_path, [stratum(nutrient_status="rich")]))
    notes = result.findings[result.findings["check"] == "not_distinguished"]
    assert not notes.empty and "nutrient_status 'rich'" in notes["message"].iloc[0]


def test_settlements_need_an_override(tmp_path):
    settings = write_inventory(tmp_path, [stratum(land_use="settlements")])
    with pytest.raises(InputError, match="no Tier 1 default for this stratum"):
        compile_inventory(settings)


def test_ipcc2006_set_with_its_climate_mapping(tmp_path):
    rows = [stratum(), stratum(climate_zone="boreal"), stratum(land_use="forest_land", nutrient_status="rich")]
    settings = write_inventory(tmp_path, rows, factor_set="ipcc2006",
                               extra_method='ipcc2006_temperate = "warm_temperate"')
    em = compile_inventory(settings).emissions
    onsite = em[em["pathway"] == "co2_onsite"].set_index(["climate_zone", "land_use"])["factor_id"]
    assert onsite[("temperate", "cropland")] == "gl06-t5.6-warm"  # Table 5.6 warm temperate: 10 t C/ha
    assert onsite[("boreal", "cropland")] == "gl06-t5.6-cold"  # boreal read as cold temperate
    assert onsite[("temperate", "forest_land")] == "gl06-t4.6-tem"
    doc = pick(em, pathway="co2_doc")
    assert (doc["notation_key"] == "NE").all()  # no DOC method in the 2006 Guidelines


def test_ipcc2006_requires_the_temperate_choice(tmp_path):
    settings = write_inventory(tmp_path, [stratum()], factor_set="ipcc2006")
    with pytest.raises(InputError, match="ipcc2006_temperate"):
        compile_inventory(settings)


def test_integer_mass_ratios_option(tmp_path):
    # The ratio printed in the IPCC equations, 44/12, when the settings ask for it.
    result = compile_inventory(write_inventory(tmp_path, [stratum(area_ha=12.0)], mass_ratios="integer_masses"))
    r = pick(result.emissions, pathway="co2_onsite").iloc[0]
    assert r["emission_t"] == pytest.approx(12.0 * 7.9 * 44 / 12)
