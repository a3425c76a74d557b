"""Scenarios to a horizon: area bookkeeping, Chapter 3 switch, file validation, climate summary.

Checks are identities of the bookkeeping (area conserved, shares reached, the start year reproduces
the inventory), hand calculations from the WS2013 factors in factor_tables/ (named where used), and
the error messages of bad scenario files.
"""

import textwrap

import numpy as np
import pytest

from compiler import compile_inventory
from compiler.errors import InputError
from compiler.scenarios import (added_drainage_area, crossing_year, load_scenarios, rewetted_share,
                                run_scenarios)
from conftest import DEMO, stratum, write_inventory

CH4_PER_C = 16.043 / 12.011  # abridged standard atomic weights (IUPAC 2021), as compiler/units.py


@pytest.fixture(scope="module")
def demo_scenarios(demo_result):
    return run_scenarios(demo_result, load_scenarios(DEMO / "scenarios.toml", demo_result.settings))


def write_scenarios(folder, text: str):
    path = folder / "scenarios.toml"
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


@pytest.fixture
def small(tmp_path):
    """A one-year inventory (2020) of 100 ha deep-drained rich temperate grassland and 40 ha boreal cropland."""
    settings = write_inventory(tmp_path, [
        stratum(land_use="grassland", nutrient_status="rich", drainage_depth="deep", area_ha=100.0),
        stratum(region="Northvale", climate_zone="boreal", land_use="cropland", area_ha=40.0),
    ])
    return compile_inventory(settings), tmp_path


# --- ramps -------------------------------------------------------------------------------


@pytest.mark.parametrize("ramp", ["linear", "front_loaded"])
def test_rewetted_share_reaches_its_target_in_the_target_year(ramp):
    years = np.arange(2020, 2060)
    r = rewetted_share(years, 0.5, 2025, 2040, ramp)
    assert (r[years < 2025] == 0).all()
    assert r[years == 2040][0] == pytest.approx(0.5, abs=1e-15)
    assert (r[years >= 2040] == r[years == 2040][0]).all()
    assert (np.diff(r) >= 0).all()
    assert r[years == 2039][0] < 0.5


def test_linear_ramp_has_equal_tranches_and_front_loaded_leads():
    years = np.arange(2025, 2041)
    linear = rewetted_share(years, 1.0, 2025, 2040, "linear")
    assert np.diff(np.concatenate([[0.0], linear])) == pytest.approx(np.full(16, 1 / 16))
    front = rewetted_share(years, 1.0, 2025, 2040, "front_loaded")
    assert (front[:-1] > linear[:-1]).all()


def test_added_drainage_area_is_rate_times_years():
    area = added_drainage_area(np.arange(2024, 2031), 40.0, 2025, 2028)
    assert area.tolist() == [0.0, 40.0, 80.0, 120.0, 160.0, 160.0, 160.0]


def test_crossing_year_is_when_the_difference_stays_below_zero():
    years = np.arange(2024, 2030)
    assert crossing_year(years, [0, 1, 2, -1, -2, -3]) == 2027
    assert crossing_year(years, [0, -1, 1, -1, -2, -3]) == 2027  # a dip that does not last is no crossing
    assert crossing_year(years, [0, 1, 2, 3, 2, 1]) is None
    assert crossing_year(years, [0, -1, -1, -1, -1, -1]) == 2025


# --- the demo --------------------------------------------------------------------------------


def test_demo_scenarios_run_end_to_end(demo_scenarios):
    res = demo_scenarios
    assert [s.name for s in res.scenarios] == ["baseline", "more_drainage", "half_rewetted", "all_rewetted",
                                               "all_rewetted_later"]
    assert (res.start_year, res.horizon) == (2024, 2100)
    assert len(res.climate) == 5 * 77
    for col in ("co2eq_t", "co2we_t", "forcing_w_m2", "temperature_k", "temperature_mk_per_kha",
                "co2eq_t_vs_baseline", "temperature_k_vs_baseline", "cumulative_co2eq_t",
                "cumulative_co2eq_t_vs_baseline"):
        assert res.climate[col].notna().all(), col
    base = res.climate[res.climate["scenario"] == "baseline"]
    assert (base["temperature_k_vs_baseline"] == 0).all()
    summary = res.summary.set_index("scenario")
    assert summary.loc["all_rewetted_later", "delay_years"] == 10
    assert summary.loc["all_rewetted_later", "extra_warming_mk_2100"] > 0
    assert summary.loc["more_drainage", "cumulative_co2eq_t_vs_baseline"] > 0
    for name in ("half_rewetted", "all_rewetted", "all_rewetted_later"):
        assert summary.loc[name, "cumulative_co2eq_t_vs_baseline"] < 0
        assert summary.loc[name, "crossing"] != ""
    assert summary.loc["baseline", "crossing"] == ""


