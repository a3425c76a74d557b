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

import pytest

from compiler.cli import main
from compiler.errors import InputError
from compiler.settings import load_settings
from conftest import DEMO, stratum, write_inventory
from test_hostile_inputs import (HEADER, ROW, check_refused, csv_text, demo, demo_append, edit_settings,
                                 previous_output, rewrite_settings, small, workbook)

__all__ = ["previous_output"]  # the module fixture of test_hostile_inputs, used by check_refused


def append_settings(folder: Path, text: str) -> Path:
    settings = small(folder)
    settings.write_text(settings.read_text() + text, encoding="utf-8")
    return settings


def small_with_fire(folder: Path, line: str, text: str | None = None) -> Path:
    settings = small(folder, text=text, extra_inputs={"fires": "fires.csv"})
    (folder / "fires.csv").write_text("year,region,climate_zone,land_use,soil_status,fire_type,burned_ha\n"
                                      + line + "\n", encoding="utf-8")
    return settings


def nested_arrays(depth: int) -> bytes:
    return b"x = " + b"[" * depth + b'"x"' + b"]" * depth + b"\n"


def nested_tables(depth: int) -> str:
    return "\n[timeseries.fill_by_region" + "".join(f".l{i}" for i in range(depth)) + "]\nx = 1\n"


