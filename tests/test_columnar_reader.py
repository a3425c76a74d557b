"""The columnar CSV path (pyarrow's reader, checks on distinct texts) against the row-by-row path.

Reference: the row-by-row reader, Python's standard-library ``csv`` module (``csv.reader`` in strict
mode), which the project used alone before the columnar path and still uses for every file the
columnar path does not take. For each spoilt copy of the invented demo's activity file, loading it
with the columnar path and with the row-by-row path forced must give the same findings (message,
file, row, column, found, expected, in the same order) and the same tables (dtypes, values, row
order, ``_row``, ``_bad`` and attrs). Each case also says which reader it meant to exercise, and
that is checked, so a case cannot silently test the fallback twice. Characters are named by code
point (Unicode Character Database names, via ``unicodedata``). All data are invented.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pandas as pd
import pytest

pytest.importorskip("pyarrow")

from compiler import readers  # noqa: E402
from compiler.activity import load_activity, load_fires, load_overrides  # noqa: E402
from compiler.errors import FindingLog, InputError  # noqa: E402
from compiler.settings import load_settings  # noqa: E402
from conftest import DEMO  # noqa: E402

HEADER, *BODY = (DEMO / "activity.csv").read_text(encoding="utf-8").splitlines()
COLUMNS = HEADER.split(",")


def spoil(changes: dict[int, dict[str, str]], rows: list[str] | None = None) -> list[list[str]]:
    """The demo's activity cells with ``changes`` ({row index: {column: new text}}) made."""
    cells = [line.split(",") for line in (rows if rows is not None else BODY)]
    for i, change in changes.items():
        for column, value in change.items():
            cells[i][COLUMNS.index(column)] = value
    return cells


def text(cells: list[list[str]], delimiter: str = ",", newline: str = "\n", header: str = HEADER) -> bytes:
    lines = [header.replace(",", delimiter)] + [delimiter.join(row) for row in cells]
    return (newline.join(lines) + newline).encode("utf-8")


def spread(column: str, values: list[str], start: int = 3, step: int = 7) -> dict[int, dict[str, str]]:
    return {start + k * step: {column: v} for k, v in enumerate(values)}


# (name, activity file bytes, whether the columnar reader takes the file)
FAST_CASES = [
    ("unknown terms", text(spoil({**spread("climate_zone", ["borea1", "tropics", "BOREAL ", "nan"]),
                                  **spread("land_use", ["forestland", "Forest Land", "pasture"], 5)})), True),
    ("terms with look-alike or invisible letters",
     text(spoil({**spread("climate_zone", ["bor\u0435al", "x\u200b"]),  # U+0435 CYRILLIC SMALL LETTER IE
                 **spread("soil_status", ["dr\u0430ined", "drained\u00ad"], 4)})), True),  # U+0430, U+00AD
    ("text starting like a formula", text(spoil(spread("region", ["=1+1", "+Orlathmoor", "-x", "@sum", " =x"]))),
     True),
    ("control, invisible and noncharacters in names",
     text(spoil(spread("region", ["Orl\x07ath", "Orl\u200bath", "Orl\ufffeath", "\u202eOrlath", "Orl\x0bath"]))),
     True),
    ("look-alike letters and accents in names",
     text(spoil(spread("region", ["Orl\u0430thmoor", "Caf\u00e9", "Cafe\u0301", "\u00a0Orlathmoor\u2003"]))), True),
    ("long names", text(spoil(spread("region", ["x" * 201, "y" * 200, "z" * 5000]))), True),
    ("not numbers and missing-value markers",
     text(spoil({**spread("area_ha", ["abc", "NaN", "NA", "-", "1 234", "12.5.3", "\u0661\u0662"]),
                 **spread("area_uncertainty_pct", ["NULL", "%", "n/a"], 4)})), True),
    ("numbers out of range", text(spoil({**spread("area_ha", ["-5", "1e10", "inf", "-inf", "1000000001", " 12.5 "]),
                                         **spread("ditch_fraction", ["1.5", "-0.1", "1"], 4),
                                         **spread("area_uncertainty_pct", ["1001", "-1"], 6)})), True),
    ("years", text(spoil(spread("year", ["2020.5", "1899", "2200", "abc", "2001.0", " 2001 ", "1e3", "", "inf"]))),
     True),
    ("blank required cells", text(spoil({**spread("region", ["", "  "]), **spread("land_use", [""], 6),
                                         **spread("area_ha", [""], 8)})), True),
    ("more findings of one kind than are listed",
     text(spoil({i: {"climate_zone": "borea1", "region": "=x"} for i in range(0, 60, 2)})), True),
    ("duplicate and conflicting rows", text(spoil({}, BODY + BODY[:3] + [BODY[5].replace("4200.0", "99.0")])),
     True),
    ("semicolons with decimal commas",
     text(spoil(spread("area_ha", ["1,5", "1.234", "12.345.678", "2.5", "1,5,5"])), delimiter=";"), True),
    ("tab-separated, Windows line ends", text(spoil(spread("region", ["=x", "Orl\u200bath"])), "\t", "\r\n"), True),
    ("old Mac line ends", text(spoil(spread("land_use", ["pasture"])), newline="\r"), True),
    ("byte-order mark", b"\xef\xbb\xbf" + text(spoil(spread("area_ha", ["abc"]))), True),
    ("blank lines inside and at the end", text(spoil({}, BODY[:5] + [""] + BODY[5:] + [""] * 2)), True),
    ("blank cells at the end", text(spoil({}, BODY + ["," * (len(COLUMNS) - 1)] * 2)), True),
    ("line separator and vertical tab inside a cell",
     text(spoil(spread("region", ["Orl\u2028ath", "Orl\x0cath", "Orl\x1cath"]))), True),
    ("aliased headers", text(spoil({}), header=HEADER.replace("year,region", "Year, Region")), True),
]
FALLBACK_CASES = [
    ("quoted cells", text([[f'"{c}"' for c in row] for row in spoil(spread("region", ["=x", "a,b"]))]), False),
    ("one quote inside a cell", text(spoil(spread("region", ['Orl"ath']))), False),
    ("a row with more cells", text(spoil({}, BODY[:4] + [BODY[4] + ",x"] + BODY[4:])), False),
    ("a row with more, blank, cells", text(spoil({}, BODY[:4] + [BODY[4] + ", ,"] + BODY[4:])), False),
    ("a short row", text(spoil({}, BODY[:4] + [BODY[4].rsplit(",", 3)[0]] + BODY[4:])), False),
    ("a blank column name at the end", text(spoil({}, [r + "," for r in BODY]), header=HEADER + ","), False),
    ("a column name twice", text(spoil({}), header=HEADER.replace("survey_note", "area_ha")), False),
    ("a NUL byte", text(spoil(spread("region", ["Orl\x00ath"]))), False),
    ("a cell above the csv field limit", text(spoil(spread("region", ["y" * 140_000]))), False),
    ("a header without rows", text([]), False),
    ("blank rows only", text([["" for _ in COLUMNS]] * 3), False),
]


