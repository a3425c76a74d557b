"""Hostile and malformed inputs, second round: limits that hold for every input file, impossible values.

Table-driven like ``test_hostile_inputs.py`` (whose builders and checks are reused): every case of
:data:`CASES` spoils one input of a small test inventory or of a copy of the invented demo region,
runs ``histosol compile`` in-process and checks exit code 2, the exact message (file, row or setting
key, column, what is allowed), no traceback, nothing written, a previous output folder unchanged and
the inputs unchanged. Classes with their own loaders (scenario files, Parquet parcel files, the
previous submission) have tables of their own below. All data are invented.
"""

from __future__ import annotations

import gzip
import io
import shutil
import zipfile
from pathlib import Path

import pandas as pd
import pytest

from compiler.cli import main
from compiler.errors import InputError
from compiler.settings import load_settings
from conftest import DEMO, stratum, write_inventory
from test_hostile_inputs import (FAST, HEADER, ROW, check_refused, csv_text, demo, demo_append, edit_settings,
                                 previous_output, rewrite_settings, rezip, small, workbook)

__all__ = ["previous_output"]  # the module fixture of test_hostile_inputs, used by check_refused


def append_settings(folder: Path, text: str) -> Path:
    settings = small(folder)
    settings.write_text(settings.read_text() + text, encoding="utf-8")
    return settings


def nested_arrays(depth: int) -> bytes:
    return b"x = " + b"[" * depth + b'"x"' + b"]" * depth + b"\n"


def nested_tables(depth: int) -> str:
    return "\n[timeseries.fill_by_region" + "".join(f".l{i}" for i in range(depth)) + "]\nx = 1\n"


CASES = [
    # --- 1. compile_date outside what a zip entry holds (1980-01-01 to 2107-12-31)
    ("compile_date 1979", lambda f: edit_settings(f, 'compile_date = "2026-01-01"', 'compile_date = "1979-12-31"'),
     "inventory.toml, column inventory.compile_date: compile_date outside the dates a workbook (zip) file can hold; "
     "found '1979-12-31'; expected a date from 1980-01-01 to 2107-12-31"),
    ("compile_date 2108", lambda f: edit_settings(f, 'compile_date = "2026-01-01"', 'compile_date = "2108-01-01"'),
     "column inventory.compile_date: compile_date outside the dates a workbook (zip) file can hold; "
     "found '2108-01-01'"),
    ("compile_date year 1 as TOML date", lambda f: edit_settings(f, 'compile_date = "2026-01-01"',
                                                                  "compile_date = 0001-01-01"),
     "found '0001-01-01'; expected a date from 1980-01-01 to 2107-12-31"),
    ("compile_date 9999 as TOML date-time", lambda f: edit_settings(f, 'compile_date = "2026-01-01"',
                                                                     "compile_date = 9999-12-31T23:59:59"),
     "found '9999-12-31'; expected a date from 1980-01-01 to 2107-12-31"),
    # --- 2. deeply nested TOML in the settings
    ("settings: arrays nested 100,000 deep", lambda f: rewrite_settings(small(f), lambda b: nested_arrays(100_000) + b),
     "inventory.toml: arrays or tables nested too deeply to read (more than 8 levels are refused); expected a "
     "settings file as in the README"),
    ("settings: inline tables nested 5,000 deep",
     lambda f: rewrite_settings(small(f), lambda b: b"x = " + b"{a=" * 5000 + b"1" + b"}" * 5000 + b"\n" + b),
     "inventory.toml: arrays or tables nested too deeply to read"),
    ("settings: arrays nested 50 deep", lambda f: edit_settings(f, 'name = "Test inventory"',
                                                                      "name = " + "[" * 50 + '"x"' + "]" * 50),
     "inventory.toml: arrays or tables nested more than 8 levels deep (at inventory.name[0][0][0][0][0][0])"),
    ("settings: tables nested 20 deep", lambda f: append_settings(f, nested_tables(20)),
     "inventory.toml: arrays or tables nested more than 8 levels deep (at timeseries.fill_by_region.l0.l1.l2.l3.l4"),
]


@pytest.mark.parametrize("case, build, expected", CASES, ids=[c[0] for c in CASES])
def test_hostile_input(case, build, expected, tmp_path, capsys, previous_output):
    check_refused(build, expected, tmp_path, capsys, previous_output)


def test_compile_date_at_the_ends_of_the_zip_range_is_accepted(tmp_path):
    # The dates a zip entry can hold: 1980-01-01 to 2107-12-31 (PKWARE APPNOTE.TXT 4.4.6, MS-DOS date format).
    for date in ("1980-01-01", "2107-12-31"):
        settings = edit_settings(tmp_path / date, 'compile_date = "2026-01-01"', f'compile_date = "{date}"')
        assert load_settings(settings).compile_date == date
