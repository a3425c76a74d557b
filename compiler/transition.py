"""The transition period: land converted in year Y is reported as converted until Y + T - 1, then as remaining.

2006 IPCC Guidelines Vol. 4 Ch. 3 (consistent representation of land): land stays in a "land
converted to" category for the transition period, 20 years by default, then moves to the
"remaining" category. ``[method] transition_years`` sets T (default 20); an optional
activity column ``conversion_year`` gives Y per row. On a row with a conversion year,
``remaining_or_converted`` is derived from it (the column as given is replaced), so the
agency does not keep it by hand. Rows without a conversion year keep what they say.

The area balance check (:func:`compiler.qaqc.check_area_balance`) then reads the land
newly converted in a year from the conversion years themselves (the area of the rows with
``conversion_year`` equal to that year), not from the growth of the converted area, which
land leaving the transition period would mask.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

COLUMN = "conversion_year"


def apply_transition(frame: pd.DataFrame, transition_years: int, check) -> None:
    """Set ``remaining_or_converted`` from ``conversion_year`` in place; flag years before the conversion."""
    if COLUMN not in frame:
        return
    given = frame[COLUMN].to_numpy(dtype=float)
    has = ~np.isnan(given) & ~frame["_bad"].to_numpy(dtype=bool)
    if not has.any():
        return
    year = pd.to_numeric(frame["year"], errors="coerce").to_numpy(dtype=float)
    early = has & (year < given)
    if early.any():
        rows = frame[early]
        check.rows("error", "conversion", "conversion_year is after the year of the row (the land is not yet "
                   "converted that year)", rows, COLUMN, rows[COLUMN].astype("Int64").astype(str),
                   "a conversion year up to the row's year")
        frame.loc[early, "_bad"] = True
        has &= ~early
    converted = has & (year < given + transition_years)
    moved = has & ~converted & (frame["remaining_or_converted"] == "converted").to_numpy(dtype=bool)
    frame.loc[converted, "remaining_or_converted"] = "converted"
    frame.loc[has & ~converted, "remaining_or_converted"] = "remaining"
    if moved.any():
        check.one("info", "transition", f"{int(moved.sum())} rows marked converted were converted {transition_years} "
                  "or more years before their year and are reported as remaining (transition period, "
                  "[method] transition_years)", column=COLUMN)


def newly_converted(activity: pd.DataFrame, years, keys: list[str], wide) -> pd.DataFrame:
    """Land newly converted each year per converted stratum [ha] (``keys`` x year, as ``wide`` makes it).

    Rows with a conversion year count in that year only; rows without one as the growth of their
    converted stratum's area (the rule used where no conversion year is given).
    """
    conv = activity[activity["remaining_or_converted"] == "converted"]
    dated = conv[COLUMN].notna() if COLUMN in conv else pd.Series(False, index=conv.index)
    undated = wide(conv[~dated], keys, "area_ha", years).diff(axis=1).clip(lower=0.0).fillna(0.0)
    at_conversion = conv[dated & (conv["year"] == conv[COLUMN])]
    exact = wide(at_conversion, keys, "area_ha", years)
    return undated.add(exact, fill_value=0.0)


def apart_by_conversion_year(result, rows: pd.DataFrame, keys: list[str]) -> pd.DataFrame:
    """``rows`` (results rows sharing ``keys``) less those told apart by the conversion year of their activity row.

    Rows of one stratum converted in different years are separate parts of it, also once they are
    all "remaining"; rows with the same conversion year (or none) are still duplicates.
    """
    act = result.activity
    if COLUMN not in act or not act[COLUMN].notna().any() or "_row" not in act:
        return rows
    activity_file = Path(result.settings.activity).name
    years = dict(zip(act["_row"].to_numpy(), act[COLUMN].to_numpy(dtype=float)))
    from_activity = (rows["input_file"] == activity_file).to_numpy(dtype=bool)
    cohort = np.where(from_activity, rows["input_row"].map(years).to_numpy(dtype=float), np.nan)
    marked = rows.assign(_cohort=cohort)
    return rows[marked.duplicated([*keys, "_cohort"], keep=False).to_numpy()]