def test_start_year_reproduces_the_inventory(demo_result, demo_scenarios):
    # Identity: in the last inventory year every scenario is the inventory (fires excluded, and the off-site CO2 of
    # the demo's extracted peat, which scenarios do not project: they move areas, not peat production).
    inv = demo_result.emissions
    inv = inv[(inv["year"] == 2024) & (inv["notation_key"] == "") & ~inv["pathway"].str.startswith("fire_")
              & (inv["pathway"] != "co2_offsite")]
    expected = inv.groupby("gas")["emission_t"].sum()
    em = demo_scenarios.emissions
    for name in ("baseline", "half_rewetted", "more_drainage"):
        got = em[(em["scenario"] == name) & (em["year"] == 2024)].groupby("gas")["emission_t"].sum()
        assert got.to_dict() == pytest.approx(expected.to_dict(), rel=1e-12)


def test_baseline_areas_are_constant(demo_result, demo_scenarios):
    keys = ["region", "climate_zone", "land_use", "soil_status", "nutrient_status", "drainage_depth", "subtype",
            "remaining_or_converted", "previous_land_use"]
    areas = demo_scenarios.areas
    base = areas[areas["scenario"] == "baseline"]
    assert set(base["origin"]) == {"inventory"}
    per_stratum = base.pivot_table(index=keys, columns="year", values="area_ha", aggfunc="sum")
    start = demo_result.activity[demo_result.activity["year"] == 2024].set_index(keys)["area_ha"]
    assert start.index.is_unique and per_stratum.index.size == start.size
    for year in per_stratum.columns:
        assert per_stratum[year].to_numpy() == pytest.approx(start.reindex(per_stratum.index).to_numpy())


def test_area_is_conserved_every_year(demo_result, demo_scenarios):
    # Identity: drained + rewetted = start area + added drainage, in every scenario and year.
    areas = demo_scenarios.areas
    start = demo_result.activity.loc[demo_result.activity["year"] == 2024, "area_ha"].sum()
    total = areas.groupby(["scenario", "year"])["area_ha"].sum()
    added = areas[areas["origin"] == "added_drainage"].groupby(["scenario", "year"])["area_ha"].sum()
    added = added.reindex(total.index, fill_value=0.0)
    assert (total - added).to_numpy() == pytest.approx(np.full(len(total), start), rel=1e-12)
    assert (areas["area_ha"] >= -1e-9).all()


def test_half_rewetted_reaches_half_of_the_drained_target_area_in_2040(demo_result, demo_scenarios):
    act = demo_result.activity
    target = act[(act["year"] == 2024) & (act["soil_status"] == "drained")
                 & act["land_use"].isin(["grassland", "cropland"])
                 & act["climate_zone"].isin(["temperate", "boreal"])]["area_ha"].sum()
    areas = demo_scenarios.areas
    rewet = areas[(areas["scenario"] == "half_rewetted") & (areas["origin"] == "rewetted")]
    by_year = rewet.groupby("year")["area_ha"].sum()
    assert by_year[2040] == pytest.approx(0.5 * target, rel=1e-12)
    assert by_year[2100] == pytest.approx(0.5 * target, rel=1e-12)
    assert by_year[2032] == pytest.approx(0.5 * target * 8 / 16, rel=1e-12)  # linear: 8 of 16 tranches
    assert 2024 not in by_year.index[by_year > 0]
    cohorts = demo_scenarios.cohorts
    half = cohorts[cohorts["scenario"] == "half_rewetted"]
    assert half["area_ha"].sum() == pytest.approx(0.5 * target, rel=1e-12)
    assert sorted(half["cohort_year"].unique()) == list(range(2025, 2041))


