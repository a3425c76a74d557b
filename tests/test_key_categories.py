"""Key category analysis (compiler/key_categories.py) checked against a table worked by hand.

Source: 2006 IPCC Guidelines, Vol. 1, Ch. 4 [GL4]: Eq. 4.1 (level), Eq. 4.2 (trend; form from memory),
Eq. 4.3 (trend where the base year is 0: |E_x,t| / sum |E_y,0|, from memory), Approach 1 threshold 95 %,
Approach 2 (level or trend x uncertainty, Eq. 4.4 / 4.5 from memory) threshold 90 %. Including the category
at which the cumulative share reaches the threshold: common practice, no source.

The hand-worked table (t CO2-eq): base year E0 and latest year Et of five categories, B a sink, C new:

    cat   E0    Et    |   sum |E0| = 162, sum |Et| = 231, sum E0 = 62, sum Et = 151
    A    100   150    |   relative trend of the total tau = (151 - 62) / 62 = 1.435484
    B    -50   -40
    C      0    30
    D     10    10
    E      2     1
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from compiler import compile_inventory
from compiler import key_categories as K
from compiler import uncertainty as U

E0 = np.array([100.0, -50.0, 0.0, 10.0, 2.0])
ET = np.array([150.0, -40.0, 30.0, 10.0, 1.0])
TAU = (151 - 62) / 62


def test_level_eq_4_1_by_hand():
    # [GL4] Eq. 4.1: |E_x| / sum |E|.
    assert K.level_assessment(ET) == pytest.approx([150 / 231, 40 / 231, 30 / 231, 10 / 231, 1 / 231])
    assert K.level_assessment(E0) == pytest.approx([100 / 162, 50 / 162, 0.0, 10 / 162, 2 / 162])


def test_trend_eq_4_2_by_hand_with_a_sink_and_a_zero_base_year():
    t = K.trend_assessment(E0, ET)
    # [GL4] Eq. 4.2 written out for the categories with a base-year value:
    # |E_x0| / sum|E_0| x |(E_xt - E_x0) / |E_x0| - (sum E_t - sum E_0) / |sum E_0||
    literal = [abs(e0) / 162 * abs((et - e0) / abs(e0) - TAU) for e0, et in zip(E0, ET) if e0 != 0]
    assert t[[0, 1, 3, 4]] == pytest.approx(literal, rel=1e-12)
    assert t[0] == pytest.approx(0.577459, abs=1e-6)  # A: 100/162 x |0.5 - 1.435484|
    assert t[1] == pytest.approx(0.381322, abs=1e-6)  # B (sink): 50/162 x |(-40 + 50)/50 - 1.435484|
    assert t[2] == pytest.approx(30 / 162, rel=1e-12)  # C: Eq. 4.3, base year 0: |E_xt| / sum |E_0|


def test_key_flags_and_ranking_by_hand():
    # Level, latest: A .649, B .173, C .130, D .043, E .004; cumulative .649 .823 .952 .996 1:
    # A, B and C (which crosses 95 %) are key, D and E not.
    cum, key = K.cumulative_key(K.level_assessment(ET), K.THRESHOLD_APPROACH1)
    assert key.tolist() == [True, True, True, False, False]
    assert cum == pytest.approx([150 / 231, 190 / 231, 220 / 231, 230 / 231, 1.0])
    # Level, base: A .617, B .309 (cumulative .926), D .062 (crosses 95 %: key), E .012 not, C 0 not.
    _, key = K.cumulative_key(K.level_assessment(E0), K.THRESHOLD_APPROACH1)
    assert key.tolist() == [True, True, False, True, False]
    # Trend shares T / sum T: A .4596, B .3035, C .1474, D .0705, E .0190; cumulative .460 .763 .910 .981 1:
    # A, B, C, D key (D crosses 95 %), E not.
    t = K.trend_assessment(E0, ET)
    shares = t / t.sum()
    assert shares == pytest.approx([0.45959, 0.30349, 0.14738, 0.07052, 0.01902], abs=5e-5)
    _, key = K.cumulative_key(shares, K.THRESHOLD_APPROACH1)
    assert key.tolist() == [True, True, True, True, False]


def test_approach2_weighting_by_hand():
    # [GL4] Approach 2 level: L x U / sum(L x U), U = 10, 50, 100, 20, 5 %:
    # weights 6.494, 8.658, 12.987, 0.866, 0.022 (sum 29.026): C .447, B .298, A .224 (crosses 90 %), D, E not key.
    shares = K.uncertainty_weighted(K.level_assessment(ET), [10, 50, 100, 20, 5])
    weights = np.array([150 * 10, 40 * 50, 30 * 100, 10 * 20, 1 * 5]) / 231
    assert shares == pytest.approx(weights / weights.sum(), rel=1e-12)
    _, key = K.cumulative_key(shares, K.THRESHOLD_APPROACH2)
    assert key.tolist() == [True, True, True, False, False]
    # A category with no emissions weighs 0 even where its uncertainty is undefined.
    assert K.uncertainty_weighted([0.0, 1.0], [np.nan, 10.0]).tolist() == [0.0, 1.0]


def test_demo_key_categories_within_the_inventory(demo_result):
    kc = K.key_categories(demo_result)
    table = kc.table
    assert set(table["run"]) == {K.RUN_INVENTORY}
    assert "national_totals not given" in kc.note
    assert kc.uncertainty_source == "Approach 1"
    for column in ("category_code", "gas", "level_base", "level_latest", "trend", "cumulative_level_base",
                   "cumulative_level_latest", "cumulative_trend", "key", "assessments", "tier1_flag"):
        assert column in table
    assert table["level_latest"].sum() == pytest.approx(1.0)
    assert (table["key"] == (table["assessments"] != "")).all()
    flagged = table[table["tier1_flag"]]
    assert not flagged.empty and (flagged["message"] == K.TIER1_MESSAGE).all()
    assert all(f.severity == "warning" and K.TIER1_MESSAGE in f.message for f in kc.findings)
    # The demo's land converted to other wetlands starts after the base year: Eq. 4.3 (from memory).
    new = table[(table["category_code"] == "3.B.4.b.iii") & (table["gas"] == "CH4")].iloc[0]
    assert new["co2eq_base_t"] == 0
    assert new["trend"] == pytest.approx(abs(new["co2eq_latest_t"]) / table["co2eq_base_t"].abs().sum())


def test_demo_key_categories_weighted_by_monte_carlo(demo_result):
    mc = U.monte_carlo(demo_result, iterations=2000)
    kc = K.key_categories(demo_result, mc)
    assert kc.uncertainty_source.startswith("Approach 2")
    assert kc.table["level2_latest"].sum() == pytest.approx(1.0)


def test_with_national_totals_runs_with_and_without_the_land_sector(demo_copy):
    folder = demo_copy.parent
    pd.DataFrame([
        {"year": y, "category_code": code, "gas": gas, "co2eq_t": value}
        for y in (1990, 2024)
        for code, gas, value in (("1.A.1", "CO2", 5_000_000.0), ("3.A.1", "CH4", 400_000.0),
                                 ("3.B.2.a", "CO2", 1.0))  # the last repeats a category of this inventory
    ]).to_csv(folder / "national_totals.csv", index=False)
    text = demo_copy.read_text(encoding="utf-8")
    demo_copy.write_text(text.replace('activity = "activity.csv"',
                                      'activity = "activity.csv"\nnational_totals = "national_totals.csv"'),
                         encoding="utf-8")
    result = compile_inventory(demo_copy)
    kc = K.key_categories(result)
    table = kc.table
    assert set(table["run"]) == {K.RUN_WITH_LAND, K.RUN_WITHOUT_LAND}
    without = table[table["run"] == K.RUN_WITHOUT_LAND]
    assert not without["category_code"].str.startswith("3.B").any()
    assert "3.C.4" in set(without["category_code"])
    national = table[table["source"] == "national_totals"]
    assert {"1.A.1", "3.A.1"} <= set(national["category_code"]) and "3.B.2.a" not in set(national["category_code"])
    assert any(f.check == "national_totals_overlap" for f in kc.findings)
    # No uncertainty for the national categories: Approach 2 is not run, and the note says why.
    assert "Approach 2 not run" in kc.note
    assert table["level2_latest"].isna().all()
    energy = table[(table["run"] == K.RUN_WITH_LAND) & (table["category_code"] == "1.A.1")].iloc[0]
    assert energy["key"] and not energy["tier1_flag"]


def test_national_totals_with_uncertainties_run_approach2(demo_result):
    # Approach 2 needs an uncertainty for every category ([GL4]); national_totals may carry uncertainty_pct.
    national = pd.DataFrame([{"year": y, "category_code": "1.A.1", "gas": "CO2", "co2eq_t": 900_000.0,
                              "uncertainty_pct": 5.0} for y in (1990, 2024)])
    kc = K.key_categories(demo_result, national_totals=national)
    assert "Approach 2 not run" not in kc.note
    for run, part in kc.table.groupby("run"):
        assert part["level2_latest"].sum() == pytest.approx(1.0), run
    energy = kc.table[kc.table["category_code"] == "1.A.1"]
    assert (energy["source"] == "national_totals").all() and energy["key"].all()
