"""The aggregate stage: each reported total is computed once, and every output shows that figure."""

from __future__ import annotations

import openpyxl
import pytest

from compiler import compile_inventory
from conftest import stratum, write_inventory


def test_totals_add_up_from_the_reporting_cells(demo_result):
    agg = demo_result.aggregates
    cats = demo_result.categories
    est = cats[(cats["notation_key"] == "") & cats["co2eq_t"].notna()]
    for year in (agg.base_year, agg.latest_year):
        assert agg.total_co2eq_t[year] == pytest.approx(est.loc[est["year"] == year, "co2eq_t"].sum(), rel=1e-12)
        assert agg.gas_co2eq_t.loc[year].sum() == pytest.approx(agg.total_co2eq_t[year], rel=1e-12)
        assert agg.category_co2eq_t[year].sum() == pytest.approx(agg.total_co2eq_t[year], rel=1e-12)
        assert agg.region_co2eq_t[year].sum() == pytest.approx(agg.total_co2eq_t[year], rel=1e-9)


def test_the_workbook_summary_shows_the_aggregate(demo_output, demo_result):
    agg = demo_result.aggregates
    ws = openpyxl.load_workbook(demo_output / "inventory.xlsx")["summary"]
    rows = [r for r in ws.iter_rows(values_only=True)]
    total = next(r for r in rows if r and r[0] == "Total")
    assert total[4] == agg.total_base_t / 1000 and total[5] == agg.total_latest_t / 1000


@pytest.mark.parametrize("years, areas", [((2020, 2020), (10.0, 5.0)), ((2020, 2021), (0.0, 0.0)),
                                          ((2019, 2021), (3.0, 4.0))])
def test_every_inventory_length_and_all_zero_areas(tmp_path, years, areas):
    first, last = years
    rows = [stratum(year=y, area_ha=a) for y in range(first, last + 1) for a in areas[:1]]
    rows += [stratum(year=y, land_use="grassland", nutrient_status="poor", area_ha=areas[1])
             for y in range(first, last + 1)]
    settings = write_inventory(tmp_path / "inv", rows, first=first, last=last)
    result = compile_inventory(settings, iterations=300)
    agg = result.aggregates
    assert agg.years == tuple(range(first, last + 1))
    assert list(agg.total_co2eq_t.index) == list(agg.years)
    result.write(tmp_path / "out", report=False)
    summary = openpyxl.load_workbook(tmp_path / "out" / "inventory.xlsx")["summary"]
    header = next(r for r in summary.iter_rows(values_only=True) if r and r[0] == "category_code")
    assert header.count(str(first)) == 1  # a one-year inventory shows its year once
    assert ("change" in header) == (first != last)


def test_the_report_lists_the_largest_regions_and_sums_the_rest(demo_result):
    # 20,000 regions would make a report of hundreds of pages: beyond REGIONS_SHOWN the rest is one line, and the
    # lines still add up to the total of every year (the workbook lists every region).
    agg = demo_result.aggregates
    top, rest, count = agg.largest_regions(2)
    assert len(top) == 2 and count == len(agg.region_co2eq_t) - 2
    latest = agg.region_co2eq_t[agg.latest_year].abs().sort_values(ascending=False)
    assert set(top.index) == set(latest.index[:2])
    for year in agg.years:
        assert top[year].sum() + rest[year] == pytest.approx(agg.region_co2eq_t[year].sum(), rel=1e-12)
    all_shown, none, zero = agg.largest_regions(len(agg.region_co2eq_t))
    assert none is None and zero == 0 and len(all_shown) == len(agg.region_co2eq_t)


def test_every_breakdown_adds_up_to_the_total(demo_result):
    agg = demo_result.aggregates
    for year in agg.years:
        for table in (agg.pathway_co2eq_t, agg.land_use_co2eq_t):
            assert table.loc[year].sum() == pytest.approx(agg.total_co2eq_t[year], rel=1e-9)
    em = demo_result.emissions
    offsite = em[(em["pathway"] == "co2_offsite") & (em["notation_key"] == "")]
    assert len(offsite) and agg.offsite_co2eq_t.sum() == pytest.approx(offsite["co2eq_t"].sum(), rel=1e-12)
    shares = [agg.gross_share(c, agg.latest_year) for c in agg.category_co2eq_t.index]
    assert sum(shares) == pytest.approx(1.0, rel=1e-12)
    change = agg.category_change_co2eq_t
    assert change.sum() == pytest.approx(agg.total_latest_t - agg.total_base_t, rel=1e-9)


def test_the_report_summary_shows_the_aggregate(demo_result):
    # The report formats the aggregate stage's figures: the same number in kt, one decimal.
    from compiler.render.report import build_context

    agg = demo_result.aggregates
    context = build_context(demo_result, chart_svgs={})
    kt = lambda t: f"{t / 1000:,.1f}".replace("-", "\u2212")
    assert context["total_latest"] == kt(agg.total_latest_t)
    assert [g["latest"] for g in context["by_gas"]] == [kt(agg.gas_co2eq_t.at[agg.latest_year, g])
                                                        for g in agg.gas_co2eq_t.columns]
    shown = {c["code"]: c["latest"] for c in context["by_category"]}
    for (code, _), value in agg.category_co2eq_t[agg.latest_year].items():
        if code in shown:
            assert shown[code] == kt(value)
