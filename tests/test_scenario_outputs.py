"""`histosol scenarios` on the demo: workbook, CSV and report, with the cautions."""

import openpyxl
import pandas as pd
from pypdf import PdfReader

from compiler.cli import main


def test_scenarios_command_writes_everything(tmp_path, capsys, demo_copy):
    out = tmp_path / "scen"
    assert main(["scenarios", str(demo_copy), "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "all_rewetted_later" in printed and "not forecasts" in printed
    for name in ("scenario_climate.csv", "scenario_emissions.csv", "scenario_areas.csv", "scenarios.xlsx",
                 "scenario-report.pdf", "scenario-report.html"):
        assert (out / name).exists(), name
    climate = pd.read_csv(out / "scenario_climate.csv")
    assert set(climate["scenario"]) == {"baseline", "more_drainage", "half_rewetted", "all_rewetted",
                                        "all_rewetted_later"}
    assert climate["year"].max() == 2100
    assert openpyxl.load_workbook(out / "scenarios.xlsx").sheetnames[:3] == ["summary", "climate", "emissions"]
    text = " ".join(p.extract_text() for p in PdfReader(out / "scenario-report.pdf").pages)
    for caution in ("not forecasts", "licensed professionals", "Methane peaks"):
        assert caution in " ".join(text.split()), caution


def test_compile_runs_both_uncertainty_approaches_and_key_categories(demo_result, demo_output):
    assert demo_result.uncertainty.approach1 is not None and demo_result.uncertainty.monte_carlo is not None
    assert demo_result.key_categories.table["key"].any()
    sheets = openpyxl.load_workbook(demo_output / "inventory.xlsx", read_only=True).sheetnames
    assert {"uncertainty_approach1", "monte_carlo", "distributions", "key_categories"} <= set(sheets)


def test_iterations_and_seed_from_the_command_line(tmp_path, capsys, demo_copy):
    out = tmp_path / "o"
    assert main(["compile", str(demo_copy), "--out", str(out), "--no-report", "--iterations", "1000", "--seed", "7"]) == 0
    ws = openpyxl.load_workbook(out / "inventory.xlsx", read_only=True)["monte_carlo"]
    assert "1000 iterations, seed 7" in next(ws.iter_rows(values_only=True))[0]
