"""The command line on the demo and on bad inputs: exact messages, exit code 2, nothing written."""

import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from compiler.cli import main
from conftest import DEMO


def run(capsys, *args):
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


def test_demo_writes_outputs(tmp_path, capsys):
    code, out, err = run(capsys, "demo", "--out", str(tmp_path / "out"))
    assert code == 0, err
    assert "Norrowmoor Province" in out and "kt CO2-eq" in out
    assert (tmp_path / "out" / "inventory.xlsx").exists()


def test_check_prints_findings_and_writes_nothing(demo_copy, capsys, tmp_path):
    code, out, _ = run(capsys, "check", str(demo_copy))
    assert code == 0
    assert "column not used by the compiler" in out and out.strip().endswith("notes")


def test_factors_command(capsys):
    code, out, _ = run(capsys, "factors", "--quantity", "ef_n2o_n_soil", "--climate-zone", "temperate",
                       "--land-use", "cropland", "--factor-set", "ipcc2013ws")
    assert code == 0
    assert "ws13-t2.5-tem-crop" in out and "8.2 to 18" in out
    assert "ws13-t2.5-bor-crop" not in out
    assert "not been checked against the published text" in out and "from_memory" not in out


def test_factors_lines_stay_narrow(capsys):
    code, out, _ = run(capsys, "factors")
    assert code == 0 and max(len(line) for line in out.splitlines()) <= 120


def test_factors_command_lists_known_conflicts(capsys):
    # The register names every from_memory row whose readings disagree, with its note (factor_tables/), when the
    # shipped tables' own notes are asked for; the plain listing speaks to the agency only.
    _, plain, _ = run(capsys, "factors", "--quantity", "ef_fire_ch4")
    assert "conflict" not in plain and "from_memory" not in plain
    code, out, _ = run(capsys, "factors", "--quantity", "ef_fire_ch4", "--notes")
    assert code == 0
    assert "3 of them with a known conflict" in out
    assert "ws13-t2.7-bt-ch4: conflict: corrected 2026-12 from 6.1 (3.8-8.4) to 9" in out


def test_module_entry_point_and_no_traceback(tmp_path):
    bad = tmp_path / "missing.toml"
    proc = subprocess.run([sys.executable, "-m", "compiler", "compile", str(bad), "--out", str(tmp_path / "o")],
                          capture_output=True, text=True)
    assert proc.returncode == 2
    assert "settings file not found" in proc.stderr and "Traceback" not in proc.stderr
    assert not (tmp_path / "o").exists()


def _edit_activity(settings: Path, edit):
    path = settings.parent / "activity.csv"
    frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    frame = edit(frame)
    frame.to_csv(path, index=False)


def _set(frame, row, column, value):
    frame.loc[row, column] = value
    return frame


