"""One home per column: the schema module is what every output and the README show."""

from __future__ import annotations

import json
from pathlib import Path

from compiler.schema import EXPORT_COLUMNS, FIELDS, GAP_FILL_COLUMNS, RESULT_COLUMNS, markdown_columns

README = Path(__file__).resolve().parents[1] / "README.md"


def test_every_column_written_or_computed_has_one_description():
    assert set(EXPORT_COLUMNS) <= set(FIELDS)
    assert set(GAP_FILL_COLUMNS) <= set(FIELDS)
    assert set(RESULT_COLUMNS) <= set(FIELDS)
    assert len(EXPORT_COLUMNS) == len(set(EXPORT_COLUMNS))


def test_the_readme_column_table_is_the_schema():
    text = README.read_text(encoding="utf-8")
    table = "\n".join("  " + line for line in markdown_columns().split("\n"))
    assert table in text, "run `python -m compiler.schema` and paste its table into README.md"


def test_datapackage_and_csv_headers_come_from_the_schema(demo_output):
    package = json.loads((demo_output / "datapackage.json").read_text(encoding="utf-8"))
    emissions = next(r for r in package["resources"] if r["name"] == "emissions")
    assert [f["name"] for f in emissions["schema"]["fields"]] == EXPORT_COLUMNS
    header = (demo_output / "emissions.csv").read_text(encoding="utf-8").split("\n", 1)[0].split(",")
    assert header == EXPORT_COLUMNS
