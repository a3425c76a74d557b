"""The report: sections, totals equal to the workbook, factor traceability, cautions, archive, safety."""

import re

import openpyxl
import pytest
from pypdf import PdfReader

from compiler import compile_inventory
from compiler.render.report import CAUTIONS, render_html

SECTIONS = ["Summary", "Cautions", "Results by category and gas", "Charts", "Uncertainty", "Key categories",
            "Input findings", "Recalculations",
            "Previous review findings", "Methods", "Factor register", "Glossary and notation keys", "Reproducibility"]


@pytest.fixture(scope="module")
def archived(demo_result, tmp_path_factory):
    out = tmp_path_factory.mktemp("report") / "out"
    demo_result.write(out, archive=True)
    return out


@pytest.fixture(scope="module")
def pdf_text(archived):
    reader = PdfReader(archived / "report.pdf")
    return "\n".join(page.extract_text() for page in reader.pages)


def _squash(text):
    return re.sub(r"\s+", " ", text)


def test_every_section_heading_and_page_numbers(pdf_text, archived):
    for heading in SECTIONS:
        assert heading in pdf_text, heading
    reader = PdfReader(archived / "report.pdf")
    n = len(reader.pages)
    assert f"Page 2 of {n}" in reader.pages[1].extract_text()
    titles = [item.title for item in reader.outline if not isinstance(item, list)]
    assert [t for t in titles if t in SECTIONS] == SECTIONS  # a bookmark for every section, in order


def test_summary_totals_equal_the_workbook(pdf_text, archived):
    ws = openpyxl.load_workbook(archived / "inventory.xlsx")["summary"]
    total = next(r for r in ws.iter_rows(values_only=True) if r[0] == "Total")
    base, latest = total[4], total[5]
    text = _squash(pdf_text)
    assert f"{base:,.1f} kt CO2-eq in 1990" in text
    assert f"{latest:,.1f} kt CO2-eq in 2024" in text


def test_every_factor_used_is_in_the_register_with_its_source(demo_result, archived):
    html = (archived / "report.html").read_text()
    # Ids starting "activity:" are values of the input data (ditch fractions, the tonnes of extracted peat), not
    # factors of the register.
    used = {i for i in set(demo_result.emissions["factor_id"]) | set(demo_result.emissions["parameter_id"])
            if i and not i.startswith("activity:")}
    for factor_id in used:
        assert f'id="f-{factor_id}"' in html, factor_id
    assert "Quillfen Peat Monitoring Network (invented for the demo)" in html
    assert "replaces ws13-t2.1-tem-grass-rich-deep (6.1 t CO2-C ha-1 yr-1)" in html
    for source_id in set(demo_result.factors_used["source_id"]) - {""}:
        assert f"[{source_id}]" in html


def test_cautions_list_every_factor_the_agency_has_not_checked(demo_result, pdf_text, archived):
    text = _squash(pdf_text).replace(" ", "")
    assert "havenotbeencheckedagainstthepublishedtextbythetool'sauthors" in text
    html = (archived / "report.html").read_text()
    cautions = html[html.index('id="cautions"'):html.index('id="results"')]
    unchecked = demo_result.factors_used.query("agency_check == 'not yet checked'")["factor_id"]
    for factor_id in unchecked:
        assert f'href="#f-{factor_id}"' in cautions, factor_id
    assert 'href="#f-ws13-t2.1-tem-crop"' not in cautions  # marked agrees in the demo's factor review log
    register_row = html[html.index('id="f-ws13-t2.1-tem-crop"'):]
    assert "&#9888;" not in register_row[:register_row.index("</tr>")] and "\u26a0" not in register_row[:register_row.index("</tr>")]
    for head, _ in CAUTIONS:
        assert head.replace(" ", "") in text
    assert "licensed professionals" in _squash(pdf_text)


def test_category_rows_link_to_methods_and_factors(archived):
    html = (archived / "report.html").read_text()
    assert 'href="#m-co2_onsite"' in html and 'id="m-co2_onsite"' in html
    assert 'href="#f-ws13-t2.1-tem-crop"' in html


def test_archive_is_pdfa3_with_the_data_attached(archived):
    reader = PdfReader(archived / "report-archive.pdf")
    attached = reader.attachments
    assert sorted(attached) == ["datapackage.json", "emissions.csv", "manifest.json"]
    for name, contents in attached.items():
        assert contents[0] == (archived / name).read_bytes(), name
    metadata = reader.xmp_metadata
    assert metadata is not None and "pdfaid" in str(reader.trailer["/Root"]["/Metadata"].get_object().get_data())
    # The catalogue's associated files (PDF/A-3): each attachment once.
    associated = [ref.get_object()["/F"] for ref in reader.trailer["/Root"]["/AF"]]
    assert sorted(associated) == ["datapackage.json", "emissions.csv", "manifest.json"]


def test_html_is_self_contained(archived):
    html = (archived / "report.html").read_text()
    assert "<style>" in html and "<svg" in html
    assert not re.search(r'(src|href)="(http|file|/)', html)


