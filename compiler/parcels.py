"""Parcel-level activity data: a Parquet file of parcels -> the stratum table of an activity CSV.

A parcel file has one row per parcel and year, with the stratum columns of the activity data
(``year, region, climate_zone, land_use, soil_status, nutrient_status, drainage_depth, subtype,
area_ha`` and optionally ``parcel_id, remaining_or_converted, previous_land_use, ditch_fraction,
area_uncertainty_pct``). :func:`aggregate_parcels` adds the parcels of each year, region and
stratum together and returns the table an activity CSV would hold, plus ``parcel_count``.

The group-by runs inside the engine, reading the Parquet file directly, so a file larger than
memory still aggregates: DuckDB (``engine="duckdb"``, one SQL query over ``read_parquet``) or
Dask (``engine="dask"``, ``dask.dataframe`` on whatever scheduler is configured). Both are optional
dependencies (``pip install 'histosol[parcels]'``).

Which values are grouped, and when they are validated
-----------------------------------------------------
The engine groups on the **raw** cell values (text as given, numbers as text), which is cheap and
exact; the controlled terms are then normalised and validated on the distinct raw values only
(:func:`compiler.vocabulary.normalise_column`, the same rules as the CSV reader), and groups whose
raw spellings normalise to the same stratum (``Forest Land`` and ``forest_land``) are added
together. Every problem is reported with the file and column (and the year and region of the
stratum); the row of a parcel is not known once aggregated.

Arithmetic, chosen so that the result does not depend on the engine, the number of threads or the
order of the rows (two runs give identical tables, and DuckDB and Dask give the same table):

- ``area_ha`` is summed as integers of 1e-6 ha (``floor(area x 1e6 + 0.5)`` per parcel: 0.01 m2,
  far below any survey's precision), then divided by 1e6;
- ``ditch_fraction`` and ``area_uncertainty_pct`` are area-weighted means over the parcels that
  give one: where every such parcel gives the same value, that value; otherwise
  ``sum(area x value) / sum(area)`` with the products summed as integers of 1e-9 ha (1e-9 ha x %
  for the uncertainty). The weighted mean of the uncertainty treats the area errors of one
  stratum's parcels as fully correlated (Eq. 3.2 of the 2006 IPCC Guidelines Vol. 1 with a
  correlation of one): conservative where they are independent. A stratum of zero area keeps the
  smallest value given.

Limits, each refused with the file and column (never an overflow or a crash of the engine): a parcel's
area at most 1e9 ha; the integer sums of a stratum and year below 9e18 (int64), that is at most 9e12 ha
of area and 9e9 of area x value (ha x fraction, ha x %: e.g. 9e7 ha at 100 %). A floating-point twin of
each sum tests the range, so that neither engine's integer sum overflows unseen.

What else is refused: a file without rows; a column read (the activity columns) whose Parquet type is
nested (struct, list, map) or neither text nor a number (binary, timestamps); a page that cannot be read
(the column is named: each column is read alone with pyarrow to find it); a year that is fractional or
outside 1900 to 2200; more than 1,000 columns.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from .errors import Finding, FindingLog, InputError
from .readers import printable
from .vocabulary import TERMS, describe_accepted, normalise_column, normalise_text

ENGINES = ("duckdb", "dask")
TERM_COLUMNS = ["climate_zone", "land_use", "soil_status", "nutrient_status", "drainage_depth", "subtype",
                "remaining_or_converted", "previous_land_use"]
GROUP_COLUMNS = ["year", "region", *TERM_COLUMNS]  # raw text, '' for a missing value
REQUIRED = ["year", "region", "climate_zone", "land_use", "soil_status", "nutrient_status", "drainage_depth",
            "subtype", "area_ha"]
OPTIONAL = ["parcel_id", "remaining_or_converted", "previous_land_use", "ditch_fraction", "area_uncertainty_pct"]
STRATUM_COLUMNS = ["year", "region", "climate_zone", "land_use", "soil_status", "nutrient_status",
                   "drainage_depth", "subtype", "area_ha", "ditch_fraction", "remaining_or_converted",
                   "previous_land_use", "area_uncertainty_pct"]  # the columns of an activity CSV
AREA_SCALE = 1_000_000  # area sums in integers of 1e-6 ha
PRODUCT_SCALE = 1_000_000_000  # area x value sums in integers of 1e-9 ha x value
MEANS = {"ditch_fraction": (0.0, 1.0, "a fraction from 0 to 1"),
         "area_uncertainty_pct": (0.0, 1000.0, "a 95 % half-width in percent, 0 to 1000")}
MAX_SHOWN = 10  # strata named per problem before "and N more"
# Per-group aggregates the engines compute: name -> how they combine (sum, min or max).
AGGREGATES = {"parcel_count": "sum", "area_blank": "sum", "area_not_number": "sum", "area_negative": "sum",
              "area_too_large": "sum", "area_units": "sum", "area_float": "sum",
              **{f"{c}_{part}": how for c in MEANS for part, how in
                 (("given", "sum"), ("bad", "sum"), ("n", "sum"), ("units", "sum"), ("weighted", "sum"),
                  ("min", "min"), ("max", "max"), ("product_float", "sum"))}}
# Sums kept as floating point: they only test the integer sums against their range (below), never give a number.
FLOAT_SUMS = ("area_float", *(f"{c}_product_float" for c in MEANS))
YEAR_RANGE = (1900, 2200)  # as the activity reader's, where the settings give no range
MAX_PARCEL_HA = 1e9  # a parcel's area: the readers' limit of an area (the world's peatlands cover about 4e8 ha)
# The integer sums are int64: a stratum's area in 1e-6 ha and its area x value in 1e-9 ha x value must stay
# below 2**63 (about 9.2e18). Beyond INTEGER_SUM_LIMIT the stratum is refused, and the engines' sums are cut
# there, so that neither overflows (DuckDB would stop with a conversion error, numpy would wrap around).
INTEGER_SUM_LIMIT = 9e18
ACCEPTED_TYPES = "text (string), whole or decimal numbers, or all blank"


def aggregate_parcels(path: str | Path, engine: str = "duckdb", log: FindingLog | None = None, *,
                      threads: int | None = None, memory_limit: str | None = None) -> pd.DataFrame:
    """The stratum table of a Parquet file of parcels: one row per year, region and stratum.

    Parameters
    ----------
    path : str or Path
        A Parquet file, one row per parcel and year (columns in the module docstring; headers are
        read as the activity CSV's are, e.g. ``Area (ha)`` for ``area_ha``).
    engine : {"duckdb", "dask"}
        Where the group-by runs. Both read the file directly and never hold all parcels.
    log : FindingLog, optional
        Findings are added here; without one, errors raise :class:`InputError` (warnings are lost).
        With one, strata with errors are left out of the table and the caller raises.
    threads, memory_limit : optional
        DuckDB's ``threads`` and ``memory_limit`` settings (e.g. ``"2GB"``; beyond it DuckDB spills
        to disk). Ignored by Dask, which uses its configured scheduler.

    Returns
    -------
    pandas.DataFrame
        The columns of an activity CSV (:data:`STRATUM_COLUMNS`: ``year`` int, text columns
        normalised, ``area_ha`` [ha], ``ditch_fraction`` [fraction] and ``area_uncertainty_pct``
        [%] NaN where no parcel gives one) and ``parcel_count``, sorted by year, region and stratum.
    """
    path = Path(path)
    own_log = log is None
    log = FindingLog() if own_log else log
    if engine not in ENGINES:
        raise ValueError(f"engine must be one of {', '.join(ENGINES)}; got {engine!r}")
    file = str(path)
    if not path.is_file():
        raise InputError([Finding("error", "read", "parcel file not found", file=file)])
    missing = _missing_packages(engine)
    if missing:
        log.add("error", "parcels", f"reading a Parquet file of parcels with {engine} needs "
                f"{' and '.join(missing)}: pip install 'histosol[parcels]'", file=file, column="inputs.engine",
                found=engine, expected=" | ".join(ENGINES))
        columns = None
    else:
        columns = _columns(path, log)
    if columns is None:
        table = _empty()
    else:
        try:
            grouped = (_group_duckdb(path, columns, threads, memory_limit) if engine == "duckdb"
                       else _group_dask(path, columns))
        except (MemoryError, KeyboardInterrupt):
            raise
        except Exception as exc:  # DuckDB and pyarrow raise many types for a damaged page or column chunk
            _unreadable(path, columns, exc, log)
            grouped = None
        if grouped is None:
            table = _empty()
            if own_log:
                log.raise_if_errors()
            return table
        table = _finish(grouped, file, log)
        log.add("info", "parcels", f"{int(table['parcel_count'].sum())} parcel-years aggregated into {len(table)} "
                f"strata with {engine}; row numbers in findings count the strata of that table (header = row 1), "
                "sorted by year, region and stratum", file=file)
    if own_log:
        log.raise_if_errors()
    return table


def load_parcel_activity(settings, log: FindingLog) -> tuple[pd.DataFrame, str]:
    """``[inputs] activity = "*.parquet"``: the typed, validated activity frame of a parcel file.

    The stratum table of :func:`aggregate_parcels` (engine ``settings.engine``) goes through the
    same column checks as a CSV (:func:`compiler.activity.validate_columns`), as text cells that
    parse back to the same numbers, so a parcel file compiles exactly as the CSV of its stratum
    table would. Returns ``(frame, sheet)`` as the CSV loader does (sheet is blank).
    """
    from .activity import ACTIVITY_COLUMNS, CellChecker, validate_columns
    from .readers import ROW

    path = Path(settings.activity)
    table = aggregate_parcels(path, getattr(settings, "engine", "duckdb"), log)
    if table.empty:
        return pd.DataFrame(), ""
    frame = validate_columns(stratum_cells(table, ROW), ACTIVITY_COLUMNS, CellChecker(log, str(path), ""), settings)
    frame["parcel_count"] = table["parcel_count"].to_numpy()
    frame.attrs["file"], frame.attrs["sheet"] = str(path), ""
    return frame, ""


def _missing_packages(engine: str) -> list[str]:
    import importlib.util

    needed = ["pyarrow", "duckdb"] if engine == "duckdb" else ["pyarrow", "dask"]
    missing = [name for name in needed if importlib.util.find_spec(name) is None]
    if engine == "dask" and not missing:
        try:
            import dask.dataframe  # noqa: F401  (needs dask[dataframe]: pandas, pyarrow)
        except ImportError:
            missing.append("dask[dataframe]")
    return missing


def to_activity_csv(table: pd.DataFrame, path: str | Path) -> Path:
    """Write a stratum table as an activity CSV (without ``parcel_count``); numbers round-trip exactly."""
    path = Path(path)
    table[STRATUM_COLUMNS].to_csv(path, index=False, lineterminator="\n", encoding="utf-8")
    return path


def stratum_cells(table: pd.DataFrame, row_column: str = "_row") -> pd.DataFrame:
    """The stratum table as text cells, as the activity reader returns a CSV of it.

    Numbers are written with ``repr`` (so that parsing them gives the same floats), a missing value
    as blank; ``row_column`` numbers the strata 2, 3, ... (as rows of a CSV with a header).
    """
    cells = pd.DataFrame(index=range(len(table)))
    for col in STRATUM_COLUMNS:
        values = table[col].reset_index(drop=True)
        if col == "year":
            cells[col] = values.astype("int64").astype(str).astype(object)
        elif pd.api.types.is_float_dtype(values):
            cells[col] = [("" if np.isnan(v) else repr(float(v))) for v in values.to_numpy(float)]
        else:
            cells[col] = values.astype(object).where(values.notna(), "").astype(str).astype(object)
    cells[row_column] = np.arange(2, len(table) + 2)
    return cells


# --- reading the schema ----------------------------------------------------------------------------


def _header(name: str) -> str:
    from .activity import HEADER_ALIASES  # the CSV reader's header names, in one place

    norm = normalise_text(name)
    return HEADER_ALIASES.get(norm, norm)


def _columns(path: Path, log: FindingLog) -> dict | None:
    """Map internal column names to the file's columns and their kinds (text or number); None on error."""
    import pyarrow.parquet as pq

    try:
        schema = pq.read_schema(path)
    except Exception as exc:  # pyarrow raises several types for a file that is not Parquet
        log.add("error", "read", f"not a readable Parquet file ({type(exc).__name__})", file=str(path),
                expected="a Parquet file with one row per parcel and year")
        return None
    from .readers import MAX_COLUMNS

    if len(schema) > MAX_COLUMNS:
        log.add("error", "columns", f"the file has {len(schema):,} columns, above the limit of {MAX_COLUMNS:,}",
                file=str(path), expected=f"at most {MAX_COLUMNS:,} columns (a parcel file needs about 15)")
        return None
    import pyarrow as pa

    found: dict[str, tuple[str, str]] = {}
    types: dict[str, object] = {}
    duplicated = []
    for field in schema:
        internal = _header(field.name)
        if internal in found:
            duplicated.append(internal)
        numeric = pa.types.is_integer(field.type) or pa.types.is_floating(field.type) or pa.types.is_decimal(field.type)
        found[internal] = (field.name, "number" if numeric else "text")
        types[internal] = field.type
    for name in sorted(set(duplicated)):
        log.add("error", "columns", "column appears more than once", file=str(path), column=name, found=name)
    missing = [c for c in REQUIRED if c not in found]
    if missing:
        log.add("error", "columns", "required column missing", file=str(path), column=", ".join(missing),
                found=", ".join(found), expected="columns " + ", ".join(REQUIRED))
    if missing or duplicated:
        return None
    unusable = False
    for name in REQUIRED + OPTIONAL:  # the columns read: one plain value per cell
        if name in types and not _plain_type(types[name]):
            nested = (pa.types.is_nested(types[name]) or pa.types.is_dictionary(types[name]))
            log.add("error", "parcels", ("the column holds nested values (a struct, list or map in each cell)"
                                         if nested else f"the column's type cannot be read as {name}")
                    + f"; its Parquet type is {printable(str(types[name]))[:120]}", file=str(path),
                    column=printable(found[name][0]), expected=f"{ACCEPTED_TYPES}: one value per cell")
            unusable = True
    try:
        rows = pq.read_metadata(path).num_rows
    except Exception as exc:  # a footer that read_schema accepted but whose row groups are damaged
        log.add("error", "read", f"not a readable Parquet file ({type(exc).__name__})", file=str(path),
                expected="a Parquet file with one row per parcel and year")
        return None
    if rows == 0:
        log.add("error", "parcels", "the parcel file has no rows", file=str(path), column=found["area_ha"][0],
                expected="one row per parcel and year")
        return None
    if unusable:
        return None
    extra = [f for f in found if f not in REQUIRED + OPTIONAL]
    if extra:
        log.add("warning", "columns", "column not used by the compiler (kept in your file, ignored here)",
                file=str(path), column=", ".join(extra))
    return {c: found[c] for c in REQUIRED + OPTIONAL if c in found}