CASES = [
    # --- 1. compile_date outside what a zip entry holds (1980-01-01 to 2107-12-31)
    ("compile_date 1979", lambda f: edit_settings(f, 'compile_date = "2026-01-01"', 'compile_date = "1979-12-31"'),
     "inventory.toml, setting inventory.compile_date: compile_date outside the dates a workbook (zip) file can hold; "
     "found '1979-12-31'; expected a date from 1980-01-01 to 2107-12-31"),
    ("compile_date 2108", lambda f: edit_settings(f, 'compile_date = "2026-01-01"', 'compile_date = "2108-01-01"'),
     "setting inventory.compile_date: compile_date outside the dates a workbook (zip) file can hold; "
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
    # --- 5. invisible characters, noncharacters and look-alike letters
    ("zero-width space in region", lambda f: small(f, text=csv_text(ROW.replace("Testvale", "Test\u200bvale"))),
     "activity.csv, row 2, column region: region holds an invisible character or a noncharacter; found "
     "'Test\\u200bvale (U+200B ZERO WIDTH SPACE at position 5)'; expected visible text: no format characters"),
    ("soft hyphen and byte-order mark in region",
     lambda f: small(f, text=csv_text(ROW.replace("Testvale", "Test\u00advale\ufeff"))),
     "found 'Test\\xadvale\\ufeff (U+00AD SOFT HYPHEN at position 5, U+FEFF ZERO WIDTH NO-BREAK SPACE at "
     "position 10)'"),
    ("noncharacter U+FFFF in region", lambda f: small(f, text=csv_text(ROW.replace("Testvale", "Test\uffffvale"))),
     "activity.csv, row 2, column region: region holds an invisible character or a noncharacter; found "
     "'Test\\uffffvale (U+FFFF NONCHARACTER at position 5)'"),
    ("noncharacter U+FDD0 in an override note", lambda f: demo(f, "overrides.csv", "measured 2005-2020",
                                                               "measured \ufdd0 2005-2020"),
     "overrides.csv, row 2, column note: note holds a noncharacter; found 'measured \\ufdd0 2005-2020 at three "
     "invented towers (U+FDD0 NONCHARACTER at position 10)'; expected text without noncharacters"),
    ("noncharacter U+10FFFF in a review finding", lambda f: demo(f, "review_log.csv", "(drained grassland)",
                                                                 "(drained grassland\U0010ffff)"),
     "review_log.csv, row 2, column finding: finding holds a noncharacter; found"),
    ("Cyrillic o inside cropland", lambda f: small(f, text=csv_text(ROW.replace("cropland", "cr\u043epland"))),
     "activity.csv, row 2, column land_use: unknown land_use; found 'cr\u043epland (U+043E CYRILLIC SMALL LETTER O "
     "at position 3)'; expected forest_land | cropland"),
    ("zero-width joiner inside drained", lambda f: small(f, text=csv_text(ROW.replace("drained", "drai\u200dned"))),
     "activity.csv, row 2, column soil_status: unknown soil_status; found 'drai\\u200dned (U+200D ZERO WIDTH "
     "JOINER at position 5)'"),
    ("Cyrillic e inside a region name", lambda f: small(f, text=csv_text(ROW.replace("Testvale", "T\u0435stvale"))),
     "activity.csv, row 2, column region: region mixes alphabets within a word (letters that look alike but are "
     "others); found 'T\u0435stvale (U+0435 CYRILLIC SMALL LETTER IE at position 2)'; expected each word in one "
     "alphabet"),
    ("Greek capital tau starting a fire region", lambda f: demo(f, "fires.csv", "1997,Kelavi Lowlands",
                                                                "1997,\u03a4elavi Lowlands"),
     "fires.csv, row 2, column region: region mixes alphabets within a word (letters that look alike but are "
     "others); found '\u03a4elavi Lowlands (U+03A4 GREEK CAPITAL LETTER TAU at position 1)'"),
    ("settings: zero-width space in the inventory name",
     lambda f: edit_settings(f, 'name = "Test inventory"', 'name = "Test\u200binventory"'),
     "inventory.toml, setting inventory.name: holds an invisible character or a noncharacter; found "
     "'Test\\u200binventory (U+200B ZERO WIDTH SPACE at position 5)'"),
    ("settings: noncharacter in a path", lambda f: edit_settings(f, '"activity.csv"', '"activity\ufffe.csv"'),
     "inventory.toml, setting inputs.activity: holds an invisible character or a noncharacter; found "
     "'activity\\ufffe.csv (U+FFFE NONCHARACTER at position 9)'"),
    # --- 7. very wide tables: at most 1,000 columns, duplicates found in one pass
    ("a million columns", lambda f: small(f, text=csv_text(ROW + "," * 999_991,
                                                          header=HEADER + "".join(f",x{i}" for i in range(999_991)))),
     "activity.csv, row 1: the header row has 1,000,000 columns, above the limit of 1,000; expected at most 1,000 "
     "columns"),
    ("1,001 columns in a workbook", lambda f: small(f, data=workbook(edit=lambda book: [
        book.active.cell(row=1, column=10 + i, value=f"extra{i}") for i in range(992)]), name="activity.xlsx"),
     "activity.xlsx, sheet activity, row 1: the header row has 1,001 columns, above the limit of 1,000"),
    ("one column 991 times", lambda f: small(f, text=csv_text(ROW + ",n" * 991, header=HEADER + ",note" * 991)),
     "activity.csv, column note: column appears more than once; found 'note, note, note, note, note, note, note, "
     "note, note, note and 981 more'; expected each column once"),
    # --- 10. a fire larger than its stratum
    ("fire larger than its stratum", lambda f: demo(f, "fires.csv", "1997,Kelavi Lowlands,tropical,forest_land,drained,"
                                                   "wildfire,120.0", "1997,Kelavi Lowlands,tropical,forest_land,"
                                                   "drained,wildfire,3894.2"),
     "fires.csv, row 2, column burned_ha: the fire burns more hectares than its stratum holds; found 'burned_ha "
     "3,894.2 ha; the stratum (1997 Kelavi Lowlands, tropical, forest_land, drained) has 3,894.1 ha'; expected at "
     "most the stratum's area_ha in the activity data (same year, region, climate zone, land use and soil status)"),
    ("fire larger than a boreal stratum", lambda f: demo(f, "fires.csv", "2006,Skarrowdale,boreal,forest_land,"
                                                            "drained,wildfire,35.0", "2006,Skarrowdale,boreal,"
                                                            "forest_land,drained,wildfire,7000"),
     "fires.csv, row 3, column burned_ha: the fire burns more hectares than its stratum holds; found 'burned_ha "
     "7,000 ha; the stratum (2006 Skarrowdale, boreal, forest_land, drained) has 6,100 ha'"),
    ("fire on a stratum of 0 ha", lambda f: small_with_fire(f, "2020,Testvale,temperate,cropland,drained,wildfire,0.5",
                                                           text=csv_text(ROW.replace("1.5", "0"))),
     "fires.csv, row 2, column burned_ha: the fire burns more hectares than its stratum holds; found 'burned_ha 0.5 "
     "ha; the stratum (2020 Testvale, temperate, cropland, drained) has 0 ha'"),
    ("fire 1.6 ha on 1.5 ha", lambda f: small_with_fire(f, "2020,Testvale,temperate,cropland,drained,prescribed,1.6"),
     "found 'burned_ha 1.6 ha; the stratum (2020 Testvale, temperate, cropland, drained) has 1.5 ha'"),
    # --- 11. override intervals: within the range of a fraction, and around their value
    ("fraction interval below 0", lambda f: demo_append(
        f, "overrides.csv", "ditch-x,frac_ditch,temperate,grassland,drained,,,,0.05,fraction,-0.02,0.12,Tier 2,"
                            "Invented note for a test,,,,"),
     "overrides.csv, row 3, column ci_low: ci_low out of range for frac_ditch: the interval must lie within the "
     "range of the value; found '-0.02'; expected 0 to 1"),
    ("fraction interval above 1", lambda f: demo_append(
        f, "overrides.csv", "doc-x,frac_doc_co2,temperate,grassland,drained,,,,0.9,fraction,0.8,1.2,Tier 2,"
                            "Invented note for a test,,,,"),
     "overrides.csv, row 3, column ci_high: ci_high out of range for frac_doc_co2: the interval must lie within the "
     "range of the value; found '1.2'; expected 0 to 1"),
    ("interval not containing its value", lambda f: demo_append(
        f, "overrides.csv", "co2-x,ef_co2_c_onsite,boreal,cropland,drained,,,,5,t CO2-C ha-1 yr-1,6,8,Tier 2,"
                            "Invented note for a test,,,,"),
     "overrides.csv, row 3, column value: value lies outside its own interval; found '5.0'; expected ci_low <= value "
     "<= ci_high"),
    ("reversed fraction interval", lambda f: demo_append(
        f, "overrides.csv", "ditch-y,frac_ditch,temperate,grassland,drained,,,,0.05,fraction,0.08,0.02,Tier 2,"
                            "Invented note for a test,,,,"),
     "overrides.csv, row 3, column value: value lies outside its own interval; found '0.05'"),
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


def test_format_characters_listed_are_those_of_unicodedata():
    # Reference: Python's unicodedata (Unicode 14.0 in Python 3.11): every code point of general category Cf is
    # in textrules.FORMAT_RANGES; the list holds Unicode 15.0, so it may name a few more.
    import unicodedata

    from compiler.textrules import FORMAT_RANGES, NONCHARACTER_RANGES

    listed = {c for a, b in FORMAT_RANGES for c in range(a, b + 1)}
    format_chars = {c for c in range(0x110000) if unicodedata.category(chr(c)) == "Cf"}
    assert format_chars <= listed
    assert all(unicodedata.category(chr(c)) in ("Cf", "Cn") for c in listed)
    # Noncharacters: 66 code points (The Unicode Standard, Section 23.7), all unassigned (Cn).
    nonchars = [c for a, b in NONCHARACTER_RANGES for c in range(a, b + 1)]
    assert len(nonchars) == 66 and all(unicodedata.category(chr(c)) == "Cn" for c in nonchars)


TEXT_ACCEPTED = [
    ("Cyrillic region name", "Москва-Тест"),
    ("accented Latin region name", "Zürich-Süd Ærø"),
    ("Greek region name", "Αθήνα Νότος"),
    ("kanji and kana in one word", "東京とうきょう"),
    ("digits and Latin letters", "Zone 7b"),
]


@pytest.mark.parametrize("case, region", TEXT_ACCEPTED, ids=[c[0] for c in TEXT_ACCEPTED])
def test_names_in_one_alphabet_are_accepted(case, region, tmp_path, capsys):
    settings = small(tmp_path / "inputs", text=csv_text(ROW.replace("Testvale", region)))
    code = main(["check", str(settings)])
    out, err = capsys.readouterr()
    assert code == 0, out + err


# ---------------------------------------------------------------- 4. scenario files (the spec-reading part)

SCENARIO_HEAD = '[[scenario]]\nname = "baseline"\n'


def rewet(**keys) -> str:
    body = {"kind": '"rewet"', "share": "0.5", "target_year": "2030", **keys}
    return '[[scenario]]\nname = "r"\n[[scenario.measure]]\n' + "".join(f"{k} = {v}\n" for k, v in body.items())


def drain(**keys) -> str:
    body = {"kind": '"more_drainage"', "region": '"Testvale"', "climate_zone": '"temperate"',
            "land_use": '"cropland"', "area_ha_per_year": "10.0", **keys}
    return '[[scenario]]\nname = "d"\n[[scenario.measure]]\n' + "".join(f"{k} = {v}\n" for k, v in body.items())


def initial_ch4(value: str) -> str:
    return (rewet() + '[scenario.measure.initial_ch4]\nmode = "multiply"\nvalue = ' + value
            + '\nyears = 5\ncitation = "Invented note for a test"\n')


SCENARIO_CASES = [
    # rates: infinite, not a number, astronomically large
    ("drainage rate inf", SCENARIO_HEAD + drain(area_ha_per_year="inf"),
     "setting scenario.d.measure[1].area_ha_per_year: not a finite number; found 'inf'; expected a finite number"),
    ("drainage rate 1e300", SCENARIO_HEAD + drain(area_ha_per_year="1e300"),
     "setting scenario.d.measure[1].area_ha_per_year: above 1e9 in magnitude; found '1e+300'; expected at most "
     "1,000,000,000 in magnitude"),
    ("drainage rate as a huge integer", SCENARIO_HEAD + drain(area_ha_per_year="9223372036854775807"),
     "setting scenario.d.measure[1].area_ha_per_year: above 1e9 in magnitude; found '9.22337e+18'"),
    ("ditch fraction nan", SCENARIO_HEAD + drain(ditch_fraction="nan"),
     "setting scenario.d.measure[1].ditch_fraction: not a finite number; found 'nan'"),
    ("share -inf", SCENARIO_HEAD + rewet(share="-inf"),
     "setting scenario.r.measure[1].share: not a finite number; found '-inf'"),
    ("initial CH4 multiplier 1e308", SCENARIO_HEAD + initial_ch4("1e308"),
     "setting scenario.r.measure[1].initial_ch4.value: above 1e9 in magnitude; found '1e+308'"),
    # names and descriptions: control and terminal-escape characters, invisible characters, length
    ("terminal escape in a name", SCENARIO_HEAD + '[[scenario]]\nname = "red\\u001b[31mflag"\n',
     "setting scenario[2].name: holds control characters; found 'red\\x1b[31mflag'; expected printable "
     "text on one line"),
    ("bell and line break in a description",
     SCENARIO_HEAD + '[[scenario]]\nname = "x"\ndescription = "one\\u0007two\\nthree"\n',
     "setting scenario.x.description: holds control characters; found 'one\\x07two\\nthree'"),
    ("bidi override in a description", SCENARIO_HEAD + '[[scenario]]\nname = "x"\ndescription = "a\\u202eb"\n',
     "setting scenario.x.description: holds control characters; found 'a\\u202eb'"),
    ("zero-width space in a name", SCENARIO_HEAD + '[[scenario]]\nname = "half\\u200brewetted"\n',
     "setting scenario[2].name: holds an invisible character or a noncharacter; found "
     "'half\\u200brewetted (U+200B ZERO WIDTH SPACE at position 5)'"),
    ("noncharacter in a description", SCENARIO_HEAD + '[[scenario]]\nname = "x"\ndescription = "a\\uFFFFb"\n',
     "setting scenario.x.description: holds a noncharacter; found 'a\\uffffb (U+FFFF NONCHARACTER at position 2)'"),
    ("Cyrillic letter in a region filter", SCENARIO_HEAD + rewet(region='["T\\u0435stvale"]'),
     "setting scenario.r.measure[1].region: mixes alphabets within a word (letters that look alike but are "
     "others); found 'T\u0435stvale (U+0435 CYRILLIC SMALL LETTER IE at position 2)'"),
    ("name of 201 characters", SCENARIO_HEAD + f'[[scenario]]\nname = "{"n" * 201}"\n',
     "setting scenario[2].name: longer than 200 characters; found '" + "n" * 60
     + "... (201 characters)'; expected at most 200 characters"),
    ("description of 100,000 characters",
     SCENARIO_HEAD + f'[[scenario]]\nname = "x"\ndescription = "{"d" * 100_000}"\n',
     "setting scenario.x.description: longer than 2000 characters; found '" + "d" * 60 + "... (100,000 characters)'"),
    ("citation of 2,001 characters", SCENARIO_HEAD + rewet() + '[scenario.measure.initial_ch4]\nmode = "multiply"\n'
     f'value = 0.5\nyears = 5\ncitation = "{"c" * 2001}"\n',
     "setting scenario.r.measure[1].initial_ch4.citation: longer than 2000 characters"),
    # nesting and size
    ("arrays nested 3,000 deep", "horizon = " + "[" * 3000 + "]" * 3000 + "\n" + SCENARIO_HEAD,
     "scenarios.toml: arrays or tables nested too deeply to read (more than 8 levels are refused)"),
    ("tables nested 12 deep", SCENARIO_HEAD + rewet() + "[scenario.measure.initial_ch4" + ".x" * 12 + "]\ny = 1\n",
     "scenarios.toml: arrays or tables nested more than 8 levels deep (at scenario[1].measure[0].initial_ch4.x.x"),
]


@pytest.fixture(scope="module")
def scenario_settings(tmp_path_factory):
    folder = tmp_path_factory.mktemp("scenario-inputs")
    return load_settings(write_inventory(folder, [stratum(area_ha=100.0)]))


@pytest.mark.parametrize("case, body, expected", SCENARIO_CASES, ids=[c[0] for c in SCENARIO_CASES])
def test_hostile_scenario_file(case, body, expected, scenario_settings, tmp_path):
    from compiler.scenarios import load_scenarios

    path = tmp_path / "scenarios.toml"
    path.write_text(body, encoding="utf-8")
    with pytest.raises(InputError) as err:
        load_scenarios(path, scenario_settings)
    text = str(err.value)
    assert f"{path}" in text and expected in text, text
    assert "\x1b" not in text and "\a" not in text and "\u202e" not in text


def test_scenario_file_above_the_size_limit_is_not_read(scenario_settings, tmp_path, monkeypatch):
    from compiler.scenarios import load_scenarios

    path = tmp_path / "scenarios.toml"
    path.write_text(SCENARIO_HEAD + "# " + "x" * 2000 + "\n", encoding="utf-8")
    monkeypatch.setattr(Path, "read_bytes", lambda self: pytest.fail(f"{self} was read"))
    small_limit = scenario_settings.__class__(**{**scenario_settings.__dict__, "max_input_mb": 0.001})
    with pytest.raises(InputError, match=r"scenarios.toml: file is 2,\d+ bytes, above the limit of 0.001 MiB "
                                         r"\(settings \[limits\] max_input_mb\); it was not read"):
        load_scenarios(path, small_limit)


def test_scenario_escape_never_reaches_the_terminal(tmp_path, capsys):
    settings = write_inventory(tmp_path, [stratum(area_ha=100.0)])
    path = tmp_path / "scenarios.toml"
    path.write_text(SCENARIO_HEAD + '[[scenario]]\nname = "x\\u001b]0;owned\\u0007"\ndescription = "\\u001b[2J"\n',
                    encoding="utf-8")
    code = main(["scenarios", str(settings), "--scenarios", str(path), "--out", str(tmp_path / "out")])
    out, err = capsys.readouterr()
    assert code == 2 and "holds control characters" in err, err
    assert "\x1b" not in out + err and "\a" not in out + err
    assert not (tmp_path / "out").exists()


# ---------------------------------------------------------------- 6. a compressed previous submission

def gzip_bomb(unpacked_mib: int, name: str = "emissions.csv.gz"):
    """A previous submission whose gzip is small and unpacks to ``unpacked_mib`` MiB (the header, then lines of
    zeros), with a 1 MiB limit in the settings."""
    def build(folder: Path) -> Path:
        shutil.copytree(DEMO, folder)
        settings = folder / "inventory.toml"
        path = folder / "previous" / "emissions.csv.gz"
        header = gzip.decompress(path.read_bytes()).split(b"\n", 1)[0] + b"\n"
        buffer = io.BytesIO()
        with gzip.GzipFile(fileobj=buffer, mode="wb", mtime=0) as packed:
            packed.write(header)
            line = b"0" * 1023 + b"\n"
            for _ in range(unpacked_mib * 1024):
                packed.write(line)
        path.unlink()
        (folder / "previous" / name).write_bytes(buffer.getvalue())
        text = settings.read_text(encoding="utf-8").replace("previous/emissions.csv.gz", f"previous/{name}")
        settings.write_text(text + "\n[limits]\nmax_input_mb = 1\n", encoding="utf-8")
        assert len(buffer.getvalue()) < 1024 * 1024
        return settings
    return build


GZIP_CASES = [
    pytest.param(gzip_bomb(2), "emissions.csv.gz: the file unpacks to more than 1 MiB, above the limit (settings "
                 "[limits] max_input_mb); reading stopped there; expected an emissions.csv of at most 1 MiB unpacked",
                 id="gzip unpacking to 2 MiB"),
    pytest.param(gzip_bomb(64), "emissions.csv.gz: the file unpacks to more than 1 MiB", id="gzip unpacking to 64 MiB"),
    pytest.param(gzip_bomb(8, name="emissions.csv"), "emissions.csv: the file unpacks to more than 1 MiB",
                 id="gzip named .csv"),
]


@pytest.mark.parametrize("build, expected", GZIP_CASES)
def test_compressed_previous_submission_limited_by_unpacked_size(build, expected, tmp_path, capsys, previous_output):
    check_refused(build, expected, tmp_path, capsys, previous_output)


def test_unpacking_stops_at_the_limit(tmp_path, monkeypatch):
    # The gzip of 64 MiB is refused after about 1 MiB unpacked, not after reading it all.
    from compiler import recalculations

    settings = gzip_bomb(64)(tmp_path / "inputs")
    counted = []
    real = recalculations._Unpacked.readinto

    def readinto(self, buffer):
        try:
            return real(self, buffer)
        finally:
            counted.append(self.count)

    monkeypatch.setattr(recalculations._Unpacked, "readinto", readinto)
    with pytest.raises(InputError, match="unpacks to more than 1 MiB"):
        recalculations.load_export(settings.parent / "previous" / "emissions.csv.gz", 1)
    assert 1024 * 1024 < max(counted) <= 2 * 1024 * 1024


# ---------------------------------------------------------------- 9. DOCTYPE in any part read as XML

def renamed_part(data: bytes, old: str, new: str, edit=lambda xml: xml) -> bytes:
    """The workbook with part ``old`` moved to ``new`` (relationships and content types follow), ``edit``ed."""
    source = zipfile.ZipFile(io.BytesIO(data))
    short_old, short_new = old.split("/", 1)[1], new.split("/", 1)[1]
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_DEFLATED) as target:
        for info in source.infolist():
            content = source.read(info.filename)
            if info.filename == old:
                target.writestr(new, edit(content))
                continue
            if info.filename.endswith((".rels", "[Content_Types].xml")):
                content = content.replace(old.encode(), new.encode()).replace(short_old.encode(), short_new.encode())
            target.writestr(info.filename, content)
    return buffer.getvalue()


def with_part(data: bytes, name: str, content: bytes) -> bytes:
    source = zipfile.ZipFile(io.BytesIO(data))
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_DEFLATED) as target:
        for info in source.infolist():
            target.writestr(info.filename, source.read(info.filename))
        target.writestr(name, content)
    return buffer.getvalue()


