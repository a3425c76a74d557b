"""Console messages: grouped check output, locations that say what they are, trace and compare wording."""

from __future__ import annotations

from compiler.cli import main
from compiler.errors import Finding
from conftest import DEMO


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_check_groups_findings_by_check_and_all_lists_every_one(capsys):
    code, grouped, _ = run(capsys, "check", str(DEMO / "inventory.toml"))
    assert code == 0
    lines = grouped.splitlines()
    assert sum(line.startswith("warning: [year_on_year_emissions]") for line in lines) == 3
    assert any("more warning findings of [year_on_year_emissions]" in line and "--all" in line for line in lines)
    code, every, _ = run(capsys, "check", str(DEMO / "inventory.toml"), "--all")
    total = every.splitlines()[-1]
    assert total == lines[-1]  # the same counts
    n_errors, n_warnings, n_notes = (int(total.split()[i]) for i in (0, 2, 4))
    assert len(every.splitlines()) - 1 == n_errors + n_warnings + n_notes


def test_locations_name_filled_years_and_settings():
    filled = Finding("info", "not_distinguished", "m", file="activity.csv", row=0, column="nutrient_status")
    assert filled.location() == "activity.csv, filled year, no input row, column nutrient_status"
    setting = Finding("warning", "monte_carlo_convergence", "m", column="uncertainty.iterations")
    assert setting.location() == "setting uncertainty.iterations"
    in_file = Finding("error", "settings", "m", file="inventory.toml", column="method.gwp")
    assert in_file.location() == "inventory.toml, setting method.gwp"
    column = Finding("warning", "columns", "m", file="activity.csv", column="survey.note")
    assert column.location() == "activity.csv, column survey.note"


def test_trace_takes_any_case_of_gas_and_says_what_is_missing(capsys, demo_output):
    code, out, _ = run(capsys, "trace", str(demo_output), "--category", "3.B.2.a", "--gas", "co2", "--year", "2024")
    assert code == 0 and "Trace of 3.B.2.a CO2 2024" in out
    # Tonnes to sensible decimals: no six-decimal figures of tonnes.
    sums = [line for line in out.splitlines() if line.startswith("Sum of")]
    assert sums and all(len(part.split(".")[-1].split()[0]) <= 3 for part in sums[0].split("=")), sums
    code, _, err = run(capsys, "trace", str(demo_output), "--category", "3.B.9", "--gas", "CO2", "--year", "2024")
    assert code == 2 and "nothing to trace" in err and "blocking problem in the inputs" not in err


def test_compare_never_prints_minus_zero(capsys, demo_output):
    code, out, _ = run(capsys, "compare", str(DEMO / "previous" / "emissions.csv.gz"), str(demo_output))
    assert code == 0 and "-0.0" not in out.replace("\u2212", "-")


def test_the_demo_monte_carlo_converges(demo_result):
    # examples/demo/inventory.toml ships an iteration count at which the convergence check passes.
    finding = next(f for f in demo_result.finding_list if f.check == "monte_carlo_convergence")
    assert finding.severity == "info" and finding.message.startswith("Monte Carlo converged")
