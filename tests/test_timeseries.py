"""Gap filling of the area series (2006 IPCC Guidelines Vol. 1 Ch. 5) against hand-computed series."""

import pandas as pd
import numpy as np
import pytest

from compiler import compile_inventory
from compiler import timeseries
from compiler.errors import InputError
from compiler.timeseries import extrapolate_trend, interpolate_linear, overlap_splice, surrogate_scale
from conftest import stratum, write_inventory


NAN = float("nan")


def test_linear_interpolation_by_hand():
    # 2006 GL Vol. 1 Section 5.3.3.3, by hand: 100 ha in 2000, 130 ha in 2003: 110 and 120 ha in 2001 and 2002.
    # A second stratum, 10 ha in 2001 and 16 ha in 2003: 13 ha in 2002; nothing before its first known year.
    out = interpolate_linear([2000, 2001, 2002, 2003], [[100, NAN, NAN, 130], [NAN, 10, NAN, 16]])
    assert out[0].tolist() == pytest.approx([100, 110, 120, 130])
    assert np.isnan(out[1, 0]) and out[1, 1:].tolist() == pytest.approx([10, 13, 16])


def test_linear_interpolation_matches_numpy_interp():
    # General-purpose reference library: numpy.interp on each row, to the last bit (the demo outputs rely on it).
    rng = np.random.default_rng(3)
    known = np.round(rng.uniform(1, 1000, size=(50, 12)), 2)
    known[rng.random(known.shape) < 0.4] = NAN
    known[:, 0], known[:, -1] = 5.0, 7.0
    years = np.arange(2000, 2012)
    out = interpolate_linear(years, known)
    for row, values in zip(out, known):
        ok = ~np.isnan(values)
        assert np.array_equal(row, np.interp(years, years[ok], values[ok]))


def test_trend_extrapolation_by_hand():
    # 2006 GL Vol. 1 Section 5.3.3.4, by hand: known 2018-2020: 10, 12, 14 (slope 2/yr): 2021 -> 16, 2022 -> 18;
    # and back: 2017 -> 8. The second stratum (5, 5, 8 in 2018-2020, 3-year line: slope 1.5, mean 6 in 2019)
    # gives 6 + 1.5 x 2 = 9 ha in 2021.
    known = [[NAN, 10, 12, 14, NAN, NAN], [NAN, 5, 5, 8, NAN, NAN]]
    cells = np.array([[True, False, False, False, True, True], [False, False, False, False, True, False]])
    out, first, last = extrapolate_trend(np.arange(2017, 2023), known, cells, n_years=3)
    assert out[0, [0, 4, 5]].tolist() == pytest.approx([8, 16, 18]) and out[1, 4] == pytest.approx(9.0)
    assert np.isnan(out[~cells]).all()
    assert first[0, 4] == 2018 and last[0, 4] == 2020


def test_trend_extrapolation_uses_the_n_points_nearest_the_end():
    # By hand: 1, 2, 3, 10, 20 in 2000-2004; the last 2 points give slope 10: 2005 -> 30; the first 2, slope 1.
    known = [[NAN, 1, 2, 3, 10, 20, NAN]]
    cells = np.array([[True, False, False, False, False, False, True]])
    out, first, last = extrapolate_trend(np.arange(1999, 2006), known, cells, n_years=2)
    assert out[0, [0, 6]].tolist() == pytest.approx([0, 30])
    assert (first[0, 0], last[0, 0], first[0, 6], last[0, 6]) == (2000, 2001, 2003, 2004)


def test_overlap_eq_5_1_worked_case():
    # 2006 GL Vol. 1 Eq. 5.1: y0 = x0 * (sum y_i / sum x_i) over the overlap years.
    # Overlap years: y = 50, 55, 60; surrogate x = 100, 110, 120 (ratio 165/330 = 0.5); x0 = 90 -> y0 = 45.
    values, ratio, overlap = overlap_splice([[NAN, 50, 55, 60], [NAN, NAN, NAN, NAN]], [90, 100, 110, 120])
    assert values[0, 0] == pytest.approx(45) and ratio[0] == pytest.approx(0.5)
    assert overlap[0].tolist() == [False, True, True, True]
    assert np.isnan(ratio[1]) and np.isnan(values[1]).all()  # no overlap year: Eq. 5.1 undefined


