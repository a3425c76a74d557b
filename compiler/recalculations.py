"""Recalculations: the current submission against the previous one, with the cause of every difference.

Rows of the two tidy exports are matched on year, region, stratum and
pathway. For a matched row, with A the area and EF = E / A the implied
factor in t CO2-eq per ha (which carries the factor value, the unit
conversion and the GWP):

    dE = (A1 - A0) x EF0  +  A1 x (EF1 - EF0)
         activity change     factor change (including a GWP set or factor-set change)

which equals E1 - E0 exactly. For the off-site CO2 of extracted peat (pathway
``co2_offsite``) the activity A is the tonnes of air-dry peat (the row's
``parameter_value``), as the row has no area. The factor change is split further. With g the
GWP of the row's gas in each submission (CO2-eq / t of gas) and f = E / A in t
of gas per ha:

    A1 x (EF1 - EF0) = A1 x f0 x (g1 - g0)  +  A1 x g1 x (f1 - f0)
                       GWP change              factor change in t of gas

and the factor change in t of gas goes whole to one cause per row: an override
added, changed or removed (either side's factor differs from the default it
replaced); a factor-set change (both defaults, of different factor sets); else
a shipped-factor value change (the same default row with another value, or
another row of the same set, or another unit conversion). The four parts add
up to the factor change (the last one is its remainder, so the sum is exact).
Rows only in the current export are "strata
added", rows only in the previous "strata removed"; a matched row whose
category changed moves its whole emission: -E0 from the old category and +E1
to the new, both "allocation". The parts add up to the total difference of
every category, gas and year.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import Finding, InputError
from .offsite_peat import OFFSITE_PATHWAY
from .schema import ROW_KEYS
from .schema import plain

MATCH_KEYS = ROW_KEYS  # rows of two exports are matched on every key of a result row (compiler.schema)
PARTS = ["activity_change", "factor_change", "strata_added", "strata_removed", "allocation_change"]
# factor_change split by cause; the four add up to factor_change
FACTOR_PARTS = ["gwp_change", "factor_set_change", "shipped_value_change", "override_change"]
NEEDED = set(MATCH_KEYS) | {"category_code", "area_ha", "emission_t", "co2eq_t", "notation_key", "factor_id"}


class _TooLarge(Exception):
    """The unpacked stream passed the size limit."""


class _Unpacked(io.RawIOBase):
    """A decompressing stream that counts what it gives and stops past ``limit`` bytes.

    The size limit of a compressed file holds for its unpacked content: a small gzip can unpack to
    gigabytes, and is refused as soon as the count passes the limit, without unpacking the rest.
    """

    def __init__(self, stream, limit: float):
        super().__init__()
        self.stream, self.limit, self.count = stream, limit, 0

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:
        data = self.stream.read(len(buffer))
        self.count += len(data)
        if self.count > self.limit:
            raise _TooLarge()
        buffer[:len(data)] = data
        return len(data)

    def close(self) -> None:
        self.stream.close()
        super().close()


def load_export(path: str | Path, max_mb: float = 512) -> pd.DataFrame:
    """Read emissions.csv (or .csv.gz) from an output folder or a file path."""
    path = Path(path)
    if path.is_dir():
        candidates = [path / "emissions.csv", path / "emissions.csv.gz"]
        path = next((c for c in candidates if c.is_file()), candidates[0])
    if not path.is_file():
        raise InputError([Finding("error", "compare", "no emissions.csv found", file=str(path),
                                  expected="an output folder of histosol or an emissions.csv file")])
    import gzip
    import zlib

    limit = max_mb * 1024 * 1024
    if path.stat().st_size > limit:
        raise InputError([Finding("error", "compare", f"file is above the limit of {max_mb:g} MiB", file=str(path))])
    with path.open("rb") as handle:
        packed = handle.read(2) == b"\x1f\x8b" or path.suffix.lower() == ".gz"  # gzip by its name or its bytes
    try:
        with (_Unpacked(gzip.open(path, "rb"), limit) if packed else path.open("rb")) as source:
            frame = pd.read_csv(source, compression=None, dtype={k: str for k in MATCH_KEYS if k != "year"},
                                keep_default_na=False, na_values={"emission_t": [""], "co2eq_t": [""], "area_ha": [""]})
    except _TooLarge:
        raise InputError([Finding("error", "compare", f"the file unpacks to more than {max_mb:g} MiB, above the limit "
                                  "(settings [limits] max_input_mb); reading stopped there", file=str(path),
                                  expected=f"an emissions.csv of at most {max_mb:g} MiB unpacked")]) from None
    except (ValueError, UnicodeDecodeError, pd.errors.ParserError, gzip.BadGzipFile, EOFError, zlib.error,
            OSError) as exc:
        raise InputError([Finding("error", "compare", f"not a readable emissions.csv ({type(exc).__name__})",
                                  file=str(path))]) from None
    missing = sorted(NEEDED - set(frame.columns))
    if missing:
        raise InputError([Finding("error", "compare", "not an emissions export of this tool: columns missing",
                                  file=str(path), column=", ".join(missing))])
    frame = frame[frame["notation_key"] == ""].copy()
    frame["co2eq_t"] = pd.to_numeric(frame["co2eq_t"], errors="coerce")
    years = pd.to_numeric(frame["year"], errors="coerce")
    for col in ("area_ha", "emission_t"):
        frame[col] = pd.to_numeric(frame[col], errors="coerce")
    bad = years.isna() | (years != np.floor(years.fillna(0)))
    if bad.any():
        first = int(np.flatnonzero(bad.to_numpy())[0])
        raise InputError([Finding("error", "compare", "year is not a whole number", file=str(path),
                                  row=int(frame.index[first]) + 2, column="year", found=str(frame["year"].iloc[first]))])
    frame["year"] = years.astype(int)
    frame.attrs["file"] = str(path)
    return frame


def _with_activity(frame: pd.DataFrame) -> pd.DataFrame:
    """Rows with ``area_ha`` as their activity: off-site CO2 of extracted peat has no area, its activity is
    the tonnes of air-dry peat (``parameter_value``), so that a revised production is an activity change."""
    if "parameter_value" not in frame or "pathway" not in frame:
        return frame
    offsite = (frame["pathway"] == OFFSITE_PATHWAY).to_numpy(dtype=bool)
    if not offsite.any():
        return frame
    frame = frame.copy()
    tonnes = pd.to_numeric(frame.loc[offsite, "parameter_value"], errors="coerce")
    frame["area_ha"] = frame["area_ha"].astype(float)
    frame.loc[offsite, "area_ha"] = tonnes.to_numpy(dtype=float)
    return frame


def _gwp_by_gas(frame: pd.DataFrame) -> dict[str, float]:
    """The GWP each gas carried in an export: CO2-eq / t of gas of its rows (0 for a gas without one)."""
    rows = frame[(frame["emission_t"] != 0) & frame["emission_t"].notna()]
    ratio = (rows["co2eq_t"] / rows["emission_t"]).fillna(0.0)
    return ratio.groupby(rows["gas"]).median().to_dict()


def _factor_set(factor_id: pd.Series, factor_sets: dict | None) -> pd.Series:
    """Factor set of each factor id: from the register where known, else the id's prefix (ws13-, gl06-)."""
    prefix = factor_id.fillna("").str.split("-", n=1).str[0]
    if not factor_sets:
        return prefix
    return factor_id.map(factor_sets).fillna(prefix)


