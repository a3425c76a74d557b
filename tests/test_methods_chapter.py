"""The methods chapter: Markdown and a Word document, one section per category, the workbook's numbers."""

import docx  # python-docx, the library the document is written with, read here as a reader would
import openpyxl
import pytest

from compiler.methods_chapter import SECTIONS, chapter, reported_categories, to_markdown


@pytest.fixture(scope="module")
def document(demo_output):
    return docx.Document(str(demo_output / "methods_chapter.docx"))


def test_docx_opens_and_holds_every_category_section(document, demo_result):
    headings = [p.text for p in document.paragraphs if p.style.name.startswith("Heading")]
    codes = reported_categories(demo_result)
    assert codes and len(codes) == len([h for h in headings if h.split(" ")[0] in codes])
    for code in codes:
        start = next(i for i, h in enumerate(headings) if h.startswith(code + " "))
        assert headings[start + 1:start + 1 + len(SECTIONS)] == list(SECTIONS), code


def test_docx_numbers_equal_the_workbook(document, demo_output, demo_result):
    # Each category's table of kt of gas (base and latest year) shows the workbook's timeseries_categories
    # cells, rounded to the three decimals of the workbook's kt format.
    wb = openpyxl.load_workbook(demo_output / "inventory.xlsx", read_only=True)
    rows = list(wb["timeseries_categories"].iter_rows(values_only=True))
    header_at = next(i for i, r in enumerate(rows) if r[0] == "category_code")
    header = rows[header_at]
    base, latest = str(demo_result.settings.first_year), str(demo_result.settings.last_year)
    sheet = {(r[0], r[2]): (r[header.index(base)], r[header.index(latest)]) for r in rows[header_at + 1:]}
    tables = [t for t in document.tables if t.rows[0].cells[0].text == "Gas"]
    assert len(tables) == len(reported_categories(demo_result))
    checked = 0
    for code, table in zip(reported_categories(demo_result), tables):
        for row in table.rows[1:]:
            gas, _, b, l = (c.text for c in row.cells[:4])
            for shown, value in ((b, sheet[(code, gas)][0]), (l, sheet[(code, gas)][1])):
                if isinstance(value, str):
                    assert shown == value
                else:
                    assert shown == f"{value:,.3f}"
                    checked += 1
    assert checked > 20


def test_markdown_is_the_same_text(demo_output, demo_result):
    md = (demo_output / "methods_chapter.md").read_text(encoding="utf-8")
    assert md == to_markdown(chapter(demo_result))
    assert "N2O of drained forest soils" in md  # where the allocation schemes differ
    for code in reported_categories(demo_result):
        assert f"\n## {code} " in md