DOCTYPE = b'<?xml version="1.0"?><!DOCTYPE x [<!ENTITY e "expanded">]>'


def doctype_in_front(xml: bytes) -> bytes:
    return DOCTYPE + (xml.split(b"?>", 1)[1] if xml.startswith(b"<?xml") else xml)


XLSX_CASES = [
    pytest.param(lambda f: small(f, data=renamed_part(workbook(), "xl/worksheets/sheet1.xml",
                                                      "xl/worksheets/sheet1.bin", doctype_in_front),
                                 name="activity.xlsx"),
                 "activity.xlsx: the workbook part xl/worksheets/sheet1.bin declares a DOCTYPE or XML entities; "
                 "refused unread (spreadsheet programs never write one; entity expansion can exhaust memory); "
                 "expected an .xlsx workbook saved by a spreadsheet program", id="sheet part named .bin"),
    pytest.param(lambda f: small(f, data=renamed_part(workbook(), "xl/styles.xml", "xl/styles",
                                                      lambda x: doctype_in_front(x).decode().encode("utf-16")),
                                 name="activity.xlsx"),
                 "activity.xlsx: the workbook part xl/styles declares a DOCTYPE or XML entities; refused unread",
                 id="UTF-16 styles part without a suffix"),
    pytest.param(lambda f: small(f, data=with_part(workbook(), "xl/media/image1.png", b"\n  " + DOCTYPE + b"<x/>"),
                                 name="activity.xlsx"),
                 "activity.xlsx: the workbook part xl/media/image1.png declares a DOCTYPE or XML entities",
                 id="XML named .png"),
]


