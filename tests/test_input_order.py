"""The order of the input rows changes nothing but the row numbers that point back into the files.

Sums are taken in one fixed order (the activity is put in stratum order when it is loaded, the results
table is sorted on every stratum key), so a file with the same rows in another order gives the same
workbook cells and the same emissions.csv, apart from the row numbers, the file names and the hashes
of the inputs.
"""

from __future__ import annotations

import shutil

import openpyxl
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from compiler import compile_inventory
from conftest import DEMO

# Columns that point back into the input files: they follow the rows, by design.
POINTERS = {"input_row", "row", "file"}


def _cells(path):
    book = openpyxl.load_workbook(path, read_only=True)
    out = {}
    for sheet in book.worksheets:
        rows = list(sheet.iter_rows(values_only=True))
        header = rows[0] if rows else ()
        keep = [j for j, name in enumerate(header) if name not in POINTERS]
        values = [tuple(r[j] if j < len(r) else None for j in keep) for r in rows]
        if sheet.title == "settings":  # the SHA-256 of each input file differs with its bytes
            values = [v for v in values if not str(v[0]).startswith("input sha256")]
        out[sheet.title] = values
    return out


@settings(max_examples=2, deadline=None, derandomize=True, database=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.randoms(use_true_random=False))
def test_shuffled_input_rows_give_the_same_workbook_and_csv(tmp_path_factory, rng):
    base = tmp_path_factory.mktemp("order")
    shutil.copytree(DEMO, base / "demo")
    for name in ("activity.csv", "fires.csv", "overrides.csv"):
        frame = pd.read_csv(DEMO / name, dtype=str, keep_default_na=False)
        order = list(range(len(frame)))
        rng.shuffle(order)
        frame.iloc[order].to_csv(base / "demo" / name, index=False)
    reference = base / "reference"
    shuffled = base / "shuffled"
    compile_inventory(DEMO / "inventory.toml", iterations=400).write(reference, report=False)
    compile_inventory(base / "demo" / "inventory.toml", iterations=400).write(shuffled, report=False)
    assert _cells(reference / "inventory.xlsx") == _cells(shuffled / "inventory.xlsx")
    a = pd.read_csv(reference / "emissions.csv", dtype=str, keep_default_na=False).drop(columns=["input_row"])
    b = pd.read_csv(shuffled / "emissions.csv", dtype=str, keep_default_na=False).drop(columns=["input_row"])
    pd.testing.assert_frame_equal(a, b)
