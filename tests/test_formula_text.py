"""Text that a spreadsheet program would run as a formula never reaches a CSV file we write.

Decision: such text is refused where it enters, in every text column of every input file (names, ids,
citations, notes), with file, row and column; nothing is altered on the way out, so the CSV files carry
exactly what the agency gave. The characters are those a spreadsheet program takes as the start of a
formula when it opens a CSV: ``=``, ``+``, ``-`` and ``@`` (common practice, no source).
"""

from __future__ import annotations

import pandas as pd
import pytest

from compiler.cli import main

FAST = ["--no-report", "--iterations", "100", "--quiet"]


def _edit(path, column, value, where=None):
    frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    rows = frame.index[:1] if where is None else frame.index[frame[where[0]] == where[1]][:1]
    frame.loc[rows, column] = value
    frame.to_csv(path, index=False)
    return int(rows[0]) + 2  # spreadsheet row: the header is row 1


CASES = [
    ("activity.csv", "region", "=HYPERLINK(\"http://example.invalid\")"),
    ("activity.csv", "region", "+SUM(1,2)"),
    ("activity.csv", "region", "-2+3"),
    ("activity.csv", "region", "@SUM(A1)"),
    ("fires.csv", "region", "=1+1"),
    ("overrides.csv", "override_id", "=cmd"),
    ("overrides.csv", "source", "@import"),
    ("overrides.csv", "note", "-see below"),
    ("review_log.csv", "finding", "=A1"),
    ("surrogates.csv", "series_id", "+census"),
]


@pytest.mark.parametrize("name, column, value", CASES, ids=[f"{n}:{c}:{v[:6]}" for n, c, v in CASES])
def test_text_that_starts_a_formula_is_refused(demo_copy, tmp_path, capsys, name, column, value):
    row = _edit(demo_copy.parent / name, column, value)
    out = tmp_path / "out"
    code = main(["compile", str(demo_copy), "--out", str(out), *FAST])
    err = capsys.readouterr().err
    assert code == 2, err
    assert f"{name}, row {row}, column {column}" in err
    assert "runs as a formula" in err
    assert not out.exists()


@pytest.mark.parametrize("value", ["(north) fen", "Fen = north", "Fen-north", "Fen @ 2 m", "1st fen"])
def test_such_characters_inside_a_name_are_accepted(demo_copy, tmp_path, value):
    path = demo_copy.parent / "activity.csv"
    frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    frame.loc[frame["region"] == "Quillfen", "region"] = value
    frame.to_csv(path, index=False)
    settings = demo_copy.read_text().replace('overrides = "overrides.csv"\n', "")
    demo_copy.write_text(settings)
    out = tmp_path / "out"
    assert main(["compile", str(demo_copy), "--out", str(out), *FAST]) == 0
    text = (out / "emissions.csv").read_text(encoding="utf-8")
    assert value in text