@pytest.mark.parametrize("build, expected", XLSX_CASES)
def test_doctype_refused_in_every_part_read_as_xml(build, expected, tmp_path, capsys, previous_output):
    check_refused(build, expected, tmp_path, capsys, previous_output)


def test_binary_part_holding_doctype_bytes_is_read(tmp_path, capsys):
    # An image is not parsed as XML: bytes that spell a DOCTYPE inside it do not refuse the workbook.
    png = b"\x89PNG\r\n\x1a\n" + DOCTYPE + b"\x00" * 64
    settings = small(tmp_path / "inputs", data=with_part(workbook(), "xl/media/image1.png", png),
                     name="activity.xlsx")
    code = main(["check", str(settings)])
    out, err = capsys.readouterr()
    assert code == 0, out + err


def test_fire_burning_its_whole_stratum_is_accepted(tmp_path, capsys):
    # Remaining and converted land of the stratum together: 1.5 ha remaining + 0.5 ha converted hold a 2 ha fire.
    settings = small_with_fire(tmp_path / "inputs", "2020,Testvale,temperate,cropland,drained,wildfire,2.0")
    activity = tmp_path / "inputs" / "activity.csv"
    activity.write_text("year,region,climate_zone,land_use,soil_status,nutrient_status,drainage_depth,subtype,area_ha,"
                        "remaining_or_converted,previous_land_use\n"
                        "2020,Testvale,temperate,cropland,drained,,,,1.5,remaining,\n"
                        "2020,Testvale,temperate,cropland,drained,,,,0.5,converted,grassland\n", encoding="utf-8")
    code = main(["check", str(settings)])
    out, err = capsys.readouterr()
    assert code == 0, out + err


