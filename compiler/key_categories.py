"""Key category analysis: Approach 1 (level, trend) and Approach 2 (weighted by uncertainty).

Categories are assessed at the level of ``category_code`` x gas, in CO2-eq, for the base year
(``first_year``) and the latest year (``last_year``), following the 2006 IPCC Guidelines,
Vol. 1, Ch. 4 [1]_:

* Approach 1 level (Eq. 4.1) in both years and trend (Eq. 4.2, Eq. 4.3 where the base year
  is 0); key are the categories that, summed in descending order, reach 95 % of the total;
* Approach 2 level and trend, each weighted by the category's uncertainty (Eq. 4.4, 4.5),
  threshold 90 %.

Removals enter with their absolute values. The category at which the cumulative share first
reaches the threshold is included (common practice, no source).

When the settings name ``national_totals`` (the rest of the national inventory by year,
category and gas), the analysis runs twice: including and excluding the land sector
(categories 3.B, :data:`LAND_SECTOR_PREFIX`); otherwise once, over this inventory's categories
alone, and the note says so.

References
----------
.. [1] IPCC (2006). 2006 IPCC Guidelines for National Greenhouse Gas Inventories, Volume 1:
   General Guidance and Reporting, Chapter 4: Methodological Choice and Identification of
   Key Categories. Eq. 4.1 (level), Eq. 4.2 and 4.3 (trend), Eq. 4.4 and 4.5 (Approach 2);
   equation numbers 4.3 to 4.5 from memory.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import Finding, InputError
from .readers import ROW, read_table

THRESHOLD_APPROACH1 = 0.95  # Vol. 1 Ch. 4, Approach 1
THRESHOLD_APPROACH2 = 0.90  # Vol. 1 Ch. 4, Approach 2
# 2006 IPCC Guidelines category 3.B Land, or sector 4 of the transparency framework's tables (allocation = "etf");
# excluded in the run without the land sector
LAND_SECTOR_PREFIX = ("3.B", "4.", "4(")


def _land_prefixes_shown(frame) -> list[str]:
    """The land-sector code patterns that occur among the assessed categories (3.B.* where none does)."""
    patterns = {"3.B": "3.B.*", "4.": "4.*", "4(": "4(II).*, 4(V).*"}
    shown = [patterns[p] for p in LAND_SECTOR_PREFIX if frame["category_code"].str.startswith(p).any()]
    return shown or [patterns["3.B"]]


TIER1 = "Tier 1 default"
TIER1_MESSAGE = "key category on Tier 1 defaults: a higher tier is good practice"
ASSESSMENTS = {
    "L1 base": "Approach 1 level, base year (Eq. 4.1)",
    "L1 latest": "Approach 1 level, latest year (Eq. 4.1)",
    "T1": "Approach 1 trend (Eq. 4.2)",
    "L2 base": "Approach 2 level, base year (Eq. 4.4)",
    "L2 latest": "Approach 2 level, latest year (Eq. 4.4)",
    "T2": "Approach 2 trend (Eq. 4.5)",
}
RUN_WITH_LAND, RUN_WITHOUT_LAND, RUN_INVENTORY = "including land sector", "excluding land sector", "this inventory"
NATIONAL_COLUMNS = ("year", "category_code", "gas", "co2eq_t")


# --- equations -------------------------------------------------------------------------------


def level_assessment(emissions) -> np.ndarray:
    """Level assessment of each category (Approach 1).

    Parameters
    ----------
    emissions : array_like
        Emissions (positive) or removals (negative) of each category in one year [t CO2-eq].

    Returns
    -------
    numpy.ndarray
        Share of each category in the sum of absolute values [fraction]; ``nan`` when all are 0.

    Notes
    -----
    Eq. 4.1 in [1]_: ``L_x,t = |E_x,t| / sum_y |E_y,t|``.
    """
    e = np.abs(np.asarray(emissions, dtype=float))
    total = e.sum()
    return e / total if total > 0 else np.full(len(e), np.nan)


def trend_assessment(base, latest) -> np.ndarray:
    """Trend assessment of each category (Approach 1).

    Parameters
    ----------
    base, latest : array_like
        Emissions or removals of each category in the base year (E_x,0) and the latest year
        (E_x,t) [t CO2-eq].

    Returns
    -------
    numpy.ndarray
        Trend assessment T_x,t [fraction]; ``nan`` when all base-year values are 0.

    Notes
    -----
    Eq. 4.2 in [1]_ (form from memory):
    ``T_x,t = |E_x,0| / sum_y |E_y,0| x |(E_x,t - E_x,0) / |E_x,0| - (sum_y E_y,t - sum_y E_y,0) / |sum_y E_y,0||``.
    Computed as the equivalent ``|(E_x,t - E_x,0) - tau |E_x,0|| / sum_y |E_y,0|``, tau the
    relative trend of the total, which for a base year of 0 is ``|E_x,t| / sum_y |E_y,0|``: the
    level term the guidance prescribes for that case (Eq. 4.3, from memory).
    """
    e0 = np.asarray(base, dtype=float)
    et = np.asarray(latest, dtype=float)
    abs_total = np.abs(e0).sum()
    if abs_total == 0:
        return np.full(len(e0), np.nan)
    net0 = e0.sum()
    tau = (et.sum() - net0) / abs(net0) if net0 != 0 else 0.0  # relative trend of the total
    return np.abs((et - e0) - tau * np.abs(e0)) / abs_total


def uncertainty_weighted(assessment, uncertainty_pct) -> np.ndarray:
    """Approach 2 share of each category: its assessment weighted by its uncertainty.

    Parameters
    ----------
    assessment : array_like
        Level (Eq. 4.1) or trend (Eq. 4.2) assessment of each category [fraction].
    uncertainty_pct : array_like
        Relative 95 % uncertainty of each category [%].

    Returns
    -------
    numpy.ndarray
        ``L_x U_x / sum_y L_y U_y`` (Eq. 4.4) or ``T_x U_x / sum_y T_y U_y`` (Eq. 4.5, from
        memory) [fraction]; a category with assessment 0 weighs 0 whatever its uncertainty.
    """
    a = np.asarray(assessment, dtype=float)
    u = np.asarray(uncertainty_pct, dtype=float)
    weighted = np.where(a == 0, 0.0, a * u)
    total = np.nansum(weighted)
    return weighted / total if total > 0 else np.full(len(a), np.nan)


def cumulative_key(shares, threshold: float) -> tuple[np.ndarray, np.ndarray]:
    """Cumulative shares in descending order, and which categories are key.

    Parameters
    ----------
    shares : array_like
        Share of each category [fraction], summing to 1.
    threshold : float
        Cumulative share to reach [fraction]: 0.95 (Approach 1) or 0.90 (Approach 2).

    Returns
    -------
    cumulative : numpy.ndarray
        Cumulative share up to and including each category, categories ranked by descending
        share (ties in input order) [fraction], aligned with ``shares``.
    key : numpy.ndarray of bool
        True for the categories ranked before the cumulative share reaches ``threshold``,
        including the one at which it does; False for zero shares.
    """
    s = np.nan_to_num(np.asarray(shares, dtype=float))
    order = np.argsort(-s, kind="stable")
    running = np.cumsum(s[order])
    before = running - s[order]
    cumulative = np.empty(len(s))
    key = np.empty(len(s), dtype=bool)
    cumulative[order] = running
    key[order] = (before < threshold - 1e-12) & (s[order] > 0)
    if np.isnan(np.asarray(shares, dtype=float)).all():
        cumulative[:] = np.nan
        key[:] = False
    return cumulative, key


# --- national totals (a loader) ----------------------------------------------------------------


def load_national_totals(path: str | Path, max_mb: float = 512) -> pd.DataFrame:
    """Read the rest of the national inventory: ``year, category_code, gas, co2eq_t``.

    An optional column ``uncertainty_pct`` (95 % half-width [%]) lets Approach 2 run on the
    national categories. Raises :class:`compiler.errors.InputError` listing every problem.
    """
    path = Path(path)
    raw, sheet, _ = read_table(path, "", max_mb)
    raw.columns = [str(c).strip().lower() if c != ROW else c for c in raw.columns]
    problems = []
    missing = [c for c in NATIONAL_COLUMNS if c not in raw.columns]
    if missing:
        raise InputError([Finding("error", "national_totals", "required column missing", file=str(path),
                                  column=", ".join(missing), expected=", ".join(NATIONAL_COLUMNS))])
    out = pd.DataFrame({"category_code": raw["category_code"].astype(str).str.strip(),
                        "gas": raw["gas"].astype(str).str.strip()})
    numbers = ["year", "co2eq_t"] + (["uncertainty_pct"] if "uncertainty_pct" in raw.columns else [])
    for col in numbers:
        text = raw[col].astype(str).str.strip()
        values = pd.to_numeric(text.where(text != "", np.nan), errors="coerce")
        bad = values.isna() & ((text != "") | (col != "uncertainty_pct"))
        for _, r in raw[bad].head(10).iterrows():
            problems.append(Finding("error", "national_totals", f"{col} is not a number", file=str(path),
                                    sheet=sheet, row=int(r[ROW]), column=col, found=str(r[col])))
        infinite = values.notna() & ~np.isfinite(values.astype(float))
        for _, r in raw[infinite].head(10).iterrows():
            problems.append(Finding("error", "national_totals", f"{col} is not finite", file=str(path),
                                    sheet=sheet, row=int(r[ROW]), column=col, found=str(r[col])))
        if col == "year":
            odd = values.notna() & np.isfinite(values.astype(float)) & (
                (values != np.floor(values.fillna(0))) | (values < 1900) | (values > 2200))
            for _, r in raw[odd].head(10).iterrows():
                problems.append(Finding("error", "national_totals", "year is not a whole year from 1900 to 2200",
                                        file=str(path), sheet=sheet, row=int(r[ROW]), column=col, found=str(r[col])))
        out[col] = values
    for col in ("category_code", "gas"):
        for _, r in raw[out[col] == ""].head(10).iterrows():
            problems.append(Finding("error", "national_totals", f"{col} is blank", file=str(path), sheet=sheet,
                                    row=int(r[ROW]), column=col))
    dup = out.duplicated(["year", "category_code", "gas"], keep=False) & out["year"].notna()
    for _, r in raw[dup].head(10).iterrows():
        problems.append(Finding("error", "national_totals", "the same year, category and gas appear twice",
                                file=str(path), sheet=sheet, row=int(r[ROW]), column="category_code",
                                expected="one row per year, category_code and gas"))
    if problems:
        raise InputError(problems)
    out["year"] = out["year"].astype(int)
    return out


# --- assembly ------------------------------------------------------------------------------------


@dataclass
class KeyCategoryResult:
    """Key category analysis.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per run and category_code x gas:

        ``run`` ("this inventory", or "including land sector" / "excluding land sector"),
        ``category_code``, ``gas``, ``source`` ("inventory" or "national_totals"),
        ``co2eq_base_t``, ``co2eq_latest_t`` [t CO2-eq],
        ``level_base``, ``level_latest`` (Eq. 4.1), ``trend`` (Eq. 4.2), ``trend_share``
        (trend / sum of trends) [fraction],
        ``cumulative_level_base``, ``cumulative_level_latest``, ``cumulative_trend`` (Approach 1,
        descending order) [fraction],
        ``uncertainty_base_pct``, ``uncertainty_latest_pct`` [%],
        ``level2_base``, ``level2_latest``, ``trend2`` (Approach 2 shares, Eq. 4.4, 4.5) and
        ``cumulative_level2_base``, ``cumulative_level2_latest``, ``cumulative_trend2``
        [fraction; NaN where Approach 2 did not run],
        ``key`` (bool), ``assessments`` (the assessments that make it key, "; "-joined keys of
        :data:`ASSESSMENTS`), ``tiers`` (tiers of its estimate rows), ``tier1_flag`` (key and
        any estimate row on a Tier 1 default), ``message`` (:data:`TIER1_MESSAGE` or "").
    note : str
        What was assessed against what, and why an assessment was not run.
    findings : list of Finding
        One warning per key category on Tier 1 defaults.
    uncertainty_source : str
        Which uncertainty weighted Approach 2 ("Approach 1", "Approach 2 (Monte Carlo)").
    """

    table: pd.DataFrame
    note: str
    findings: list[Finding] = field(default_factory=list)
    uncertainty_source: str = ""


def _category_uncertainty(result, uncertainty) -> tuple[pd.DataFrame, str]:
    """Relative uncertainty per year, category_code and gas [%] from whichever result is given."""
    from .uncertainty import Approach1Result, MonteCarloResult, UncertaintyResult, approach1

    if uncertainty is None:
        uncertainty = approach1(result)
    if isinstance(uncertainty, UncertaintyResult):
        uncertainty = uncertainty.monte_carlo if uncertainty.monte_carlo is not None else uncertainty.approach1
    if isinstance(uncertainty, MonteCarloResult):
        frame = uncertainty.summary[uncertainty.summary["category_code"] != "total"]
        source = "Approach 2 (Monte Carlo; the larger of -x % and +y %)"
    elif isinstance(uncertainty, Approach1Result):
        frame = uncertainty.cells
        source = "Approach 1"
    else:
        raise TypeError(f"uncertainty must be an Approach1Result, MonteCarloResult or UncertaintyResult; "
                        f"got {type(uncertainty).__name__}")
    return frame[["year", "category_code", "gas", "uncertainty_pct"]].copy(), source


def _inventory_cells(result, years) -> pd.DataFrame:
    cats = result.categories
    est = cats[(cats["notation_key"] == "") & cats["co2eq_t"].notna()].copy()
    est["year"] = est["year"].astype(int)
    est = est[est["year"].isin(years)]
    return est[["year", "category_code", "gas", "co2eq_t"]]


def _assess(frame: pd.DataFrame, run_approach2: bool) -> pd.DataFrame:
    """All assessments of one run (``frame``: one row per category_code x gas)."""
    out = frame.copy()
    e0, et = out["co2eq_base_t"].to_numpy(float), out["co2eq_latest_t"].to_numpy(float)
    out["level_base"] = level_assessment(e0)
    out["level_latest"] = level_assessment(et)
    out["trend"] = trend_assessment(e0, et)
    total_trend = np.nansum(out["trend"])
    out["trend_share"] = out["trend"] / total_trend if total_trend > 0 else np.nan
    flags = {}
    for column, share, label in (("cumulative_level_base", "level_base", "L1 base"),
                                 ("cumulative_level_latest", "level_latest", "L1 latest"),
                                 ("cumulative_trend", "trend_share", "T1")):
        out[column], flags[label] = cumulative_key(out[share], THRESHOLD_APPROACH1)
    for col in ("level2_base", "level2_latest", "trend2", "cumulative_level2_base", "cumulative_level2_latest",
                "cumulative_trend2"):
        out[col] = np.nan
    if run_approach2:
        u0, ut = out["uncertainty_base_pct"].to_numpy(float), out["uncertainty_latest_pct"].to_numpy(float)
        out["level2_base"] = uncertainty_weighted(out["level_base"], u0)
        out["level2_latest"] = uncertainty_weighted(out["level_latest"], ut)
        out["trend2"] = uncertainty_weighted(out["trend"], ut)  # U of the latest year (Eq. 4.5, from memory)
        for column, share, label in (("cumulative_level2_base", "level2_base", "L2 base"),
                                     ("cumulative_level2_latest", "level2_latest", "L2 latest"),
                                     ("cumulative_trend2", "trend2", "T2")):
            out[column], flags[label] = cumulative_key(out[share], THRESHOLD_APPROACH2)
    labels = np.array(list(flags))
    matrix = np.column_stack([flags[k] for k in labels]) if len(labels) else np.zeros((len(out), 0), bool)
    out["key"] = matrix.any(axis=1)
    out["assessments"] = ["; ".join(labels[row]) for row in matrix]
    return out


def key_categories(result, uncertainty=None, national_totals: pd.DataFrame | None = None) -> KeyCategoryResult:
    """Key category analysis of the base and latest year (Approaches 1 and 2).

    Parameters
    ----------
    result : InventoryResult
        A compiled inventory.
    uncertainty : Approach1Result, MonteCarloResult or UncertaintyResult, optional
        Category uncertainties for Approach 2 (a Monte Carlo result is preferred where an
        :class:`UncertaintyResult` holds both); default: :func:`compiler.uncertainty.approach1`.
    national_totals : pandas.DataFrame, optional
        The rest of the national inventory (``year, category_code, gas, co2eq_t`` and optionally
        ``uncertainty_pct``); default: read from ``result.settings.national_totals`` where set.

    Returns
    -------
    KeyCategoryResult
        Table described in :class:`KeyCategoryResult`, a note and Tier 1 findings.

    Notes
    -----
    Eq. 4.1, 4.2 (4.3), 4.4 and 4.5 in [1]_, at the level of category_code x gas in CO2-eq.
    CO (no GWP) is not assessed.
    """
    settings = result.settings
    years = sorted({int(settings.first_year), int(settings.last_year)})
    base_year, latest_year = years[0], years[-1]
    notes: list[str] = []
    findings: list[Finding] = []
    if national_totals is None and getattr(settings, "national_totals", None) is not None:
        national_totals = load_national_totals(settings.national_totals, getattr(settings, "max_input_mb", 512))

    unc, source = _category_uncertainty(result, uncertainty)
    cells = _inventory_cells(result, years).assign(source="inventory")
    unc = unc.assign(year=unc["year"].astype(int))
    cells = cells.merge(unc, on=["year", "category_code", "gas"], how="left")
    if national_totals is not None:
        nat = national_totals[national_totals["year"].isin(years)].copy()
        if "uncertainty_pct" not in nat:
            nat["uncertainty_pct"] = np.nan
        ours = set(zip(cells["category_code"], cells["gas"]))
        overlap = [pair for pair in zip(nat["category_code"], nat["gas"]) if pair in ours]
        if overlap:
            listed = ", ".join(sorted({f"{c} {g}" for c, g in overlap}))
            findings.append(Finding("warning", "national_totals_overlap",
                                    f"national_totals repeats categories this inventory compiles ({listed}); the "
                                    "inventory's values are used and the national rows left out"))
            nat = nat[[pair not in ours for pair in zip(nat["category_code"], nat["gas"])]]
        cells = pd.concat([cells, nat[["year", "category_code", "gas", "co2eq_t", "uncertainty_pct"]]
                           .assign(source="national_totals")], ignore_index=True)

    key = ["category_code", "gas", "source"]
    wide = cells.pivot_table(index=key, columns="year", values="co2eq_t", aggfunc="sum")
    wide = wide.reindex(columns=years).fillna(0.0)
    u = cells.pivot_table(index=key, columns="year", values="uncertainty_pct", aggfunc="first").reindex(
        index=wide.index, columns=years)
    frame = pd.DataFrame({"co2eq_base_t": wide[base_year], "co2eq_latest_t": wide[latest_year],
                          "uncertainty_base_pct": u[base_year], "uncertainty_latest_pct": u[latest_year]}).reset_index()
    frame = frame[(frame["co2eq_base_t"] != 0) | (frame["co2eq_latest_t"] != 0)].reset_index(drop=True)

    if national_totals is not None:
        land = frame["category_code"].str.startswith(LAND_SECTOR_PREFIX)
        runs = [(RUN_WITH_LAND, frame), (RUN_WITHOUT_LAND, frame[~land])]
        notes.append(f"Assessed against the national total (national_totals), {RUN_WITH_LAND} and {RUN_WITHOUT_LAND} "
                     f"(categories {', '.join(_land_prefixes_shown(frame))}).")
    else:
        runs = [(RUN_INVENTORY, frame)]
        notes.append("national_totals not given: the categories of this inventory were assessed among themselves, "
                     "not against the national total, so 'key' here means key within this inventory; give "
                     "[inputs] national_totals for the national key category analysis.")
    if base_year == latest_year:
        notes.append("Base year and latest year coincide: the trend assessment is not meaningful.")
    pieces = []
    for name, part in runs:
        if part.empty:
            notes.append(f"Run '{name}': no categories.")
            continue
        nonzero = (part["co2eq_base_t"] != 0) | (part["co2eq_latest_t"] != 0)
        lacking = part[nonzero & (((part["co2eq_base_t"] != 0) & part["uncertainty_base_pct"].isna())
                                  | ((part["co2eq_latest_t"] != 0) & part["uncertainty_latest_pct"].isna()))]
        run2 = lacking.empty
        if not run2:
            notes.append(f"Run '{name}': Approach 2 not run, {len(lacking)} categories have no uncertainty "
                         "(national_totals needs an uncertainty_pct column for it).")
        if np.abs(part["co2eq_base_t"]).sum() == 0:
            notes.append(f"Run '{name}': every base-year value is 0; no trend assessment.")
        pieces.append(_assess(part, run2).assign(run=name))
    table = pd.concat(pieces, ignore_index=True) if pieces else pd.DataFrame()
    notes.append(f"Approach 1 threshold {THRESHOLD_APPROACH1:.0%}, Approach 2 threshold {THRESHOLD_APPROACH2:.0%} "
                 f"weighted by the uncertainty of {source}; base year {base_year}, latest year {latest_year}; "
                 "categories at the level of category code x gas in CO2-eq, removals by absolute value.")

    # Tiers of the estimate rows behind each category and gas.
    em = result.emissions
    est = em.loc[(em["notation_key"] == "").to_numpy(dtype=bool), ["category_code", "gas", "tier"]]
    tiers = est.groupby(["category_code", "gas"])["tier"].agg(lambda t: "; ".join(sorted(set(t)))).rename("tiers")
    if not table.empty:
        table = table.merge(tiers.reset_index(), on=["category_code", "gas"], how="left")
        table["tiers"] = table["tiers"].where(table["source"] == "inventory", "").fillna("")
        on_tier1 = table["tiers"].str.split("; ").map(lambda t: TIER1 in t)
        table["tier1_flag"] = table["key"] & on_tier1
        table["message"] = np.where(table["tier1_flag"], TIER1_MESSAGE, "")
        for code, gas in table.loc[table["tier1_flag"], ["category_code", "gas"]].drop_duplicates().itertuples(
                index=False):
            findings.append(Finding("warning", "key_category_tier", f"{code} {gas}: {TIER1_MESSAGE}",
                                    found=f"{code} {gas}", category_code=code, gas=gas))
        order = {name: i for i, (name, _) in enumerate(runs)}
        table = (table.assign(_run=table["run"].map(order))
                 .sort_values(["_run", "level_latest"], ascending=[True, False], kind="stable")
                 .drop(columns="_run").reset_index(drop=True))
        columns = ["run", "category_code", "gas", "source", "co2eq_base_t", "co2eq_latest_t", "level_base",
                   "level_latest", "trend", "trend_share", "cumulative_level_base", "cumulative_level_latest",
                   "cumulative_trend", "uncertainty_base_pct", "uncertainty_latest_pct", "level2_base",
                   "level2_latest", "trend2", "cumulative_level2_base", "cumulative_level2_latest",
                   "cumulative_trend2", "key", "assessments", "tiers", "tier1_flag", "message"]
        table = table[columns]
    return KeyCategoryResult(table=table, note=" ".join(notes), findings=findings, uncertainty_source=source)
