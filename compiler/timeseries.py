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

FILL_MODES = ("none", "interpolate", "extrapolate", "both")
SERIES_KEYS = ["region", "climate_zone", "land_use", "soil_status", "nutrient_status", "drainage_depth", "subtype",
               "remaining_or_converted", "previous_land_use"]
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
                        side: str) -> np.ndarray:
    """Per row: least-squares line through the n known values nearest one end; evaluated where fill_mask."""
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
    return out


def fill_gaps(activity: pd.DataFrame, years, mode: str, n_years: int, log: FindingLog,
              mode_by_region: dict[str, str] | None = None) -> pd.DataFrame:
    """Return the activity table with gaps filled (or errors logged), with ``activity_source`` per row."""
    activity = activity.copy()
    activity["activity_source"] = "reported"
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
    region_years = good.groupby("region")["year"].agg(lambda s: set(int(y) for y in s))
    region_first = regions.map(lambda r: years.searchsorted(min(region_years[r]))).to_numpy()
    region_last = regions.map(lambda r: years.searchsorted(max(region_years[r]))).to_numpy()
    region_has = np.array([[int(y) in region_years[r] for y in years] for r in region_years.index])
    region_row = pd.Index(region_years.index).get_indexer(regions)

    inside = (col[None, :] > first[:, None]) & (col[None, :] < last[:, None]) & ~present
    # The region's reporting ends (or starts) early: strata present at that end continue.
    after = (col[None, :] > last[:, None]) & (last == region_last)[:, None] & ~region_has[region_row]
    before = (col[None, :] < first[:, None]) & (first == region_first)[:, None] & ~region_has[region_row]

    modes = regions.map(lambda r: mode_by_region.get(r, mode)).to_numpy()
    can_interp = np.isin(modes, ["interpolate", "both"])[:, None]
    can_extrap = np.isin(modes, ["extrapolate", "both"])[:, None]

    _report_unfilled(table, inside & ~can_interp, years, "interpolate", file, log)
    _report_unfilled(table, (after | before) & ~can_extrap, years, "extrapolate", file, log)

    filled = known.copy()
    interp = inside & can_interp
    if interp.any():
        frame = pd.DataFrame(known, columns=years).interpolate(axis=1, limit_area="inside")
        filled[interp] = frame.to_numpy()[interp]
    extrap_end = after & can_extrap
    extrap_start = before & can_extrap
    if extrap_end.any():
        filled[extrap_end] = _matrix_extrapolate(known, years.astype(float), extrap_end, n_years, "end")[extrap_end]
    if extrap_start.any():
        filled[extrap_start] = _matrix_extrapolate(known, years.astype(float), extrap_start, n_years,
                                                   "start")[extrap_start]
    negative = (extrap_end | extrap_start) & (filled < 0)
    filled[negative] = 0.0
    if negative.any():
        log.add("info", "timeseries", f"{int(negative.sum())} extrapolated areas fell below zero and were set to zero",
                file=file)

    new = interp | extrap_end | extrap_start
    if not new.any():
        return activity
    r, c = np.nonzero(new)
    keys = table.index.to_frame(index=False).iloc[r].reset_index(drop=True)
    keys["year"] = years[c]
    keys["area_ha"] = filled[r, c]
    keys["activity_source"] = np.where(interp[r, c], "interpolated", "extrapolated")
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
    for source, count in counts.items():
        log.add("info", "timeseries", f"{count} stratum-years {source} ({', '.join(sorted(set(keys.loc[keys['activity_source'] == source, 'region'])))})",
                file=file)
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