# ---------------------------------------------------------------- 3. Parquet parcel files

def parcels(**changes):
    """Two parcels of one stratum as a pyarrow table; ``changes`` replace columns (arrays or lists)."""
    import pyarrow as pa

    base = {"parcel_id": ["A", "B"], "year": [2020, 2020], "region": ["Testvale"] * 2,
            "climate_zone": ["temperate"] * 2, "land_use": ["cropland"] * 2, "soil_status": ["drained"] * 2,
            "nutrient_status": [""] * 2, "drainage_depth": [""] * 2, "subtype": [""] * 2, "area_ha": [1.0, 0.5]}
    base.update(changes)
    return pa.table(base)


def many_parcels(n: int, **columns):
    base = {k: v[:1] * n for k, v in parcels().to_pydict().items()}
    base.update(columns)
    return parcels(**base)


def empty_parcels():
    import pyarrow as pa

    return pa.table({name: pa.array([], type=column.type) for name, column in zip(parcels().column_names,
                                                                                   parcels().columns)})


def damaged_page(path: Path) -> None:
    """A file whose area_ha column has a damaged page header (its footer is intact, so the schema reads)."""
    import numpy as np
    import pyarrow.parquet as pq

    n = 5000
    table = many_parcels(n, area_ha=list(np.random.default_rng(1).random(n)))
    pq.write_table(table, path, compression="snappy")
    chunk = pq.read_metadata(path).row_group(0).column(table.column_names.index("area_ha"))
    data = bytearray(path.read_bytes())
    start = chunk.data_page_offset + 40
    data[start:start + 200] = bytes(range(200))
    path.write_bytes(bytes(data))