def test_rewetted_strata_have_no_n2o_estimate(demo_scenarios):
    # WS2013 Chapter 3 (pathway_coverage.csv): N2O of rewetted organic soils is NA at Tier 1.
    d = demo_scenarios.detail
    rewetted_n2o = d[(d["soil_status"] == "rewetted") & (d["gas"] == "N2O")]
    assert not rewetted_n2o.empty
    assert (rewetted_n2o["notation_key"] == "NA").all()
    assert rewetted_n2o["emission_t"].isna().all()
    em = demo_scenarios.emissions
    assert em[(em["soil_status"] == "rewetted") & (em["gas"] == "N2O")].empty


def test_rewetted_strata_use_chapter_3_factors(demo_scenarios):
    d = demo_scenarios.detail
    rows = d[(d["origin"] == "rewetted") & (d["pathway"] == "ch4_soil") & (d["region"] == "Vennmarsh")
             & (d["land_use"] == "cropland")]
    # WS2013 Table 3.3 temperate nutrient-rich (from memory, factor_tables/rewetted_ipcc2013ws.csv); the demo
    # assumes drained cropland rich when rewetted.
    assert set(rows["factor_id"]) == {"ws13-t3.3-tem-rich"}
    assert (rows["drainage_depth"] == "").all() and (rows["subtype"] == "").all()


def test_postponed_rewetting_is_the_same_pathway_ten_years_later(demo_scenarios):
    areas = demo_scenarios.areas
    rewet = areas[areas["origin"] == "rewetted"].groupby(["scenario", "year"])["area_ha"].sum()
    early, late = rewet["all_rewetted"], rewet["all_rewetted_later"]
    for year in range(2035, 2101):
        assert late.get(year, 0.0) == pytest.approx(early.get(year - 10, 0.0), rel=1e-12)


def test_overrides_in_force_in_the_last_year_are_carried_forward(demo_scenarios):
    d = demo_scenarios.detail
    quill = d[(d["region"] == "Quillfen") & (d["pathway"] == "co2_onsite") & (d["soil_status"] == "drained")
              & (d["land_use"] == "grassland") & (d["scenario"] == "baseline")]
    assert set(quill["factor_id"]) == {"quillfen-grass-co2"}
    assert quill["year"].max() == 2100


def test_overrides_as_given_stop_at_their_last_year(demo_copy):
    text = (demo_copy.parent / "scenarios.toml").read_text(encoding="utf-8")
    text = text.replace('overrides_after_last_year = "carry_forward"', 'overrides_after_last_year = "as_given"')
    (demo_copy.parent / "scenarios.toml").write_text(text, encoding="utf-8")
    result = compile_inventory(demo_copy)
    res = run_scenarios(result, load_scenarios(demo_copy.parent / "scenarios.toml", result.settings), horizon=2030)
    d = res.detail
    quill = d[(d["region"] == "Quillfen") & (d["pathway"] == "co2_onsite") & (d["soil_status"] == "drained")
              & (d["land_use"] == "grassland") & (d["scenario"] == "baseline")]
    assert set(quill.loc[quill["year"] == 2024, "factor_id"]) == {"quillfen-grass-co2"}
    assert set(quill.loc[quill["year"] > 2024, "factor_id"]) == {"ws13-t2.1-tem-grass-rich-deep"}


def test_temperature_per_kha_is_temperature_over_area(demo_scenarios):
    c = demo_scenarios.climate
    assert c["temperature_mk_per_kha"].to_numpy() == pytest.approx(
        (c["temperature_k"] * 1e3 / (c["area_ha"] / 1e3)).to_numpy(), rel=1e-12)


def test_warming_equivalent_uses_gwp_star_for_methane_only(demo_result, demo_scenarios):
    # Smith et al. (2021): CH4 by E* = GWP100 (4.53 E_t - 4.25 E_t-20); CO2 and N2O by GWP100.
    c = demo_scenarios.climate
    inv = demo_result.emissions
    ch4 = inv[(inv["gas"] == "CH4") & (inv["notation_key"] == "") & ~inv["pathway"].str.startswith("fire_")]
    ch4_2005 = ch4[ch4["year"] == 2005]["emission_t"].sum()
    row = c[(c["scenario"] == "baseline") & (c["year"] == 2025)].iloc[0]
    gwp = demo_result.gwp
    expected = row["co2_t"] + gwp["N2O"] * row["n2o_t"] + gwp["CH4"] * (4.53 * row["ch4_t"] - 4.25 * ch4_2005)
    assert row["co2we_t"] == pytest.approx(expected, rel=1e-12)


