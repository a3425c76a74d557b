"""Time-series consistency: filling gaps in the area series (2006 IPCC Guidelines Vol. 1 Ch. 5).

The area series is laid out as a matrix, one row per stratum and one column
per year, so every technique below works on all strata at once:

- linear interpolation between known years (Vol. 1 Section 5.3.3.3);
- trend extrapolation at either end from the last (or first) N known years
  (Section 5.3.3.4), areas floored at zero;
- overlap (Eq. 5.1): a surrogate series scaled by the ratio of the two series
  over the years where both exist;
- surrogate (Eq. 5.2): proportional to a driver series.

What counts as a gap. A year missing for a whole region (no row of that
region in that year) is a region gap; a year missing for one stratum between
two years where it is reported is a stratum gap. A stratum that stops before
its region's last reported year has ended (not occurring afterwards) and is
not extrapolated; one that starts after its region's first year has begun.
With ``fill = "none"``, any gap is an input error naming the strata and years.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .errors import FindingLog
from .readers import ROW
from .schema import SERIES_KEYS

FILL_MODES = ("none", "interpolate", "extrapolate", "both")
SOURCES = ("reported", "interpolated", "extrapolated", "overlap", "surrogate")


# --- the published techniques, on the strata x years matrix ------------------------
#
# Every function takes ``known``: one row per stratum, one column per year of ``years``, the
# reported values [ha, or whatever unit the series has] and NaN where a year is missing.

def interpolate_linear(years, known) -> np.ndarray:
    """Linear interpolation between known years, on every stratum at once.

    2006 IPCC Guidelines Vol. 1 Section 5.3.3.3 (interpolation).

    Parameters
    ----------
    years : array_like, shape (n_years,)
        The years of the columns, increasing [year].
    known : array_like, shape (n_strata, n_years)
        The series, one row per stratum [unit of the series, e.g. ha]; NaN where missing.

    Returns
    -------
    numpy.ndarray, shape (n_strata, n_years)
        ``known`` with every missing value between two known years of its row replaced by
        ``y_a + (y_b - y_a) (t - t_a) / (t_b - t_a)``, a and b the nearest known years before and
        after t [unit of the series]; missing values before the first or after the last known year
        of a row stay NaN.
    """
    years = np.asarray(years, dtype=float)
    known = np.asarray(known, dtype=float)
    out = known.copy()
    before, after = _nearest_known(~np.isnan(known))
    inside = np.isnan(known) & (before >= 0) & (after < known.shape[1])
    r, c = np.nonzero(inside)
    a, b = before[r, c], after[r, c]
    y_a, y_b = known[r, a], known[r, b]
    # The arithmetic of numpy.interp (slope first), so the result is the same to the last bit.
    slope = (y_b - y_a) / (years[b] - years[a])
    out[r, c] = slope * (years[c] - years[a]) + y_a
    return out


def extrapolate_trend(years, known, cells, n_years: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Trend extrapolation at either end of each stratum's series, on every stratum at once.

    2006 IPCC Guidelines Vol. 1 Section 5.3.3.4 (trend extrapolation): a straight line fitted by
    least squares to the ``n_years`` known points of the row nearest the target end.

    Parameters
    ----------
    years : array_like, shape (n_years,)
        The years of the columns, increasing [year].
    known : array_like, shape (n_strata, n_years)
        The series, one row per stratum [unit of the series, e.g. ha]; NaN where missing.
    cells : array_like of bool, shape (n_strata, n_years)
        The cells to fill. A cell after the last known year of its row takes the line through
        the row's last ``n_years`` known points; one before the first known year the line
        through its first ``n_years``. Cells between known years are not extrapolated.
    n_years : int
        Known points per line (fewer where the row has fewer; one point gives a flat line).

    Returns
    -------
    values : numpy.ndarray, shape (n_strata, n_years)
        ``intercept + slope x year`` at the cells [unit of the series]; NaN elsewhere. Not
        floored at zero (the caller decides).
    first_used, last_used : numpy.ndarray, shape (n_strata, n_years)
        Per cell, the first and last year of the points its line went through [year]; NaN
        elsewhere.
    """
    years = np.asarray(years, dtype=float)
    known = np.asarray(known, dtype=float)
    cells = np.asarray(cells, dtype=bool)
    present = ~np.isnan(known)
    col = np.arange(known.shape[1])[None, :]
    first = np.where(present.any(axis=1), np.argmax(present, axis=1), known.shape[1])[:, None]
    last = np.where(present.any(axis=1), known.shape[1] - 1 - np.argmax(present[:, ::-1], axis=1), -1)[:, None]
    values, first_used, last_used = (np.full(known.shape, np.nan) for _ in range(3))
    for side, target in (("end", cells & (col > last)), ("start", cells & (col < first))):
        if not target.any():
            continue
        order = np.cumsum(present[:, ::-1], axis=1)[:, ::-1] if side == "end" else np.cumsum(present, axis=1)
        use = present & (order <= n_years)
        x = np.where(use, years[None, :], 0.0)
        y = np.where(use, known, 0.0)
        n = use.sum(axis=1).astype(float)
        sx, sy = x.sum(axis=1), y.sum(axis=1)
        sxx, sxy = (x * x).sum(axis=1), (x * y).sum(axis=1)
        denom = n * sxx - sx * sx
        with np.errstate(invalid="ignore", divide="ignore"):
            slope = np.where(denom > 0, (n * sxy - sx * sy) / denom, 0.0)
            intercept = np.where(n > 0, (sy - slope * sx) / np.maximum(n, 1), np.nan)
        line = intercept[:, None] + slope[:, None] * years[None, :]
        values[target] = line[target]
        lo = np.broadcast_to(np.where(use, years[None, :], np.inf).min(axis=1)[:, None], known.shape)
        hi = np.broadcast_to(np.where(use, years[None, :], -np.inf).max(axis=1)[:, None], known.shape)
        first_used[target], last_used[target] = lo[target], hi[target]
    return values, first_used, last_used


