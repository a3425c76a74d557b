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


# --- the published techniques, on arrays ----------------------------------------

def interpolate_linear(years, values, target_years):
    """Linear interpolation between known years (2006 GL Vol. 1 Section 5.3.3.3) [unit of values]."""
    return np.interp(np.asarray(target_years, dtype=float), np.asarray(years, dtype=float),
                     np.asarray(values, dtype=float))


def extrapolate_trend(years, values, target_years, n_years: int):
    """Linear trend fitted by least squares to the ``n_years`` known points nearest the targets.

    2006 GL Vol. 1 Section 5.3.3.4 (trend extrapolation). Targets after the
    known years use the last ``n_years`` points, targets before use the first.
    """
    years = np.asarray(years, dtype=float)
    values = np.asarray(values, dtype=float)
    target = np.asarray(target_years, dtype=float)
    out = np.empty_like(target)
    for side, mask in (("end", target > years.max()), ("start", target < years.min())):
        if not mask.any():
            continue
        pick = slice(-n_years, None) if side == "end" else slice(0, n_years)
        x, y = years[pick], values[pick]
        slope, intercept = np.polyfit(x, y, 1) if len(x) > 1 else (0.0, y[0])
        out[mask] = intercept + slope * target[mask]
    inside = (target >= years.min()) & (target <= years.max())
    out[inside] = np.interp(target[inside], years, values)
    return out


def overlap_splice(y_overlap, x_overlap, x_target):
    """Eq. 5.1 (overlap): y_0 = x_0 x (sum of y_i / sum of x_i over the overlap years).

    Parameters
    ----------
    y_overlap, x_overlap : array_like
        The series to fill and the surrogate series, in the years where both exist.
    x_target : array_like
        The surrogate series in the years to fill.
    """
    ratio = np.sum(np.asarray(y_overlap, dtype=float)) / np.sum(np.asarray(x_overlap, dtype=float))
    return np.asarray(x_target, dtype=float) * ratio


def surrogate_scale(y_t, s_t, s_target):
    """Eq. 5.2 (surrogate): y_0 = y_t x (s_0 / s_t), proportional to the driver s."""
    return float(y_t) * np.asarray(s_target, dtype=float) / float(s_t)


# --- applying them to the activity table ------------------------------------------

def _matrix_extrapolate(known: np.ndarray, years: np.ndarray, fill_mask: np.ndarray, n_years: int,
                        side: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per row: least-squares line through the n known values nearest one end; evaluated where fill_mask.

    Returns the values and, per row, the first and last year of the points the line went through.
    """
    out = np.full(known.shape, np.nan)
    present = ~np.isnan(known)
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
    out[fill_mask] = line[fill_mask]
    used_first = np.where(use, years[None, :], np.inf).min(axis=1)
    used_last = np.where(use, years[None, :], -np.inf).max(axis=1)
    return out, used_first, used_last


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
    present = ~np.isnan(known)
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
        have = present[rows]
        target = gaps[rows] & ~np.isnan(driver)[None, :]
        if not target.any():
            log.add("info", "surrogates", f"series {sid} gives no value in a missing year of the strata it matches",
                    file=file, column="year", found=sid)
            continue
        label = f"{sid} ({spec['unit']})"
        if spec["method"] == "overlap":
            both = have & ~np.isnan(driver)[None, :]
            sum_y = np.where(both, y, 0.0).sum(axis=1)
            sum_x = np.where(both, driver[None, :], 0.0).sum(axis=1)
            usable = both.any(axis=1) & (sum_x > 0)
            lacking = target.any(axis=1) & ~usable
            if lacking.any():
                log.add("error", "surrogates", f"series {sid} shares no year with a reported area of "
                        f"{_describe_strata(table, rows[lacking][:3])} (Eq. 5.1 scales by the overlap years)",
                        file=file, column="year", found=sid,
                        expected="driver values in some years where the stratum's area is reported, not all zero")
            target &= usable[:, None]
            with np.errstate(invalid="ignore", divide="ignore"):
                ratio = sum_y / sum_x
            fill = driver[None, :] * ratio[:, None]
            first = np.where(both, years[None, :], years.max() + 1).min(axis=1)
            last = np.where(both, years[None, :], years.min() - 1).max(axis=1)
            count = both.sum(axis=1)
            text = np.array([f"Eq. 5.1 overlap with {label}: ratio {r:.6g} over {n} years {a}-{b}"
                             if u else "" for r, n, a, b, u in zip(ratio, count, first, last, usable)], dtype=object)
            cell_text = np.broadcast_to(text[:, None], target.shape)
        else:
            ref = have & (driver > 0)[None, :]
            before, after = _nearest_known(ref)
            col = np.arange(width)[None, :]
            dist_before = np.where(before >= 0, col - before, width + 1)
            dist_after = np.where(after < width, after - col, width + 1)
            pick = np.where(dist_after <= dist_before, after, before)  # the nearer; the later one on a tie
            usable_cell = (dist_before <= width) | (dist_after <= width)
            lacking = (target & ~usable_cell).any(axis=1)
            if lacking.any():
                log.add("error", "surrogates", f"series {sid} has no positive value in a year with a reported area "
                        f"of {_describe_strata(table, rows[lacking][:3])} (Eq. 5.2 scales from such a year)",
                        file=file, column="value", found=sid,
                        expected="a driver value above zero in some year where the stratum's area is reported")
            target &= usable_cell
            safe = np.clip(pick, 0, width - 1)
            y_t = np.take_along_axis(y, safe, axis=1)
            s_t = driver[safe]
            fill = y_t * driver[None, :] / np.where(s_t > 0, s_t, np.nan)
            cell_text = np.full(target.shape, "", dtype=object)
            r_i, c_i = np.nonzero(target)
            cell_text[r_i, c_i] = [f"Eq. 5.2 surrogate {label}: {y_t[a, b]:.6g} ha in {years[safe[a, b]]} x "
                                   f"{driver[b]:.6g} / {s_t[a, b]:.6g}" for a, b in zip(r_i, c_i)]
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
        frame = pd.DataFrame(known, columns=years).interpolate(axis=1, limit_area="inside")
        filled[interp] = frame.to_numpy()[interp]
        prev, nxt = _nearest_known(present)
        r_i, c_i = np.nonzero(interp)
        basis[r_i, c_i] = [f"linear interpolation between {years[prev[a, b]]} and {years[nxt[a, b]]}"
                           for a, b in zip(r_i, c_i)]
        source[interp] = "interpolated"
    for side, cells in (("end", after & can_extrap), ("start", before & can_extrap)):
        if not cells.any():
            continue
        values, lo, hi = _matrix_extrapolate(known, years.astype(float), cells, n_years, side)
        filled[cells] = values[cells]
        r_i = np.nonzero(cells)[0]
        basis[cells] = [f"linear trend of the reported years {lo[a]:.0f}-{hi[a]:.0f}" for a in r_i]
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