# --- small inventories: hand calculations ----------------------------------------------------


def test_initial_methane_replacement_by_cohort(small):
    result, folder = small
    path = write_scenarios(folder, """\
        [[scenario]]
        name = "baseline"
        [[scenario]]
        name = "rewet"
        [[scenario.measure]]
        kind = "rewet"
        land_use = "grassland"
        share = 1.0
        start_year = 2021
        target_year = 2030
        [scenario.measure.initial_ch4]
        mode = "replace"
        value = 300.0
        unit = "kg CH4 ha-1 yr-1"
        years = 3
        citation = "invented for the test"
        """)
    res = run_scenarios(result, load_scenarios(path, result.settings), horizon=2040)
    d = res.detail
    ch4 = d[(d["scenario"] == "rewet") & (d["year"] == 2025) & (d["pathway"] == "ch4_soil")
            & (d["soil_status"] == "rewetted")]
    # Linear ramp 2021-2030: R(2025) = 0.5, R(2022) = 0.2, so 100 x (0.5 - 0.2) = 30 ha rewetted in
    # 2023-2025 (younger than 3 years) and 20 ha older.
    young, old = ch4[ch4["initial_ch4"]], ch4[~ch4["initial_ch4"]]
    assert young["area_ha"].sum() == pytest.approx(30.0)
    assert old["area_ha"].sum() == pytest.approx(20.0)
    assert young["emission_t"].sum() == pytest.approx(30.0 * 0.300)
    # WS2013 Table 3.3 temperate nutrient-rich: 216 kg CH4-C ha-1 yr-1 (from memory, rewetted_ipcc2013ws.csv).
    assert old["emission_t"].sum() == pytest.approx(20.0 * 0.216 * CH4_PER_C, rel=1e-4)
    assert young["adjustment"].str.contains("invented for the test").all()
    late = d[(d["scenario"] == "rewet") & (d["year"] == 2035) & (d["pathway"] == "ch4_soil")]
    assert not late["initial_ch4"].any() or late.loc[late["initial_ch4"], "area_ha"].sum() == pytest.approx(0.0)


def test_initial_methane_multiplier(small):
    result, folder = small
    path = write_scenarios(folder, """\
        [[scenario]]
        name = "baseline"
        [[scenario]]
        name = "rewet"
        [[scenario.measure]]
        kind = "rewet"
        land_use = "grassland"
        share = 1.0
        start_year = 2021
        target_year = 2021
        [scenario.measure.initial_ch4]
        mode = "multiply"
        value = 2.0
        years = 5
        citation = "invented for the test"
        """)
    res = run_scenarios(result, load_scenarios(path, result.settings), horizon=2030)
    d = res.detail
    ch4 = d[(d["scenario"] == "rewet") & (d["pathway"] == "ch4_soil") & (d["soil_status"] == "rewetted")]
    by_year = ch4.groupby("year")["emission_t"].sum()
    assert by_year[2025] == pytest.approx(2.0 * by_year[2026], rel=1e-12)  # years 2021-2025 doubled
    assert by_year[2026] == pytest.approx(100.0 * 0.216 * CH4_PER_C, rel=1e-4)


def test_more_drainage_adds_drained_area_that_emits(small):
    result, folder = small
    path = write_scenarios(folder, """\
        [[scenario]]
        name = "baseline"
        [[scenario]]
        name = "drain"
        [[scenario.measure]]
        kind = "more_drainage"
        region = "Testvale"
        climate_zone = "temperate"
        land_use = "cropland"
        area_ha_per_year = 10
        start_year = 2021
        end_year = 2025
        """)
    res = run_scenarios(result, load_scenarios(path, result.settings), horizon=2030)
    em = res.emissions
    onsite = em[(em["pathway"] == "co2_onsite")].groupby(["scenario", "year"])["emission_t"].sum()
    # WS2013 Table 2.1 temperate cropland 7.9 t CO2-C ha-1 yr-1 (from memory): 50 ha added by 2025.
    extra = onsite["drain"][2030] - onsite["baseline"][2030]
    assert extra == pytest.approx(50 * 7.9 * 44.009 / 12.011, rel=1e-9)
    assert onsite["drain"][2020] == onsite["baseline"][2020]


