"""A compiled result is read-only: every table is made by the stage that owns it, before the result is handed out."""

from __future__ import annotations

import dataclasses

import pytest

from compiler import compile_inventory
from conftest import stratum, write_inventory


def test_assigning_to_a_compiled_result_raises(demo_result):
    for name, value in (("emissions", None), ("uncertainty", None), ("aggregates", None),
                        ("_report_document", object()), ("_progress", None)):
        with pytest.raises(AttributeError, match="read-only"):
            setattr(demo_result, name, value)
    assert demo_result.reporting_tables is not None and demo_result.methods_chapter
    # A changed copy is the way to another result (tests tamper with tables so).
    copy = dataclasses.replace(demo_result, findings=demo_result.findings.head(0))
    assert copy.findings.empty and not demo_result.findings.empty


@pytest.mark.parametrize("options", [{}, {"parallel": False}, {"archive": True}], ids=["forked", "serial", "archive"])
def test_compile_and_write_assign_nothing_after_the_freeze(tmp_path, options):
    # Every output of a compile, with the report laid out in a forked process, in this one, or once for the
    # report and the archive: the writers only read the result (an assignment would raise).
    settings = write_inventory(tmp_path / "inv", [stratum(year=y) for y in (2019, 2020)], first=2019, last=2020)
    result = compile_inventory(settings, iterations=200)
    out = result.write(tmp_path / "out", **options)
    assert (out / "report.pdf").is_file() and (out / "methods_chapter.md").is_file()
    assert (out / "report-archive.pdf").is_file() == bool(options.get("archive"))
