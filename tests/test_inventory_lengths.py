"""Every command on inventories of every length: 1, 2, 3 and 35 years, one that starts after 1990, one whose
areas are all zero. Each is cut from the demo's inputs (rows of the years kept), so the strata are the demo's."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import pandas as pd
import pytest

from compiler.cli import main
from conftest import DEMO

CASES = {  # name: (first year, last year)
    "one_year": (2023, 2023),
    "two_years": (2022, 2023),
    "three_years": (2021, 2023),
    "thirty_five_years": (1990, 2024),
    "starts_after_1990": (2005, 2012),
}


def cut_demo(folder: Path, first: int, last: int, zero_areas: bool = False) -> Path:
    """The demo's inputs restricted to first..last (fires, driver series and previous export likewise)."""
    folder.mkdir(parents=True)
    toml = (DEMO / "inventory.toml").read_text(encoding="utf-8")
    toml = re.sub(r"first_year = \d+", f"first_year = {first}", toml)
    toml = re.sub(r"last_year = \d+", f"last_year = {last}", toml)
    toml = re.sub(r"iterations = \d+", "iterations = 1000", toml)
    for name in ("activity.csv", "fires.csv", "surrogates.csv", "peat_production.csv"):
        table = pd.read_csv(DEMO / name, dtype=str, keep_default_na=False)
        table = table[table["year"].astype(int).between(first, last)]
        if zero_areas and name == "activity.csv":
            table["area_ha"] = "0.0"
        if table.empty:  # no fire or driver series in these years: the input is left out
            toml = re.sub(rf'\n{name.split(".")[0]} = [^\n]*', "", toml)
            continue
        table.to_csv(folder / name, index=False)
    previous = pd.read_csv(DEMO / "previous" / "emissions.csv.gz", dtype=str, keep_default_na=False)
    previous = previous[previous["year"].astype(int).between(first, last)]
    (folder / "previous").mkdir()
    previous.to_csv(folder / "previous" / "emissions.csv", index=False, lineterminator="\n")
    toml = toml.replace('"previous/emissions.csv.gz"', '"previous/emissions.csv"')
    for name in ("overrides.csv", "factor_review.csv", "review_log.csv", "scenarios.toml"):
        shutil.copy(DEMO / name, folder / name)
    (folder / "inventory.toml").write_text(toml, encoding="utf-8")
    return folder / "inventory.toml"


def run_every_command(settings: Path, tmp_path: Path, capsys, last: int) -> dict[str, str]:
    out = tmp_path / "out"
    printed = {}
    for name, argv in (
        ("check", ["check", str(settings)]),
        ("compile", ["compile", str(settings), "--out", str(out), "--archive"]),
        ("trace", ["trace", str(out), "--category", "3.B.2.a", "--gas", "CO2", "--year", str(last)]),
        ("compare", ["compare", str(settings.parent / "previous" / "emissions.csv"), str(out)]),
        ("scenarios", ["scenarios", str(settings), "--out", str(tmp_path / "scen")]),
    ):
        code = main(argv)
        printed[name] = capsys.readouterr().out
        assert code == 0, (name, printed[name])
    for name in ("report.pdf", "report-archive.pdf", "report.html", "inventory.xlsx", "emissions.csv"):
        assert (out / name).stat().st_size > 0
    assert (tmp_path / "scen" / "scenario-report.pdf").exists()
    return printed


@pytest.mark.parametrize("case", [pytest.param(c, marks=pytest.mark.slow) if c == "thirty_five_years" else c
                                  for c in CASES])  # 35 years take about 30 s here
def test_every_command_on_every_inventory_length(case, tmp_path, capsys):
    first, last = CASES[case]
    printed = run_every_command(cut_demo(tmp_path / "inputs", first, last), tmp_path, capsys, last)
    summary = printed["compile"]
    if first == last:  # the year is named once, in the console and in the workbook's summary
        assert summary.count(f"{last}:") == 1, summary
        import openpyxl

        sheet = openpyxl.load_workbook(tmp_path / "out" / "inventory.xlsx", read_only=True)["summary"]
        rows = list(sheet.iter_rows(values_only=True))
        header = next(r for r in rows if r and r[0] == "category_code")
        assert header == ("category_code", "category_name", "gas", "unit", str(last))
    else:
        assert f"{first}:" in summary and f"{last}:" in summary
    assert "3.B.2.a" in printed["trace"]


def test_an_inventory_whose_areas_are_all_zero_compiles(tmp_path, capsys):
    settings = cut_demo(tmp_path / "inputs", 2021, 2023, zero_areas=True)
    run_every_command(settings, tmp_path, capsys, 2023)


@pytest.mark.parametrize("years", [(2023, 2023), (2022, 2023), (2019, 2023)])
def test_chart_year_axes_carry_whole_years_within_the_data(years):
    """Tick labels are whole years between the first and last year; the axis ends at the data."""
    import matplotlib.pyplot as plt

    from compiler.render import charts

    index = list(range(years[0], years[1] + 1))
    frame = pd.DataFrame({"cropland": [1.0] * len(index), "wetlands": [-0.5] * len(index)}, index=index)
    fig, ax = charts._half()
    charts._stack(ax, frame, charts.LAND_USE_STYLE, charts.LAND_USE_LABEL)
    fig.canvas.draw()
    ticks = [t for t in ax.get_xticks() if ax.get_xlim()[0] <= t <= ax.get_xlim()[1]]
    assert all(float(t).is_integer() for t in ticks) and ticks
    assert {int(t) for t in ticks} <= set(index)
    if len(index) > 1:
        assert ax.get_xlim() == (years[0], years[1])
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    assert labels == ["Cropland", "Wetlands", "net total"]
    plt.close(fig)


def test_chart_labels_are_plain_text():
    """A name with "$" (a region or scenario) is drawn as written, never parsed as math text."""
    from compiler.render import charts, scenario_outputs

    frame = pd.DataFrame({"scenario": ["cost $5 / $10 ha"] * 3, "year": [2024, 2025, 2026], "v": [1.0, 2.0, 3.0]})
    svg = scenario_outputs._lines(frame, "v", "t", "Pathway $x$")
    assert "cost $5 / $10 ha" in svg and "Pathway $x$" in svg
    # Two charts in one page never share an element id.
    ids = set(re.findall(r'id="([^"]+)"', svg))
    other = set(re.findall(r'id="([^"]+)"', charts.area_by_status(pd.DataFrame(
        {"year": [2024], "soil_status": ["drained"], "area_ha": [5.0]}))))
    assert ids and other and not ids & other
