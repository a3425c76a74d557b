"""Recalculations attribute every difference to its cause; the trace ends with the reported figure."""

import numpy as np
import pandas as pd
import pytest

from compiler import compile_inventory
from compiler.recalculations import compare
from compiler.trace import trace_text


def _export(result):
    return result.emissions[result.emissions["notation_key"] == ""]


def test_compare_attributes_each_cause_and_the_parts_add_up(demo_copy):
    folder = demo_copy.parent
    base_text = demo_copy.read_text().replace('previous_submission = "previous/emissions.csv.gz"', "")
    demo_copy.write_text(base_text)
    previous = compile_inventory(demo_copy, analyses=False)
    # Current: the regional override removed (factor change), one stratum's area changed (activity change),
    # GWP set changed (factor change for CH4 and N2O).
    activity = pd.read_csv(folder / "activity.csv", dtype=str, keep_default_na=False)
    rows = (activity["region"] == "Skarrowdale") & (activity["land_use"] == "cropland")
    activity.loc[rows, "area_ha"] = (activity.loc[rows, "area_ha"].astype(float) + 100).astype(str)
    activity.to_csv(folder / "activity.csv", index=False)
    demo_copy.write_text(base_text.replace('overrides = "overrides.csv"\n', "").replace('gwp = "AR5"', 'gwp = "AR6"'))
    current = compile_inventory(demo_copy, analyses=False)
    by_cell, _ = compare(_export(previous), _export(current))
    assert np.allclose(by_cell["parts_sum_co2eq_t"], by_cell["difference_co2eq_t"], rtol=0, atol=1e-6)
    cell = by_cell.set_index(["category_code", "gas", "year"])
    crop = cell.loc[("3.B.2.a", "CO2", 2010)]  # area changed, CO2 GWP unchanged: all activity change
    assert crop["activity_change"] == pytest.approx(crop["difference_co2eq_t"]) and crop["factor_change"] == pytest.approx(0, abs=1e-6)
    grass = cell.loc[("3.B.3.a", "CO2", 2010)]  # override removed: all factor change
    assert grass["factor_change"] == pytest.approx(grass["difference_co2eq_t"]) and grass["activity_change"] == 0
    n2o = cell.loc[("3.B.1.a", "N2O", 2010)]  # GWP 265 -> 273: factor change of 8/265 of the previous value
    assert n2o["factor_change"] == pytest.approx(n2o["previous_co2eq_t"] * (273 - 265) / 265)
    assert (by_cell[["strata_added", "strata_removed", "allocation_change"]] == 0).all().all()


@pytest.mark.parametrize("category, gas, year", [("3.B.2.a", "CH4", 2024), ("3.C.4", "N2O", 1990),
                                                 ("3.B.1.a", "CO2", 1997), ("3.B.4.a.i", "CH4", 2024)])
def test_trace_ends_with_the_reported_figure(demo_result, demo_output, category, gas, year):
    emissions = pd.read_csv(demo_output / "emissions.csv", keep_default_na=False,
                            na_values={c: [""] for c in ("emission_t", "co2eq_t", "factor_value", "parameter_value",
                                                         "area_basis_ha", "conversion", "emission_basis_t")})
    factors = pd.read_csv(demo_output / "factors.csv", keep_default_na=False)
    text, total = trace_text(emissions, factors, category, gas, year)
    cats = demo_result.categories
    reported = cats[(cats.category_code == category) & (cats.gas == gas) & (cats.year == year)]["emission_t"].iloc[0]
    assert total == pytest.approx(reported, rel=1e-12)
    assert "source:" in text and "Sum of" in text