def load_all(settings_path: Path) -> dict:
    settings = load_settings(settings_path)
    log = FindingLog()
    result: dict = {}
    for name, load in (("activity", load_activity), ("fires", load_fires), ("overrides", load_overrides)):
        try:
            result[name] = load(settings, log)
        except InputError as exc:
            result[name] = exc.findings
            break
    result["findings"] = list(log.findings)
    return result


def assert_same(fast: dict, slow: dict) -> None:
    assert fast.keys() == slow.keys()
    assert fast["findings"] == slow["findings"]
    for name, frame in fast.items():
        other = slow[name]
        if isinstance(frame, pd.DataFrame):
            assert frame.attrs == other.attrs
            pd.testing.assert_frame_equal(frame, other, check_exact=True)
            assert list(frame.dtypes) == list(other.dtypes)
        else:
            assert frame == other


@pytest.mark.parametrize("name, data, columnar", FAST_CASES + FALLBACK_CASES, ids=[c[0] for c in
                                                                                    FAST_CASES + FALLBACK_CASES])
def test_columnar_path_matches_row_by_row(tmp_path, monkeypatch, name, data, columnar):
    folder = tmp_path / "inv"
    shutil.copytree(DEMO, folder)
    (folder / "activity.csv").write_bytes(data)
    delimiter = ";" if name.startswith("semicolons") else "\t" if name.startswith("tab") else ","
    assert (readers._columnar_frame(data, delimiter) is not None) == columnar  # the path this case exercises
    fast = load_all(folder / "inventory.toml")
    monkeypatch.setattr(readers, "_columnar_frame", lambda data, delimiter: None)
    slow = load_all(folder / "inventory.toml")
    assert_same(fast, slow)
    if columnar and name not in ("blank cells at the end", "aliased headers"):  # each spoils cells
        assert any(f.severity == "error" for f in fast["findings"]), name


def test_columnar_cells_match_csv_reader(tmp_path):
    """The reader alone: the same cells, column names and row numbers; only the column dtype differs."""
    for name, data, columnar in FAST_CASES:
        path = tmp_path / "t.csv"
        path.write_bytes(data)
        fast, _, fast_notes = readers.read_table(path, columnar=True)
        slow, _, slow_notes = readers.read_table(path)
        assert fast_notes == slow_notes, name
        assert [str(t) for t in fast.dtypes.iloc[:-1].unique()] == ["str"], name
        pd.testing.assert_frame_equal(fast, slow.astype({c: str for c in slow.columns if c != readers.ROW}),
                                      check_exact=True, obj=name)


def test_demo_loads_through_the_columnar_path():
    data = (DEMO / "activity.csv").read_bytes()
    assert readers._columnar_frame(data, ",") is not None