def _plain_type(kind) -> bool:
    """Text, numbers, or the null type of an all-blank column (also as a dictionary of text or numbers)."""
    import pyarrow as pa

    if pa.types.is_dictionary(kind):
        kind = kind.value_type
    return (pa.types.is_string(kind) or pa.types.is_large_string(kind) or pa.types.is_integer(kind)
            or pa.types.is_floating(kind) or pa.types.is_decimal(kind) or pa.types.is_null(kind)
            or (hasattr(pa.types, "is_string_view") and pa.types.is_string_view(kind)))


def _unreadable(path: Path, columns: dict, exc: Exception, log: FindingLog) -> None:
    """An engine could not read the data: name the first column whose pages do not read (pyarrow, one column
    at a time), else the file."""
    import pyarrow.parquet as pq

    reason = printable(str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__)[:160]
    for name, _kind in columns.values():
        try:
            pq.read_table(path, columns=[name])
        except Exception as column_exc:  # pyarrow raises OSError, ArrowInvalid, ... for a damaged page
            log.add("error", "read", "not a readable Parquet file: the data of this column cannot be read (a "
                    f"damaged page: {printable(str(column_exc).strip().splitlines()[0])[:160]})", file=str(path),
                    column=printable(name), expected="the file written again by the program that made it")
            return
    log.add("error", "read", f"not a readable Parquet file ({type(exc).__name__}: {reason})", file=str(path),
            expected="the file written again by the program that made it")