def test_rewetting_a_blank_nutrient_status_needs_an_assumption(small):
    result, folder = small
    path = write_scenarios(folder, """\
        [[scenario]]
        name = "baseline"
        [[scenario]]
        name = "rewet"
        [[scenario.measure]]
        kind = "rewet"
        land_use = "cropland"
        share = 1.0
        target_year = 2030
        """)
    with pytest.raises(InputError) as err:
        run_scenarios(result, load_scenarios(path, result.settings))
    text = str(err.value)
    assert str(path) in text
    assert "scenario.rewet.measure[1].assume_nutrient_status" in text
    assert "Northvale boreal cropland" in text


# --- bad scenario files ----------------------------------------------------------------------------


@pytest.mark.parametrize("body, key, words", [
    ("""\
     [[scenario]]
     name = "baseline"
     [[scenario]]
     name = "r"
     [[scenario.measure]]
     kind = "rewet"
     shre = 0.5
     target_year = 2030
     """, "scenario.r.measure[1].shre", ["unknown key", "did you mean share?"]),
    ("""\
     [[scenario]]
     name = "baseline"
     [[scenario]]
     name = "r"
     [[scenario.measure]]
     kind = "rewet"
     share = 1.5
     target_year = 2030
     """, "scenario.r.measure[1].share", ["share out of range", "1.5"]),
    ("""\
     [[scenario]]
     name = "baseline"
     [[scenario]]
     name = "r"
     [[scenario.measure]]
     kind = "rewet"
     land_use = "grasland"
     share = 0.5
     target_year = 2030
     """, "scenario.r.measure[1].land_use", ["unknown land_use", "did you mean grassland?"]),
    ("""\
     [[scenario]]
     name = "baseline"
     [[scenario]]
     name = "r"
     [[scenario.measure]]
     kind = "rewett"
     """, "scenario.r.measure[1].kind", ["value not accepted", "did you mean rewet?"]),
    ("""\
     [[scenario]]
     name = "baseline"
     [[scenario]]
     name = "r"
     [[scenario.measure]]
     kind = "rewet"
     share = "half"
     target_year = 2030
     """, "scenario.r.measure[1].share", ["wrong type", "'half'", "int or float"]),
    ("""\
     [[scenario]]
     name = "baseline"
     [[scenario]]
     name = "r"
     [[scenario.measure]]
     kind = "rewet"
     share = 0.5
     start_year = 2019
     target_year = 2030
     """, "scenario.r.measure[1].start_year", ["start_year out of range", "2021"]),
    ("""\
     baseline = "base"
     [[scenario]]
     name = "baseline"
     """, "baseline", ["baseline scenario not found", "did you mean baseline?"]),
    ("""\
     horizon = 2100
     [[scenarios]]
     name = "baseline"
     """, "scenarios", ["unknown key", "did you mean scenario?"]),
    ("""\
     [[scenario]]
     name = "baseline"
     [[scenario]]
     name = "a"
     [[scenario.measure]]
     kind = "rewet"
     share = 0.5
     start_year = 2025
     target_year = 2030
     [[scenario]]
     name = "b"
     postpones = "a"
     [[scenario.measure]]
     kind = "rewet"
     share = 0.6
     start_year = 2030
     target_year = 2035
     """, "scenario.b.postpones", ["differs from 'a' by more than the timing"]),
    ("""\
     [[scenario]]
     name = "baseline"
     [[scenario.measure]]
     kind = "rewet"
     share = 0.5
     target_year = 2030
     [scenario.measure.initial_ch4]
     mode = "replace"
     value = 300
     unit = "kg N2O-N ha-1 yr-1"
     years = 5
     citation = "x"
     """, "scenario.baseline.measure[1].initial_ch4.unit", ["unit is not a CH4 flux"]),
])
def test_bad_scenario_file_names_file_and_key(small, body, key, words):
    result, folder = small
    path = write_scenarios(folder, body)
    with pytest.raises(InputError) as err:
        load_scenarios(path, result.settings)
    text = str(err.value)
    assert str(path) in text
    assert key in text
    for word in words:
        assert word in text


def test_not_valid_toml_is_an_input_error(small):
    result, folder = small
    path = write_scenarios(folder, "[[scenario]\nname = 1\n")
    with pytest.raises(InputError, match="not valid TOML"):
        load_scenarios(path, result.settings)


def test_missing_scenario_setting_is_an_input_error(small):
    result, _ = small
    with pytest.raises(InputError, match="inputs.scenarios"):
        load_scenarios(None, result.settings)


