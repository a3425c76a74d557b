"""Uncertainty of the inventory: Approach 1 (error propagation) and Approach 2 (Monte Carlo).

Both approaches of the 2006 IPCC Guidelines, Vol. 1, Ch. 3 [1]_ work here on one model of the
estimate rows of the base year (``first_year``) and the latest year (``last_year``). Every
estimate row of :attr:`InventoryResult.emissions` is, by the engine's data contract,

    emission_t = coefficient x factor x g(parameter) x area multiplier

with ``coefficient = area_ha x conversion`` [ha x t per factor unit]; ``g`` is 1, ``Frac_ditch``
(ditch CH4), ``1 - Frac_ditch`` (CH4 of the land surface) or the fuel consumption (fires); the
area multiplier is 1 at the estimate. Off-site CO2 of extracted peat (pathway ``co2_offsite``,
:mod:`compiler.offsite_peat`) has no area: its coefficient is the tonnes of air-dry peat (the row's
``parameter_value``) x conversion, and its "area" multiplier carries the production uncertainty
(``production_uncertainty_pct`` of the production file). The uncertain inputs are

* each factor and parameter id (one value per id, shared by every row, region and year that
  uses it: a default used in 1990 and in 2024 is one number in both years);
* each activity draw: one area per (input file, region, stratum keys), shared by all years when
  ``settings.correlate_activity_across_years``, else one per activity row (input file, row).

The rules applied to the published intervals are in :data:`METHOD_RULES` (one sentence each,
for the methods appendix of the report).

Public functions take an :class:`compiler.pipeline.InventoryResult` (or any object with the
same ``emissions``, ``factors_used``, ``activity``, ``settings`` and ``gwp`` attributes) and
return dataclasses of DataFrames; nothing here reads or writes files.

References
----------
.. [1] IPCC (2006). 2006 IPCC Guidelines for National Greenhouse Gas Inventories, Volume 1:
   General Guidance and Reporting, Chapter 3: Uncertainties. Eq. 3.1 (products), Eq. 3.2
   (sums), Table 3.2 (Approach 1 uncertainty calculation with type A and type B
   sensitivities), Section 3.2.3.2 (Approach 2, Monte Carlo simulation).
.. [2] IPCC (2014). 2013 Supplement to the 2006 IPCC Guidelines for National Greenhouse Gas
   Inventories: Wetlands (the source of the Tier 1 factors and their 95 % intervals).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from .errors import CompilerError, Finding
from .factors import QUANTITIES
from .offsite_peat import DEFAULT_PRODUCTION_PCT, OFFSITE_PATHWAY
from .row_model import by_pathway
from .schema import SERIES_KEYS

Z_95 = 1.959963984540054  # 97.5th percentile of the standard normal ("1.96" in [1])
SYMMETRY_TOLERANCE = 0.10  # half-widths within 10 % of the larger count as symmetric (printed rounding)
CONVERGENCE_TOLERANCE = 0.05  # of the width of the 95 % interval; common practice, no source
RNG_BLOCK = 1000  # iterations per random-number stream; chunks are whole numbers of blocks
DEFAULT_CHUNK = 2000  # iterations per chunk at most
CHUNK_BYTES = 512 * 1024 ** 2  # a chunk is cut to the whole blocks whose draws fit in this working memory
ROW_SLICE = 2048  # estimate rows per slice within a chunk (bounds memory on large inventories)
FRACTION_QUANTITIES = tuple(q for q, (_, unit, bounds) in QUANTITIES.items() if bounds == (0.0, 1.0))
STRATUM_DRAW_KEYS = ["input_file", *SERIES_KEYS, "fire_type"]  # one area draw: a file's stratum series

METHOD_RULES: dict[str, str] = {
    "asymmetric_interval":
        "Approach 1 takes the larger of the two half-widths of a factor's 95 % interval, relative to its "
        "central value, as its +/- uncertainty (conservative for asymmetric intervals).",
    "zero_factor":
        "A factor whose central value is 0 enters with its absolute half-width (area basis x half-width x "
        "conversion), since a relative uncertainty is undefined.",
    "no_interval":
        "A factor or parameter printed without a 95 % interval, and a ditch fraction given in the activity "
        "data, is treated as exact in both approaches; the findings list them.",
    "area":
        "Area data carry the 95 % half-width of the activity row (area_uncertainty_pct), or "
        "default_area_pct where the row gives none; burnt areas always carry default_area_pct. The tonnes of "
        "extracted peat (off-site CO2, which has no area) carry the production file's "
        f"production_uncertainty_pct, or {DEFAULT_PRODUCTION_PCT:g} % where the row gives none.",
    "correlation":
        "Rows that share an input (a factor id, a parameter id or an area draw) add its contribution "
        "linearly before the quadrature sums of Eq. 3.1 and 3.2; across categories the Approach 1 total "
        "follows Table 3.2 (categories independent), and a second total accounts for inputs shared across "
        "categories.",
    "trend_approach1":
        "Approach 1 trend: Table 3.2 of Vol. 1 Ch. 3, with factor and parameter uncertainty fully correlated "
        "between the base and the latest year (type A sensitivity) and activity uncertainty uncorrelated "
        "(type B sensitivity x sqrt(2)); the category's activity and factor uncertainties of the latest year "
        "are used (of the base year where the latest estimate is 0). A second figure propagates each input "
        "to first order as the Monte Carlo draws it (a factor id is one value in both years; an area is one "
        "value in both years when correlate_activity_across_years), which also sees a change of the factor "
        "mix within a category that the category-level Table 3.2 cannot.",
    "normal":
        "Approach 2 draws a factor from a normal distribution centred on the central value with sd = larger "
        "half-width / 1.96 where its interval is symmetric (half-widths within 10 % of each other), reaches "
        "or straddles zero, or is longer on the side towards zero (a lognormal cannot have that skew).",
    "lognormal":
        "An asymmetric, strictly positive interval that is longer above the central value gets a lognormal "
        "distribution whose 2.5th and 97.5th percentiles are the interval bounds (mu = mean of the log "
        "bounds, sigma = half their difference / 1.96); a strictly negative one longer below, the mirrored "
        "lognormal.",
    "fraction":
        "A fraction (Frac_ditch, Frac_DOC-CO2) with an interval gets a beta distribution with the central "
        "value as mean and sd = larger half-width / 1.96 (method of moments); where no beta has these "
        "moments, a uniform distribution on the interval clipped to [0, 1].",
    "area_distribution":
        "An area is drawn as area x (1 + s z), s = half-width / 100 / 1.96, z standard normal truncated so "
        "that no area is negative (redrawn below -1/s, s the largest of the stratum's years).",
    "random_numbers":
        "Random numbers: numpy PCG64, one stream per block of 1000 iterations, seeded by the settings seed "
        "and the block number (numpy SeedSequence spawn key), so results do not depend on the chunk size.",
    "convergence":
        "Convergence: the 2.5th and 97.5th percentiles of the first and the second half of the iterations "
        "differ by less than 5 % of the width of the 95 % interval of every reported quantity; otherwise the "
        "iterations needed are estimated by scaling the difference with 1/sqrt(iterations).",
}


class UncertaintyModelError(CompilerError, ValueError):
    """An estimate row does not follow the row model the uncertainty analysis relies on."""


# --- equations -------------------------------------------------------------------------------


def product_uncertainty(*relative_pct) -> np.ndarray | float:
    """Relative uncertainty of a product of uncertain quantities (Approach 1).

    Parameters
    ----------
    *relative_pct : float or array_like
        95 % half-widths of the factors of the product, relative to their values [%].

    Returns
    -------
    float or numpy.ndarray
        95 % half-width of the product, relative to its value [%].

    Notes
    -----
    Eq. 3.1 in [1]_: ``U_total = sqrt(U_1**2 + U_2**2 + ... + U_n**2)``. First-order error
    propagation, good for uncorrelated inputs with relative uncertainties below about 100 %.
    """
    terms = np.asarray([np.asarray(u, dtype=float) for u in relative_pct])
    out = np.sqrt(np.sum(terms ** 2, axis=0))
    return float(out) if out.ndim == 0 else out


def sum_uncertainty(values, relative_pct=None, groups=None, *, half_width=None, shared=None):
    """Relative uncertainty of a sum of uncertain quantities (Approach 1), for one sum or many at once.

    Parameters
    ----------
    values : array_like, shape (n,)
        The quantities summed, x_i [any unit, the same for all].
    relative_pct : array_like, shape (n,), optional
        Their 95 % half-widths relative to their values, U_i [%].
    groups : array_like, shape (n,), optional
        The sum each quantity belongs to (any labels: one sum per label); one sum of all when omitted.
    half_width : array_like, shape (n,), optional
        Instead of ``relative_pct``: the 95 % half-widths themselves, U_i x_i / 100 [unit of values].
        Needed where a quantity is 0 but uncertain (a factor of 0 with an interval), whose U_i is
        undefined.
    shared : array_like, shape (n,), optional
        Codes of the uncertain input behind each quantity. Quantities of one group with the same code
        depend on one input (fully correlated): their half-widths add linearly, with their signs, into
        one term before the quadrature sum, whose terms are independent.

    Returns
    -------
    float
        Without ``groups``: U_total, the 95 % half-width of the sum relative to its absolute value
        [%]; ``nan`` when the sum is 0.
    pandas.DataFrame
        With ``groups``: one row per group, indexed by its label in the order of first appearance:
        ``total`` (sum of the x_i) [unit of values], ``half_width`` (``U_total x |total| / 100``,
        that is ``sqrt((U_1 x_1)**2 + ... + (U_n x_n)**2) / 100``) [unit of values] and ``pct``
        (U_total) [%; NaN where the total is 0].

    Notes
    -----
    Eq. 3.2 in [1]_: ``U_total = sqrt((U_1 x_1)**2 + ... + (U_n x_n)**2) / |x_1 + ... + x_n|``.
    The sums of one group are added in the order of the quantities.
    """
    x = np.asarray(values, dtype=float)
    h = (np.asarray(half_width, dtype=float) if half_width is not None
         else np.asarray(relative_pct, dtype=float) * x / 100.0)
    frame = pd.DataFrame({"_g": np.zeros(len(x), dtype=int) if groups is None else np.asarray(groups),
                          "_x": x, "_h": h})
    if shared is None:
        squares = (frame["_h"] ** 2).groupby(frame["_g"], sort=False).sum()
    else:
        frame["_s"] = np.asarray(shared)
        terms = frame.groupby(["_g", "_s"], sort=False)["_h"].sum()  # one term per shared input
        squares = (terms ** 2).groupby(level="_g", sort=False).sum()
    out = frame.groupby("_g", sort=False)["_x"].sum().to_frame("total")
    out["half_width"] = np.sqrt(squares.reindex(out.index))
    out["pct"] = out["half_width"] / out["total"].abs().replace(0.0, np.nan) * 100.0
    out.index.name = None
    if groups is None:
        return float(out["pct"].iloc[0]) if len(out) else math.nan
    return out


def type_a_sensitivity(base_x, latest_x, base_total: float, latest_total: float) -> np.ndarray:
    """Type A sensitivity of the trend to a category (Approach 1 trend).

    Parameters
    ----------
    base_x, latest_x : array_like
        Emissions of each category in the base year (C_x) and the latest year (D_x) [t CO2-eq].
    base_total, latest_total : float
        Sums over all categories in the base year (sum C) and the latest year (sum D) [t CO2-eq].

    Returns
    -------
    numpy.ndarray
        Change of the trend when the category's emissions rise by 1 % in both years
        [percentage points per %].

    Notes
    -----
    Table 3.2, column I in [1]_ (from memory):
    ``((0.01 D_x + sum D - (0.01 C_x + sum C)) / (0.01 C_x + sum C) - (sum D - sum C) / sum C) x 100``.
    Departure: the denominators are taken in absolute value, so that an inventory that is a net
    sink in the base year keeps the natural sign of its trend (same as :func:`trend_percent`).
    """
    c = np.asarray(base_x, dtype=float)
    d = np.asarray(latest_x, dtype=float)
    shifted = 0.01 * c + base_total
    return ((0.01 * d + latest_total - shifted) / np.abs(shifted)
            - (latest_total - base_total) / abs(base_total)) * 100.0


def type_b_sensitivity(latest_x, base_total: float) -> np.ndarray:
    """Type B sensitivity of the trend to a category (Approach 1 trend).

    Parameters
    ----------
    latest_x : array_like
        Emissions of each category in the latest year (D_x) [t CO2-eq].
    base_total : float
        Sum over all categories in the base year (sum C) [t CO2-eq].

    Returns
    -------
    numpy.ndarray
        Change of the trend when the category's latest-year emissions alone rise by 1 %
        [percentage points per %].

    Notes
    -----
    Table 3.2, column J in [1]_ (from memory): ``D_x / sum C`` (denominator in absolute value).
    """
    return np.asarray(latest_x, dtype=float) / abs(base_total)


def trend_percent(base_total: float, latest_total: float) -> float:
    """Trend of a total from the base year to the latest year [%].

    ``(latest - base) / |base| x 100`` ([1]_, Table 3.2); ``nan`` when the base year total is 0.
    """
    return (latest_total - base_total) / abs(base_total) * 100.0 if base_total != 0 else math.nan


def trend_uncertainty(base, latest, activity_pct, factor_pct) -> tuple[pd.DataFrame, float, float]:
    """Approach 1 uncertainty of the trend of a total, by type A and type B sensitivities.

    Parameters
    ----------
    base, latest : array_like
        Emissions of each category in the base year (C) and the latest year (D) [t CO2-eq].
    activity_pct, factor_pct : array_like
        95 % half-widths of each category's activity data (E) and emission factor (F) [%].

    Returns
    -------
    table : pandas.DataFrame
        One row per category: ``type_a_sensitivity`` (I) [pp per %], ``type_b_sensitivity`` (J)
        [pp per %], ``trend_from_factor_pp`` (K = I x F) [pp], ``trend_from_activity_pp``
        (L = J x E x sqrt(2)) [pp], ``trend_variance_pp2`` (M = K**2 + L**2) [pp**2].
    trend_pct : float
        Trend of the total, ``(sum D - sum C) / |sum C| x 100`` [%].
    trend_uncertainty_pp : float
        95 % half-width of the trend, ``sqrt(sum M)`` [percentage points].

    Notes
    -----
    Table 3.2, columns I to M, and Section 3.2.3.1 in [1]_ (column letters from memory): the
    factor uncertainty is fully correlated between the two years (type A), the activity
    uncertainty uncorrelated (type B, with sqrt(2) because both years carry it).
    """
    c = np.asarray(base, dtype=float)
    d = np.asarray(latest, dtype=float)
    e = np.nan_to_num(np.asarray(activity_pct, dtype=float))
    f = np.nan_to_num(np.asarray(factor_pct, dtype=float))
    base_total, latest_total = float(c.sum()), float(d.sum())
    if base_total == 0:
        nan = np.full(len(c), np.nan)
        table = pd.DataFrame({"type_a_sensitivity": nan, "type_b_sensitivity": nan, "trend_from_factor_pp": nan,
                              "trend_from_activity_pp": nan, "trend_variance_pp2": nan})
        return table, math.nan, math.nan
    a = type_a_sensitivity(c, d, base_total, latest_total)
    b = type_b_sensitivity(d, base_total)
    k = a * f  # column K: trend uncertainty from the factor (correlated between years)
    l_ = b * e * math.sqrt(2.0)  # column L: from activity data (uncorrelated, both years)
    m = k ** 2 + l_ ** 2  # column M
    table = pd.DataFrame({"type_a_sensitivity": a, "type_b_sensitivity": b, "trend_from_factor_pp": k,
                          "trend_from_activity_pp": l_, "trend_variance_pp2": m})
    return table, trend_percent(base_total, latest_total), float(math.sqrt(m.sum()))


def lognormal_from_interval(low: float, high: float) -> tuple[float, float]:
    """Parameters of the lognormal whose 2.5th and 97.5th percentiles are ``low`` and ``high``.

    Parameters
    ----------
    low, high : float
        Bounds of a strictly positive 95 % interval [any unit].

    Returns
    -------
    (mu, sigma) : tuple of float
        Mean and standard deviation of the logarithm [log of the unit; dimensionless].

    Notes
    -----
    ``ln low = mu - 1.96 sigma`` and ``ln high = mu + 1.96 sigma`` (closed form).
    """
    if not 0 < low < high:
        raise ValueError(f"a lognormal needs 0 < low < high; got {low!r}, {high!r}")
    mu = 0.5 * (math.log(low) + math.log(high))
    sigma = (math.log(high) - math.log(low)) / (2.0 * Z_95)
    return mu, sigma


def beta_from_moments(mean: float, sd: float) -> tuple[float, float] | None:
    """Beta distribution on [0, 1] with the given mean and standard deviation (method of moments).

    Parameters
    ----------
    mean : float
        Mean, strictly between 0 and 1 [fraction].
    sd : float
        Standard deviation, positive [fraction].

    Returns
    -------
    (alpha, beta) or None
        Shape parameters [dimensionless]; ``None`` where no beta has these moments
        (``sd**2 >= mean (1 - mean)``).

    Notes
    -----
    ``alpha = mean k``, ``beta = (1 - mean) k``, ``k = mean (1 - mean) / sd**2 - 1`` (closed form).
    """
    if not 0 < mean < 1 or sd <= 0:
        return None
    k = mean * (1.0 - mean) / sd ** 2 - 1.0
    if k <= 0:
        return None
    return mean * k, (1.0 - mean) * k


def _beta_quantiles(alpha: float, beta: float, probs, grid: int = 20001) -> np.ndarray:
    """Quantiles of a beta distribution by integrating its density on a grid (no SciPy)."""
    x = np.linspace(0.0, 1.0, grid)
    with np.errstate(divide="ignore", invalid="ignore"):
        logpdf = ((alpha - 1) * np.log(x) + (beta - 1) * np.log1p(-x)
                  + math.lgamma(alpha + beta) - math.lgamma(alpha) - math.lgamma(beta))
    pdf = np.nan_to_num(np.exp(logpdf), posinf=0.0)
    cdf = np.concatenate([[0.0], np.cumsum(0.5 * (pdf[1:] + pdf[:-1]) * np.diff(x))])
    cdf /= cdf[-1]
    return np.interp(np.asarray(probs, dtype=float), cdf, x)


# --- the input model ---------------------------------------------------------------------------


@dataclass
class _Model:
    """Estimate rows of the reported years and their uncertain inputs, as arrays."""

    years: list[int]
    rows: pd.DataFrame  # one row per estimate row, sorted by cell
    inputs: pd.DataFrame  # one row per factor / parameter id (index = input number)
    draws: pd.DataFrame  # one row per area draw (index = draw number)
    cells: pd.DataFrame  # one row per (year, category_code, gas)
    findings: list[Finding]


def _reported_years(settings) -> list[int]:
    return sorted({int(settings.first_year), int(settings.last_year)})


def _half_widths(value: np.ndarray, low: np.ndarray, high: np.ndarray) -> np.ndarray:
    """The larger half-width of each interval (0 where no interval is printed) [factor unit]."""
    hw = np.fmax(high - value, value - low)
    return np.where(np.isnan(low) | np.isnan(high), 0.0, hw)


def _choose_distributions(inputs: pd.DataFrame) -> pd.DataFrame:
    """Distribution of each input for Approach 2 (rules in METHOD_RULES)."""
    out = inputs.copy()
    v, lo, hi = out["value"].to_numpy(float), out["ci_low"].to_numpy(float), out["ci_high"].to_numpy(float)
    hw = out["half_width"].to_numpy(float)
    cols = {c: np.full(len(out), np.nan) for c in ("mean", "sd", "mu_log", "sigma_log", "alpha", "beta",
                                                     "low", "high", "implied_low", "implied_high")}
    kind = np.empty(len(out), dtype=object)
    rule = np.empty(len(out), dtype=object)
    for i in range(len(out)):  # one pass over distinct factor ids (tens), not over rows
        no_interval = math.isnan(lo[i]) or math.isnan(hi[i])
        if no_interval or hw[i] == 0:
            kind[i], rule[i] = "fixed", "no_interval"
            cols["implied_low"][i] = cols["implied_high"][i] = v[i]
            continue
        sd = hw[i] / Z_95
        if out["quantity"].iat[i] in FRACTION_QUANTITIES:
            shapes = beta_from_moments(v[i], sd)
            if shapes is not None:
                kind[i], rule[i] = "beta", "fraction"
                cols["alpha"][i], cols["beta"][i] = shapes
                cols["mean"][i], cols["sd"][i] = v[i], sd
                cols["implied_low"][i], cols["implied_high"][i] = _beta_quantiles(*shapes, [0.025, 0.975])
            else:
                kind[i], rule[i] = "uniform", "fraction"
                cols["low"][i], cols["high"][i] = max(lo[i], 0.0), min(hi[i], 1.0)
                cols["mean"][i] = 0.5 * (cols["low"][i] + cols["high"][i])
                cols["sd"][i] = (cols["high"][i] - cols["low"][i]) / math.sqrt(12.0)
                width = cols["high"][i] - cols["low"][i]
                cols["implied_low"][i] = cols["low"][i] + 0.025 * width
                cols["implied_high"][i] = cols["low"][i] + 0.975 * width
            continue
        upper, lower = hi[i] - v[i], v[i] - lo[i]
        symmetric = abs(upper - lower) <= SYMMETRY_TOLERANCE * hw[i]
        # A lognormal is skewed away from zero: it fits only an interval whose far side is the longer.
        skewed_away = upper > lower if lo[i] > 0 else lower > upper
        if symmetric or lo[i] <= 0 <= hi[i] or not skewed_away:
            kind[i], rule[i] = "normal", "normal"
            cols["mean"][i], cols["sd"][i] = v[i], sd
            cols["implied_low"][i], cols["implied_high"][i] = v[i] - Z_95 * sd, v[i] + Z_95 * sd
            continue
        sign = 1.0 if lo[i] > 0 else -1.0  # strictly positive, or strictly negative (mirrored)
        a, b = sorted((sign * lo[i], sign * hi[i]))
        mu, sigma = lognormal_from_interval(a, b)
        kind[i] = "lognormal" if sign > 0 else "negative lognormal"
        rule[i] = "lognormal"
        cols["mu_log"][i], cols["sigma_log"][i] = mu, sigma
        cols["mean"][i] = sign * math.exp(mu + 0.5 * sigma ** 2)
        cols["sd"][i] = math.exp(mu + 0.5 * sigma ** 2) * math.sqrt(math.expm1(sigma ** 2))
        cols["implied_low"][i], cols["implied_high"][i] = sorted((sign * a, sign * b))
    out["distribution"] = kind
    out["rule"] = rule
    for c, values in cols.items():
        out[c] = values
    return out


def _build_model(result) -> _Model:
    settings = result.settings
    years = _reported_years(settings)
    findings: list[Finding] = []
    em = result.emissions
    # One selection of the rows analysed (estimates of the reported years): a copy of every estimate row
    # first would hold most of the results table twice.
    keep = (em["notation_key"] == "") & em["emission_t"].notna() & em["year"].astype(int).isin(years)
    est = em[keep.to_numpy(dtype=bool)].reset_index(drop=True)
    est["year"] = est["year"].astype(int)
    if est.empty:
        raise UncertaintyModelError(f"no estimate rows in the reported years {years}: nothing to analyse")
    for col in STRATUM_DRAW_KEYS:
        if col not in est:
            est[col] = ""
        est[col] = est[col].fillna("").astype(str)
    est["parameter_id"] = est["parameter_id"].fillna("").astype(str)

    # Inputs: every factor and parameter id of the register that the rows use.
    reg = result.factors_used.drop_duplicates("factor_id").set_index("factor_id")
    ids = sorted(set(est["factor_id"]) | set(est["parameter_id"]) - {""})
    known = [i for i in ids if i in reg.index]
    inputs = pd.DataFrame({"factor_id": known})
    for col in ("quantity", "unit", "tier"):
        inputs[col] = reg.loc[known, col].to_numpy(dtype=object) if known else []
    for col in ("value", "ci_low", "ci_high"):
        inputs[col] = reg.loc[known, col].to_numpy(dtype=float) if known else np.array([], dtype=float)
    inputs["half_width"] = _half_widths(inputs["value"].to_numpy(float), inputs["ci_low"].to_numpy(float),
                                        inputs["ci_high"].to_numpy(float))
    with np.errstate(divide="ignore", invalid="ignore"):
        inputs["relative_pct"] = np.where(inputs["value"] != 0,
                                          inputs["half_width"] / inputs["value"].abs() * 100.0, np.nan)
    inputs["approach1_rule"] = np.select(
        [inputs["half_width"] == 0, inputs["value"] == 0], ["no_interval", "zero_factor"], "asymmetric_interval")
    inputs = _choose_distributions(inputs)
    missing = sorted(i for i in set(ids) - set(known) if not i.startswith("activity:"))
    if missing:  # only a value given in the activity data ("activity:...") may lack a register row
        raise UncertaintyModelError(f"factor or parameter ids of estimate rows missing from factors_used: {missing}")
    number = {fid: i for i, fid in enumerate(known)}
    uncertain = set(inputs.loc[inputs["distribution"] != "fixed", "factor_id"])

    # Row model: emission = coefficient x factor x (g0 + g1 x parameter) x area multiplier.
    # g0 and g1 come from each pathway's own equation (compiler.row_model), which is linear in the parameter.
    pathway = est["pathway"].astype(str).to_numpy()
    has_param = (est["parameter_id"] != "").to_numpy()
    g0 = by_pathway(pathway, lambda model, rows: model.parameter_term(0.0))
    g1 = np.where(has_param, by_pathway(pathway, lambda model, rows: model.parameter_term(1.0)) - g0, 0.0)
    p_value = est["parameter_value"].to_numpy(float)
    g_central = g0 + g1 * np.nan_to_num(p_value)
    # The activity of a row is its area; off-site CO2 of extracted peat has none: its activity is the
    # tonnes of air-dry peat, carried as the row's parameter (compiler.offsite_peat).
    offsite = pathway == OFFSITE_PATHWAY
    amount = np.where(offsite, p_value, est["area_ha"].to_numpy(float))
    coef = amount * est["conversion"].to_numpy(float)
    f_value = est["factor_value"].to_numpy(float)
    modelled = coef * f_value * g_central
    emission = est["emission_t"].to_numpy(float)
    off = np.abs(modelled - emission) > 1e-9 * np.maximum(np.abs(emission), 1e-6)
    if off.any():
        r = est[off].iloc[0]
        raise UncertaintyModelError(
            f"estimate row {r['input_file']} row {r['input_row']} ({r['year']}, {r['pathway']}) is not "
            f"area x factor x parameter term x conversion: {modelled[off][0]!r} != {emission[off][0]!r}")
    p_uncertain = (g1 != 0) & est["parameter_id"].isin(uncertain).to_numpy()
    # Exact parameters (and activity-given ditch fractions, which differ by row) fold into the coefficient.
    est["coef"] = np.where(p_uncertain, coef, coef * g_central)
    est["g0"] = np.where(p_uncertain, g0, 1.0)
    est["g1"] = np.where(p_uncertain, g1, 0.0)
    est["g_central"] = np.where(p_uncertain, g_central, 1.0)
    est["fid"] = est["factor_id"].map(number).astype(int)
    est["pid"] = np.where(p_uncertain, est["parameter_id"].map(number).fillna(-1), -1).astype(int)
    est["gwp"] = est["gas"].map(result.gwp).astype(float)

    # Area uncertainty per row [%, 95 % half-width].
    activity = result.activity
    activity_file = settings.activity.name if getattr(settings, "activity", None) is not None else ""
    pct_by_row = (dict(zip(activity["_row"].astype(int), activity["area_uncertainty_pct"].astype(float)))
                  if "area_uncertainty_pct" in activity else {})
    from_activity = (est["input_file"] == activity_file).to_numpy()
    pct = np.where(from_activity, est["input_row"].astype(int).map(pct_by_row).to_numpy(float), np.nan)
    default_pct = float(settings.default_area_pct)
    defaulted = np.isnan(pct) & ~offsite
    est["area_pct"] = np.where(defaulted, default_pct, pct)
    if offsite.any():  # production statistics: the file's production_uncertainty_pct, else the default
        peat = getattr(result, "peat_production", None)
        by_row = ({} if peat is None or peat.empty else
                  dict(zip(peat["_row"].astype(int), peat["production_uncertainty_pct"].astype(float))))
        given = est.loc[offsite, "input_row"].astype(int).map(by_row).to_numpy(float)
        est.loc[offsite, "area_pct"] = np.where(np.isnan(given), DEFAULT_PRODUCTION_PCT, given)
        if np.isnan(given).any():
            findings.append(Finding("info", "uncertainty_area",
                                    f"{int(np.isnan(given).sum())} off-site peat rows of the reported years take the "
                                    f"default production uncertainty of {DEFAULT_PRODUCTION_PCT:g} % (no "
                                    "production_uncertainty_pct given)", column="production_uncertainty_pct"))
    if (defaulted & from_activity).any():
        findings.append(Finding("info", "uncertainty_area",
                                f"{int((defaulted & from_activity).sum())} estimate rows of the reported years take "
                                f"the default area uncertainty of {default_pct:g} % (no area_uncertainty_pct given)",
                                column="area_uncertainty_pct"))
    if (~from_activity & ~offsite).any():
        findings.append(Finding("info", "uncertainty_area",
                                f"burnt areas carry the default area uncertainty of {default_pct:g} % "
                                "(uncertainty.default_area_pct)"))

    # Area draws: one per stratum across years, or one per activity row.
    draw_keys = STRATUM_DRAW_KEYS if settings.correlate_activity_across_years else ["input_file", "input_row"]
    est["draw"] = est.groupby(draw_keys, sort=True).ngroup().astype(int)
    s = est["area_pct"].to_numpy(float) / 100.0 / Z_95
    est["area_sd"] = s
    draws = est.groupby("draw").agg(input_file=("input_file", "first"), region=("region", "first"),
                                    years=("year", "nunique"), rows=("year", "size"),
                                    max_area_pct=("area_pct", "max"))
    for col in STRATUM_DRAW_KEYS[2:]:
        draws[col] = est.groupby("draw")[col].first()
    draws["max_sd"] = draws["max_area_pct"] / 100.0 / Z_95
    with np.errstate(divide="ignore"):
        draws["z_lower"] = np.where(draws["max_sd"] > 0, -1.0 / draws["max_sd"], -np.inf)
    draws["distribution"] = "normal multiplier 1 + s z, truncated at zero area"

    # Cells: (year, category_code, gas); rows sorted by cell for the segment sums.
    est = est.sort_values(["year", "category_code", "gas", "fid", "draw"], kind="stable").reset_index(drop=True)
    est["cell"] = est.groupby(["year", "category_code", "gas"], sort=False).ngroup().astype(int)
    cells = est.groupby("cell").agg(year=("year", "first"), category_code=("category_code", "first"),
                                    gas=("gas", "first"), gwp=("gwp", "first"), emission_t=("emission_t", "sum"),
                                    rows=("emission_t", "size"))
    cells["co2eq_t"] = cells["emission_t"] * cells["gwp"]

    fixed = inputs[(inputs["distribution"] == "fixed") & inputs["factor_id"].isin(set(est["factor_id"])
                                                                                  | set(est["parameter_id"]))]
    if not fixed.empty:
        findings.append(Finding("warning", "uncertainty_no_interval",
                                f"{len(fixed)} factors in use have no 95 % interval (or one of zero width) and are "
                                "treated as exact, which understates the uncertainty: " + ", ".join(fixed["factor_id"])))
    if (est["parameter_id"] == "activity:ditch_fraction").any():
        findings.append(Finding("info", "uncertainty_no_interval",
                                "ditch fractions given in the activity data are treated as exact"))
    return _Model(years=years, rows=est, inputs=inputs, draws=draws, cells=cells, findings=findings)


# --- Approach 1 ----------------------------------------------------------------------------------


@dataclass
class Approach1Result:
    """Approach 1 (error propagation) results.

    Attributes
    ----------
    cells : pandas.DataFrame
        One row per year (base and latest), category_code and gas: ``year``, ``category_code``,
        ``gas``, ``emission_t`` [t gas], ``co2eq_t`` [t CO2-eq; NaN for CO],
        ``activity_half_width_t``, ``factor_half_width_t``, ``half_width_t`` (95 % half-widths
        [t gas]), ``activity_pct`` (E), ``factor_pct`` (F, factors and parameters),
        ``uncertainty_pct`` (combined, sqrt(E**2 + F**2)) [% of |emission_t|; NaN where the
        estimate is 0].
    total : pandas.DataFrame
        One row per year: ``year``, ``co2eq_t``, ``half_width_t`` and ``uncertainty_pct``
        (Table 3.2: categories independent) [t CO2-eq, %], ``half_width_shared_inputs_t`` and
        ``uncertainty_pct_shared_inputs`` (inputs shared across categories and gases added
        linearly) [t CO2-eq, %].
    trend_table : pandas.DataFrame
        One row per category_code and gas with a GWP (Table 3.2): ``co2eq_base_t`` (C),
        ``co2eq_latest_t`` (D) [t CO2-eq], ``activity_pct`` (E), ``factor_pct`` (F),
        ``combined_pct`` (G) [%], ``variance_share_latest`` (H) [%**2], ``type_a_sensitivity`` (I),
        ``type_b_sensitivity`` (J) [pp per %], ``trend_from_factor_pp`` (K),
        ``trend_from_activity_pp`` (L) [pp], ``trend_variance_pp2`` (M) [pp**2], ``trend_pct``
        (the category's own trend) [%], ``trend_uncertainty_pp`` (95 % half-width of the
        category's own trend, shared inputs propagated to first order) [pp].
    trend : pandas.DataFrame
        One row: ``base_year``, ``latest_year``, ``co2eq_base_t``, ``co2eq_latest_t``
        [t CO2-eq], ``trend_pct`` [%], ``trend_uncertainty_pp`` (95 % half-width, Table 3.2:
        sqrt of the sum of column M) [pp], ``trend_uncertainty_pp_shared_inputs`` (the same trend,
        each factor, parameter and area draw propagated to first order) [pp].
    rows : pandas.DataFrame
        One row per estimate row of the two years (Eq. 3.1 per row): ``year``,
        ``category_code``, ``gas``, ``pathway``, ``region``, ``input_file``, ``input_row``,
        ``factor_id``, ``parameter_id``, ``emission_t``, ``activity_pct``, ``factor_pct``,
        ``parameter_pct`` [%], ``uncertainty_pct`` [%], ``half_width_t`` [t gas].
    inputs : pandas.DataFrame
        One row per factor or parameter id: ``factor_id``, ``quantity``, ``value``, ``unit``,
        ``ci_low``, ``ci_high``, ``half_width`` [factor unit], ``relative_pct`` [%],
        ``approach1_rule`` (key of :data:`METHOD_RULES`).
    findings : list of Finding
    variance_shares : pandas.DataFrame
        The latest year's cells (:func:`variance_shares`), largest contribution to the variance of the
        total first.
    """

    cells: pd.DataFrame
    total: pd.DataFrame
    trend_table: pd.DataFrame
    trend: pd.DataFrame
    rows: pd.DataFrame
    inputs: pd.DataFrame
    findings: list[Finding] = field(default_factory=list)
    variance_shares: pd.DataFrame = field(default_factory=pd.DataFrame)


def variance_shares(cells: pd.DataFrame, year: int) -> pd.DataFrame:
    """The cells of ``year`` (:attr:`Approach1Result.cells`) with their part of the variance of the total, largest
    first: ``variance`` = (half_width_t x co2eq_t / emission_t)**2 [(t CO2-eq)**2; 0 where the estimate is 0 or
    has no GWP] and ``variance_share_pct``, its share of the sum over the cells [%; 0 where that sum is 0]
    (categories independent, as in Eq. 3.2)."""
    out = cells[cells["year"] == year].copy()
    out["variance"] = (out["half_width_t"] * out["co2eq_t"]
                       / out["emission_t"].where(out["emission_t"] != 0)).fillna(0) ** 2
    total = out["variance"].sum()
    out = out.sort_values("variance", ascending=False)
    out["variance_share_pct"] = out["variance"] / total * 100 if total else out["variance"] * 0
    return out


def approach1(result) -> Approach1Result:
    """Approach 1 uncertainty of the base and latest year and of the trend.

    Parameters
    ----------
    result : InventoryResult
        A compiled inventory.

    Returns
    -------
    Approach1Result
        Tables described in :class:`Approach1Result`.

    Notes
    -----
    Eq. 3.1 and Eq. 3.2 and Table 3.2 in [1]_, applied to the uncertain inputs rather than to
    the rows: within a cell, the rows sharing a factor, a parameter or an area add its
    half-width linearly (full correlation) before the quadrature sum over inputs. For one row
    this is exactly Eq. 3.1 (``sqrt(U_area**2 + U_factor**2)``); for rows with distinct inputs
    exactly Eq. 3.2. A factor of value 0 enters with its absolute half-width. Rules:
    :data:`METHOD_RULES`.

    The arithmetic is that of :func:`sum_uncertainty` (Eq. 3.2: per cell over the inputs of one
    kind, with the rows' input codes as ``shared``; per year over the cells and over the shared
    inputs) and :func:`product_uncertainty` (Eq. 3.1: factor with parameter, then with area; per
    row; the category's E and F of the trend table). The trend's own quadrature sums are those of
    Table 3.2 (:func:`trend_uncertainty`) and of the first-order trend over shared inputs.
    """
    model = _build_model(result)
    rows, inputs, cells = model.rows, model.inputs, model.cells
    hw = inputs["half_width"].to_numpy(float)
    fid, pid = rows["fid"].to_numpy(), rows["pid"].to_numpy()
    coef, g, g1 = rows["coef"].to_numpy(float), rows["g_central"].to_numpy(float), rows["g1"].to_numpy(float)
    f_value = inputs["value"].to_numpy(float)[fid]
    emission = rows["emission_t"].to_numpy(float)
    # Absolute 95 % half-widths contributed by each input to each row [t gas].
    u_factor = coef * g * hw[fid]  # dE/dfactor x half-width of the factor
    u_param = np.where(pid >= 0, coef * f_value * g1 * hw[np.maximum(pid, 0)], 0.0)  # dE/dparameter x half-width
    u_area = emission * rows["area_pct"].to_numpy(float) / 100.0  # E x U_area

    # Eq. 3.2 within each cell over the inputs of one kind (rows sharing an input add linearly first).
    cell = rows["cell"].to_numpy()
    pid_code = np.where(pid >= 0, pid, -1)
    by_factor = sum_uncertainty(emission, groups=cell, half_width=u_factor, shared=fid).reindex(cells.index)
    by_param = sum_uncertainty(emission, groups=cell, half_width=u_param, shared=pid_code).reindex(cells.index)
    by_area = sum_uncertainty(emission, groups=cell, half_width=u_area, shared=rows["draw"].to_numpy())
    by_area = by_area.reindex(cells.index)
    out = cells.copy()
    out["activity_half_width_t"] = by_area["half_width"].to_numpy()
    # Eq. 3.1: each row is the product area x factor x g(parameter), whose three kinds of input are independent,
    # so the cell's half-widths from each kind combine in quadrature. All are relative to the same |emission_t|,
    # so Eq. 3.1 holds for them as for relative uncertainties (and still where emission_t is 0).
    out["factor_half_width_t"] = product_uncertainty(by_factor["half_width"], by_param["half_width"])
    out["half_width_t"] = product_uncertainty(out["activity_half_width_t"], out["factor_half_width_t"])
    denominator = out["emission_t"].abs().replace(0.0, np.nan)
    out["activity_pct"] = by_area["pct"].to_numpy()
    for name, column in (("factor_pct", "factor_half_width_t"), ("uncertainty_pct", "half_width_t")):
        out[name] = out[column] / denominator * 100.0
    cell_table = out[["year", "category_code", "gas", "emission_t", "co2eq_t", "activity_half_width_t",
                      "factor_half_width_t", "half_width_t", "activity_pct", "factor_pct",
                      "uncertainty_pct"]].reset_index(drop=True)

    # Totals in CO2-eq per year: Eq. 3.2 over the cells (categories independent, Table 3.2) and, beside it,
    # over the inputs shared across cells, one kind of input at a time, the kinds combined as in the cells.
    with_gwp = out[out["gwp"].notna()]
    gwp_rows = rows["gwp"].to_numpy(float)
    has = ~np.isnan(gwp_rows)
    w_all = np.nan_to_num(gwp_rows)
    year, co2eq = rows["year"].to_numpy()[has], (emission * w_all)[has]
    kinds = [sum_uncertainty(co2eq, groups=year, half_width=(u * w_all)[has], shared=ids[has])["half_width"]
             for u, ids in ((u_factor, fid), (u_param, pid_code), (u_area, rows["draw"].to_numpy()))]
    shared = pd.Series(product_uncertainty(*kinds), index=kinds[0].index)
    total = sum_uncertainty(with_gwp["co2eq_t"].to_numpy(), groups=with_gwp["year"].to_numpy(),
                            half_width=(with_gwp["half_width_t"] * with_gwp["gwp"]).to_numpy()).sort_index()
    total.index.name = "year"
    total = total.rename(columns={"total": "co2eq_t", "half_width": "half_width_t", "pct": "uncertainty_pct"})
    total["half_width_shared_inputs_t"] = shared.reindex(total.index)
    denom = total["co2eq_t"].abs().replace(0.0, np.nan)
    total["uncertainty_pct_shared_inputs"] = total["half_width_shared_inputs_t"] / denom * 100.0
    total = total.reset_index()[["year", "co2eq_t", "half_width_t", "uncertainty_pct",
                                 "half_width_shared_inputs_t", "uncertainty_pct_shared_inputs"]]

    trend_table, trend = _approach1_trend(with_gwp, model.years)
    if len(model.years) == 2:
        # The same trend by first-order propagation over the shared inputs (as the Monte Carlo draws them).
        parts = [("factor", fid[has], (u_factor * w_all)[has]), ("parameter", pid[has], (u_param * w_all)[has]),
                 ("area", rows["draw"].to_numpy()[has], (u_area * w_all)[has])]
        sub_rows = rows[has].assign(_all="total", _co2eq=(emission * w_all)[has])
        whole = _shared_trend(sub_rows, parts, model.years, ["_all"])
        trend["trend_uncertainty_pp_shared_inputs"] = whole["trend_uncertainty_pp"].to_numpy()
        own = _shared_trend(sub_rows, parts, model.years, ["category_code", "gas"])
        trend_table = trend_table.merge(own, on=["category_code", "gas"], how="left")
    else:
        trend["trend_uncertainty_pp_shared_inputs"] = math.nan
        trend_table["trend_uncertainty_pp"] = math.nan

    # Per-row Eq. 3.1, for transparency.
    with np.errstate(divide="ignore", invalid="ignore"):
        a_pct = rows["area_pct"].to_numpy(float)
        f_pct = np.where(f_value != 0, hw[fid] / np.abs(f_value) * 100.0, np.nan)
        p_pct = np.where(pid >= 0, np.abs(g1) * hw[np.maximum(pid, 0)] / np.abs(g) * 100.0, 0.0)
        row_hw = product_uncertainty(u_factor, u_param, u_area)  # Eq. 3.1 per row
        row_pct = np.where(emission != 0, row_hw / np.abs(emission) * 100.0, np.nan)
    row_table = rows[["year", "category_code", "gas", "pathway", "region", "input_file", "input_row", "factor_id",
                      "parameter_id", "emission_t"]].copy()
    row_table["activity_pct"], row_table["factor_pct"], row_table["parameter_pct"] = a_pct, f_pct, p_pct
    row_table["uncertainty_pct"], row_table["half_width_t"] = row_pct, row_hw
    inputs_table = inputs[["factor_id", "quantity", "value", "unit", "ci_low", "ci_high", "half_width",
                           "relative_pct", "approach1_rule"]].copy()
    return Approach1Result(cells=cell_table, total=total, trend_table=trend_table, trend=trend, rows=row_table,
                           inputs=inputs_table, findings=list(model.findings),
                           variance_shares=variance_shares(cell_table, max(model.years)))


def _shared_trend(rows: pd.DataFrame, parts, years: list[int], group: list[str]) -> pd.DataFrame:
    """First-order uncertainty of the trend of each group's total, input by input [pp].

    For the trend ``T = (D - C) / |C| x 100`` of the group's totals C (base year) and D (latest
    year), an input shifting them by dC and dD (its signed 95 % half-width contributions, summed
    over the rows that share it) moves the trend by ``100 (dD / |C| - sign(C) D dC / C**2)``;
    the inputs are independent of each other, so these add in quadrature. An area draw shared by
    both years (``correlate_activity_across_years``) has both dC and dD; otherwise one of them.
    """
    base_year, latest_year = years[0], years[-1]
    frames = []
    for kind, ids, values in parts:
        frame = rows[group + ["year"]].copy()
        frame["_kind"], frame["_id"], frame["_v"] = kind, ids, values
        frames.append(frame)
    long = pd.concat(frames, ignore_index=True)
    sums = (long.groupby(group + ["_kind", "_id", "year"])["_v"].sum().unstack("year")
            .reindex(columns=[base_year, latest_year]).fillna(0.0))
    totals = (rows.groupby(group + ["year"])["_co2eq"].sum().unstack("year")
              .reindex(columns=[base_year, latest_year]).fillna(0.0))
    c = totals[base_year].reindex(sums.index.droplevel(["_kind", "_id"])).to_numpy()
    d = totals[latest_year].reindex(sums.index.droplevel(["_kind", "_id"])).to_numpy()
    with np.errstate(divide="ignore", invalid="ignore"):
        d_latest, d_base = sums[latest_year].to_numpy(), sums[base_year].to_numpy()
        moved = 100.0 * (d_latest / np.abs(c) - np.sign(c) * d * d_base / c ** 2)
    variance = pd.Series(moved ** 2, index=sums.index).groupby(level=group).sum()
    out = totals.copy()
    out["trend_uncertainty_pp"] = np.sqrt(variance.reindex(out.index)).to_numpy()
    out.loc[out[base_year] == 0, "trend_uncertainty_pp"] = np.nan
    return out.reset_index()[group + ["trend_uncertainty_pp"]]


def _approach1_trend(cells: pd.DataFrame, years: list[int]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Table 3.2 of [1] at the level of category_code x gas, in CO2-eq."""
    base_year, latest_year = years[0], years[-1]
    key = ["category_code", "gas"]
    base = cells[cells["year"] == base_year].set_index(key)
    latest = cells[cells["year"] == latest_year].set_index(key)
    index = base.index.union(latest.index)
    c = base["co2eq_t"].reindex(index).fillna(0.0)
    d = latest["co2eq_t"].reindex(index).fillna(0.0)
    # The category's E and F: latest year, or base year where the latest estimate is 0.
    use_latest = d != 0
    e = latest["activity_pct"].reindex(index).where(use_latest, base["activity_pct"].reindex(index))
    f = latest["factor_pct"].reindex(index).where(use_latest, base["factor_pct"].reindex(index))
    table = pd.DataFrame({"co2eq_base_t": c, "co2eq_latest_t": d, "activity_pct": e, "factor_pct": f})
    table["combined_pct"] = product_uncertainty(e, f)  # Eq. 3.1
    latest_total = float(d.sum())
    hw_latest = (latest["half_width_t"] * latest["gwp"]).reindex(index).fillna(0.0)
    table["variance_share_latest"] = (100.0 * hw_latest / abs(latest_total)) ** 2 if latest_total else np.nan
    if base_year == latest_year:
        sens = pd.DataFrame(np.nan, index=range(len(index)), columns=[
            "type_a_sensitivity", "type_b_sensitivity", "trend_from_factor_pp", "trend_from_activity_pp",
            "trend_variance_pp2"])
        trend_pct, trend_pp = math.nan, math.nan
    else:
        sens, trend_pct, trend_pp = trend_uncertainty(c.to_numpy(), d.to_numpy(), e.to_numpy(), f.to_numpy())
    for col in sens.columns:
        table[col] = sens[col].to_numpy()
    with np.errstate(divide="ignore", invalid="ignore"):
        table["trend_pct"] = np.where(c != 0, (d - c) / c.abs() * 100.0, np.nan)
    table = table.reset_index()
    trend = pd.DataFrame([{"base_year": base_year, "latest_year": latest_year, "co2eq_base_t": float(c.sum()),
                           "co2eq_latest_t": latest_total, "trend_pct": trend_pct,
                           "trend_uncertainty_pp": trend_pp}])
    return table, trend


# --- Approach 2 ----------------------------------------------------------------------------------


@dataclass
class MonteCarloResult:
    """Approach 2 (Monte Carlo) results.

    Attributes
    ----------
    summary : pandas.DataFrame
        One row per year (base, latest) and reported quantity: ``year``, ``category_code``
        ("total" for the total), ``gas`` ("CO2-eq" for the total), ``unit`` ("t" of the gas or
        "t CO2-eq"), ``estimate`` (the inventory value), ``mean``, ``median``, ``p2_5``,
        ``p97_5`` [unit], ``minus_pct`` = (estimate - p2_5) / |estimate| x 100 and ``plus_pct`` =
        (p97_5 - estimate) / |estimate| x 100 (the interval as -x % / +y % of the estimate),
        ``uncertainty_pct`` = max(minus_pct, plus_pct) [%].
    trend : pandas.DataFrame
        One row per category_code and gas present in the base year, and the total:
        ``category_code``, ``gas``, ``base_year``, ``latest_year``, ``estimate_pct`` (trend of the
        inventory values), ``mean_pct``, ``median_pct``, ``p2_5_pct``, ``p97_5_pct`` [%],
        ``minus_pp``, ``plus_pp`` (distance of the bounds from the estimate) [percentage points].
    distributions : pandas.DataFrame
        One row per factor or parameter id: ``factor_id``, ``quantity``, ``value``, ``unit``,
        ``ci_low``, ``ci_high``, ``distribution`` (normal, lognormal, negative lognormal, beta,
        uniform, fixed), ``rule`` (key of :data:`METHOD_RULES`), ``mean``, ``sd`` [unit],
        ``mu_log``, ``sigma_log`` [log unit], ``alpha``, ``beta`` [-], ``low``, ``high`` (uniform
        bounds), ``implied_low``, ``implied_high`` (2.5th and 97.5th percentiles of the chosen
        distribution) [unit].
    activity_draws : pandas.DataFrame
        One row per area draw: ``draw``, ``input_file``, ``region``, the stratum keys, ``years``,
        ``rows``, ``max_area_pct`` [%], ``max_sd`` [-], ``z_lower`` (truncation of z),
        ``distribution``.
    convergence : pandas.DataFrame
        One row per reported quantity: ``kind`` (level or trend), ``period`` ("1990", "2024" or
        "1990-2024"), ``category_code``, ``gas``, ``p2_5_first``, ``p2_5_second``, ``p97_5_first``,
        ``p97_5_second``, ``width`` (p97_5 - p2_5 of all iterations), ``difference`` (largest
        |first - second| over the two percentiles), ``relative_difference`` (difference / width),
        ``converged`` (bool), ``iterations_needed``.
    findings : list of Finding
        Convergence (warning or info) and input remarks.
    iterations, seed, chunk_size : int
    samples : numpy.ndarray
        Per-iteration values of every cell, total and trend, shape (len(sample_index), iterations).
    sample_index : pandas.DataFrame
        ``kind`` (level or trend), ``period`` ("1990", "2024", "1990-2024"), ``year`` (NA for a
        trend), ``category_code``, ``gas``, ``unit`` ("t", "t CO2-eq" or "%") of each row of
        ``samples``.
    """

    summary: pd.DataFrame
    trend: pd.DataFrame
    distributions: pd.DataFrame
    activity_draws: pd.DataFrame
    convergence: pd.DataFrame
    findings: list[Finding]
    iterations: int
    seed: int
    chunk_size: int
    samples: np.ndarray = field(repr=False)
    sample_index: pd.DataFrame = field(repr=False)


@dataclass
class _Kernel:
    """The arrays one Monte Carlo chunk needs (built once per run)."""

    n_inputs: int
    n_draws: int
    kind_index: dict[str, np.ndarray]  # distribution -> input numbers
    loc: np.ndarray
    scale: np.ndarray
    mu: np.ndarray
    sigma: np.ndarray
    sign: np.ndarray
    alpha: np.ndarray
    beta: np.ndarray
    low: np.ndarray
    high: np.ndarray
    value: np.ndarray
    z_lower: np.ndarray
    fid: np.ndarray
    pid: np.ndarray
    multiplier: np.ndarray  # per row: number of its (area draw, sd) pair
    mult_draw: np.ndarray  # per pair: the area draw
    mult_sd: np.ndarray  # per pair: s = half-width / 100 / 1.96
    coef: np.ndarray
    g0: np.ndarray
    g1: np.ndarray
    param_rows: np.ndarray
    slices: list[tuple[int, int, np.ndarray, np.ndarray]]  # (start, stop, local segment starts, cell ids)
    n_cells: int
    total_weights: np.ndarray  # (n_years, n_cells) GWP per cell of the year, 0 elsewhere


def _kernel(model: _Model) -> _Kernel:
    inputs, rows = model.inputs, model.rows
    dist = inputs["distribution"].to_numpy(dtype=object)
    kind_index = {k: np.flatnonzero(dist == k) for k in ("fixed", "normal", "lognormal", "negative lognormal",
                                                           "beta", "uniform")}
    cell = rows["cell"].to_numpy()
    starts = np.flatnonzero(np.r_[True, cell[1:] != cell[:-1]]) if len(cell) else np.array([], dtype=int)
    slices = []
    for a in range(0, len(rows), ROW_SLICE):
        b = min(a + ROW_SLICE, len(rows))
        local = starts[(starts >= a) & (starts < b)]
        if len(local) == 0 or local[0] != a:
            local = np.r_[a, local]
        slices.append((a, b, local - a, cell[local]))
    n_cells = len(model.cells)
    weights = np.zeros((len(model.years), n_cells))
    for i, year in enumerate(model.years):
        mask = (model.cells["year"] == year).to_numpy() & model.cells["gwp"].notna().to_numpy()
        weights[i, mask] = model.cells["gwp"].to_numpy(float)[mask]
    pid = rows["pid"].to_numpy()
    # Rows of one stratum and year (its pathways) share one area multiplier 1 + s z.
    pairs = pd.DataFrame({"draw": rows["draw"].to_numpy(), "sd": rows["area_sd"].to_numpy(float)})
    mult = pairs.groupby(["draw", "sd"], sort=True).ngroup().to_numpy()
    unique = pairs.drop_duplicates().sort_values(["draw", "sd"])
    return _Kernel(
        n_inputs=len(inputs), n_draws=len(model.draws), kind_index=kind_index,
        loc=inputs["value"].to_numpy(float), scale=(inputs["half_width"] / Z_95).to_numpy(float),
        mu=inputs["mu_log"].to_numpy(float), sigma=inputs["sigma_log"].to_numpy(float),
        sign=np.where(dist == "negative lognormal", -1.0, 1.0), alpha=inputs["alpha"].to_numpy(float),
        beta=inputs["beta"].to_numpy(float), low=inputs["low"].to_numpy(float), high=inputs["high"].to_numpy(float),
        value=inputs["value"].to_numpy(float), z_lower=model.draws["z_lower"].to_numpy(float),
        fid=rows["fid"].to_numpy(), pid=np.maximum(pid, 0), multiplier=mult,
        mult_draw=unique["draw"].to_numpy(), mult_sd=unique["sd"].to_numpy(float), coef=rows["coef"].to_numpy(float),
        g0=rows["g0"].to_numpy(float), g1=rows["g1"].to_numpy(float), param_rows=np.flatnonzero(pid >= 0),
        slices=slices, n_cells=n_cells, total_weights=weights)


def block_generator(seed: int, block: int) -> np.random.Generator:
    """The random-number stream of one block of :data:`RNG_BLOCK` iterations.

    PCG64 seeded by ``SeedSequence(seed, spawn_key=(block,))``: independent streams per block,
    the same whatever the chunk size.
    """
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(seed, spawn_key=(block,))))