def write_table(table):
    def build(path: Path) -> None:
        import pyarrow.parquet as pq

        pq.write_table(table() if callable(table) else table, path)
    return build


def pa_array(values, kind: str):
    import pyarrow as pa

    types = {"int64": pa.int64(), "binary": pa.binary(), "decimal": pa.decimal128(38, 0),
             "map": pa.map_(pa.string(), pa.string())}
    return pa.array(values, type=types[kind])


PARQUET_CASES = [
    ("no rows", write_table(empty_parcels),
     "parcels.parquet, column area_ha: the parcel file has no rows; expected one row per parcel and year"),
    ("damaged page", damaged_page,
     "parcels.parquet, column area_ha: not a readable Parquet file: the data of this column cannot be read (a "
     "damaged page: Couldn't deserialize thrift"),
    ("parcel of 1e15 ha", lambda p: write_table(parcels(area_ha=[1e15, 1.0]))(p),
     "parcels.parquet, column area_ha: area_ha of a parcel is above 1e9 ha (2 parcels; strata 2020 Testvale); "
     "expected at most 1,000,000,000 ha"),
    ("area as int64 2**62", lambda p: write_table(parcels(area_ha=pa_array([2 ** 62, 1], "int64")))(p),
     "parcels.parquet, column area_ha: area_ha of a parcel is above 1e9 ha"),
    ("area as decimal 1e30", lambda p: write_table(parcels(area_ha=pa_array([10 ** 30, 1], "decimal")))(p),
     "parcels.parquet, column area_ha: area_ha of a parcel is above 1e9 ha"),
    ("10,000 parcels of 1e9 ha in one stratum", lambda p: write_table(many_parcels(10_000, area_ha=[1e9] * 10_000))(p),
     "parcels.parquet, column area_ha: the parcels of a stratum add up to more than its exact sum holds (10000 "
     "parcels; strata 2020 Testvale); expected at most 9.0e+12 ha per stratum and year"),
    ("area x uncertainty beyond the integer sum",
     lambda p: write_table(parcels(area_ha=[1e8, 1e8], area_uncertainty_pct=[500.0, 400.0]))(p),
     "parcels.parquet, column area_uncertainty_pct: area_ha x area_uncertainty_pct of a stratum is beyond the "
     "exact integer sum of the area-weighted mean (2 parcels; strata 2020 Testvale); expected area_ha x "
     "area_uncertainty_pct at most 9.0e+09 per stratum and year"),
    ("struct region", lambda p: write_table(parcels(region=[{"name": "Testvale"}, {"name": "Testvale"}]))(p),
     "parcels.parquet, column region: the column holds nested values (a struct, list or map in each cell); its "
     "Parquet type is struct<name: string>; expected text (string), whole or decimal numbers, or all blank: one "
     "value per cell"),
    ("list of areas", lambda p: write_table(parcels(area_ha=[[1.0], [0.5, 0.5]]))(p),
     "parcels.parquet, column area_ha: the column holds nested values (a struct, list or map in each cell); its "
     "Parquet type is list<element: double>"),
    ("map subtype", lambda p: write_table(parcels(subtype=pa_array([[("a", "b")], []], "map")))(p),
     "parcels.parquet, column subtype: the column holds nested values (a struct, list or map in each cell)"),
    ("binary region", lambda p: write_table(parcels(region=pa_array([b"Test\xffvale", b"Testvale"], "binary")))(p),
     "parcels.parquet, column region: the column's type cannot be read as region; its Parquet type is binary"),
    ("fractional year", lambda p: write_table(parcels(year=[2020.5, 2020.5]))(p),
     "parcels.parquet, column year: year is not a whole year (2 parcels; strata 2020.5 Testvale); found '2020.5'; "
     "expected a whole year such as 2020"),
    ("fractional year as text", lambda p: write_table(parcels(year=["2020", "2020.25"]))(p),
     "parcels.parquet, column year: year is not a whole year (1 parcels; strata 2020.25 Testvale); found '2020.25'"),
    ("year 1e20", lambda p: write_table(parcels(year=[1e20, 1e20]))(p),
     "parcels.parquet, column year: year outside 1900 to 2200 (2 parcels; strata 1e+20 Testvale); found '1e+20'; "
     "expected a whole year from 1900 to 2200"),
]