# (case id, edit of the demo inputs, expected text in the message)
CASES = [
    ("missing column", lambda s: _edit_activity(s, lambda f: f.drop(columns=["area_ha"])),
     "activity.csv, column area_ha: required column missing"),
    ("misspelt land use", lambda s: _edit_activity(s, lambda f: _set(f, 0, "land_use", "grasland")),
     "activity.csv, row 2, column land_use: unknown land_use; found 'grasland'; expected forest_land | cropland | "
     "grassland | wetlands | settlements | other_land (closest: grassland)"),
    ("negative area", lambda s: _edit_activity(s, lambda f: _set(f, 3, "area_ha", "-5")),
     "activity.csv, row 5, column area_ha: area_ha is negative; found '-5'; expected >= 0"),
    ("area as text", lambda s: _edit_activity(s, lambda f: _set(f, 4, "area_ha", "1,200.5")),
     "activity.csv, row 6, column area_ha: area_ha is not a number; found '1,200.5'"),
    ("year out of range", lambda s: _edit_activity(s, lambda f: _set(f, 0, "year", "1989")),
     "activity.csv, row 2, column year: year outside the inventory years; found '1989'; expected 1990 to 2024"),
    ("fraction out of range", lambda s: _edit_activity(s, lambda f: _set(f, 0, "ditch_fraction", "1.5")),
     "activity.csv, row 2, column ditch_fraction: ditch_fraction is outside [0, 1]; found '1.5'"),
    ("duplicate stratum", lambda s: _edit_activity(s, lambda f: pd.concat([f, f.iloc[[0]]], ignore_index=True)),
     "the same year, region and stratum appear in more than one row"),
    ("missing nutrient status", lambda s: _edit_activity(s, lambda f: f.assign(
        nutrient_status=f["nutrient_status"].where(f["land_use"] != "grassland", ""))),
     "the ipcc2013ws table distinguishes nutrient_status here"),
    ("converted without previous use", lambda s: _edit_activity(s, lambda f: _set(f, 0, "remaining_or_converted",
                                                                                    "converted")),
     "activity.csv, row 2, column previous_land_use: converted land needs previous_land_use"),
    ("override without source", lambda s: (s.parent / "overrides.csv").write_text(
        (s.parent / "overrides.csv").read_text().replace('"Quillfen Peat Monitoring Network (invented for the demo), '
                                                          '2021. Eddy-covariance synthesis for deep-drained grassland, '
                                                          'Technical Note 7."', '')),
     "overrides.csv, row 2, column source: source is blank"),
    ("override unit", lambda s: (s.parent / "overrides.csv").write_text(
        (s.parent / "overrides.csv").read_text().replace("t CO2 ha-1 yr-1", "kg CH4 ha-1 yr-1")),
     "overrides.csv, row 2, column unit: unit cannot be converted for ef_co2_c_onsite"),
    ("unknown settings key", lambda s: s.write_text(s.read_text().replace("gwp =", "gwq =")),
     # (the list names every [method] key, allocation and transition_years included)
     "setting method.gwq: unknown key; found 'gwq'; expected one of factor_set, gwp, mass_ratios, "
     "ipcc2006_temperate, allocation, transition_years (did you mean gwp?)"),
    ("unknown GWP set", lambda s: s.write_text(s.read_text().replace('gwp = "AR5"', 'gwp = "AR7"')),
     "setting method.gwp: value not accepted; found 'AR7'; expected AR5 | AR4 | AR6 | SAR"),
    ("missing input file", lambda s: (s.parent / "fires.csv").unlink(), "setting inputs.fires: input file not found"),
    ("path outside settings folder", lambda s: s.write_text(s.read_text().replace('"fires.csv"', '"../fires.csv"')),
     "setting inputs.fires: path leaves the settings folder"),
    ("review differs", lambda s: (s.parent / "factor_review.csv").write_text(
        (s.parent / "factor_review.csv").read_text().replace(",agrees,", ",differs,")),
     "factor ws13-t2.1-tem-crop was found to differ"),
    ("not UTF-8", lambda s: (s.parent / "activity.csv").write_bytes(
        (s.parent / "activity.csv").read_bytes().replace(b"Quillfen", "Quillfén".encode("latin-1"))),
     "activity.csv: not UTF-8 text"),
    ("header only", lambda s: (s.parent / "activity.csv").write_text(
        (s.parent / "activity.csv").read_text().splitlines()[0] + "\n"), "the file has a header but no data rows"),
]


@pytest.mark.parametrize("case, edit, expected", CASES, ids=[c[0] for c in CASES])
def test_bad_input(case, edit, expected, demo_copy, tmp_path, capsys):
    edit(demo_copy)
    out_dir = tmp_path / "out"
    code, out, err = run(capsys, "compile", str(demo_copy), "--out", str(out_dir))
    assert code == 2, (case, err)
    assert expected in err, err
    assert "Traceback" not in err and "nothing was written" in err
    assert not out_dir.exists()


def test_bad_input_leaves_previous_output(demo_copy, tmp_path, capsys):
    out_dir = tmp_path / "out"
    assert run(capsys, "compile", str(demo_copy), "--out", str(out_dir))[0] == 0
    before = sorted((p.name, p.stat().st_mtime_ns) for p in out_dir.iterdir())
    _edit_activity(demo_copy, lambda f: _set(f, 0, "area_ha", "abc"))
    assert run(capsys, "compile", str(demo_copy), "--out", str(out_dir))[0] == 2
    assert sorted((p.name, p.stat().st_mtime_ns) for p in out_dir.iterdir()) == before


@pytest.mark.parametrize("year", ["2024", "1980", "2100"])
def test_compare_a_year_not_in_both_exports_is_an_input_error(demo_output, capsys, year):
    # The demo's previous export covers 1990-2023: a year outside what both cover is named, not a crash.
    previous = DEMO / "previous" / "emissions.csv.gz"
    code, out, err = run(capsys, "compare", str(previous), str(demo_output), "--year", year)
    assert code == 2, err
    assert f"option --year: this year is not in both exports; found '{year}'; expected a year both cover, 1990 to " \
           "2023" in err


@pytest.mark.parametrize("target", ["previous_file", "current_folder_csv", "inside_current_folder"])
def test_compare_csv_never_writes_over_what_it_compares(tmp_path, demo_output, capsys, target):
    # Nothing the user gave is changed, whatever the arguments: --csv may not name a compared export or a file in
    # a compared output folder.
    import shutil

    previous = tmp_path / "previous.csv.gz"
    shutil.copy(DEMO / "previous" / "emissions.csv.gz", previous)
    current = tmp_path / "current"
    shutil.copytree(demo_output, current)
    path = {"previous_file": previous, "current_folder_csv": current / "emissions.csv",
            "inside_current_folder": current / "recalc.csv"}[target]
    before = {p: p.read_bytes() for p in [previous, *current.iterdir()]}
    code, _, err = run(capsys, "compare", str(previous), str(current), "--csv", str(path))
    assert code == 2 and "option --csv: the CSV file would overwrite or change an export being compared" in err
    assert {p: p.read_bytes() for p in [previous, *current.iterdir()]} == before