def test_surrogate_eq_5_2_worked_case():
    # 2006 GL Vol. 1 Eq. 5.2: y0 = y_t * (s0 / s_t); y_t = 200 ha when the driver s_t = 40; s0 = 30 -> 150 ha.
    values, reference = surrogate_scale([[NAN, 200]], [30, 40])
    assert values[0, 0] == pytest.approx(150) and reference[0, 0] == 1
    # The nearest known year with a positive driver, the later one on a tie (our rule): 2011 lies between 2010
    # (100 ha, s = 50) and 2012 (130 ha, s = 65): 130 * 55 / 65 = 110 ha, by hand; no reference year: NaN.
    values, reference = surrogate_scale([[100, NAN, 130], [NAN, NAN, NAN]], [50, 55, 65])
    assert values[0, 1] == pytest.approx(130 * 55 / 65) and reference[0, 1] == 2
    assert (reference[1] == -1).all() and np.isnan(values[1]).all()


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
    assert {"interpolated", "extrapolated", "overlap", "surrogate"} <= set(demo_result.emissions["activity_source"])
    fills = demo_result.gap_fills
    assert (fills["fill_basis"] != "").all() and set(fills["activity_source"]) == {"interpolated", "extrapolated",
                                                                                    "overlap", "surrogate"}


def test_gap_filling_table_is_written_and_the_trace_names_the_basis(demo_output):
    from compiler.trace import load_outputs, trace_text

    fills = pd.read_csv(demo_output / "gap_filling.csv", keep_default_na=False)
    assert set(fills["activity_source"]) == {"interpolated", "extrapolated", "overlap", "surrogate"}
    emissions, factors = load_outputs(demo_output)
    text, _ = trace_text(emissions, factors, "3.B.2.a", "CO2", 1990, "Skarrowdale")
    assert "overlap (gap filled: Eq. 5.1 overlap with SKD-census-tilled" in text


# --- overlap and surrogate series from [inputs] surrogates --------------------------------------------------

SERIES_HEADER = "series_id,method,year,value,unit,source,region,land_use\n"


def _with_series(tmp_path, areas: dict, series_csv: str, first: int, last: int, fill: str = "none"):
    rows = [stratum(year=y, area_ha=a) for y, a in areas.items()]
    settings = write_inventory(tmp_path, rows, first=first, last=last, extra_inputs={"surrogates": "surrogates.csv"})
    settings.write_text(settings.read_text().replace("[inputs]", f'[timeseries]\nfill = "{fill}"\n[inputs]'))
    (tmp_path / "surrogates.csv").write_text(SERIES_HEADER + series_csv, encoding="utf-8")
    return settings


def _areas(result):
    onsite = result.emissions[result.emissions["pathway"] == "co2_onsite"].set_index("year")
    return onsite["area_ha"], onsite["activity_source"]


def test_overlap_series_reproduces_eq_5_1_in_a_compile(tmp_path):
    # 2006 GL Vol. 1 Eq. 5.1 on a small worked case: the stratum is reported 2013-2015 (50, 55, 60 ha); an older
    # census gives 80, 85, 90 for 2010-2012 and 100, 110, 120 for the overlap years 2013-2015, so the ratio is
    # (50 + 55 + 60) / (100 + 110 + 120) = 0.5 and the filled areas are 40, 42.5 and 45 ha (by hand).
    series = "".join(f"census,overlap,{y},{v},ha in the census,Testvale census tables,Testvale,cropland\n"
                     for y, v in zip(range(2010, 2016), (80, 85, 90, 100, 110, 120)))
    settings = _with_series(tmp_path, {2013: 50.0, 2014: 55.0, 2015: 60.0}, series, 2010, 2015)
    result = compile_inventory(settings)  # fill = "none": the series covers every missing year, so no error
    area, source = _areas(result)
    assert area.loc[[2010, 2011, 2012]].tolist() == pytest.approx([40.0, 42.5, 45.0])
    assert (source.loc[[2010, 2011, 2012]] == "overlap").all() and (source.loc[[2013, 2014, 2015]] == "reported").all()
    basis = result.activity.set_index("year").loc[2010, "fill_basis"]
    assert "Eq. 5.1" in basis and "ratio 0.5 over 3 years 2013-2015" in basis