@pytest.mark.parametrize("engine", ["duckdb", "dask"])
@pytest.mark.parametrize("case, build, expected", PARQUET_CASES, ids=[c[0] for c in PARQUET_CASES])
def test_hostile_parcel_file(case, build, expected, engine, tmp_path):
    pytest.importorskip("duckdb")
    dask = pytest.importorskip("dask")
    pytest.importorskip("dask.dataframe")
    from compiler.parcels import aggregate_parcels

    path = tmp_path / "parcels.parquet"
    build(path)
    with dask.config.set(scheduler="synchronous"), pytest.raises(InputError) as err:
        aggregate_parcels(path, engine=engine)
    assert expected in str(err.value), str(err.value)


def parquet_inventory(build):
    def make(folder: Path) -> Path:
        settings = small(folder)
        (folder / "activity.csv").unlink()
        build(folder / "parcels.parquet")
        settings.write_text(settings.read_text().replace('"activity.csv"', '"parcels.parquet"'), encoding="utf-8")
        return settings
    return make


@pytest.mark.parametrize("case, build, expected", [c for c in PARQUET_CASES if c[0] in (
    "no rows", "damaged page", "struct region", "10,000 parcels of 1e9 ha in one stratum")],
    ids=lambda c: c if isinstance(c, str) else "")
def test_hostile_parcel_file_through_the_command(case, build, expected, tmp_path, capsys, previous_output):
    pytest.importorskip("duckdb")
    check_refused(parquet_inventory(build), expected, tmp_path, capsys, previous_output)


def test_parcel_file_of_more_than_1000_columns(tmp_path):
    pytest.importorskip("duckdb")
    from compiler.parcels import aggregate_parcels

    path = tmp_path / "parcels.parquet"
    write_table(parcels(**{f"extra{i}": [0, 0] for i in range(992)}))(path)
    with pytest.raises(InputError, match="parcels.parquet: the file has 1,002 columns, above the limit of 1,000"):
        aggregate_parcels(path)
