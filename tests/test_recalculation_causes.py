"""The factor change of a recalculation split into GWP, factor-set, shipped-value and override changes."""

import numpy as np
import pandas as pd
import pytest

from compiler import compile_inventory
from compiler.recalculations import FACTOR_PARTS, MATCH_KEYS, PARTS, compare

GWP_CH4 = {"AR5": 28.0, "AR6": 27.0}  # GWP100 of CH4: AR5 WG1 Table 8.7; AR6 WG1 Table 7.15 (from memory)


def _row(key, gas, area, tonnes, gwp, factor_id, default=None, category="3.B.2.a"):
    row = {k: "" for k in MATCH_KEYS}
    row.update(year=2020, region="Testvale", land_use="cropland", pathway=key, gas=gas, category_code=category,
               area_ha=area, emission_t=tonnes, co2eq_t=tonnes * gwp, notation_key="", factor_id=factor_id,
               default_factor_id=factor_id if default is None else default)
    return row


def _frames():
    g0, g1 = GWP_CH4["AR5"], GWP_CH4["AR6"]
    previous = pd.DataFrame([
        _row("ch4_soil", "CH4", 100, 1.0, g0, "ws13-ch4"),      # a: GWP change only
        _row("co2_onsite", "CO2", 10, 10.0, 1, "ws13-x"),        # b: an override added
        _row("co2_doc", "CO2", 10, 5.0, 1, "ws13-a"),            # c: another factor set
        _row("fire_co2", "CO2", 10, 2.0, 1, "ws13-c"),           # d: area and shipped value
        _row("ch4_ditch", "CH4", 50, 2.0, g0, "ws13-d"),          # e: GWP and shipped value
    ])
    current = pd.DataFrame([
        _row("ch4_soil", "CH4", 100, 1.0, g1, "ws13-ch4"),
        _row("co2_onsite", "CO2", 10, 20.0, 1, "ov-1", default="ws13-x"),
        _row("co2_doc", "CO2", 10, 8.0, 1, "gl06-b"),
        _row("fire_co2", "CO2", 12, 2.5, 1, "ws13-c"),
        _row("ch4_ditch", "CH4", 50, 3.0, g1, "ws13-d"),
    ])
    return previous, current


def test_hand_computed_split():
    # dE = (A1 - A0) x EF0 + A1 x f0 x (g1 - g0) + A1 x g1 x (f1 - f0), f = E / A in t of gas per ha
    # (the decomposition in compiler/recalculations.py, computed by hand per row):
    # a: 100 x 0.01 x (27 - 28) = -1 GWP;  e: 50 x 0.04 x (27 - 28) = -2 GWP and 50 x 27 x 0.02 = 27 value
    # b: 10 x 1 x (2 - 1) = 10 override;  c: 10 x (0.8 - 0.5) = 3 factor set
    # d: (12 - 10) x 0.2 = 0.4 activity and 12 x (2.5/12 - 0.2) = 0.1 value
    previous, current = _frames()
    by_cell, _ = compare(previous, current, factor_sets={"ws13-a": "ipcc2013ws", "gl06-b": "ipcc2006"})
    ch4 = by_cell[by_cell["gas"] == "CH4"].iloc[0]
    co2 = by_cell[by_cell["gas"] == "CO2"].iloc[0]
    assert ch4["gwp_change"] == pytest.approx(-3.0)
    assert ch4["shipped_value_change"] == pytest.approx(27.0)
    assert ch4["override_change"] == 0 and ch4["factor_set_change"] == 0
    assert co2["override_change"] == pytest.approx(10.0)
    assert co2["factor_set_change"] == pytest.approx(3.0)
    assert co2["shipped_value_change"] == pytest.approx(0.1)
    assert co2["activity_change"] == pytest.approx(0.4)
    assert co2["gwp_change"] == 0
    for cell in (ch4, co2):
        assert cell[FACTOR_PARTS].sum() == pytest.approx(cell["factor_change"], abs=1e-12)
        assert cell[PARTS].sum() == pytest.approx(cell["difference_co2eq_t"], abs=1e-12)


def test_demo_gwp_switch_and_override_removal(demo_copy):
    base_text = demo_copy.read_text().replace('previous_submission = "previous/emissions.csv.gz"', "")
    demo_copy.write_text(base_text)
    previous = compile_inventory(demo_copy, analyses=False)
    demo_copy.write_text(base_text.replace('overrides = "overrides.csv"\n', "").replace('gwp = "AR5"', 'gwp = "AR6"'))
    current = compile_inventory(demo_copy, analyses=False)
    export = [r.emissions[r.emissions["notation_key"] == ""] for r in (previous, current)]
    by_cell, _ = compare(*export)
    assert np.allclose(by_cell[FACTOR_PARTS].sum(axis=1), by_cell["factor_change"], rtol=0, atol=1e-6)
    cell = by_cell.set_index(["category_code", "gas", "year"])
    n2o = cell.loc[("3.B.1.a", "N2O", 2010)]  # N2O GWP 265 (AR5) -> 273 (AR6): all GWP change
    assert n2o["gwp_change"] == pytest.approx(n2o["factor_change"]) and n2o["override_change"] == 0
    grass = cell.loc[("3.B.3.a", "CO2", 2010)]  # the regional CO2 override removed: all override change
    assert grass["override_change"] == pytest.approx(grass["factor_change"]) and grass["gwp_change"] == 0