# --- the engines --------------------------------------------------------------------------------


def _sql_identifier(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _sql_text(column: tuple[str, str] | None) -> str:
    """A column as trimmed-free raw text, '' where missing (the group key)."""
    if column is None:
        return "''"
    name, kind = column
    return f"COALESCE(CAST({_sql_identifier(name)} AS VARCHAR), '')"


def _sql_number(column: tuple[str, str] | None) -> tuple[str, str]:
    """(given, value) expressions: given = the cell is not blank; value = the number or NULL."""
    if column is None:
        return "FALSE", "CAST(NULL AS DOUBLE)"
    name, kind = column
    ident = _sql_identifier(name)
    if kind == "number":  # NaN counts as blank, as pandas reads it
        return f"({ident} IS NOT NULL AND NOT isnan(CAST({ident} AS DOUBLE)))", f"CAST({ident} AS DOUBLE)"
    text = f"trim(CAST({ident} AS VARCHAR))"
    return f"({ident} IS NOT NULL AND {text} <> '')", f"TRY_CAST({text} AS DOUBLE)"


def _group_duckdb(path: Path, columns: dict, threads: int | None, memory_limit: str | None) -> pd.DataFrame:
    import duckdb

    keys = ",\n".join(f"{_sql_text(columns.get(c))} AS {c}" for c in GROUP_COLUMNS)
    area_given, area = _sql_number(columns["area_ha"])
    parts = [f"{area_given} AS area_given", f"{area} AS area"]
    for c in MEANS:
        given, value = _sql_number(columns.get(c))
        parts += [f"{given} AS {c}_given", f"{value} AS {c}"]
    # Per parcel: is the area usable, and its integer 1e-6 ha; per mean column: is the value usable.
    ok_area = f"(area_given AND isfinite(area) AND area >= 0 AND area <= {MAX_PARCEL_HA:.1f})"
    cap = f"{INTEGER_SUM_LIMIT:.0f}"

    def capped(expression: str) -> str:  # an integer sum cut at INTEGER_SUM_LIMIT (such strata are refused)
        return f"CAST(LEAST(SUM({expression}), {cap}) AS BIGINT)"

    aggregates = [
        "COUNT(*) AS parcel_count",
        "SUM(CASE WHEN NOT area_given THEN 1 ELSE 0 END) AS area_blank",
        "SUM(CASE WHEN area_given AND (area IS NULL OR NOT isfinite(area)) THEN 1 ELSE 0 END) AS area_not_number",
        "SUM(CASE WHEN area_given AND isfinite(area) AND area < 0 THEN 1 ELSE 0 END) AS area_negative",
        f"SUM(CASE WHEN area_given AND isfinite(area) AND area > {MAX_PARCEL_HA:.1f} THEN 1 ELSE 0 END) "
        "AS area_too_large",
        capped(f"CASE WHEN {ok_area} THEN CAST(floor(area * {AREA_SCALE}.0 + 0.5) AS BIGINT) ELSE 0 END")
        + " AS area_units",
        f"SUM(CASE WHEN {ok_area} THEN area ELSE 0.0 END) AS area_float",
    ]
    for c, (low, high, _) in MEANS.items():
        ok_value = f"({c} IS NOT NULL AND isfinite({c}) AND {c} >= {low} AND {c} <= {high})"
        use = f"({c}_given AND {ok_value} AND {ok_area})"
        product = f"(area * {c} * {PRODUCT_SCALE}.0)"
        aggregates += [
            f"SUM(CASE WHEN {c}_given THEN 1 ELSE 0 END) AS {c}_given",
            f"SUM(CASE WHEN {c}_given AND NOT {ok_value} THEN 1 ELSE 0 END) AS {c}_bad",
            f"SUM(CASE WHEN {use} THEN 1 ELSE 0 END) AS {c}_n",
            capped(f"CASE WHEN {use} THEN CAST(floor(area * {AREA_SCALE}.0 + 0.5) AS BIGINT) ELSE 0 END")
            + f" AS {c}_units",
            capped(f"CASE WHEN {use} AND {product} < {cap} THEN CAST(floor({product} + 0.5) AS BIGINT) "
                   f"ELSE 0 END") + f" AS {c}_weighted",
            f"SUM(CASE WHEN {use} THEN {product} ELSE 0.0 END) AS {c}_product_float",
            f"MIN(CASE WHEN {use} THEN {c} END) AS {c}_min",
            f"MAX(CASE WHEN {use} THEN {c} END) AS {c}_max",
        ]
    source = "read_parquet('" + str(path).replace("'", "''") + "')"
    query = (f"WITH parcels AS (SELECT {keys}, {', '.join(parts)} FROM {source})\n"
             f"SELECT {', '.join(GROUP_COLUMNS)}, {', '.join(aggregates)} FROM parcels "
             f"GROUP BY {', '.join(GROUP_COLUMNS)}")
    config = {}
    if threads:
        config["threads"] = int(threads)
    if memory_limit:
        config["memory_limit"] = str(memory_limit)
    con = duckdb.connect(":memory:", config=config)
    try:
        return con.execute(query).df()
    finally:
        con.close()


def _prepare_partition(frame: pd.DataFrame, columns: dict) -> pd.DataFrame:
    """Per parcel (one partition, pandas): the group keys and the numbers the aggregates add."""
    out = pd.DataFrame(index=frame.index)
    for c in GROUP_COLUMNS:
        col = columns.get(c)
        if col is None:
            out[c] = ""
            continue
        values = frame[col[0]]
        text = values.astype(object).where(values.notna(), "")
        if col[1] == "number" and pd.api.types.is_float_dtype(values):
            # DuckDB's text of a double: integral values with ".0", as Python prints them.
            text = text.map(lambda v: "" if v == "" else repr(float(v)))
        out[c] = text.astype(str).astype(object)

    def number(col):
        if col is None:
            return np.zeros(len(frame), dtype=bool), np.full(len(frame), np.nan)
        values = frame[col[0]]
        if col[1] == "number":
            return values.notna().to_numpy(bool), pd.to_numeric(values, errors="coerce").astype("float64").to_numpy()
        text = values.astype(object).where(values.notna(), "").astype(str).str.strip()
        given = (text != "").to_numpy(bool)
        return given, pd.to_numeric(text.where(text != ""), errors="coerce").astype("float64").to_numpy()

    area_given, area = number(columns["area_ha"])
    with np.errstate(invalid="ignore"):
        finite = np.isfinite(area)
        too_large = area_given & finite & (area > MAX_PARCEL_HA)
        ok_area = area_given & finite & (area >= 0) & ~too_large
        units = np.where(ok_area, np.floor(np.where(ok_area, area, 0.0) * float(AREA_SCALE) + 0.5), 0.0)
    out["parcel_count"] = np.ones(len(frame), dtype=np.int64)
    out["area_blank"] = (~area_given).astype(np.int64)
    out["area_not_number"] = (area_given & ~finite).astype(np.int64)
    out["area_negative"] = (area_given & finite & (area < 0)).astype(np.int64)
    out["area_too_large"] = too_large.astype(np.int64)
    out["area_units"] = units.astype(np.int64)
    out["area_float"] = np.where(ok_area, area, 0.0)
    for c, (low, high, _) in MEANS.items():
        given, value = number(columns.get(c))
        with np.errstate(invalid="ignore"):
            ok_value = np.isfinite(value) & (value >= low) & (value <= high)
            use = given & ok_value & ok_area
            exact = np.where(use, area, 0.0) * np.where(use, value, 0.0) * float(PRODUCT_SCALE)
            fits = exact < INTEGER_SUM_LIMIT
            product = np.where(fits, exact, 0.0) + 0.5
        out[f"{c}_given"] = given.astype(np.int64)
        out[f"{c}_bad"] = (given & ~ok_value).astype(np.int64)
        out[f"{c}_n"] = use.astype(np.int64)
        out[f"{c}_units"] = np.where(use, units, 0.0).astype(np.int64)
        out[f"{c}_weighted"] = np.where(use & fits, np.floor(product), 0.0).astype(np.int64)
        out[f"{c}_product_float"] = exact
        out[f"{c}_min"] = np.where(use, value, np.nan)
        out[f"{c}_max"] = np.where(use, value, np.nan)
    return out


def _group_dask(path: Path, columns: dict) -> pd.DataFrame:
    import dask.dataframe as dd

    names = [col[0] for col in columns.values()]
    parcels = dd.read_parquet(str(path), columns=names)
    meta = _prepare_partition(parcels._meta, columns)
    prepared = parcels.map_partitions(_prepare_partition, columns, meta=meta)
    grouped = prepared.groupby(GROUP_COLUMNS, dropna=False, sort=False).agg(AGGREGATES)
    table = grouped.compute().reset_index()
    for c in ("area_units", *(f"{m}_{part}" for m in MEANS for part in ("units", "weighted"))):
        # As DuckDB's sums, cut at the limit; a sum that wrapped around is caught by its float twin in _finish.
        table[c] = table[c].clip(upper=int(INTEGER_SUM_LIMIT))
    return table


# --- validation and the final table (the same for both engines) --------------------------------------


def _empty() -> pd.DataFrame:
    frame = pd.DataFrame({c: pd.Series(dtype=object) for c in STRATUM_COLUMNS})
    frame["year"] = frame["year"].astype("int64")
    for c in ("area_ha", "ditch_fraction", "area_uncertainty_pct"):
        frame[c] = frame[c].astype(float)
    frame["parcel_count"] = pd.Series(dtype="int64")
    return frame


def _strata_text(groups: pd.DataFrame, limit: int = MAX_SHOWN) -> str:
    shown = [f"{y} {r}" for y, r in groups[["year", "region"]].drop_duplicates().head(limit).itertuples(index=False)]
    more = len(groups[["year", "region"]].drop_duplicates()) - len(shown)
    return ", ".join(shown) + (f" and {more} more" if more > 0 else "")


def _finish(grouped: pd.DataFrame, file: str, log: FindingLog) -> pd.DataFrame:
    """Normalise and validate the distinct raw values, add spelling variants together, compute means."""
    g = grouped.copy()
    for c in GROUP_COLUMNS:
        g[c] = g[c].astype(object).where(g[c].notna(), "").astype(str)
    for c, how in AGGREGATES.items():
        if how == "sum" and c not in FLOAT_SUMS:
            g[c] = g[c].fillna(0).astype(np.int64)
        else:
            g[c] = g[c].astype(float)
    bad = np.zeros(len(g), dtype=bool)

    def error(mask, column, message, found="", expected=""):
        nonlocal bad
        mask = np.asarray(mask, dtype=bool)
        if not mask.any():
            return
        parcels = int(g.loc[mask, "parcel_count"].sum())
        log.add("error", "parcels", f"{message} ({parcels} parcels; strata {_strata_text(g[mask])})", file=file,
                column=column, found=found, expected=expected)
        bad |= mask

    # Year: a whole number (the text of the group key; '2020' and '2020.0' are the same year).
    year_text = g["year"].str.strip()
    year = pd.to_numeric(year_text.where(year_text != ""), errors="coerce")
    error(year_text == "", "year", "year is blank", expected="a whole year such as 2020")
    not_whole = (year_text != "") & (year.isna() | (year != np.floor(year.fillna(0))))
    for value in sorted(set(g.loc[not_whole, "year"]))[:MAX_SHOWN]:
        error(not_whole & (g["year"] == value), "year", "year is not a whole year", found=value,
              expected="a whole year such as 2020")
    outside = ~not_whole & year.notna() & ((year < YEAR_RANGE[0]) | (year > YEAR_RANGE[1]))
    for value in sorted(set(g.loc[outside, "year"]))[:MAX_SHOWN]:
        error(outside & (g["year"] == value), "year", f"year outside {YEAR_RANGE[0]} to {YEAR_RANGE[1]}",
              found=value, expected=f"a whole year from {YEAR_RANGE[0]} to {YEAR_RANGE[1]}")
    g["year"] = year.where(~not_whole & ~outside & (year_text != ""), 0).fillna(0).astype(np.int64)

    # Region: free text, trimmed as the CSV reader trims it.
    region = g["region"].str.strip()
    error(region == "", "region", "region is blank", expected="a value")
    g["region"] = region

    # Controlled terms: normalised and checked on the distinct raw values of each column.
    for c in TERM_COLUMNS:
        raw = g[c].where(g[c].str.strip() != "", "remaining") if c == "remaining_or_converted" else g[c]
        values, unknown = normalise_column(raw, c)
        if "" not in TERMS[c]:  # a blank where a term is required: reported as blank, not as unknown
            blank = (raw.str.strip() == "").to_numpy(bool)
            error(blank, c, f"{c} is blank", expected=describe_accepted(c))
            unknown = {v: near for v, near in unknown.items() if v.strip() != ""}
        for value, near in unknown.items():
            error(values == value, c, f"unknown {c}", found=value,
                  expected=describe_accepted(c) + (f" (closest: {near})" if near else ""))
        g[c] = values

    # Numbers, counted per group by the engine.
    error(g["area_blank"] > 0, "area_ha", "area_ha is blank", expected="a number")
    error(g["area_not_number"] > 0, "area_ha", "area_ha is not a finite number",
          expected="a number with '.' as decimal mark")
    error(g["area_negative"] > 0, "area_ha", "area_ha is negative", expected=">= 0")
    error(g["area_too_large"] > 0, "area_ha", "area_ha of a parcel is above 1e9 ha",
          expected="at most 1,000,000,000 ha (the world's peatlands cover about 4e8 ha)")
    # The sums of a stratum are whole numbers of 1e-6 ha (and 1e-9 ha x value) in int64: refused beyond.
    error(g["area_float"] * AREA_SCALE >= INTEGER_SUM_LIMIT, "area_ha", "the parcels of a stratum add up to more "
          "than its exact sum holds", expected=f"at most {INTEGER_SUM_LIMIT / AREA_SCALE:.1e} ha per stratum and year "
          "(the readers refuse a stratum above 1e9 ha)")
    for c, (_, _, expected) in MEANS.items():
        error(g[f"{c}_bad"] > 0, c, f"{c} is not {expected}", expected=expected)
        error(g[f"{c}_product_float"] >= INTEGER_SUM_LIMIT, c, f"area_ha x {c} of a stratum is beyond the exact "
              "integer sum of the area-weighted mean",
              expected=f"area_ha x {c} at most {INTEGER_SUM_LIMIT / PRODUCT_SCALE:.1e} per stratum and year")

    # As the CSV reader does: previous_land_use means something only on converted land.
    remaining = (g["remaining_or_converted"] != "converted") & (g["previous_land_use"] != "")
    if remaining.any():
        log.add("warning", "conversion", "previous_land_use given on land marked remaining; ignored "
                f"(strata {_strata_text(g[remaining])})", file=file, column="previous_land_use", expected="blank")
        g.loc[remaining, "previous_land_use"] = ""

    g = g[~bad]
    keys = ["year", "region", *TERM_COLUMNS]
    how = dict(AGGREGATES)
    merged = g.groupby(keys, sort=True, dropna=False).agg(how).reset_index()
    out = merged[keys].copy()
    out["area_ha"] = merged["area_units"].to_numpy(np.int64) / AREA_SCALE
    partial = []
    for c in MEANS:
        n = merged[f"{c}_n"].to_numpy(np.int64)
        low, high = merged[f"{c}_min"].to_numpy(float), merged[f"{c}_max"].to_numpy(float)
        units = merged[f"{c}_units"].to_numpy(np.int64)
        with np.errstate(invalid="ignore", divide="ignore"):
            weighted = (merged[f"{c}_weighted"].to_numpy(np.int64) / PRODUCT_SCALE) / (units / AREA_SCALE)
        mean = np.where(n == 0, np.nan, np.where((low == high) | (units == 0), low, weighted))
        out[c] = mean
        usable = merged["parcel_count"].to_numpy(np.int64)
        partial.append((c, (n > 0) & (n < usable)))
    for c, mask in partial:
        if mask.any():
            log.add("warning", "parcels", f"{c} given for some parcels of a stratum only: the area-weighted mean "
                    f"of those given applies to the whole stratum (strata {_strata_text(out[mask])})",
                    file=file, column=c)
    out["parcel_count"] = merged["parcel_count"].to_numpy(np.int64)
    out = out[STRATUM_COLUMNS + ["parcel_count"]].reset_index(drop=True)
    for c in ["region", *TERM_COLUMNS]:
        out[c] = out[c].astype(object)
    return out