def overlap_splice(known, surrogate) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Eq. 5.1 (overlap): ``y_0 = x_0 x (sum of y_i / sum of x_i)`` over the overlap years, per stratum.

    2006 IPCC Guidelines Vol. 1 Eq. 5.1: a related series x is spliced on, scaled by the ratio of
    the two series over the years where both exist.

    Parameters
    ----------
    known : array_like, shape (n_strata, n_years)
        The series to fill, y [unit of the series, e.g. ha]; NaN where missing.
    surrogate : array_like, shape (n_years,) or (n_strata, n_years)
        The related series, x [its own unit]; NaN where it gives no value.

    Returns
    -------
    values : numpy.ndarray, shape (n_strata, n_years)
        ``x_0 x ratio`` in every year where x is given [unit of y]; NaN where the row's ratio is
        undefined. The caller picks the cells to fill.
    ratio : numpy.ndarray, shape (n_strata,)
        ``sum y_i / sum x_i`` over the overlap years [unit of y per unit of x]; NaN where the
        row has no overlap year or the surrogate sums to zero or less there.
    overlap : numpy.ndarray of bool, shape (n_strata, n_years)
        The overlap years of each row (both series given).
    """
    known = np.asarray(known, dtype=float)
    x = np.broadcast_to(np.asarray(surrogate, dtype=float), known.shape)
    overlap = ~np.isnan(known) & ~np.isnan(x)
    sum_y = np.where(overlap, known, 0.0).sum(axis=1)
    sum_x = np.where(overlap, x, 0.0).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(sum_x > 0, sum_y / sum_x, np.nan)
    return x * ratio[:, None], ratio, overlap


def surrogate_scale(known, driver) -> tuple[np.ndarray, np.ndarray]:
    """Eq. 5.2 (surrogate): ``y_0 = y_t x (s_0 / s_t)``, proportional to the driver s, per stratum.

    2006 IPCC Guidelines Vol. 1 Eq. 5.2. The reference year t of each cell is the nearest year
    where the stratum's value is known and the driver is above zero (the later one on a tie).

    Parameters
    ----------
    known : array_like, shape (n_strata, n_years)
        The series to fill, y [unit of the series, e.g. ha]; NaN where missing.
    driver : array_like, shape (n_years,) or (n_strata, n_years)
        The driver series, s [its own unit]; NaN where it gives no value.

    Returns
    -------
    values : numpy.ndarray, shape (n_strata, n_years)
        ``y_t x s_0 / s_t`` in every cell with a reference year [unit of y]; NaN elsewhere. The
        caller picks the cells to fill.
    reference : numpy.ndarray of int, shape (n_strata, n_years)
        Column of the reference year t of each cell; -1 where the row has none.
    """
    known = np.asarray(known, dtype=float)
    s = np.broadcast_to(np.asarray(driver, dtype=float), known.shape)
    width = known.shape[1]
    with np.errstate(invalid="ignore"):
        ref = ~np.isnan(known) & (s > 0)
    before, after = _nearest_known(ref)
    col = np.arange(width)[None, :]
    dist_before = np.where(before >= 0, col - before, width + 1)
    dist_after = np.where(after < width, after - col, width + 1)
    pick = np.where(dist_after <= dist_before, after, before)  # the nearer; the later one on a tie
    has = (dist_before <= width) | (dist_after <= width)
    safe = np.clip(pick, 0, width - 1)
    y_t = np.take_along_axis(known, safe, axis=1)
    s_t = np.take_along_axis(s, safe, axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        values = y_t * s / np.where(s_t > 0, s_t, np.nan)
    values[~has] = np.nan
    return values, np.where(has, safe, -1)


# --- applying them to the activity table ------------------------------------------

def _nearest_known(present: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per cell, the column of the nearest known value before it (-1 if none) and after it (width if none)."""
    width = present.shape[1]
    col = np.arange(width)
    before = np.maximum.accumulate(np.where(present, col[None, :], -1), axis=1)
    after = np.minimum.accumulate(np.where(present, col[None, :], width)[:, ::-1], axis=1)[:, ::-1]
    return before, after