def _draw_block(k: _Kernel, rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Factor values (inputs x n) and standard normal area deviates (draws x n) of one block.

    The order of the draws from the stream is fixed: one standard normal per input and per area
    draw, then the beta and uniform inputs, then redraws of the truncated area deviates.
    """
    z = rng.standard_normal((k.n_inputs + k.n_draws, n))
    zf, za = z[:k.n_inputs], z[k.n_inputs:]
    f = np.empty((k.n_inputs, n))
    i = k.kind_index["fixed"]
    f[i] = k.value[i, None]
    i = k.kind_index["normal"]
    f[i] = k.loc[i, None] + k.scale[i, None] * zf[i]
    for kind in ("lognormal", "negative lognormal"):
        i = k.kind_index[kind]
        if len(i):
            f[i] = k.sign[i, None] * np.exp(k.mu[i, None] + k.sigma[i, None] * zf[i])
    i = k.kind_index["beta"]
    if len(i):
        f[i] = rng.beta(k.alpha[i, None], k.beta[i, None], size=(len(i), n))
    i = k.kind_index["uniform"]
    if len(i):
        f[i] = k.low[i, None] + (k.high[i] - k.low[i])[:, None] * rng.random((len(i), n))
    # Truncation of the area deviates: redraw below -1/s so that no area is negative.
    bad = za < k.z_lower[:, None]
    while bad.any():
        za[bad] = rng.standard_normal(int(bad.sum()))
        bad = za < k.z_lower[:, None]
    return f, za


def _blocks_per_chunk(k: _Kernel, chunk_size: int) -> int:
    """Blocks of RNG_BLOCK iterations per chunk: ``chunk_size`` rounded up to whole blocks, fewer where
    the chunk's working arrays (about 8 bytes x (inputs + 2 x area draws + 2 x area multipliers +
    ROW_SLICE + cells) per iteration) would pass CHUNK_BYTES; at least one. The numbers do not depend
    on it. At 1e6 stratum-years (40,000 area draws) one block per chunk made the Monte Carlo add
    0.76 GiB and run faster than two (1.99 GiB)."""
    requested = max(1, -(-int(chunk_size) // RNG_BLOCK))
    per_iteration = 8 * (k.n_inputs + 2 * k.n_draws + 2 * len(k.mult_draw) + ROW_SLICE + k.n_cells)
    return max(1, min(requested, CHUNK_BYTES // (per_iteration * RNG_BLOCK)))


def _draw_chunk(k: _Kernel, seed: int, iterations: int, first: int, stop: int) -> tuple[np.ndarray, np.ndarray]:
    """Factor values and area deviates of blocks ``first:stop``, each block written into place."""
    if stop - first == 1:
        return _draw_block(k, block_generator(seed, first), min(RNG_BLOCK, iterations - first * RNG_BLOCK))
    n = min(stop * RNG_BLOCK, iterations) - first * RNG_BLOCK
    f, za = np.empty((k.n_inputs, n)), np.empty((k.n_draws, n))
    for block in range(first, stop):
        a = (block - first) * RNG_BLOCK
        m = min(RNG_BLOCK, iterations - block * RNG_BLOCK)
        f[:, a:a + m], za[:, a:a + m] = _draw_block(k, block_generator(seed, block), m)
    return f, za


def _chunk_sums(k: _Kernel, f: np.ndarray, za: np.ndarray) -> np.ndarray:
    """Cell totals (cells x n) of one chunk: sum over rows of coef x factor x g(parameter) x area multiplier."""
    n = f.shape[1]
    sums = np.zeros((k.n_cells, n))
    area = za[k.mult_draw]  # area multipliers of each (draw, sd) pair: 1 + s z
    area *= k.mult_sd[:, None]
    area += 1.0
    for a, b, local, cell_ids in k.slices:  # slices of ROW_SLICE rows, not rows
        v = f[k.fid[a:b]]
        v *= area[k.multiplier[a:b]]
        p = k.param_rows[(k.param_rows >= a) & (k.param_rows < b)]
        if len(p):
            v[p - a] *= k.g0[p, None] + k.g1[p, None] * f[k.pid[p]]
        v *= k.coef[a:b, None]
        sums[cell_ids] += np.add.reduceat(v, local, axis=0)
    return sums


def monte_carlo(result, iterations: int | None = None, seed: int | None = None,
                progress: Callable[[int, int], None] | None = None,
                chunk_size: int = DEFAULT_CHUNK) -> MonteCarloResult:
    """Approach 2: Monte Carlo simulation of the base year, the latest year and the trend.

    Parameters
    ----------
    result : InventoryResult
        A compiled inventory.
    iterations : int, optional
        Number of iterations [-]; default ``result.settings.iterations``.
    seed : int, optional
        Seed of the random numbers (non-negative); default ``result.settings.seed``.
    progress : callable(done, total), optional
        Called after each chunk with the iterations done and the total.
    chunk_size : int, optional
        Iterations per chunk at most, rounded up to whole blocks of :data:`RNG_BLOCK`, and cut to
        the blocks whose working arrays fit :data:`CHUNK_BYTES` (:func:`_blocks_per_chunk`).
        Memory in use is about 8 bytes x (inputs + 2 x area draws + 2 x area multipliers +
        ROW_SLICE) x chunk, plus 8 bytes x (cells + totals) x iterations for the kept
        per-iteration totals. The results do not depend on it.

    Returns
    -------
    MonteCarloResult
        Tables described in :class:`MonteCarloResult`.

    Notes
    -----
    Section 3.2.3.2 in [1]_. One draw per factor or parameter id per iteration, shared by all
    rows, regions and years using it; one area draw per stratum (shared across years when
    ``correlate_activity_across_years``) or per activity row. Distributions and the
    random-number scheme: :data:`METHOD_RULES`. Vectorised over rows and iterations; the only
    Python loops run over chunks and row slices.
    """
    settings = result.settings
    iterations = int(settings.iterations if iterations is None else iterations)
    seed = int(settings.seed if seed is None else seed)
    if iterations < 2:
        raise ValueError(f"iterations must be at least 2; got {iterations}")
    if seed < 0:
        raise ValueError(f"the seed must be a non-negative integer; got {seed}")
    if chunk_size < 1:
        raise ValueError(f"chunk_size must be positive; got {chunk_size}")
    model = _build_model(result)
    k = _kernel(model)
    blocks_per_chunk = _blocks_per_chunk(k, chunk_size)
    n_blocks = -(-iterations // RNG_BLOCK)
    index = model.cells[["year", "category_code", "gas"]].copy()
    index["unit"] = "t"
    totals = pd.DataFrame({"year": model.years, "category_code": "total", "gas": "CO2-eq", "unit": "t CO2-eq"})
    index = pd.concat([index, totals], ignore_index=True)
    estimate = np.r_[model.cells["emission_t"].to_numpy(float),
                     [float(model.cells.loc[(model.cells["year"] == y), "co2eq_t"].sum()) for y in model.years]]
    trend_index, base_row, latest_row, trend_estimate = _trend_pairs(index, estimate, model.years)
    n_level = len(index)
    # Per-iteration values kept: cells, totals, then the trends (filled after the last chunk).
    samples = np.empty((n_level + len(trend_index), iterations))
    done = 0
    for first_block in range(0, n_blocks, blocks_per_chunk):
        f, za = _draw_chunk(k, seed, iterations, first_block, min(first_block + blocks_per_chunk, n_blocks))
        sums = _chunk_sums(k, f, za)
        n = sums.shape[1]
        samples[:k.n_cells, done:done + n] = sums
        for i, weights in enumerate(k.total_weights):  # one per reported year; a row-by-row sum, not a
            mask = weights != 0                          # BLAS product, so it is the same for any chunk size
            samples[k.n_cells + i, done:done + n] = (weights[mask, None] * sums[mask]).sum(axis=0)
        done += n
        if progress is not None:
            progress(done, iterations)
    _fill_trends(samples, n_level, base_row, latest_row, trend_estimate)

    # All percentiles in three calls: every level and trend row, all iterations and each half.
    half = iterations // 2
    with np.errstate(invalid="ignore"):
        q_all = np.percentile(samples, [2.5, 50.0, 97.5], axis=1)
        q_first = np.percentile(samples[:, :half], [2.5, 97.5], axis=1)
        q_second = np.percentile(samples[:, half:], [2.5, 97.5], axis=1)
        mean = samples.mean(axis=1)
    summary = _summaries(index, estimate, q_all[:, :n_level], mean[:n_level])
    trend = _trend_summaries(trend_index, trend_estimate, q_all[:, n_level:], mean[n_level:], model.years)
    period = f"{model.years[0]}-{model.years[-1]}"
    sample_index = pd.DataFrame({
        "kind": ["level"] * n_level + ["trend"] * len(trend_index),
        "period": np.r_[index["year"].astype(str).to_numpy(), np.full(len(trend_index), period)],
        "year": pd.array(list(index["year"]) + [pd.NA] * len(trend_index), dtype="Int64"),
        "category_code": np.r_[index["category_code"].to_numpy(), trend_index["category_code"].to_numpy()],
        "gas": np.r_[index["gas"].to_numpy(), trend_index["gas"].to_numpy()],
        "unit": np.r_[index["unit"].to_numpy(), np.full(len(trend_index), "%")]})
    convergence, findings = _convergence(sample_index.drop(columns=["year", "unit"]), q_all[[0, 2]], q_first,
                                         q_second, iterations)
    distributions = model.inputs[["factor_id", "quantity", "value", "unit", "ci_low", "ci_high", "distribution",
                                  "rule", "mean", "sd", "mu_log", "sigma_log", "alpha", "beta", "low", "high",
                                  "implied_low", "implied_high"]].copy()
    draws = model.draws.reset_index()
    return MonteCarloResult(summary=summary, trend=trend, distributions=distributions, activity_draws=draws,
                            convergence=convergence, findings=list(model.findings) + findings,
                            iterations=iterations, seed=seed, chunk_size=blocks_per_chunk * RNG_BLOCK,
                            samples=samples, sample_index=sample_index)


def _summaries(index: pd.DataFrame, estimate: np.ndarray, q: np.ndarray, mean: np.ndarray) -> pd.DataFrame:
    out = index.copy()
    out["estimate"] = estimate
    out["mean"] = mean
    out["median"] = q[1]
    out["p2_5"], out["p97_5"] = q[0], q[2]
    with np.errstate(divide="ignore", invalid="ignore"):
        denom = np.where(estimate != 0, np.abs(estimate), np.nan)
        out["minus_pct"] = (estimate - q[0]) / denom * 100.0
        out["plus_pct"] = (q[2] - estimate) / denom * 100.0
    out["uncertainty_pct"] = np.fmax(out["minus_pct"], out["plus_pct"])
    return out


def _trend_pairs(index: pd.DataFrame, estimate: np.ndarray, years: list[int]):
    """Cells and totals present in either reported year: their rows in the samples and their trend [%]."""
    key = ["category_code", "gas"]
    if len(years) < 2:
        return pd.DataFrame(columns=key), np.array([]), np.array([]), np.array([])
    base_year, latest_year = years
    pos = index.reset_index().rename(columns={"index": "_i"})
    base = pos[pos["year"] == base_year].set_index(key)["_i"]
    latest = pos[pos["year"] == latest_year].set_index(key)["_i"]
    pairs = base.index.union(latest.index)
    base_row = base.reindex(pairs).fillna(-1).to_numpy(int)
    latest_row = latest.reindex(pairs).fillna(-1).to_numpy(int)
    e_base = np.where(base_row >= 0, estimate[np.maximum(base_row, 0)], 0.0)
    e_latest = np.where(latest_row >= 0, estimate[np.maximum(latest_row, 0)], 0.0)
    trend = np.array([trend_percent(b, l_) for b, l_ in zip(e_base, e_latest)])
    return pd.DataFrame(list(pairs), columns=key), base_row, latest_row, trend


def _fill_trends(samples: np.ndarray, first: int, base_row, latest_row, trend_estimate) -> None:
    """Per-iteration trend (latest - base) / |base| x 100 into rows ``first...`` [%]; NaN where the base is 0."""
    for j, (b, l_) in enumerate(zip(base_row, latest_row)):  # one per reported cell (tens), vectorised
        out = samples[first + j]
        if b < 0 or np.isnan(trend_estimate[j]):
            out[:] = np.nan
            continue
        with np.errstate(divide="ignore", invalid="ignore"):
            if l_ >= 0:
                np.subtract(samples[l_], samples[b], out=out)
            else:
                np.negative(samples[b], out=out)
            out /= np.abs(samples[b])
            out *= 100.0


def _trend_summaries(trend_index, estimate, q, mean, years) -> pd.DataFrame:
    out = trend_index.copy()
    out["base_year"], out["latest_year"] = years[0], years[-1]
    out["estimate_pct"] = estimate
    out["mean_pct"], out["median_pct"], out["p2_5_pct"], out["p97_5_pct"] = mean, q[1], q[0], q[2]
    out["minus_pp"] = estimate - q[0]
    out["plus_pp"] = q[2] - estimate
    return out


def _convergence(labels: pd.DataFrame, q_all: np.ndarray, q_first: np.ndarray, q_second: np.ndarray,
                 iterations: int) -> tuple[pd.DataFrame, list[Finding]]:
    """Percentiles of the first and the second half of the iterations (rule in METHOD_RULES)."""
    keep = np.isfinite(q_all).all(axis=0) & np.isfinite(q_first).all(axis=0) & np.isfinite(q_second).all(axis=0)
    table = labels[keep].reset_index(drop=True)
    if table.empty:
        return table, []
    first, second = q_first[:, keep], q_second[:, keep]
    table["p2_5_first"], table["p2_5_second"] = first[0], second[0]
    table["p97_5_first"], table["p97_5_second"] = first[1], second[1]
    table["width"] = q_all[1, keep] - q_all[0, keep]
    table["difference"] = np.abs(first - second).max(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.where(table["difference"] == 0, 0.0, table["difference"] / table["width"])
    table["relative_difference"] = rel
    table["converged"] = rel <= CONVERGENCE_TOLERANCE
    with np.errstate(invalid="ignore", over="ignore"):
        needed = np.where(table["converged"], iterations,
                          np.ceil(iterations * (rel / CONVERGENCE_TOLERANCE) ** 2 / RNG_BLOCK) * RNG_BLOCK)
    table["iterations_needed"] = np.where(np.isfinite(needed), needed, np.nan)
    worst = table.iloc[int(np.argmax(np.where(np.isfinite(rel), rel, np.inf)))]
    where = f"{worst['kind']} {worst['period']} {worst['category_code']} {worst['gas']}"
    if table["converged"].all():
        finding = Finding("info", "monte_carlo_convergence",
                          f"Monte Carlo converged: for every reported quantity the 2.5th and 97.5th percentiles of "
                          f"the first and the second half of the {iterations} iterations differ by at most "
                          f"{CONVERGENCE_TOLERANCE:.0%} of the width of the 95 % interval (largest "
                          f"{worst['relative_difference']:.1%}, {where})")
    else:
        bad = int((~table["converged"]).sum())
        need = np.nanmax(table["iterations_needed"].to_numpy()) if table["iterations_needed"].notna().any() else np.nan
        need_text = f"about {int(need):,} iterations are needed" if np.isfinite(need) else "more iterations are needed"
        finding = Finding("warning", "monte_carlo_convergence",
                          f"Monte Carlo not converged: for {bad} of {len(table)} reported quantities the 2.5th or "
                          f"97.5th percentile of the first and the second half of the {iterations} iterations differ "
                          f"by more than {CONVERGENCE_TOLERANCE:.0%} of the width of the 95 % interval (worst "
                          f"{worst['relative_difference']:.1%}, {where}); {need_text} (scaled by "
                          "1/sqrt(iterations)): raise uncertainty.iterations",
                          column="uncertainty.iterations", found=str(iterations),
                          expected=f">= {int(need):,}" if np.isfinite(need) else "")
    return table, [finding]


# --- both ------------------------------------------------------------------------------------------


@dataclass
class UncertaintyResult:
    """What :func:`run_uncertainty` produced: either approach may be ``None`` (not requested)."""

    approach: str
    approach1: Approach1Result | None
    monte_carlo: MonteCarloResult | None
    findings: list[Finding] = field(default_factory=list)


def run_uncertainty(result, progress: Callable[[int, int], None] | None = None) -> UncertaintyResult:
    """Run the approaches named by ``result.settings.uncertainty_approach`` ("1", "2" or "both").

    Parameters
    ----------
    result : InventoryResult
        A compiled inventory.
    progress : callable(done, total), optional
        Passed to :func:`monte_carlo`.

    Returns
    -------
    UncertaintyResult
        The results of each approach run, and all their findings (each listed once).
    """
    approach = str(result.settings.uncertainty_approach)
    if approach not in ("1", "2", "both"):
        raise ValueError(f"uncertainty_approach must be 1, 2 or both; got {approach!r}")
    a1 = approach1(result) if approach in ("1", "both") else None
    mc = monte_carlo(result, progress=progress) if approach in ("2", "both") else None
    findings = list(dict.fromkeys(f for part in (a1, mc) if part is not None for f in part.findings))
    return UncertaintyResult(approach=approach, approach1=a1, monte_carlo=mc, findings=findings)