def test_unknown_region_is_reported_with_the_closest_match(small):
    result, folder = small
    path = write_scenarios(folder, """\
        [[scenario]]
        name = "baseline"
        [[scenario]]
        name = "r"
        [[scenario.measure]]
        kind = "rewet"
        region = "Testvail"
        share = 0.5
        target_year = 2030
        """)
    with pytest.raises(InputError) as err:
        run_scenarios(result, load_scenarios(path, result.settings))
    text = str(err.value)
    assert str(path) in text and "scenario.r.measure[1].region" in text and "did you mean Testvale?" in text


def test_shares_above_the_drained_area_are_an_error(small):
    result, folder = small
    path = write_scenarios(folder, """\
        [[scenario]]
        name = "baseline"
        [[scenario]]
        name = "r"
        [[scenario.measure]]
        kind = "rewet"
        land_use = "grassland"
        share = 0.7
        target_year = 2030
        [[scenario.measure]]
        kind = "rewet"
        climate_zone = "temperate"
        share = 0.5
        target_year = 2030
        """)
    with pytest.raises(InputError) as err:
        run_scenarios(result, load_scenarios(path, result.settings))
    assert "together rewet more than the drained area" in str(err.value)
    assert "scenario.r.measure" in str(err.value)


def test_filters_that_match_nothing_are_an_error(small):
    result, folder = small
    path = write_scenarios(folder, """\
        [[scenario]]
        name = "baseline"
        [[scenario]]
        name = "r"
        [[scenario.measure]]
        kind = "rewet"
        land_use = "forest_land"
        share = 0.5
        target_year = 2030
        """)
    with pytest.raises(InputError, match="match no drained area in 2020"):
        run_scenarios(result, load_scenarios(path, result.settings))


def test_engine_factor_gaps_point_at_the_scenario(small):
    # WS2013 Table 2.1 (factor_tables/drained_ipcc2013ws.csv) has no Tier 1 row for drained temperate
    # settlements: the engine's error must name the scenario and measure, not synthetic rows.
    result, folder = small
    path = write_scenarios(folder, """\
        [[scenario]]
        name = "baseline"
        [[scenario]]
        name = "d"
        [[scenario.measure]]
        kind = "more_drainage"
        region = "Testvale"
        climate_zone = "temperate"
        land_use = "settlements"
        area_ha_per_year = 1
        """)
    with pytest.raises(InputError) as err:
        run_scenarios(result, load_scenarios(path, result.settings), horizon=2025)
    text = str(err.value)
    assert str(path) in text
    assert "scenario 'd'" in text and "scenario.d.measure[1]" in text
    assert "no ef_co2_c_onsite factor" in text
    assert "(rows " not in text


def test_mixed_scenario_front_loaded_rewetting_and_drainage_by_region(small):
    result, folder = small
    path = write_scenarios(folder, """\
        [[scenario]]
        name = "baseline"
        [[scenario]]
        name = "mixed"
        [[scenario.measure]]
        kind = "rewet"
        region = "Testvale"
        share = 0.6
        start_year = 2021
        target_year = 2030
        ramp = "front_loaded"
        [[scenario.measure]]
        kind = "more_drainage"
        region = "Northvale"
        climate_zone = "boreal"
        land_use = "cropland"
        area_ha_per_year = 2
        end_year = 2024
        """)
    res = run_scenarios(result, load_scenarios(path, result.settings), horizon=2040)
    areas = res.areas[res.areas["scenario"] == "mixed"]
    rewet = areas[areas["origin"] == "rewetted"].groupby("year")["area_ha"].sum()
    # front_loaded: R = share (1 - (1 - x)^2), x = (year - 2021 + 1) / 10.
    assert rewet[2025] == pytest.approx(100 * 0.6 * (1 - (1 - 0.5) ** 2), rel=1e-12)
    assert rewet[2030] == pytest.approx(60.0, rel=1e-12)
    assert set(areas.loc[areas["origin"] == "rewetted", "region"]) == {"Testvale"}
    added = areas[areas["origin"] == "added_drainage"].groupby("year")["area_ha"].sum()
    assert added[2024] == added[2040] == pytest.approx(8.0)
    assert set(areas.loc[areas["origin"] == "added_drainage", "region"]) == {"Northvale"}
    assert res.summary.set_index("scenario").loc["mixed", "kind"] == "more_drainage+rewet"