def _describe_strata(table: pd.DataFrame, rows) -> str:
    return "; ".join(", ".join(str(v) for v in table.index[i] if v) for i in rows)


def _series_fill(table: pd.DataFrame, known: np.ndarray, gaps: np.ndarray, years: np.ndarray,
                 series: pd.DataFrame, log: FindingLog):
    """Fill gap cells from driver series: overlap (Eq. 5.1) or surrogate (Eq. 5.2).

    Each stratum takes the most specific series whose keys match it (blank = any); two equally specific
    series for one stratum are an error. A series fills the stratum's gap cells in the years it gives a value
    for; its other gap cells are left to interpolation or extrapolation.

    Returns (mask of filled cells, values, method per cell, basis text per cell).
    """
    from .activity import SURROGATE_KEYS

    file = series.attrs.get("file", "")
    n_rows, width = known.shape
    mask = np.zeros(known.shape, dtype=bool)
    values = np.full(known.shape, np.nan)
    method = np.full(known.shape, "", dtype=object)
    basis = np.full(known.shape, "", dtype=object)
    strata = table.index.to_frame(index=False)
    specs = series.groupby("series_id", sort=True).first()
    level = (specs[SURROGATE_KEYS] != "").sum(axis=1).sort_values(ascending=False, kind="stable")
    owner = np.full(n_rows, -1)
    owner_level = np.full(n_rows, -1)
    names = list(level.index)
    for k, sid in enumerate(names):
        spec = specs.loc[sid]
        match = np.ones(n_rows, dtype=bool)
        for key in SURROGATE_KEYS:
            if spec[key] != "":
                match &= (strata[key] == spec[key]).to_numpy()
        if not match.any():
            log.add("warning", "surrogates", f"series {sid} matches no stratum of the activity data", file=file,
                    column="series_id", found=sid, expected="stratum keys (region, land_use, ...) of strata to fill")
            continue
        tie = match & (owner >= 0) & (owner_level == level[sid])
        if tie.any():
            rows = np.nonzero(tie)[0]
            log.add("error", "surrogates", f"series {names[owner[rows[0]]]} and {sid} match the same strata "
                    f"equally specifically ({_describe_strata(table, rows[:3])})", file=file, column="series_id",
                    found=sid, expected="one series per stratum: give the series different stratum keys")
        take = match & (owner < 0)
        owner[take], owner_level[take] = k, level[sid]
    years_index = pd.Index(years)
    for k, sid in enumerate(names):
        rows = np.nonzero(owner == k)[0]
        if rows.size == 0:
            continue
        spec = specs.loc[sid]
        part = series[series["series_id"] == sid]
        driver = np.full(width, np.nan)
        at = years_index.get_indexer(part["year"].astype(int))
        driver[at[at >= 0]] = part["value"].to_numpy(dtype=float)[at >= 0]
        y = known[rows]
        target = gaps[rows] & ~np.isnan(driver)[None, :]
        if not target.any():
            log.add("info", "surrogates", f"series {sid} gives no value in a missing year of the strata it matches",
                    file=file, column="year", found=sid)
            continue
        label = f"{sid} ({spec['unit']})"
        if spec["method"] == "overlap":
            fill, ratio, both = overlap_splice(y, driver)
            usable = ~np.isnan(ratio)
            lacking = target.any(axis=1) & ~usable
            if lacking.any():
                log.add("error", "surrogates", f"series {sid} shares no year with a reported area of "
                        f"{_describe_strata(table, rows[lacking][:3])} (Eq. 5.1 scales by the overlap years)",
                        file=file, column="year", found=sid,
                        expected="driver values in some years where the stratum's area is reported, not all zero")
            target &= usable[:, None]
            first = np.where(both, years[None, :], years.max() + 1).min(axis=1)
            last = np.where(both, years[None, :], years.min() - 1).max(axis=1)
            count = both.sum(axis=1)
            text = np.array([f"Eq. 5.1 overlap with {label}: ratio {r:.6g} over {n} years {a}-{b}"
                             if u else "" for r, n, a, b, u in zip(ratio, count, first, last, usable)], dtype=object)
            cell_text = np.broadcast_to(text[:, None], target.shape)
        else:
            fill, reference = surrogate_scale(y, driver)
            lacking = (target & (reference < 0)).any(axis=1)
            if lacking.any():
                log.add("error", "surrogates", f"series {sid} has no positive value in a year with a reported area "
                        f"of {_describe_strata(table, rows[lacking][:3])} (Eq. 5.2 scales from such a year)",
                        file=file, column="value", found=sid,
                        expected="a driver value above zero in some year where the stratum's area is reported")
            target &= reference >= 0
            cell_text = np.full(target.shape, "", dtype=object)
            r_i, c_i = np.nonzero(target)
            t_i = reference[r_i, c_i]
            cell_text[r_i, c_i] = [f"Eq. 5.2 surrogate {label}: {y[a, t]:.6g} ha in {years[t]} x "
                                   f"{driver[b]:.6g} / {driver[t]:.6g}" for a, b, t in zip(r_i, c_i, t_i)]
        r_i, c_i = np.nonzero(target)
        mask[rows[r_i], c_i] = True
        values[rows[r_i], c_i] = fill[r_i, c_i]
        method[rows[r_i], c_i] = spec["method"]
        basis[rows[r_i], c_i] = cell_text[r_i, c_i]
    return mask, values, method, basis


