"""Gap filling of the area series (2006 IPCC Guidelines Vol. 1 Ch. 5) against hand-computed series."""

import numpy as np
import pandas as pd
import pytest

from compiler import compile_inventory
from compiler.errors import InputError
from compiler.timeseries import extrapolate_trend, interpolate_linear, overlap_splice, surrogate_scale
from conftest import stratum, write_inventory


def test_linear_interpolation_by_hand():
    # 100 ha in 2000, 130 ha in 2003: 110 and 120 ha in 2001 and 2002.
    assert interpolate_linear([2000, 2003], [100, 130], [2001, 2002]).tolist() == pytest.approx([110, 120])


def test_trend_extrapolation_by_hand():
    # Known 2018-2020: 10, 12, 14 (slope 2/yr): 2021 -> 16, 2022 -> 18; and back: 2017 -> 8.
    out = extrapolate_trend([2018, 2019, 2020], [10, 12, 14], [2017, 2021, 2022], n_years=3)
    assert out.tolist() == pytest.approx([8, 16, 18])


def test_overlap_eq_5_1_worked_case():
    # 2006 GL Vol. 1 Eq. 5.1: y0 = x0 * (sum y_i / sum x_i) over the overlap years.
    # Overlap years: y = 50, 55, 60; surrogate x = 100, 110, 120 (ratio 165/330 = 0.5); x0 = 90 -> y0 = 45.
    assert overlap_splice([50, 55, 60], [100, 110, 120], [90]).tolist() == pytest.approx([45])


def test_surrogate_eq_5_2_worked_case():
    # 2006 GL Vol. 1 Eq. 5.2: y0 = y_t * (s0 / s_t); y_t = 200 ha when the driver s_t = 40; s0 = 30 -> 150 ha.
    assert surrogate_scale(200, 40, [30]).tolist() == pytest.approx([150])


def _series(tmp_path, areas: dict, fill: str, **kw):
    rows = [stratum(year=y, area_ha=a, **kw) for y, a in areas.items()]
    settings = write_inventory(tmp_path, rows, first=min(areas), last=max(areas) + kw.pop("extra_years", 0))
    text = settings.read_text().replace("[inputs]", f'[timeseries]\nfill = "{fill}"\ntrend_years = 3\n[inputs]')
    settings.write_text(text)
    return settings


def test_internal_gap_interpolated_and_flagged(tmp_path):
    settings = _series(tmp_path, {2000: 100.0, 2003: 130.0}, "interpolate")
    result = compile_inventory(settings)
    onsite = result.emissions[result.emissions["pathway"] == "co2_onsite"].set_index("year")
    assert onsite.loc[2001, "area_ha"] == pytest.approx(110) and onsite.loc[2002, "area_ha"] == pytest.approx(120)
    assert onsite.loc[2001, "activity_source"] == "interpolated" and onsite.loc[2000, "activity_source"] == "reported"


def test_gap_with_fill_none_is_an_error_naming_strata_and_years(tmp_path):
    settings = _series(tmp_path, {2000: 100.0, 2003: 130.0}, "none")
    with pytest.raises(InputError) as err:
        compile_inventory(settings)
    assert "missing years 2001, 2002 for stratum Testvale, temperate, cropland, drained" in str(err.value)


def test_region_without_latest_year_is_extrapolated(tmp_path):
    rows = [stratum(year=y, area_ha=a) for y, a in {2018: 10.0, 2019: 12.0, 2020: 14.0}.items()]
    rows += [stratum(year=y, region="Other", area_ha=5.0) for y in (2018, 2019, 2020, 2021, 2022)]
    settings = write_inventory(tmp_path, rows, first=2018, last=2022)
    settings.write_text(settings.read_text().replace("[inputs]", '[timeseries]\nfill = "extrapolate"\ntrend_years = 3\n[inputs]'))
    result = compile_inventory(settings)
    onsite = result.emissions[(result.emissions["pathway"] == "co2_onsite") & (result.emissions["region"] == "Testvale")]
    areas = onsite.set_index("year")["area_ha"]
    assert areas[2021] == pytest.approx(16) and areas[2022] == pytest.approx(18)
    assert (onsite.set_index("year").loc[[2021, 2022], "activity_source"] == "extrapolated").all()


def test_a_stratum_that_ends_is_not_extrapolated(tmp_path):
    # The region reports 2022, so a stratum last seen in 2020 has ended (e.g. converted land turned remaining).
    rows = [stratum(year=y, area_ha=10.0) for y in (2018, 2019, 2020)]
    rows += [stratum(year=y, land_use="grassland", nutrient_status="poor", area_ha=5.0) for y in range(2018, 2023)]
    settings = write_inventory(tmp_path, rows, first=2018, last=2022)
    settings.write_text(settings.read_text().replace("[inputs]", '[timeseries]\nfill = "both"\n[inputs]'))
    result = compile_inventory(settings)
    crop = result.emissions[(result.emissions["pathway"] == "co2_onsite") & (result.emissions["land_use"] == "cropland")]
    assert sorted(crop["year"]) == [2018, 2019, 2020]


def test_demo_exercises_gap_filling(demo_result):
    assert {"interpolated", "extrapolated"} <= set(demo_result.emissions["activity_source"])