def test_user_markup_is_text_and_fetches_nothing(tmp_path, demo_copy, monkeypatch):
    import pandas as pd

    activity = demo_copy.parent / "activity.csv"
    frame = pd.read_csv(activity, dtype=str, keep_default_na=False)
    evil = '<img src="file:///etc/hostname"><link rel=stylesheet href="http://example.invalid/x.css">'
    frame.loc[frame["region"] == "Vennmarsh", "region"] = evil
    frame.to_csv(activity, index=False)
    result = compile_inventory(demo_copy)
    html = render_html(result, {"pathway": "", "land_use": "", "area": "", "gas": ""})
    assert "<img src=" not in html and "<link rel=stylesheet" not in html
    assert "&lt;img src=&#34;file:///etc/hostname&#34;&gt;" in html  # shown as text in the regions table
    from compiler.render import report as report_module

    fetchers = []
    original = report_module.RestrictedFetcher

    class Spy(original):
        def __init__(self, root):
            super().__init__(root)
            fetchers.append(self)

    monkeypatch.setattr(report_module, "RestrictedFetcher", Spy)
    out = tmp_path / "out"
    result.write(out, parallel=False)  # in this process, where the spy sees the fetcher
    assert fetchers and all(not f.refused for f in fetchers)  # escaped: nothing even asked for
    fetcher = original(report_module.resource_dir("report_templates"))
    with pytest.raises(ValueError, match="refused"):
        fetcher.fetch("file:///etc/hostname")
    with pytest.raises(ValueError, match="refused"):
        fetcher.fetch("http://example.invalid/x.css")
    assert fetcher.refused == ["file:///etc/hostname", "http://example.invalid/x.css"]


def test_report_is_deterministic(demo_result, tmp_path):
    from pypdf import PdfReader

    a, b = tmp_path / "a", tmp_path / "b"
    demo_result.write(a)
    compile_inventory(demo_result.settings).write(b)
    assert (a / "report.html").read_bytes() == (b / "report.html").read_bytes()
    text = [" ".join(p.extract_text() for p in PdfReader(x / "report.pdf").pages) for x in (a, b)]
    assert text[0] == text[1]


def test_report_laid_out_in_a_second_process_is_the_same(tmp_path, demo_result):
    # The parallel write (report in a forked process) and the serial one give the same files.
    from pypdf import PdfReader

    serial, parallel = tmp_path / "serial", tmp_path / "parallel"
    demo_result.write(serial, parallel=False)
    demo_result.write(parallel, parallel=True)
    assert (serial / "report.html").read_bytes() == (parallel / "report.html").read_bytes()
    text = [[p.extract_text() for p in PdfReader(f / "report.pdf").pages] for f in (serial, parallel)]
    assert text[0] == text[1]


def test_a_failing_report_process_fails_the_write_and_leaves_nothing(tmp_path, demo_result, monkeypatch):
    from compiler.render import report as report_module

    def boom(*args, **kwargs):
        raise RuntimeError("layout failed")

    monkeypatch.setattr(report_module, "write_report", boom)  # the forked process inherits the patch
    out = tmp_path / "out"
    with pytest.raises(RuntimeError, match="layout failed"):
        demo_result.write(out, parallel=True)
    assert not out.exists() and list(tmp_path.iterdir()) == []


def test_text_printed_before_a_parallel_write_appears_once(tmp_path):
    # The report process is a fork: output still buffered in this process (stdout to a pipe is buffered)
    # must be flushed before it, or the child writes it a second time when it exits.
    import subprocess
    import sys

    code = ("from compiler import compile_inventory\n"
            "from compiler.resources import resource_dir\n"
            "r = compile_inventory(resource_dir('examples') / 'demo' / 'inventory.toml', iterations=2000)\n"
            "print('before write')\n"
            f"r.write({str(tmp_path / 'out')!r}, parallel=True)\n")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.count("before write") == 1


WORKING_NOTES = ["from memory", "from_memory", "rule our own", "our own", "common practice", "no source", "style.md",
                 "transcription", "not seen", "not recorded", "verification"]


def test_no_working_notes_in_any_output(archived, demo_result, capsys):
    """Notes on how the shipped values were entered stay in factor_tables/ and the tests, out of every output."""
    import zipfile

    from compiler.cli import _print_summary

    texts = {name: (archived / name).read_text(encoding="utf-8")
             for name in ("report.html", "factors.csv", "emissions.csv", "datapackage.json")}
    with zipfile.ZipFile(archived / "inventory.xlsx") as book:
        for name in book.namelist():
            if name.startswith("xl/worksheets/"):
                texts[name] = book.read(name).decode("utf-8")
    texts["report.pdf"] = pdf_text_of(archived / "report.pdf")
    _print_summary(demo_result, archived)
    texts["console"] = capsys.readouterr().out
    assert "row 0," not in texts["report.html"] and "row 0," not in texts["console"]  # "filled year, no input row"
    for name, text in texts.items():
        for note in WORKING_NOTES:
            assert note.lower() not in text.lower(), (name, note)


def pdf_text_of(path):
    return "\n".join(page.extract_text() for page in PdfReader(path).pages)