def fill_gaps(activity: pd.DataFrame, years, mode: str, n_years: int, log: FindingLog,
              mode_by_region: dict[str, str] | None = None, surrogates: pd.DataFrame | None = None,
              mode_by_land_use: dict[str, str] | None = None) -> pd.DataFrame:
    """Return the activity table with gaps filled (or errors logged), with ``activity_source`` per row.

    Filled rows also carry ``fill_basis``: how the value was made (the years interpolated between, the
    years of the trend, or the series, ratio and years of Eq. 5.1 / Eq. 5.2). Driver series in
    ``surrogates`` (see :func:`compiler.activity.load_surrogates`) fill the gaps of the strata they
    match first, whatever the fill mode; the remaining gaps follow the stratum's region's mode in
    ``mode_by_region``, else its land use's in ``mode_by_land_use``, else ``mode``.
    """
    activity = activity.copy()
    activity["activity_source"] = "reported"
    activity["fill_basis"] = ""
    good = activity[~activity["_bad"]] if "_bad" in activity else activity
    if good.empty:
        return activity
    years = np.asarray(list(years))
    file = activity.attrs.get("file", "")
    mode_by_region = mode_by_region or {}

    # One row per observed stratum (a grouped sum, then years as columns): the same table as a pivot over the
    # strata, without first laying out every combination of the key values (which grows as their product).
    table = good.groupby(SERIES_KEYS + ["year"], sort=True)["area_ha"].sum().unstack("year")
    table = table.reindex(columns=years)
    table = table[table.notna().any(axis=1)]
    known = table.to_numpy(dtype=float)
    present = ~np.isnan(known)
    col = np.arange(len(years))
    first = np.where(present.any(axis=1), np.argmax(present, axis=1), -1)
    last = np.where(present.any(axis=1), len(years) - 1 - np.argmax(present[:, ::-1], axis=1), -1)

    regions = table.index.get_level_values("region")
    # Which years each region reports: a regions x years matrix filled from the rows at once (no Python
    # loop over regions, which grows slow at tens of thousands of regions).
    codes, region_names = pd.factorize(good["region"], sort=True)
    row_years = good["year"].to_numpy(dtype=np.int64)
    position = np.minimum(years.searchsorted(row_years), len(years) - 1)
    listed = years[position] == row_years
    region_has = np.zeros((len(region_names), len(years)), dtype=bool)
    region_has[codes[listed], position[listed]] = True
    by_code = pd.Series(row_years).groupby(codes)
    region_row = pd.Index(region_names).get_indexer(regions)
    region_first = years.searchsorted(by_code.min().to_numpy())[region_row]
    region_last = years.searchsorted(by_code.max().to_numpy())[region_row]

    inside = (col[None, :] > first[:, None]) & (col[None, :] < last[:, None]) & ~present
    # The region's reporting ends (or starts) early: strata present at that end continue.
    after = (col[None, :] > last[:, None]) & (last == region_last)[:, None] & ~region_has[region_row]
    before = (col[None, :] < first[:, None]) & (first == region_first)[:, None] & ~region_has[region_row]

    by_series = np.zeros(known.shape, dtype=bool)
    if surrogates is not None and not surrogates.empty:
        by_series, series_values, series_method, series_basis = _series_fill(
            table, known, inside | after | before, years, surrogates, log)
        inside, after, before = inside & ~by_series, after & ~by_series, before & ~by_series

    by_land_use = mode_by_land_use or {}
    land_uses = table.index.get_level_values("land_use")
    modes = np.array([mode_by_region.get(r, by_land_use.get(u, mode)) for r, u in zip(regions, land_uses)])
    can_interp = np.isin(modes, ["interpolate", "both"])[:, None]
    can_extrap = np.isin(modes, ["extrapolate", "both"])[:, None]

    _report_unfilled(table, inside & ~can_interp, years, "interpolate", file, log)
    _report_unfilled(table, (after | before) & ~can_extrap, years, "extrapolate", file, log)

    filled = known.copy()
    basis = np.full(known.shape, "", dtype=object)
    source = np.full(known.shape, "", dtype=object)
    interp = inside & can_interp
    if interp.any():
        filled[interp] = interpolate_linear(years, known)[interp]
        prev, nxt = _nearest_known(present)
        r_i, c_i = np.nonzero(interp)
        basis[r_i, c_i] = [f"linear interpolation between {years[prev[a, b]]} and {years[nxt[a, b]]}"
                           for a, b in zip(r_i, c_i)]
        source[interp] = "interpolated"
    cells = (after | before) & can_extrap
    if cells.any():
        values, lo, hi = extrapolate_trend(years, known, cells, n_years)
        filled[cells] = values[cells]
        basis[cells] = [f"linear trend of the reported years {a:.0f}-{b:.0f}" for a, b in zip(lo[cells], hi[cells])]
        source[cells] = "extrapolated"
    extrapolated = source == "extrapolated"
    negative = extrapolated & (filled < 0)
    filled[negative] = 0.0
    if negative.any():
        basis[negative] = basis[negative] + ", below zero and set to zero"
        log.add("info", "timeseries", f"{int(negative.sum())} extrapolated areas fell below zero and were set to zero",
                file=file)
    if by_series.any():
        filled[by_series] = series_values[by_series]
        basis[by_series] = series_basis[by_series]
        source[by_series] = series_method[by_series]

    new = source != ""
    if not new.any():
        return activity
    r, c = np.nonzero(new)
    keys = table.index.to_frame(index=False).iloc[r].reset_index(drop=True)
    keys["year"] = years[c]
    keys["area_ha"] = filled[r, c]
    keys["activity_source"] = source[r, c]
    keys["fill_basis"] = basis[r, c]
    # Other columns from the nearest reported row of the same stratum.
    donor_cols = [c_ for c_ in ("ditch_fraction", "area_uncertainty_pct") if c_ in good]
    nearest = good.astype({"year": "int64"}).sort_values("year")
    keys = keys.astype({"year": "int64"}).sort_values("year")
    keys = pd.merge_asof(keys, nearest[SERIES_KEYS + ["year", ROW] + donor_cols].rename(columns={ROW: "_donor_row"}),
                         on="year", by=SERIES_KEYS, direction="nearest")
    keys[ROW] = 0  # not a row of the input file; activity_source says how it was made
    keys["_bad"] = False
    for col_name in activity.columns:
        if col_name not in keys:
            keys[col_name] = "" if activity[col_name].dtype == object else np.nan
    counts = keys["activity_source"].value_counts()
    for how, count in counts.items():
        regions = ", ".join(sorted(set(keys.loc[keys["activity_source"] == how, "region"])))
        log.add("info", "timeseries", f"{count} stratum-years {how} ({regions})", file=file)
    out = pd.concat([activity, keys[activity.columns.tolist() + ["_donor_row"]]], ignore_index=True)
    out.attrs = activity.attrs
    out["year"] = out["year"].astype("Int64")
    return out


def _report_unfilled(table, mask, years, needed: str, file: str, log: FindingLog) -> None:
    if not mask.any():
        return
    rows, _ = np.nonzero(mask)
    for i in np.unique(rows)[:10]:
        stratum = table.index[i]
        missing = years[mask[i]]
        text = ", ".join(str(y) for y in missing[:12]) + (" ..." if len(missing) > 12 else "")
        described = ", ".join(str(v) for v in stratum if v)
        log.add("error", "timeseries",
                f"missing years {text} for stratum {described}; set [timeseries] fill = \"{needed}\" or \"both\" "
                "to fill them, or supply the areas", file=file, column="year", found=text,
                expected=f"a row for every year {years[0]}-{years[-1]} of the stratum's span")
    n = len(np.unique(rows))
    if n > 10:
        log.add("error", "timeseries", f"{n - 10} more strata with missing years not listed", file=file)
