"""Rules of thumb of the trade (common practice, no source), run through the whole compile."""

import pytest

from compiler import compile_inventory
from conftest import stratum, write_inventory


def per_ha_co2eq(tmp_path, gwp="AR6", **kw):
    settings = write_inventory(tmp_path, [stratum(area_ha=1000.0, **kw)], gwp=gwp)
    result = compile_inventory(settings)
    est = result.emissions[result.emissions["notation_key"] == ""]
    return est["co2eq_t"].sum() / 1000.0, result


def test_temperate_drained_cropland_about_40_t_co2eq_per_ha(tmp_path):
    # Common practice, no source: a temperate drained cropland on organic soil emits about
    # 40 t CO2-eq per ha and year (AR6 GWPs); within 25 %. We get about 37.
    value, _ = per_ha_co2eq(tmp_path, land_use="cropland")
    assert value == pytest.approx(40, rel=0.25)


def test_temperate_drained_grassland_about_30_t_co2eq_per_ha(tmp_path):
    # Common practice, no source: a drained grassland about 30 t CO2-eq per ha and year (AR6);
    # within 25 %. Taken for nutrient-rich deep-drained temperate grassland.
    value, _ = per_ha_co2eq(tmp_path, land_use="grassland", nutrient_status="rich", drainage_depth="deep")
    assert value == pytest.approx(30, rel=0.25)


def test_temperate_rewetted_site_about_250_kg_ch4_per_ha(tmp_path):
    # Common practice, no source: a temperate rewetted site emits about 250 kg CH4 per ha and year;
    # within 30 %. Nutrient-rich (216 kg CH4-C -> 288 kg CH4).
    _, result = per_ha_co2eq(tmp_path, land_use="grassland", soil_status="rewetted", nutrient_status="rich")
    ch4 = result.emissions[(result.emissions["gas"] == "CH4") & (result.emissions["notation_key"] == "")]
    assert ch4["emission_t"].sum() * 1000 / 1000.0 == pytest.approx(250, rel=0.30)


def test_rewetting_stops_n2o(tmp_path):
    # Common practice, no source (and WS2013 Chapter 3, Tier 1): no N2O from rewetted organic soils.
    _, result = per_ha_co2eq(tmp_path, land_use="grassland", soil_status="rewetted", nutrient_status="rich")
    n2o = result.emissions[result.emissions["gas"] == "N2O"]
    assert (n2o["notation_key"] == "NA").all() and n2o["emission_t"].isna().all()
