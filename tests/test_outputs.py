"""Written outputs: Table Schema validity, workbook contents, manifest, determinism, atomic writes."""

import hashlib
import json

import openpyxl
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st
from frictionless import validate  # reference implementation of the Table Schema standard

from compiler import compile_inventory
from compiler.schema import EXPORT_COLUMNS, plain


def sha(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_all_outputs_written(demo_output):
    names = {p.name for p in demo_output.iterdir()}
    assert {"emissions.csv", "factors.csv", "datapackage.json", "inventory.xlsx", "manifest.json"} <= names


def test_emissions_csv_validates_against_its_schema(demo_output):
    # Source: frictionless (PyPI), the reference implementation of the Frictionless Table Schema.
    report = validate(str(demo_output / "datapackage.json"))
    assert report.valid, report.flatten(["rowNumber", "fieldName", "type", "note"])[:10]


def test_emissions_csv_has_the_documented_columns(demo_output):
    frame = pd.read_csv(demo_output / "emissions.csv", nrows=5)
    assert list(frame.columns) == EXPORT_COLUMNS
    assert EXPORT_COLUMNS[:18] == ["year", "region", "category_code", "land_use", "climate_zone", "soil_status",
                                   "nutrient_status", "drainage_depth", "subtype", "pathway", "gas", "area_ha",
                                   "factor_id", "factor_value", "factor_unit", "tier", "emission_t", "co2eq_t"]


def test_workbook_sheets_and_summary_equal_the_tables(demo_output, demo_result):
    wb = openpyxl.load_workbook(demo_output / "inventory.xlsx")
    assert wb.sheetnames == ["summary", "categories", "categories_long", "strata", "trace", "recalculations",
                             "gap_filling", "review_log", "uncertainty_approach1", "uncertainty_total", "uncertainty_trend",
                             "monte_carlo", "monte_carlo_trend", "distributions", "convergence", "key_categories",
                             "factors", "findings", "settings",
                             # the submission tables, appended after the others (compiler/render/submission.py)
                             "organic_soils", "timeseries_gases", "timeseries_categories"]
    ws = wb["summary"]
    header_row = next(r for r in range(1, 10) if ws.cell(r, 1).value == "category_code")
    assert ws.freeze_panes == f"A{header_row + 1}"
    rows = {(ws.cell(r, 1).value, ws.cell(r, 3).value): ws.cell(r, 6).value
            for r in range(header_row + 1, ws.max_row + 1)}
    cats = demo_result.categories
    cell = cats[(cats.category_code == "3.B.3.a") & (cats.gas == "CO2") & (cats.year == 2024)].iloc[0]
    assert rows[("3.B.3.a", "CO2")] == pytest.approx(cell["co2eq_t"] / 1000)
    assert rows[("3.B.1.b", "CO2")] == "NO"
    total = cats[cats.notation_key == ""].groupby("year")["co2eq_t"].sum()[2024] / 1000
    assert rows[("Total", "CO2-eq")] == pytest.approx(total)


def test_workbook_trace_sheet_leads_to_the_strata_rows(demo_output, demo_result):
    # The trace sheet is streamed as XML (not through openpyxl's cell writer): read back with openpyxl,
    # every row must point at the strata row it came from, carry that row's exact numbers and its
    # number formats, and the rows of a cell must add up to cell_total_t (the sheet's own promise).
    wb = openpyxl.load_workbook(demo_output / "inventory.xlsx")
    trace, strata = wb["trace"], wb["strata"]
    header = [c.value for c in trace[2]]
    s_header = [c.value for c in strata[1]]
    rows = [dict(zip(header, (c.value for c in r))) for r in trace.iter_rows(min_row=3)]
    est = demo_result.emissions
    expected = est[(est.notation_key == "") & est.year.isin([demo_result.settings.first_year,
                                                             demo_result.settings.last_year])]
    assert len(rows) == len(expected)
    for row in rows[:: max(1, len(rows) // 200)]:
        target = dict(zip(s_header, (c.value for c in strata[row["strata_sheet_row"]])))
        for key in ("category_code", "gas", "year", "region", "pathway", "factor_id", "factor_value",
                    "area_basis_ha", "conversion", "emission_t"):
            assert row[key] == target[key], key
    frame = pd.DataFrame(rows)
    sums = frame.groupby(["category_code", "gas", "year"]).agg(total=("emission_t", "sum"),
                                                               cell=("cell_total_t", "first"))
    assert sums["total"].to_numpy() == pytest.approx(sums["cell"].to_numpy(), rel=1e-12)
    col = header.index("emission_t") + 1
    assert trace.cell(3, col).number_format == "#,##0.000"
    assert trace.cell(3, header.index("factors_sheet_row") + 1).number_format == "0"
    assert trace.freeze_panes == "A3"


def test_workbook_splits_the_strata_over_sheets_and_streams_them_like_a_serial_write(tmp_path, demo_result,
                                                                                    monkeypatch):
    # With a sheet row limit of 1,001 the demo's strata rows go over several sheets; every row is in
    # one of them, in order (never truncated). The spooled sheets are deflated by a second thread while
    # the next is made: the file must be byte for byte the one a serial write gives (a synchronous
    # stand-in for the thread pool), with the spool on disk and small XML pieces.
    import concurrent.futures

    import compiler.render.workbook as W

    monkeypatch.setattr(W, "SHEET_ROW_LIMIT", 1001)
    monkeypatch.setattr(W, "SPOOL_BYTES", 1 << 16)
    monkeypatch.setattr(W, "ROWS_PER_PIECE", 333)
    W.write_workbook(demo_result, tmp_path / "threaded.xlsx")

    class Serial:
        def __init__(self, workers):
            pass

        def __enter__(self):
            return self

        def __exit__(self, *exc):
            return False

        def submit(self, fn, *args):
            future = concurrent.futures.Future()
            future.set_result(fn(*args))
            return future

    monkeypatch.setattr(concurrent.futures, "ThreadPoolExecutor", Serial)
    W.write_workbook(demo_result, tmp_path / "serial.xlsx")
    assert (tmp_path / "threaded.xlsx").read_bytes() == (tmp_path / "serial.xlsx").read_bytes()

    wb = openpyxl.load_workbook(tmp_path / "threaded.xlsx", read_only=True)
    em = demo_result.emissions
    parts = [n for n in wb.sheetnames if n.startswith("strata")]
    assert parts == [f"strata_{i + 1}" for i in range(-(-len(em) // 1000))]
    rows = []
    for name in parts:
        sheet = list(wb[name].iter_rows(values_only=True))
        assert list(sheet[0]) == EXPORT_COLUMNS
        rows.extend(sheet[1:])
    assert len(rows) == len(em)
    got = pd.DataFrame(rows, columns=EXPORT_COLUMNS)
    assert got["emission_t"].fillna(0).tolist() == em["emission_t"].fillna(0).tolist()
    assert got["factor_id"].fillna("").tolist() == em["factor_id"].tolist()
    assert got["input_row"].tolist() == em["input_row"].tolist()


def test_workbook_numbers_carry_a_format_and_fit_their_columns(demo_output, demo_result):
    # Every numeric column of the strata and trace sheets carries a number format (areas #,##0.0, tonnes
    # #,##0.000, factors and conversions 0.0####, years and row numbers 0), and every numeric column of
    # every sheet is at least as wide as its longest number shown in its format: a spreadsheet program
    # shows ### in a cell too narrow for its number (common practice, no source).
    from compiler.render.workbook import NUMBER_WIDTH_LIMIT, number_width

    wb = openpyxl.load_workbook(demo_output / "inventory.xlsx")
    strata = wb["strata"]
    expected = {"year": "0", "area_ha": "#,##0.0", "factor_value": "0.0####", "emission_t": "#,##0.000",
                "co2eq_t": "#,##0.000", "area_basis_ha": "#,##0.0", "parameter_value": "0.0####",
                "emission_basis_t": "#,##0.000", "conversion": "0.0####", "input_row": "0"}
    numeric = [c for c in EXPORT_COLUMNS if pd.api.types.is_numeric_dtype(demo_result.emissions[c])]
    assert sorted(numeric) == sorted(expected)
    for col, fmt in expected.items():
        cells = [row[0] for row in strata.iter_rows(min_row=2, min_col=EXPORT_COLUMNS.index(col) + 1,
                                                      max_col=EXPORT_COLUMNS.index(col) + 1)]
        assert {c.number_format for c in cells if isinstance(c.value, (int, float))} == {fmt}, col
    trace = wb["trace"]
    header = [c.value for c in trace[2]]
    for col in ("year", "cell_total_t", "area_basis_ha", "factor_value", "conversion", "emission_t",
                "factors_sheet_row"):
        assert trace.cell(3, header.index(col) + 1).number_format != "General", col
    # Python's own formatting of the largest number in the format's decimals: "{:,.3f}" for #,##0.000.
    assert number_width([375196.4852645076, -2547.79], "#,##0.000") == len("-375,196.485")
    assert number_width([0.1234], "0.0%") == len("12.3%")
    assert number_width([2024], "0") == 4 and number_width([float("nan")], "0") == 0
    for ws in wb.worksheets:
        columns = {}
        for row in ws.iter_rows():
            for c in row:
                if isinstance(c.value, (int, float)) and not isinstance(c.value, bool):
                    columns.setdefault(c.column_letter, []).append((c.value, c.number_format))
        for letter, values in columns.items():
            need = number_width([v for v, _ in values], values[0][1])
            assert ws.column_dimensions[letter].width >= min(NUMBER_WIDTH_LIMIT, need + 1), (ws.title, letter)


def test_workbook_factors_sheet_shows_the_agency_check(demo_output):
    # The agency's status from its factor review log; the repository's verification notes are not shown.
    ws = openpyxl.load_workbook(demo_output / "inventory.xlsx")["factors"]
    header = [c.value for c in ws[2]]
    assert "verification" not in header and "verification_note" not in header
    status = {ws.cell(r, 1).value: ws.cell(r, header.index("agency_check") + 1).value for r in range(3, ws.max_row + 1)}
    assert status["ws13-t2.1-tem-crop"] == "agrees"  # examples/demo/factor_review.csv
    assert status["ws13-t2.5-tem-crop"] == "not yet checked"
    assert status["quillfen-grass-co2"] == "own factor"


def test_user_text_is_never_a_formula(tmp_path, demo_result):
    # Input text that starts like a formula is refused when read (tests/test_formula_text.py); the workbook
    # writer still writes any text as a text cell, whatever it starts with.
    out = tmp_path / "out"
    emissions = plain(demo_result.emissions)  # text columns to assign to (README: results for Python users)
    emissions.loc[emissions["region"] == "Quillfen", "region"] = "=HYPERLINK(\"http://example.invalid\")"
    import dataclasses

    dataclasses.replace(demo_result, emissions=emissions).write(out, report=False)
    ws = openpyxl.load_workbook(out / "inventory.xlsx")["strata"]
    col = [c.value for c in ws[1]].index("region") + 1
    cells = [ws.cell(r, col) for r in range(2, ws.max_row + 1)]
    hits = [c for c in cells if str(c.value).startswith("=HYPERLINK")]
    assert hits and all(c.data_type == "s" for c in hits)


def test_manifest(demo_output, demo_result):
    m = json.loads((demo_output / "manifest.json").read_text())
    assert m["tool"] == "histosol" and m["settings"]["method.gwp"] == "AR5"
    # peat_production: the demo's peat production series (off-site CO2 of extracted peat) is an input too.
    assert set(m["inputs_sha256"]) == {"activity", "fires", "overrides", "factor_review", "previous_submission",
                                       "review_log", "scenarios", "surrogates", "peat_production"}
    assert "drained_ipcc2013ws.csv" in m["factor_tables_sha256"]
    assert m["area_ha_by_year"]["2024"] == pytest.approx(demo_result.activity.query("year == 2024")["area_ha"].sum())
    assert m["outputs_sha256"]["emissions.csv"] == sha(demo_output / "emissions.csv")


def test_two_compiles_are_byte_identical(tmp_path, demo_result):
    # The report too: font subsets carry the compile date, not the clock's (two runs a second apart).
    import time

    a, b = tmp_path / "a", tmp_path / "b"
    demo_result.write(a)
    time.sleep(1.1)
    compile_inventory(demo_result.settings).write(b)
    for name in ("emissions.csv", "gap_filling.csv", "datapackage.json", "inventory.xlsx", "manifest.json",
                 "report.html", "report.pdf", "organic_soils.csv", "timeseries_gases.csv", "timeseries_categories.csv",
                 "methods_chapter.md", "methods_chapter.docx"):
        assert sha(a / name) == sha(b / name), name


def test_failed_write_leaves_previous_output_untouched(tmp_path, demo_result, monkeypatch):
    out = tmp_path / "out"
    demo_result.write(out, report=False)
    before = {p.name: sha(p) for p in out.iterdir()}

    def boom(*args, **kwargs):
        raise RuntimeError("renderer failed")

    monkeypatch.setattr("compiler.render.outputs.write_workbook", boom)
    with pytest.raises(RuntimeError):
        demo_result.write(out, report=False)
    assert {p.name: sha(p) for p in out.iterdir()} == before
    assert [p.name for p in tmp_path.iterdir()] == ["out"]  # no temporary folder left behind


def test_refuses_to_overwrite_a_foreign_folder(tmp_path, demo_result):
    out = tmp_path / "mine"
    out.mkdir()
    (out / "notes.txt").write_text("keep me")
    with pytest.raises(Exception, match="not written by this tool"):
        demo_result.write(out, report=False)
    assert (out / "notes.txt").read_text() == "keep me"


def test_column_by_column_sort_equals_a_stable_sort_values():
    # pipeline._sorted reorders the results table one column at a time (to bound memory); it must give
    # exactly what pandas' stable sort_values gives, missing values last.
    import numpy as np
    import pandas as pd

    from compiler.pipeline import _sorted

    rng = np.random.default_rng(5)
    n = 2000
    frame = pd.DataFrame({
        "year": rng.integers(1990, 1995, n), "region": rng.choice(["b", "a", "Å", "c"], n),
        "category_code": pd.Series(rng.choice(["3.B.1.a", "3.C.4", None], n), dtype="str"),
        "pathway": rng.choice(["co2_onsite", "ch4_soil"], n), "input_row": rng.integers(0, 50, n),
        "emission_t": rng.normal(size=n), "flag": rng.random(n) > 0.5})
    keys = ["year", "region", "category_code", "pathway", "input_row"]
    expected = frame.sort_values(keys, kind="stable").reset_index(drop=True)
    pd.testing.assert_frame_equal(_sorted([frame.copy()], keys), expected)


_TEXT = st.one_of(st.none(), st.sampled_from(["", "drained", "a,b", 'say "no"', "two\nlines", "cr\rhere", " lead",
                                             "trail ", "Å ø ∑", "=1+1", "NA", "nan"]), st.text(max_size=6))
_FLOAT = st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.sampled_from([0.0, -0.0, 1e16, 1e15, 1e-5,
                                                                                     1e-4, 4200.0, 0.1 + 0.2]))


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(_TEXT, _FLOAT, st.integers(-2 ** 63, 2 ** 63 - 1), st.booleans()), max_size=40),
       st.integers(1, 7))
def test_csv_writer_gives_the_bytes_of_pandas_to_csv(tmp_path_factory, rows, piece):
    # Reference: pandas DataFrame.to_csv (index=False, lineterminator="\n"), the writer emissions.csv was
    # written with before; write_csv formats each distinct value once and must not change a byte,
    # whatever the piece size (quotes, commas, line breaks, -0.0, NaN, inf, 17-digit floats).
    import compiler.render.tidy as tidy

    frame = pd.DataFrame({
        "text": pd.Series([r[0] for r in rows], dtype="str"), "value": pd.Series([r[1] for r in rows], dtype=float),
        "count": pd.Series([r[2] for r in rows], dtype="int64"), "flag": pd.Series([r[3] for r in rows], dtype=bool),
        "sorted out": pd.Series([r[0] for r in rows][::-1], dtype="str"),
        "coded": pd.Series([r[0] for r in rows], dtype="str").astype("category")})  # as the results table holds text
    folder = tmp_path_factory.mktemp("csv")
    frame.to_csv(folder / "pandas.csv", index=False, lineterminator="\n", encoding="utf-8")
    old, tidy.CSV_ROWS_PER_PIECE = tidy.CSV_ROWS_PER_PIECE, piece
    try:
        tidy.write_csv(frame, folder / "ours.csv")
        tidy.write_csv(frame, folder / "subset.csv", ["value", "text"])
    finally:
        tidy.CSV_ROWS_PER_PIECE = old
    assert (folder / "ours.csv").read_bytes() == (folder / "pandas.csv").read_bytes()
    frame[["value", "text"]].to_csv(folder / "pandas_subset.csv", index=False, lineterminator="\n", encoding="utf-8")
    assert (folder / "subset.csv").read_bytes() == (folder / "pandas_subset.csv").read_bytes()


def test_demo_emissions_csv_is_what_pandas_writes(demo_output, demo_result):
    # Reference: pandas DataFrame.to_csv on the same columns (the fast writer must not change a byte).
    expected = demo_result.emissions[EXPORT_COLUMNS].to_csv(index=False, lineterminator="\n").encode("utf-8")
    assert (demo_output / "emissions.csv").read_bytes() == expected