def test_surrogate_series_reproduces_eq_5_2_in_a_compile(tmp_path):
    # 2006 GL Vol. 1 Eq. 5.2, y0 = y_t * s0 / s_t, from the nearest reported year with a driver value (by hand):
    # 2011 is nearest 2010 (100 ha, s = 50): 100 * 55 / 50 = 110 ha; 2012 is nearest 2013 (130 ha, s = 65):
    # 130 * 60 / 65 = 120 ha.
    series = "".join(f"livestock,surrogate,{y},{v},grazing livestock units,Testvale farm register,,\n"
                     for y, v in ((2010, 50), (2011, 55), (2012, 60), (2013, 65)))
    settings = _with_series(tmp_path, {2010: 100.0, 2013: 130.0}, series, 2010, 2013)
    area, source = _areas(compile_inventory(settings))
    assert area.loc[[2011, 2012]].tolist() == pytest.approx([110.0, 120.0])
    assert (source.loc[[2011, 2012]] == "surrogate").all()


def test_years_a_series_does_not_cover_follow_the_fill_mode(tmp_path):
    series = "livestock,surrogate,2010,50,units,register,,\nlivestock,surrogate,2011,55,units,register,,\n"
    settings = _with_series(tmp_path, {2010: 100.0, 2013: 130.0}, series, 2010, 2013)
    with pytest.raises(InputError) as err:  # fill = "none": 2012 has no driver value, so it is still a gap
        compile_inventory(settings)
    assert "missing years 2012 for stratum" in str(err.value)
    settings = _with_series(tmp_path, {2010: 100.0, 2013: 130.0}, series, 2010, 2013, fill="interpolate")
    area, source = _areas(compile_inventory(settings))
    assert source.loc[2011] == "surrogate" and source.loc[2012] == "interpolated"
    assert area.loc[2012] == pytest.approx(120.0)  # linear between 100 (2010) and 130 (2013), by hand


def test_a_series_does_not_extend_a_stratum_that_ended(tmp_path):
    # The region reports 2013 through another stratum, so cropland last seen in 2012 has ended; a series that
    # matches it fills only gaps, never years outside a stratum's span while its region reports.
    rows = [stratum(year=y, area_ha=10.0) for y in (2010, 2011, 2012)]
    rows += [stratum(year=y, land_use="grassland", nutrient_status="poor", area_ha=5.0) for y in range(2010, 2014)]
    settings = write_inventory(tmp_path, rows, first=2010, last=2013, extra_inputs={"surrogates": "surrogates.csv"})
    (tmp_path / "surrogates.csv").write_text(
        SERIES_HEADER + "".join(f"s,surrogate,{y},{y - 2000},u,src,,cropland\n" for y in range(2010, 2014)))
    result = compile_inventory(settings)
    crop = result.emissions[(result.emissions["pathway"] == "co2_onsite") & (result.emissions["land_use"] == "cropland")]
    assert sorted(crop["year"]) == [2010, 2011, 2012]
    assert any("gives no value in a missing year" in f.message for f in result.finding_list)


@pytest.mark.parametrize("series, message", [
    ("s,splice,2011,5,u,src,,\n", "unknown method"),
    ("s,overlap,2011,5,u,src,,\ns,surrogate,2012,5,u,src,,\n", "method differs between rows of the same series_id"),
    ("s,overlap,2011,5,u,src,,\ns,overlap,2011,6,u,src,,\n", "series_id and year given twice"),
    ("a,overlap,2011,5,u,src,Testvale,\nb,surrogate,2011,5,u,src,,cropland\n", "match the same strata equally"),
    ("s,overlap,2011,5,u,src,,\ns,overlap,2012,5,u,src,,\n", "shares no year with a reported area"),
    ("s,surrogate,2011,5,u,src,,\ns,surrogate,2010,0,u,src,,\n", "has no positive value in a year with a reported"),
    ("s,overlap,2011,-5,u,src,,\n", "value is negative"),
])
def test_bad_series_are_input_errors(tmp_path, series, message):
    settings = _with_series(tmp_path, {2010: 100.0, 2013: 130.0}, series, 2010, 2013, fill="interpolate")
    with pytest.raises(InputError) as err:
        compile_inventory(settings)
    assert message in str(err.value)
    assert "surrogates.csv" in str(err.value)


def test_a_series_matching_no_stratum_is_a_warning(tmp_path):
    settings = _with_series(tmp_path, {2010: 100.0, 2011: 110.0}, "s,overlap,2011,5,u,src,Elsewhere,\n", 2010, 2011)
    result = compile_inventory(settings)
    assert any(f.severity == "warning" and "matches no stratum" in f.message for f in result.finding_list)


