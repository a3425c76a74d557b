"""[method] allocation: the 2006 IPCC category codes and the transparency framework's reporting tables."""

import pandas as pd
import pytest

from compiler import compile_inventory
from compiler.allocation_schemes import with_allocation
from compiler.errors import SettingsError
from compiler.factors import load_library
from conftest import stratum, write_inventory

ROWS = [stratum(land_use="forest_land", climate_zone="boreal", nutrient_status="rich", area_ha=1000.0),
        stratum(land_use="cropland", climate_zone="tropical", area_ha=500.0)]


def _compile(tmp_path, scheme):
    folder = tmp_path / scheme
    folder.mkdir()
    pd.DataFrame([{"year": 2020, "region": "Testvale", "climate_zone": "tropical", "land_use": "cropland",
                   "soil_status": "drained", "fire_type": "wildfire", "burned_ha": 10.0}]).to_csv(
        folder / "fires.csv", index=False)
    settings = write_inventory(folder, ROWS, extra_inputs={"fires": "fires.csv"},
                               extra_method=f'allocation = "{scheme}"')
    return compile_inventory(settings, analyses=False)


def _where(result, land_use, pathway):
    em = result.emissions
    rows = em[(em["land_use"] == land_use) & (em["pathway"] == pathway) & (em["notation_key"] == "")]
    return set(rows["category_code"])


def test_ipcc2006_codes(tmp_path):
    r = _compile(tmp_path, "ipcc2006")
    # Source: 2006 IPCC Guidelines Vol. 1 Ch. 8 (category codes, Table 8.2) and Vol. 4 Ch. 11 Eq. 11.1
    # (N2O of drained organic soils of cropland and grassland, F_OS, under 3.C.4), from memory; forest N2O
    # stays with the land category 3.B.1 as the project's mapping (reporting_allocation.csv) has it.
    assert _where(r, "forest_land", "n2o_soil") == {"3.B.1.a"}
    assert _where(r, "cropland", "n2o_soil") == {"3.C.4"}
    assert _where(r, "cropland", "fire_ch4") == {"3.C.1.b"}  # 3.C.1 biomass burning (Vol. 1 Ch. 8)
    assert _where(r, "cropland", "co2_doc") == {"3.B.2.a"}
    assert _where(r, "cropland", "co2_onsite") == {"3.B.2.a"}


def test_transparency_framework_tables(tmp_path):
    r = _compile(tmp_path, "etf")
    # Source: decision 5/CMA.3 Annex I, common reporting tables (from memory; reporting_allocation_etf.csv):
    # Table 4(II) drainage and rewetting of organic soils takes CH4, N2O and off-site CO2 of forest land;
    # N2O of cropland goes to Table 3.D (3.D.1.f cultivation of organic soils); fires to Table 4(V).
    assert _where(r, "forest_land", "n2o_soil") == {"4(II).A"}
    assert _where(r, "forest_land", "ch4_soil") == {"4(II).A"}
    assert _where(r, "cropland", "n2o_soil") == {"3.D.1.f"}
    assert _where(r, "cropland", "fire_ch4") == {"4(V).B"}
    assert _where(r, "cropland", "fire_co2") == {"4(V).B"}
    assert _where(r, "cropland", "co2_doc") == {"4(II).B"}
    assert _where(r, "cropland", "co2_onsite") == {"4.B.1"}
    assert set(r.emissions["land_category_code"]) == {"4.A.1", "4.B.1"}


def test_schemes_move_cells_not_tonnes(tmp_path):
    a, b = _compile(tmp_path, "ipcc2006"), _compile(tmp_path, "etf")
    assert a.totals.sum().to_dict() == pytest.approx(b.totals.sum().to_dict(), rel=1e-12)
    for r in (a, b):
        cats = r.categories
        by_gas = cats[cats["notation_key"] == ""].groupby("gas")["emission_t"].sum()
        assert by_gas.to_dict() == pytest.approx(r.totals.sum().to_dict(), rel=1e-12)


def test_every_stratum_of_the_vocabulary_gets_a_transparency_framework_category():
    library = with_allocation(load_library(), "etf")
    assert set(library.allocation["category_code"]) <= set(library.categories["category_code"])
    assert (library.allocation["verification"] == "from_memory").all()
    assert set(library.allocation["source_id"]) <= set(library.sources["source_id"])


def test_unknown_scheme_is_a_settings_error(tmp_path):
    with pytest.raises(SettingsError):
        compile_inventory(write_inventory(tmp_path, ROWS, extra_method='allocation = "crf"'))
