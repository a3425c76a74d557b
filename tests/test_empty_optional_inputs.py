"""An optional input with a header and no data rows means "none": the compile runs and says so in a note.

The activity table is not optional: a header without rows stays an error (tests/test_hostile_inputs.py).
"""

from __future__ import annotations

import subprocess
import sys

import pytest

from compiler import compile_inventory
from compiler.errors import InputError


def _header_only(path, blank_lines: int = 0):
    header = path.read_text(encoding="utf-8").splitlines()[0]
    path.write_text(header + "\n" + "\n" * blank_lines, encoding="utf-8")


@pytest.mark.parametrize("name, blank_lines", [
    ("fires.csv", 0), ("fires.csv", 3), ("overrides.csv", 0), ("factor_review.csv", 1),
    ("surrogates.csv", 0), ("peat_production.csv", 2)])
def test_optional_file_with_a_header_only_compiles_with_a_note(demo_copy, name, blank_lines):
    _header_only(demo_copy.parent / name, blank_lines)
    result = compile_inventory(demo_copy, analyses=False)
    notes = [f for f in result.finding_list if f.check == "read" and f.file.endswith(name)]
    assert [f.severity for f in notes] == ["info"]
    assert "header and no data rows" in notes[0].message
    assert len(result.emissions) > 0


def test_header_only_fires_means_no_fire_rows(demo_copy):
    _header_only(demo_copy.parent / "fires.csv")
    em = compile_inventory(demo_copy, analyses=False).emissions
    assert not em["pathway"].astype(str).str.startswith("fire_").any()


@pytest.mark.parametrize("blank_lines", [0, 2])
def test_header_only_activity_is_still_an_error(demo_copy, blank_lines):
    _header_only(demo_copy.parent / "activity.csv", blank_lines)
    with pytest.raises(InputError) as caught:
        compile_inventory(demo_copy, analyses=False)
    assert any("header but no data rows" in f.message and f.file.endswith("activity.csv")
               for f in caught.value.findings)


def test_header_only_fires_through_the_command(demo_copy, tmp_path):
    _header_only(demo_copy.parent / "fires.csv")
    proc = subprocess.run([sys.executable, "-m", "compiler", "check", str(demo_copy)], capture_output=True,
                          text=True)
    assert proc.returncode == 0, proc.stderr[-400:]
