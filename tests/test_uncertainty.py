"""Uncertainty (compiler/uncertainty.py): Approach 1 and Approach 2 checked against outside things.

Sources named beside each check:
[GL3] 2006 IPCC Guidelines, Vol. 1, Ch. 3 (Uncertainties): Eq. 3.1 (product), Eq. 3.2 (sum),
      Table 3.2 (Approach 1 trend with type A and type B sensitivities; column letters from memory).
Closed forms: sums of independent normals; the product of independent lognormals is lognormal with
      mu = sum of mu_i and sigma**2 = sum of sigma_i**2; linear functions of one random variable.
Monte Carlo error: the asymptotic standard error of a sample quantile, sqrt(p (1 - p) / N) / f(q_p)
      (from memory: a standard result of order statistics); tolerances are 4 such errors.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pandas as pd
import pytest

from compiler import compile_inventory
from compiler import uncertainty as U
from conftest import stratum, write_inventory

Z = 1.959963984540054  # 97.5th percentile of the standard normal


def quantile_se(p: float, z: float, n: int, sigma: float) -> float:
    """Standard error of the sample p-quantile (z its standard normal quantile) of n normal(., sigma) draws."""
    density = math.exp(-z ** 2 / 2) / math.sqrt(2 * math.pi) / sigma
    return math.sqrt(p * (1 - p) / n) / density


OVERRIDE_HEADER = "override_id,quantity,climate_zone,land_use,soil_status,value,unit,ci_low,ci_high,tier,source\n"
FIRE_OVERRIDE_HEADER = OVERRIDE_HEADER.replace("soil_status,", "soil_status,fire_type,")


def ov(*fields) -> str:
    """One override line: id, quantity, stratum keys, value, unit, ci_low, ci_high (tier and source added)."""
    return ",".join(map(str, fields)) + ",Tier 2 country-specific,test"


def inventory(tmp_path, rows, overrides: list[str] = (), fires: list[str] = (), first=2020, last=2020, **settings):
    """A small compiled inventory: activity rows, override lines, fire lines (CSV text)."""
    extra = {}
    if overrides:
        header = FIRE_OVERRIDE_HEADER if fires else OVERRIDE_HEADER
        (tmp_path / "overrides.csv").write_text(header + "\n".join(overrides) + "\n", encoding="utf-8")
        extra["overrides"] = "overrides.csv"
    if fires:
        (tmp_path / "fires.csv").write_text("year,region,climate_zone,land_use,soil_status,fire_type,burned_ha\n"
                                            + "\n".join(fires) + "\n", encoding="utf-8")
        extra["fires"] = "fires.csv"
    path = write_inventory(tmp_path, rows, first=first, last=last, extra_inputs=extra)
    return compile_inventory(path, **settings)


def cell(table, year, code, gas):
    hit = table[(table["year"] == year) & (table["category_code"] == code) & (table["gas"] == gas)]
    assert len(hit) == 1, hit
    return hit.iloc[0]


N2O_40PCT = ov("n2o-40", "ef_n2o_n_soil", "temperate", "cropland", "drained", 10, "kg N2O-N ha-1 yr-1", 6, 14)


# --- Approach 1: equations ------------------------------------------------------------------


def test_product_rule_eq_3_1():
    # [GL3] Eq. 3.1, by hand: sqrt(10**2 + 40**2) = sqrt(1700) = 41.2311 %.
    assert U.product_uncertainty(10.0, 40.0) == pytest.approx(41.231056256, rel=1e-10)


def test_sum_rule_eq_3_2_two_numbers():
    # [GL3] Eq. 3.2, by hand: 100 +/- 10 % and 50 +/- 20 %: sqrt(10**2 + 10**2) / 150 = 9.428 %.
    assert U.sum_uncertainty([100.0, 50.0], [10.0, 20.0]) == pytest.approx(100 * math.sqrt(200) / 150, rel=1e-12)
    assert math.isnan(U.sum_uncertainty([1.0, -1.0], [5.0, 5.0]))


def test_sum_rule_eq_3_2_by_group_and_with_shared_inputs():
    # [GL3] Eq. 3.2 by hand, two sums at once: group "a" = 100 +/- 10 % and 50 +/- 20 % (9.428 % of 150, half-width
    # sqrt(10**2 + 10**2) = 14.142); group "b" = 40 +/- 50 % alone (50 %, half-width 20); group "c" sums to 0 (NaN).
    out = U.sum_uncertainty([100.0, 40.0, 50.0, 3.0, -3.0], [10.0, 50.0, 20.0, 5.0, 5.0], ["a", "b", "a", "c", "c"])
    assert out.index.tolist() == ["a", "b", "c"]
    assert out["total"].tolist() == [150.0, 40.0, 0.0]
    assert out.loc["a", "pct"] == pytest.approx(100 * math.sqrt(200) / 150, rel=1e-12)
    assert out.loc["a", "half_width"] == pytest.approx(math.sqrt(200), rel=1e-12)
    assert out.loc["b", "pct"] == pytest.approx(50.0, rel=1e-12) and math.isnan(out.loc["c", "pct"])
    # Absolute half-widths give the same sums, and serve a quantity of 0 with a half-width (here 6).
    out = U.sum_uncertainty([100.0, 50.0, 0.0], groups=[1, 1, 1], half_width=[10.0, 10.0, 6.0])
    assert out.loc[1, "half_width"] == pytest.approx(math.sqrt(236), rel=1e-12)
    # Our stated rule (METHOD_RULES["correlation"]): quantities sharing an input are one term of the sum, their
    # half-widths added linearly first: (10 + 10) and 6 in quadrature = sqrt(436).
    out = U.sum_uncertainty([100.0, 50.0, 0.0], groups=[1, 1, 1], half_width=[10.0, 10.0, 6.0], shared=[7, 7, 8])
    assert out.loc[1, "half_width"] == pytest.approx(math.sqrt(436), rel=1e-12)


def test_trend_table_3_2_by_hand():
    # [GL3] Table 3.2 columns I to M worked by hand for two categories:
    # C = (100, 50), D = (120, 30), E = (10, 20) %, F = (40, 50) %; sum C = sum D = 150, trend 0 %.
    table, trend, pp = U.trend_uncertainty([100, 50], [120, 30], [10, 20], [40, 50])
    type_a = [(0.01 * 120 + 150 - (0.01 * 100 + 150)) / (0.01 * 100 + 150) * 100,  # 0.13245
              (0.01 * 30 + 150 - (0.01 * 50 + 150)) / (0.01 * 50 + 150) * 100]  # -0.13289
    type_b = [120 / 150, 30 / 150]
    k = [type_a[0] * 40, type_a[1] * 50]
    l_ = [type_b[0] * 10 * math.sqrt(2), type_b[1] * 20 * math.sqrt(2)]
    assert table["type_a_sensitivity"].tolist() == pytest.approx(type_a, rel=1e-12)
    assert table["type_b_sensitivity"].tolist() == pytest.approx(type_b, rel=1e-12)
    assert table["trend_from_factor_pp"].tolist() == pytest.approx(k, rel=1e-12)
    assert table["trend_from_activity_pp"].tolist() == pytest.approx(l_, rel=1e-12)
    assert trend == 0.0
    assert pp == pytest.approx(math.sqrt(sum(a * a for a in k) + sum(b * b for b in l_)), rel=1e-12)
    # Closed form: type A is the finite-difference form of d(trend)/d(ln E_x) = (D_x - C_x sum D / sum C) / sum C;
    # for category 1 that is 20 / 150 = 0.1333, within 1 %.
    assert type_a[0] == pytest.approx(20 / 150, rel=0.01)


def test_lognormal_and_beta_fits_closed_form():
    # Closed form: ln(low) = mu - 1.96 sigma, ln(high) = mu + 1.96 sigma.
    mu, sigma = U.lognormal_from_interval(7.6, 134.0)
    assert mu - Z * sigma == pytest.approx(math.log(7.6)) and mu + Z * sigma == pytest.approx(math.log(134.0))
    # Closed form (method of moments): mean 0.05, sd 0.01: k = 0.05 x 0.95 / 1e-4 - 1 = 474.
    assert U.beta_from_moments(0.05, 0.01) == pytest.approx((0.05 * 474, 0.95 * 474))
    assert U.beta_from_moments(0.5, 0.6) is None  # sd**2 >= m (1 - m): no beta has these moments


# --- Approach 1: through the compile ---------------------------------------------------------


def test_single_row_cell_is_the_product_rule(tmp_path):
    # [GL3] Eq. 3.1 by hand: area +/- 10 %, N2O factor 10 (6 to 14) = +/- 40 %: the 3.C.4 cell holds one row.
    result = inventory(tmp_path, [stratum(area_ha=1000.0, area_uncertainty_pct=10)], [N2O_40PCT])
    row = cell(U.approach1(result).cells, 2020, "3.C.4", "N2O")
    assert row["activity_pct"] == pytest.approx(10.0, rel=1e-12)
    assert row["factor_pct"] == pytest.approx(40.0, rel=1e-12)
    assert row["uncertainty_pct"] == pytest.approx(math.sqrt(10 ** 2 + 40 ** 2), rel=1e-12)


def test_shared_factor_adds_linearly_areas_in_quadrature(tmp_path):
    # Our stated rule (METHOD_RULES["correlation"]) applied to [GL3] Eq. 3.2, by hand: two regions of equal
    # area and emission E share one factor (+/- 40 %) and have independent areas (+/- 10 % each):
    # U = sqrt((0.4 x 2E)**2 + (0.1 E)**2 + (0.1 E)**2) / 2E = sqrt(40**2 + 200 / 4) = sqrt(1650) = 40.62 %.
    rows = [stratum(region=r, area_ha=500.0, area_uncertainty_pct=10) for r in ("North", "South")]
    result = inventory(tmp_path, rows, [N2O_40PCT])
    row = cell(U.approach1(result).cells, 2020, "3.C.4", "N2O")
    assert row["uncertainty_pct"] == pytest.approx(math.sqrt(1650.0), rel=1e-12)


def test_zero_factor_enters_with_its_absolute_half_width(tmp_path):
    # METHOD_RULES["zero_factor"], by hand: 1000 ha, ditch fraction 0.05 given (exact), CH4 soil factor 0 (-3 to 3)
    # kg CH4/ha, ditch factor 1000 kg CH4/ha with no spread, exact area: E = 1000 x 0.05 x 1000 / 1000 = 50 t CH4,
    # half-width = 1000 x 0.95 x 3 / 1000 = 2.85 t CH4 (5.7 %).
    overrides = [ov("soil0", "ef_ch4_soil", "temperate", "cropland", "drained", 0, "kg CH4 ha-1 yr-1", -3, 3),
                 ov("ditch", "ef_ch4_ditch", "temperate", "cropland", "drained", 1000, "kg CH4 ha-1 yr-1", 1000, 1000)]
    result = inventory(tmp_path, [stratum(area_ha=1000.0, area_uncertainty_pct=0, ditch_fraction=0.05)], overrides)
    row = cell(U.approach1(result).cells, 2020, "3.B.2.a", "CH4")
    assert row["emission_t"] == pytest.approx(50.0, rel=1e-12)
    assert row["half_width_t"] == pytest.approx(2.85, rel=1e-12)
    assert row["uncertainty_pct"] == pytest.approx(5.7, rel=1e-12)


def test_fraction_parameter_beta_and_linear_closed_form(tmp_path):
    # Closed form: E = A (EF_soil (1 - f) + EF_ditch f) is linear in the ditch fraction f, so with exact area and
    # factors its sd is A |EF_ditch - EF_soil| sd_f and its mean A (EF_soil + mean_f (EF_ditch - EF_soil)).
    # A = 1000 ha, EF_soil 10, EF_ditch 1000 kg CH4/ha, f = 0.05 (0.03 to 0.07): sd_f = 0.02 / 1.96 (beta).
    overrides = [ov("soil", "ef_ch4_soil", "temperate", "cropland", "drained", 10, "kg CH4 ha-1 yr-1", 10, 10),
                 ov("ditch", "ef_ch4_ditch", "temperate", "cropland", "drained", 1000, "kg CH4 ha-1 yr-1", 1000, 1000),
                 ov("frac", "frac_ditch", "temperate", "cropland", "drained", 0.05, "fraction", 0.03, 0.07)]
    result = inventory(tmp_path, [stratum(area_ha=1000.0, area_uncertainty_pct=0)], overrides)
    a1 = cell(U.approach1(result).cells, 2020, "3.B.2.a", "CH4")
    assert a1["half_width_t"] == pytest.approx(1000 * 990 / 1000 * 0.02, rel=1e-12)  # [GL3] first order, exact here
    mc = U.monte_carlo(result, iterations=20000)
    dist = mc.distributions.set_index("factor_id").loc["frac"]
    assert dist["distribution"] == "beta"
    idx = mc.sample_index
    row = idx.index[(idx["kind"] == "level") & (idx["category_code"] == "3.B.2.a") & (idx["gas"] == "CH4")][0]
    draws = mc.samples[row]
    sd = 1000 * 990 / 1000 * 0.02 / Z
    n = len(draws)
    assert draws.mean() == pytest.approx(1000 * (10 + 0.05 * 990) / 1000, abs=4 * sd / math.sqrt(n))
    assert draws.std() == pytest.approx(sd, rel=4 / math.sqrt(2 * n))  # se of an sd: sd / sqrt(2N) (from memory)


def test_fire_rows_product_of_two_lognormals_closed_form(tmp_path):
    # Closed form: fuel 100 (50 to 200) t dm/ha and CH4 factor 10 (5 to 20) g/kg are each lognormal with the bounds as
    # 2.5th/97.5th percentiles (sigma_i = ln 4 / 3.92); their product is lognormal with sigma = sqrt(2) ln 4 / 3.92
    # and median 10 ha x 100 x 10 / 1000 = 10 t CH4; 95 % interval 10 x exp(-/+ 1.96 sigma). Burnt area exact.
    keys = ("tropical", "forest_land", "drained", "wildfire")
    overrides = [ov("fuel", "fuel_consumption", *keys, 100, "t dm ha-1", 50, 200),
                 ov("ch4", "ef_fire_ch4", *keys, 10, "g CH4 kg-1 dm", 5, 20)]
    fire = "2020,Testvale,tropical,forest_land,drained,wildfire,10"
    result = inventory(tmp_path, [stratum()], overrides, fires=[fire], default_area_pct=0.0)
    n = 20000
    mc = U.monte_carlo(result, iterations=n)
    dists = mc.distributions.set_index("factor_id")
    assert dists.loc["fuel", "distribution"] == "lognormal" and dists.loc["ch4", "distribution"] == "lognormal"
    sigma = math.sqrt(2) * math.log(4) / (2 * Z)
    row = cell(mc.summary, 2020, "3.C.1.a", "CH4")
    assert row["estimate"] == pytest.approx(10.0, rel=1e-12)
    tol_tail = 4 * quantile_se(0.025, -Z, n, sigma)  # in log space, where the product is normal
    tol_median = 4 * quantile_se(0.5, 0.0, n, sigma)
    assert math.log(row["p2_5"]) == pytest.approx(math.log(10) - Z * sigma, abs=tol_tail)
    assert math.log(row["p97_5"]) == pytest.approx(math.log(10) + Z * sigma, abs=tol_tail)
    assert math.log(row["median"]) == pytest.approx(math.log(10), abs=tol_median)


def test_small_normal_uncertainties_approach2_agrees_with_approach1(tmp_path):
    # [GL3]: for small uncertainties and normal inputs the two approaches agree (the model is then nearly linear,
    # and Approach 1 is exact for linear sums of normals). Three regions share two factors with symmetric +/- 5 %
    # and 6.5 % intervals; areas +/- 5, 4 and 3 %. Agreement within 3 % (Monte Carlo error at 20,000 about 1 %).
    overrides = [ov("on", "ef_co2_c_onsite", "temperate", "cropland", "drained", 7.9, "t CO2-C ha-1 yr-1", 7.5, 8.3),
                 ov("doc", "ef_co2_c_doc", "temperate", "cropland", "drained", 0.31, "t CO2-C ha-1 yr-1", 0.29, 0.33)]
    rows = [stratum(region=r, area_ha=a, area_uncertainty_pct=p)
            for r, a, p in (("North", 1000.0, 5), ("East", 2000.0, 4), ("South", 3000.0, 3))]
    result = inventory(tmp_path, rows, overrides)
    a1 = cell(U.approach1(result).cells, 2020, "3.B.2.a", "CO2")
    mc = cell(U.monte_carlo(result, iterations=20000).summary, 2020, "3.B.2.a", "CO2")
    half = (mc["p97_5"] - mc["p2_5"]) / 2 / mc["estimate"] * 100
    assert half == pytest.approx(a1["uncertainty_pct"], rel=0.03)
    assert mc["mean"] == pytest.approx(mc["estimate"], rel=0.002)


# --- shared draws and the trend ---------------------------------------------------------------


def trend_row(mc, code="total", gas="CO2-eq"):
    hit = mc.trend[(mc.trend["category_code"] == code) & (mc.trend["gas"] == gas)]
    assert len(hit) == 1
    return hit.iloc[0]


@pytest.mark.parametrize("pct, correlate", [(0, False), (5, True)])
def test_shared_factor_draws_give_a_zero_width_trend(tmp_path, pct, correlate):
    # Closed form: one stratum of constant area; each factor is one draw shared by 2020 and 2024, so with exact areas
    # (or one area draw shared by both years) every iteration has E_2024 = E_2020 and the trend is exactly 0.
    rows = [stratum(year=y, area_ha=1000.0, area_uncertainty_pct=pct) for y in range(2020, 2025)]
    result = inventory(tmp_path, rows, first=2020, last=2024, correlate_activity_across_years=correlate)
    mc = U.monte_carlo(result, iterations=3000)
    for _, row in mc.trend.iterrows():
        assert row["p2_5_pct"] == 0.0 and row["p97_5_pct"] == 0.0, row
    assert (mc.summary["p97_5"] > mc.summary["p2_5"]).all()  # while each year alone is uncertain
    a1 = U.approach1(result)
    assert a1.trend["trend_uncertainty_pp_shared_inputs"].iloc[0] == pytest.approx(0.0, abs=1e-9)


def test_uncorrelated_areas_give_the_type_b_trend(tmp_path):
    # [GL3] Table 3.2 type B with sqrt(2), closed form: one stratum, constant area +/- 5 %, areas drawn independently
    # in 2020 and 2024 (factors shared): trend = (m2 / m1 - 1) x 100, half-width 5 sqrt(2) = 7.071 pp to first order.
    rows = [stratum(year=y, area_ha=1000.0, area_uncertainty_pct=5) for y in range(2020, 2025)]
    result = inventory(tmp_path, rows, first=2020, last=2024, correlate_activity_across_years=False)
    a1 = U.approach1(result)
    assert a1.trend["trend_uncertainty_pp_shared_inputs"].iloc[0] == pytest.approx(5 * math.sqrt(2), rel=1e-9)
    mc = trend_row(U.monte_carlo(result, iterations=20000))
    assert (mc["p97_5_pct"] - mc["p2_5_pct"]) / 2 == pytest.approx(5 * math.sqrt(2), rel=0.04)


# --- reproducibility, chunks, convergence, progress --------------------------------------------


def test_same_seed_same_draws_other_seed_other_draws(demo_result):
    a = U.monte_carlo(demo_result, iterations=1500, seed=7)
    b = U.monte_carlo(demo_result, iterations=1500, seed=7)
    c = U.monte_carlo(demo_result, iterations=1500, seed=8)
    assert np.array_equal(a.samples, b.samples, equal_nan=True)
    assert not np.array_equal(a.samples, c.samples, equal_nan=True)
    pd.testing.assert_frame_equal(a.summary, b.summary)


def test_results_do_not_depend_on_the_chunk_size(demo_result):
    # Design (METHOD_RULES["random_numbers"]): one random stream per block of RNG_BLOCK iterations, seeded by
    # (seed, block number); a chunk is a whole number of blocks, so any chunk size gives the same numbers.
    runs = [U.monte_carlo(demo_result, iterations=4500, seed=3, chunk_size=c) for c in (1, 1000, 3000, 10_000)]
    for other in runs[1:]:
        assert np.array_equal(runs[0].samples, other.samples, equal_nan=True)
        pd.testing.assert_frame_equal(runs[0].trend, other.trend)


def test_chunks_are_cut_to_the_memory_budget_without_changing_a_number(demo_result, monkeypatch):
    # Design: a chunk holds at most the whole blocks whose draws fit CHUNK_BYTES (at least one), so the
    # memory of a run is bounded on large inventories; as above, the numbers cannot depend on it.
    wide = U.monte_carlo(demo_result, iterations=4500, seed=3, chunk_size=10_000)
    assert wide.chunk_size == 10_000  # whole blocks as asked (the demo draws are small)
    monkeypatch.setattr(U, "CHUNK_BYTES", 1)
    narrow = U.monte_carlo(demo_result, iterations=4500, seed=3, chunk_size=10_000)
    assert narrow.chunk_size == U.RNG_BLOCK
    assert np.array_equal(wide.samples, narrow.samples, equal_nan=True)


def test_progress_callback_counts_up_to_the_total(demo_result):
    seen = []
    U.monte_carlo(demo_result, iterations=4500, chunk_size=2000,
                  progress=lambda done, total: seen.append((done, total)))
    assert seen == [(2000, 4500), (4000, 4500), (4500, 4500)]


def test_too_few_iterations_gives_a_warning_with_the_iterations_needed(demo_result):
    mc = U.monte_carlo(demo_result, iterations=300)
    finding = next(f for f in mc.findings if f.check == "monte_carlo_convergence")
    assert finding.severity == "warning"
    assert "Monte Carlo not converged" in finding.message and "iterations are needed" in finding.message
    table = mc.convergence
    bad = table[~table["converged"]]
    # The stated scaling rule: iterations x (difference / tolerance)**2, rounded up to whole blocks.
    expected = np.ceil(300 * (bad["relative_difference"] / U.CONVERGENCE_TOLERANCE) ** 2 / U.RNG_BLOCK) * U.RNG_BLOCK
    assert np.array_equal(bad["iterations_needed"].to_numpy(), expected.to_numpy())
    assert f">= {int(bad['iterations_needed'].max()):,}" == finding.expected


def test_converged_run_gives_an_info(tmp_path):
    result = inventory(tmp_path, [stratum(area_ha=1000.0, area_uncertainty_pct=5)], [N2O_40PCT])
    mc = U.monte_carlo(result, iterations=20000)
    finding = next(f for f in mc.findings if f.check == "monte_carlo_convergence")
    assert finding.severity == "info" and finding.message.startswith("Monte Carlo converged")


# --- distributions chosen for the demo's factors -----------------------------------------------


def test_distribution_rules_on_shipped_intervals(demo_result):
    d = U.monte_carlo(demo_result, iterations=200).distributions.set_index("factor_id")
    assert d.loc["ws13-t2.3-bor-crop", "distribution"] == "normal"  # 0 (-2.8 to 2.8): straddles zero
    assert d.loc["ws13-t2.3-bor-crop", "sd"] == pytest.approx(2.8 / Z)
    assert d.loc["ws13-t2.4-bt-frac-crop", "distribution"] == "fixed"  # no interval printed
    lognormal = d.loc["ws13-t3.3-tro"]  # 41 (7.6 to 134): positive, longer above
    assert lognormal["distribution"] == "lognormal"
    assert lognormal["mu_log"] == pytest.approx((math.log(7.6) + math.log(134)) / 2)
    assert d.loc["ws13-t2.1-bor-extraction", "distribution"] == "normal"  # 2.8 (1.1 to 4.2): longer below
    assert d.loc["ws13-t2.1-bor-extraction", "sd"] == pytest.approx(1.7 / Z)  # the larger half-width


# --- the demo, end to end -----------------------------------------------------------------------


def test_demo_runs_both_approaches_with_finite_total_intervals(demo_result):
    both = U.run_uncertainty(demo_result)
    assert both.approach == "both" and both.approach1 is not None and both.monte_carlo is not None
    total = both.monte_carlo.summary[both.monte_carlo.summary["category_code"] == "total"]
    assert len(total) == 2
    assert np.isfinite(total[["p2_5", "p97_5"]].to_numpy()).all()
    assert (total["p2_5"] < total["estimate"]).all() and (total["estimate"] < total["p97_5"]).all()
    a1 = both.approach1.total
    assert np.isfinite(a1["uncertainty_pct"]).all() and (a1["uncertainty_pct"] > 0).all()
    assert np.isfinite(both.approach1.trend["trend_uncertainty_pp"].iloc[0])
    # The warning about factors printed without an interval appears once.
    assert sum(f.check == "uncertainty_no_interval" and f.severity == "warning" for f in both.findings) == 1


def test_approach_setting_is_honoured(demo_result):
    only1 = dataclasses.replace(demo_result, settings=dataclasses.replace(demo_result.settings,
                                                                          uncertainty_approach="1"))
    run = U.run_uncertainty(only1)
    assert run.approach1 is not None and run.monte_carlo is None


def test_a_row_off_the_model_is_an_error(demo_result):
    emissions = demo_result.emissions.copy()
    i = emissions.index[(emissions["notation_key"] == "") & (emissions["year"] == 2024)][0]
    emissions.loc[i, "emission_t"] *= 1.5
    broken = dataclasses.replace(demo_result, emissions=emissions)
    with pytest.raises(U.UncertaintyModelError, match="is not area x factor x parameter term x conversion"):
        U.approach1(broken)


# --- Approach 1 runs the published equations --------------------------------------------------------------------


@pytest.mark.parametrize("name", ["product_uncertainty", "sum_uncertainty"])
def test_approach1_runs_the_published_equations(tmp_path, monkeypatch, name):
    # Replacing Eq. 3.1 (product_uncertainty) or Eq. 3.2 (sum_uncertainty) by one that doubles its half-widths moves
    # Approach 1's results: these functions, and no copy of them, are what approach1 computes with.
    rows = [stratum(region=r, area_ha=500.0, area_uncertainty_pct=10) for r in ("North", "South")]
    result = inventory(tmp_path, rows, [N2O_40PCT])
    before = U.approach1(result)
    assert cell(before.cells, 2020, "3.C.4", "N2O")["uncertainty_pct"] == pytest.approx(math.sqrt(1650.0), rel=1e-12)
    original = getattr(U, name)

    def doubled(*args, **kwargs):
        out = original(*args, **kwargs)
        if isinstance(out, pd.DataFrame):
            return out.assign(half_width=2 * out["half_width"], pct=2 * out["pct"])
        return 2 * out

    monkeypatch.setattr(U, name, doubled)
    after = U.approach1(result)
    row = cell(after.cells, 2020, "3.C.4", "N2O")
    if name == "sum_uncertainty":
        # Every input's half-width doubled inside the cell and the year total.
        assert row["uncertainty_pct"] == pytest.approx(2 * math.sqrt(1650.0), rel=1e-12)
        assert after.total["half_width_shared_inputs_t"].iloc[0] == pytest.approx(
            2 * before.total["half_width_shared_inputs_t"].iloc[0], rel=1e-12)
    else:
        # Eq. 3.1 combines factor with parameter (40 % -> 80 %), then with the areas (sqrt(50) %, Eq. 3.2 alone):
        # 2 x sqrt(80**2 + 50), by hand; and the per-row Eq. 3.1 of the rows table doubles.
        assert row["factor_pct"] == pytest.approx(2 * 40.0, rel=1e-12)
        assert row["uncertainty_pct"] == pytest.approx(2 * math.sqrt(80 ** 2 + 50), rel=1e-12)
        assert np.allclose(after.rows["uncertainty_pct"], 2 * before.rows["uncertainty_pct"], rtol=1e-12,
                           equal_nan=True)