def test_fill_mode_by_land_use_with_the_region_first(tmp_path):
    # Cropland interpolates, grassland is left at "none" (its gap is an error) unless its region says otherwise.
    rows = [stratum(year=y, area_ha=a) for y, a in {2000: 100.0, 2003: 130.0}.items()]
    rows += [stratum(year=y, land_use="grassland", nutrient_status="poor", area_ha=a)
             for y, a in {2000: 10.0, 2003: 13.0}.items()]
    settings = write_inventory(tmp_path, rows, first=2000, last=2003)
    base = settings.read_text()
    settings.write_text(base.replace("[inputs]", '[timeseries]\nfill = "none"\n'
                                     'fill_by_land_use = { cropland = "interpolate" }\n[inputs]'))
    with pytest.raises(InputError) as err:
        compile_inventory(settings)
    assert "missing years 2001, 2002 for stratum Testvale, temperate, grassland" in str(err.value)
    assert "cropland" not in str(err.value)
    settings.write_text(base.replace("[inputs]", '[timeseries]\nfill = "none"\nfill_by_region = { Testvale = "both" }\n'
                                     'fill_by_land_use = { cropland = "none" }\n[inputs]'))
    result = compile_inventory(settings)
    onsite = result.emissions[result.emissions["pathway"] == "co2_onsite"]
    assert (onsite.loc[onsite["year"] == 2001, "activity_source"] == "interpolated").all()
    assert len(onsite[onsite["year"] == 2001]) == 2


def test_fill_by_land_use_names_land_uses(tmp_path):
    settings = _series(tmp_path, {2000: 100.0, 2003: 130.0}, "none")
    settings.write_text(settings.read_text().replace('trend_years = 3', 'trend_years = 3\n'
                                                     'fill_by_land_use = { croplands = "both" }'))
    with pytest.raises(Exception) as err:
        compile_inventory(settings)
    assert "timeseries.fill_by_land_use.croplands" in str(err.value) and "unknown land use" in str(err.value)


# --- the published functions are the code the compile runs ----------------------------------------------------


def _region_ends_early(tmp_path):
    rows = [stratum(year=y, area_ha=a) for y, a in {2018: 10.0, 2019: 12.0, 2020: 14.0}.items()]
    rows += [stratum(year=y, region="Other", area_ha=5.0) for y in (2018, 2019, 2020, 2021, 2022)]
    settings = write_inventory(tmp_path, rows, first=2018, last=2022)
    settings.write_text(settings.read_text().replace("[inputs]", '[timeseries]\nfill = "both"\ntrend_years = 3\n[inputs]'))
    return settings


def _overlap_case(tmp_path):
    series = "".join(f"census,overlap,{y},{v},ha,census tables,Testvale,cropland\n"
                     for y, v in zip(range(2010, 2016), (80, 85, 90, 100, 110, 120)))
    return _with_series(tmp_path, {2013: 50.0, 2014: 55.0, 2015: 60.0}, series, 2010, 2015)


def _surrogate_case(tmp_path):
    series = "".join(f"livestock,surrogate,{y},{v},units,register,,\n" for y, v in ((2010, 50), (2011, 55), (2012, 60),
                                                                                   (2013, 65)))
    return _with_series(tmp_path, {2010: 100.0, 2013: 130.0}, series, 2010, 2013)


@pytest.mark.parametrize("name, case, year, expected, changed", [
    # Each published function, replaced by one that adds 1000 ha to what it returns, moves the compiled area of
    # the cell it fills by 1000 ha: the compile runs these functions and no other code for the technique.
    ("interpolate_linear", lambda p: _series(p, {2000: 100.0, 2003: 130.0}, "interpolate"), 2001, 110.0, 1110.0),
    ("extrapolate_trend", _region_ends_early, 2021, 16.0, 1016.0),
    ("overlap_splice", _overlap_case, 2010, 40.0, 1040.0),
    ("surrogate_scale", _surrogate_case, 2011, 110.0, 1110.0),
])
def test_the_compile_runs_the_published_function(tmp_path, monkeypatch, name, case, year, expected, changed):
    settings = case(tmp_path)

    def area():
        result = compile_inventory(settings)
        onsite = result.emissions[(result.emissions["pathway"] == "co2_onsite")
                                  & (result.emissions["region"] == "Testvale")].set_index("year")
        return onsite.loc[year, "area_ha"]

    assert area() == pytest.approx(expected)
    original = getattr(timeseries, name)

    def shifted(*args, **kwargs):
        out = original(*args, **kwargs)
        return out + 1000.0 if isinstance(out, np.ndarray) else (out[0] + 1000.0, *out[1:])

    monkeypatch.setattr(timeseries, name, shifted)
    assert area() == pytest.approx(changed)