def _split_factor_change(rows: pd.DataFrame, factor: np.ndarray, same_cat: np.ndarray, a0, a1, g0: dict,
                         g1: dict, factor_sets: dict | None) -> None:
    """Add the FACTOR_PARTS columns to ``rows`` (matched rows of one category); they add up to ``factor``."""
    gas0 = rows["gas"].map(g0).fillna(0.0).to_numpy(dtype=float)
    gas1 = rows["gas"].map(g1).fillna(0.0).to_numpy(dtype=float)
    t0 = rows["emission_t_0"].fillna(0.0).to_numpy(dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        scaled = np.where(a0 != 0, a1 * t0 / np.where(a0 != 0, a0, 1.0), t0)  # A1 x f0 (E0 where A0 = 0)
    gwp = np.where(same_cat, scaled * (gas1 - gas0), 0.0)
    rest = factor - gwp
    f0, f1 = rows["factor_id_0"].fillna(""), rows["factor_id_1"].fillna("")
    d0 = rows["default_factor_id_0"].fillna("") if "default_factor_id_0" in rows else f0
    d1 = rows["default_factor_id_1"].fillna("") if "default_factor_id_1" in rows else f1
    override = (((d0 != "") & (f0 != d0)) | ((d1 != "") & (f1 != d1))).to_numpy()
    other_set = (_factor_set(f0, factor_sets) != _factor_set(f1, factor_sets)).to_numpy() & ~override
    rows["gwp_change"] = gwp
    rows["override_change"] = np.where(override, rest, 0.0)
    rows["factor_set_change"] = np.where(other_set, rest, 0.0)
    # The remainder: exact, so that the four parts add up to the factor change row by row.
    rows["shipped_value_change"] = factor - gwp - rows["override_change"].to_numpy() - rows["factor_set_change"].to_numpy()


def compare(previous: pd.DataFrame, current: pd.DataFrame,
            factor_sets: dict | None = None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Return (by_cell, by_row): differences by category, gas and year with their causes, and per row.

    ``factor_sets`` (factor id -> factor set, from the register) tells factor-set changes apart.
    """
    # Only the years both submissions cover: a year new in the current one is not a recalculation.
    common = sorted(set(previous["year"]) & set(current["year"]))
    previous = _with_activity(previous[previous["year"].isin(common)])
    current = _with_activity(current[current["year"].isin(common)])
    g0, g1 = _gwp_by_gas(previous), _gwp_by_gas(current)

    def grouped(frame):
        extra = ["default_factor_id"] if "default_factor_id" in frame else []
        cols = MATCH_KEYS + ["category_code", "area_ha", "emission_t", "co2eq_t", "factor_id", *extra]
        return frame[cols].groupby(MATCH_KEYS + ["category_code"], as_index=False, dropna=False).agg(
            area_ha=("area_ha", "sum"), emission_t=("emission_t", "sum"),
            co2eq_t=("co2eq_t", lambda s: s.sum(min_count=1)), factor_id=("factor_id", "first"),
            **({"default_factor_id": ("default_factor_id", "first")} if extra else {}))

    prev, cur = plain(grouped(previous)), plain(grouped(current))  # the current side's keys are categoricals
    rows = prev.merge(cur, on=MATCH_KEYS, how="outer", suffixes=("_0", "_1"), indicator=True)
    both = rows["_merge"] == "both"
    e0 = rows["co2eq_t_0"].fillna(0.0).to_numpy()
    e1 = rows["co2eq_t_1"].fillna(0.0).to_numpy()
    a0 = rows["area_ha_0"].fillna(0.0).to_numpy()
    a1 = rows["area_ha_1"].fillna(0.0).to_numpy()
    with np.errstate(invalid="ignore", divide="ignore"):
        ef0 = np.where(a0 != 0, e0 / np.where(a0 != 0, a0, 1.0), 0.0)
    same_cat = both & (rows["category_code_0"] == rows["category_code_1"])
    moved = both & ~same_cat
    activity = np.where(same_cat, (a1 - a0) * ef0, 0.0)
    factor = np.where(same_cat, (e1 - e0) - activity, 0.0)  # = A1 x (EF1 - EF0), exact by construction
    rows["activity_change"] = activity
    rows["factor_change"] = factor
    rows["strata_added"] = np.where(rows["_merge"] == "right_only", e1, 0.0)
    rows["strata_removed"] = np.where(rows["_merge"] == "left_only", -e0, 0.0)
    rows["factor_changed"] = both & (rows["factor_id_0"] != rows["factor_id_1"])
    _split_factor_change(rows, factor, same_cat.to_numpy(), a0, a1, g0, g1, factor_sets)

    # Per category: current-side parts in the current category, previous-side parts in the old one.
    cur_side = rows.assign(category_code=rows["category_code_1"])
    cur_side = cur_side[cur_side["_merge"] != "left_only"]
    cur_side = cur_side.assign(allocation_change=np.where(moved[cur_side.index], e1[cur_side.index], 0.0))
    old_side = rows[rows["_merge"] != "right_only"].assign(category_code=lambda d: d["category_code_0"])
    old_parts = pd.DataFrame({
        "category_code": old_side["category_code"], "gas": old_side["gas"], "year": old_side["year"],
        "strata_removed": old_side["strata_removed"],
        "allocation_change": np.where(moved[old_side.index], -e0[old_side.index], 0.0),
        "previous_co2eq_t": e0[old_side.index], "previous_t": old_side["emission_t_0"].fillna(0.0),
    })
    new_parts = pd.DataFrame({
        "category_code": cur_side["category_code"], "gas": cur_side["gas"], "year": cur_side["year"],
        "activity_change": cur_side["activity_change"], "factor_change": cur_side["factor_change"],
        **{part: cur_side[part] for part in FACTOR_PARTS},
        "strata_added": cur_side["strata_added"], "allocation_change": cur_side["allocation_change"],
        "current_co2eq_t": e1[cur_side.index], "current_t": cur_side["emission_t_1"].fillna(0.0),
    })
    keys = ["category_code", "gas", "year"]
    cell = pd.concat([old_parts, new_parts], ignore_index=True).groupby(keys, as_index=False).sum(numeric_only=True)
    for col in PARTS + FACTOR_PARTS + ["previous_co2eq_t", "current_co2eq_t", "previous_t", "current_t"]:
        if col not in cell:
            cell[col] = 0.0
    # The remainder again per cell, so that the cell's four factor parts add up to its factor change.
    cell["shipped_value_change"] = (cell["factor_change"] - cell["gwp_change"] - cell["factor_set_change"]
                                    - cell["override_change"])
    cell["difference_co2eq_t"] = cell["current_co2eq_t"] - cell["previous_co2eq_t"]
    cell["difference_t"] = cell["current_t"] - cell["previous_t"]
    with np.errstate(invalid="ignore", divide="ignore"):
        cell["difference_pct"] = np.where(cell["previous_co2eq_t"] != 0,
                                          cell["difference_co2eq_t"] / cell["previous_co2eq_t"].abs() * 100, np.nan)
    cell["parts_sum_co2eq_t"] = cell[PARTS].sum(axis=1)
    cell = cell[["category_code", "gas", "year", "previous_t", "current_t", "difference_t", "previous_co2eq_t",
                 "current_co2eq_t", "difference_co2eq_t", "difference_pct", *PARTS, "parts_sum_co2eq_t",
                 *FACTOR_PARTS]]
    rows = rows.drop(columns="_merge")
    return cell.sort_values(keys).reset_index(drop=True), rows


def year_totals(by_cell: pd.DataFrame) -> pd.DataFrame:
    """The previous and the current net total of each year both cover [t CO2-eq]: index year, columns
    previous_co2eq_t, current_co2eq_t."""
    return by_cell.groupby("year")[["previous_co2eq_t", "current_co2eq_t"]].sum()


def category_totals(by_cell: pd.DataFrame) -> pd.DataFrame:
    """The difference of each category and year and its parts, summed over the gases [t CO2-eq]: index
    (category_code, year), columns difference_co2eq_t and the parts of :data:`PARTS` and :data:`FACTOR_PARTS`
    that ``by_cell`` has."""
    columns = ["difference_co2eq_t", *(c for c in [*PARTS, *FACTOR_PARTS] if c in by_cell)]
    return by_cell.groupby(["category_code", "year"])[columns].sum()


def trend_effect(by_cell: pd.DataFrame, base: int, latest: int) -> dict:
    """Change of the total's trend (base -> latest, %) between the two submissions."""
    tot = year_totals(by_cell)
    def trend(col):
        if base not in tot.index or latest not in tot.index or not tot.loc[base, col]:
            return float("nan")
        return (tot.loc[latest, col] - tot.loc[base, col]) / abs(tot.loc[base, col]) * 100
    return {"previous_trend_pct": trend("previous_co2eq_t"), "current_trend_pct": trend("current_co2eq_t")}
