"""Climate response to emission series: AGWP, AGTP, GWP, GTP, GWP*, forcing and temperature.

Pure functions of arrays and a :class:`ClimateParameters` set loaded from
``factor_tables/climate_response_<set>.csv`` (the only place a number of
this module lives). One published model per function:

* CO2 stays in the atmosphere by the impulse response function of Joos et
  al. (2013) [2]_, ``a0 + sum_i a_i exp(-t / tau_i)``;
* CH4 and N2O decay with one perturbation lifetime each [1]_;
* radiative forcing is the radiative efficiency per kg times the airborne
  mass; CH4 carries its indirect effects (ozone and stratospheric water
  vapour, ``1 + f1 + f2``), and N2O the lowering of its efficiency by the
  CH4 it destroys, both as in AR5 [1]_;
* temperature follows the two-timescale response of Boucher and Reddy
  (2008) [3]_, ``R_T(t) = sum_j c_j / d_j exp(-t / d_j)``.

Every response is a sum of exponentials, so pulses, their integrals and
their convolutions with the temperature response have closed forms; no
numerical integration is used.

Timing convention
-----------------
The emission of calendar year ``k`` is released at a constant rate from the
start to the end of that year (not as one pulse). Forcing and temperature
of element ``n`` of a series are the values at the end of year ``n`` (time
``n + 1`` years after the start of the first year). The response to one
year's release is then the exact integral of the pulse response over the
year, ``AGWP(n - k + 1) - AGWP(n - k)`` for forcing, and the discrete
convolution telescopes: a constant emission ``E`` from year 0 gives a
forcing at time ``H`` of exactly ``E x AGWP(H)``. To first order the
release is a pulse at mid-year.

Unit conversion from per ppb to per kg (Notes of
:func:`efficiency_per_kg`): 1 kg of a gas raises its mole fraction by
``1e9 M_air / (M_gas m_atm)`` ppb, with ``m_atm`` the mass of the dry
atmosphere (Trenberth and Smith 2005 [4]_), ``M_air`` the molar mass of dry
air (AR5 8.SM [1]_) and ``M_gas`` from :func:`compiler.units.molar_mass`.

References
----------
.. [1] Myhre G. et al. (2013). Anthropogenic and Natural Radiative Forcing,
   and its Supplementary Material. IPCC AR5 WG1 Chapter 8: Section 8.7,
   Table 8.7, Table 8.A.1, Section 8.SM.11.
.. [2] Joos F. et al. (2013). Carbon dioxide and climate impulse response
   functions for the computation of greenhouse gas metrics: a multi-model
   analysis. Atmos. Chem. Phys. 13, 2793-2825.
.. [3] Boucher O. and Reddy M.S. (2008). Climate trade-off between black
   carbon and carbon dioxide emissions. Energy Policy 36, 193-200.
.. [4] Trenberth K.E. and Smith L. (2005). The mass of the atmosphere: a
   constraint on global analyses. J. Climate 18, 864-875.
.. [5] Smith M.A., Cain M. and Allen M.R. (2021). Further improvement of
   warming-equivalent emissions calculation. npj Clim. Atmos. Sci. 4, 19.
.. [6] Cain M. et al. (2019). Improved calculation of warming-equivalent
   emissions for short-lived climate pollutants. npj Clim. Atmos. Sci. 2, 29.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import FactorLookupError
from .factors import FactorTableError, source_and_verification_problems
from .resources import resource_dir
from .units import MASS_RATIO_CONVENTIONS, molar_mass

PARAMETER_SETS = ("ar5",)
GASES = ("CO2", "CH4", "N2O")
GWP_STAR_FORMS = ("smith2021", "cain2019")
TIMING_CONVENTION = ("emissions of each calendar year released at a constant rate through the year; "
                     "forcing and temperature reported at the end of each year")
TABLE_COLUMNS = ["parameter_set", "gas", "parameter", "value", "unit", "ci_low", "ci_high", "source_id", "table",
                 "row_label", "page", "verification", "verification_note"]
REQUIRED_TEXT = ["parameter_set", "gas", "parameter", "value", "unit", "source_id", "table", "verification"]
# (gas, parameter) -> unit the code expects; a table with another unit is a package defect.
EXPECTED_UNITS = {
    **{("CO2", f"irf_a{i}"): "fraction" for i in range(4)},
    **{("CO2", f"irf_tau{i}"): "yr" for i in range(1, 4)},
    ("CO2", "radiative_efficiency"): "W m-2 ppb-1",
    ("CH4", "radiative_efficiency"): "W m-2 ppb-1",
    ("CH4", "lifetime"): "yr",
    ("CH4", "indirect_ozone"): "fraction",
    ("CH4", "indirect_stratospheric_water_vapour"): "fraction",
    ("N2O", "radiative_efficiency"): "W m-2 ppb-1",
    ("N2O", "lifetime"): "yr",
    ("N2O", "ch4_per_n2o"): "ppb ppb-1",
    ("climate", "temperature_c1"): "K (W m-2)-1",
    ("climate", "temperature_c2"): "K (W m-2)-1",
    ("climate", "temperature_d1"): "yr",
    ("climate", "temperature_d2"): "yr",
    ("atmosphere", "mass_dry_air"): "kg",
    ("atmosphere", "molar_mass_dry_air"): "g mol-1",
    ("CH4", "gwp_star_smith2021_current"): "fraction",
    ("CH4", "gwp_star_smith2021_lagged"): "fraction",
    ("CH4", "gwp_star_smith2021_lag"): "yr",
    ("CH4", "gwp_star_cain2019_r"): "fraction",
    ("CH4", "gwp_star_cain2019_s"): "fraction",
    ("CH4", "gwp_star_cain2019_dt"): "yr",
    ("CH4", "gwp_star_cain2019_horizon"): "yr",
}


@dataclass(frozen=True)
class GasResponse:
    """Airborne fraction and forcing of one gas after a 1 kg pulse.

    ``forcing(t) = efficiency_per_kg x sum_i amplitudes[i] exp(-t / timescales[i])``
    [W m-2 kg-1]; a timescale of ``inf`` is the part that stays.
    """

    gas: str
    efficiency_per_kg: float  # [W m-2 kg-1], indirect effects included
    amplitudes: tuple[float, ...]  # [fraction]
    timescales: tuple[float, ...]  # [yr]


@dataclass(frozen=True)
class ClimateParameters:
    """One set of metric parameters (e.g. AR5), with the table rows they came from."""

    parameter_set: str
    convention: str
    gases: dict[str, GasResponse]
    temperature_sensitivity: tuple[float, ...]  # c_j [K (W m-2)-1]
    temperature_timescale: tuple[float, ...]  # d_j [yr]
    gwp_star: dict[str, float]
    table: pd.DataFrame = field(repr=False, compare=False)
    file: Path | None = None

    def value(self, gas: str, parameter: str) -> float:
        """One parameter of the table (e.g. ``value("CH4", "lifetime")``) [its table unit]."""
        return _lookup(self.table, gas, parameter, self.file)


def _lookup(table: pd.DataFrame, gas: str, parameter: str, file) -> float:
    rows = table[(table["gas"] == gas) & (table["parameter"] == parameter)]
    if len(rows) != 1:
        raise FactorLookupError(f"climate response parameter {gas} {parameter} is not in {file} "
                                f"({len(rows)} rows)")
    return float(rows["value"].iloc[0])


def load_climate_table(parameter_set: str = "ar5", folder: Path | None = None) -> tuple[pd.DataFrame, Path]:
    """Read and check ``climate_response_<set>.csv``; raise :class:`FactorTableError` on a defect."""
    if parameter_set not in PARAMETER_SETS:
        raise FactorLookupError(f"climate response parameter set {parameter_set!r} is not shipped; "
                                f"expected one of {', '.join(PARAMETER_SETS)}")
    folder = Path(folder) if folder else resource_dir("factor_tables")
    path = folder / f"climate_response_{parameter_set}.csv"
    if not path.is_file():
        raise FactorTableError(f"{path} is missing")
    table = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8")
    sources = pd.read_csv(folder / "sources.csv", dtype=str, keep_default_na=False, encoding="utf-8")
    problems = []
    missing_cols = [c for c in TABLE_COLUMNS if c not in table]
    if missing_cols:
        raise FactorTableError(f"{path.name}: missing columns {missing_cols}")
    for col in REQUIRED_TEXT:
        empty = table[table[col].str.strip() == ""]
        problems += [f"{row['gas']} {row['parameter']}: empty {col}" for _, row in empty.iterrows()]
    problems += source_and_verification_problems(table, sources)
    if (table["parameter_set"] != parameter_set).any():
        problems.append(f"rows of another parameter set than {parameter_set!r}")
    dup = table[table.duplicated(["gas", "parameter"], keep=False)]
    if not dup.empty:
        problems.append(f"duplicate parameters: {sorted(set(dup['gas'] + ' ' + dup['parameter']))}")
    numbers = pd.to_numeric(table["value"], errors="coerce")
    if numbers.isna().any():
        problems.append(f"value is not a number for {list(table.loc[numbers.isna(), 'parameter'])}")
    for (gas, parameter), unit in EXPECTED_UNITS.items():
        row = table[(table["gas"] == gas) & (table["parameter"] == parameter)]
        if row.empty:
            problems.append(f"missing parameter {gas} {parameter}")
        elif row["unit"].iloc[0] != unit:
            problems.append(f"{gas} {parameter}: unit {row['unit'].iloc[0]!r}, expected {unit!r}")
    if problems:
        raise FactorTableError(f"{path.name} is inconsistent:\n" + "\n".join(problems))
    table["value"] = numbers
    return table, path


def efficiency_per_kg(efficiency_per_ppb: float, species: str, mass_dry_air_kg: float,
                      molar_mass_air_g_per_mol: float, convention: str = "standard_atomic_weights") -> float:
    """Radiative efficiency per kg of gas in the atmosphere [W m-2 kg-1].

    Parameters
    ----------
    efficiency_per_ppb : float
        Radiative efficiency per unit mole fraction [W m-2 ppb-1].
    species : str
        Gas (``CO2``, ``CH4``, ``N2O``); its molar mass comes from
        :func:`compiler.units.molar_mass`.
    mass_dry_air_kg : float
        Mass of the dry atmosphere [kg].
    molar_mass_air_g_per_mol : float
        Mean molar mass of dry air [g mol-1].
    convention : str
        Molar-mass convention of :mod:`compiler.units`.

    Notes
    -----
    1 kg of gas is ``1 / M_gas`` kmol in ``m_atm / M_air`` kmol of air, so
    its mole fraction rises by ``1e9 M_air / (M_gas m_atm)`` ppb; the per-kg
    efficiency is the per-ppb efficiency times that (AR5 8.SM.11 [1]_).
    """
    ppb_per_kg = 1e9 * molar_mass_air_g_per_mol / (molar_mass(species, convention) * mass_dry_air_kg)
    return efficiency_per_ppb * ppb_per_kg


def load_climate_parameters(parameter_set: str = "ar5", convention: str = "standard_atomic_weights",
                            folder: Path | None = None) -> ClimateParameters:
    """The metric parameters of ``parameter_set``, per kg of gas, for a molar-mass ``convention``.

    Notes
    -----
    * CO2: amplitudes ``a0..a3`` and timescales ``inf, tau1..tau3`` [2]_.
    * CH4: one lifetime; efficiency times ``1 + f1 + f2`` (ozone,
      stratospheric water vapour), AR5 8.SM.11 [1]_.
    * N2O: one lifetime; efficiency times ``1 - k (1 + f1 + f2) RE_CH4 / RE_N2O``
      (per-ppb efficiencies, ``k`` = ppb CH4 lost per ppb N2O added): the
      CH4 adjustment of AR5 8.SM.11 [1]_, included here.
    """
    if convention not in MASS_RATIO_CONVENTIONS:
        raise ValueError(f"unknown molar-mass convention {convention!r}")
    table, path = load_climate_table(parameter_set, folder)

    def v(gas: str, parameter: str) -> float:
        return _lookup(table, gas, parameter, path)

    mass_air, molar_air = v("atmosphere", "mass_dry_air"), v("atmosphere", "molar_mass_dry_air")
    per_kg = {g: efficiency_per_kg(v(g, "radiative_efficiency"), g, mass_air, molar_air, convention) for g in GASES}
    ch4_indirect = 1.0 + v("CH4", "indirect_ozone") + v("CH4", "indirect_stratospheric_water_vapour")
    # N2O destroys CH4: k ppb CH4 per ppb N2O, each ppb CH4 worth (1 + f1 + f2) RE_CH4 (AR5 8.SM.11).
    n2o_adjustment = 1.0 - v("N2O", "ch4_per_n2o") * ch4_indirect * (
        v("CH4", "radiative_efficiency") / v("N2O", "radiative_efficiency"))
    gases = {
        "CO2": GasResponse("CO2", per_kg["CO2"], tuple(v("CO2", f"irf_a{i}") for i in range(4)),
                           (np.inf, *(v("CO2", f"irf_tau{i}") for i in range(1, 4)))),
        "CH4": GasResponse("CH4", per_kg["CH4"] * ch4_indirect, (1.0,), (v("CH4", "lifetime"),)),
        "N2O": GasResponse("N2O", per_kg["N2O"] * n2o_adjustment, (1.0,), (v("N2O", "lifetime"),)),
    }
    star = {p.removeprefix("gwp_star_"): float(val) for p, val in zip(table["parameter"], table["value"])
            if p.startswith("gwp_star_")}
    return ClimateParameters(
        parameter_set=parameter_set, convention=convention, gases=gases,
        temperature_sensitivity=(v("climate", "temperature_c1"), v("climate", "temperature_c2")),
        temperature_timescale=(v("climate", "temperature_d1"), v("climate", "temperature_d2")),
        gwp_star=star, table=table, file=path)


# --- closed forms of the exponential pieces -------------------------------------


def _decay_integral(tau: float, t: np.ndarray) -> np.ndarray:
    """int_0^t exp(-s / tau) ds [yr]; ``tau = inf`` gives ``t``."""
    if np.isinf(tau):
        return t.copy()
    return tau * -np.expm1(-t / tau)


def _temperature_piece(tau: float, d: float, t: np.ndarray) -> np.ndarray:
    """int_0^t exp(-s / tau) (1 / d) exp(-(t - s) / d) ds [1]: decay convolved with one response mode."""
    if np.isinf(tau):
        return -np.expm1(-t / d)
    if abs(tau - d) <= 1e-9 * max(tau, d):  # the limit tau -> d of the general form
        return t / d * np.exp(-t / d)
    return tau / (tau - d) * (np.exp(-t / tau) - np.exp(-t / d))


def _temperature_piece_integral(tau: float, d: float, t: np.ndarray) -> np.ndarray:
    """int_0^t of :func:`_temperature_piece` [yr]."""
    if np.isinf(tau):
        return t + d * np.expm1(-t / d)
    if abs(tau - d) <= 1e-9 * max(tau, d):
        return d * (1.0 - np.exp(-t / d) * (1.0 + t / d))
    return tau / (tau - d) * (tau * -np.expm1(-t / tau) - d * -np.expm1(-t / d))


def _gas(gas: str, params: ClimateParameters) -> GasResponse:
    if gas not in params.gases:
        raise FactorLookupError(f"no climate response for gas {gas!r}; expected one of {', '.join(params.gases)}")
    return params.gases[gas]


def _as_years(horizon) -> np.ndarray:
    t = np.asarray(horizon, dtype=float)
    if np.any(t < 0):
        raise ValueError("time horizon must be >= 0 years")
    return t


# --- absolute and relative metrics ------------------------------------------------


def forcing_after_pulse(gas: str, t, params: ClimateParameters) -> np.ndarray:
    """Radiative forcing ``t`` years after a 1 kg pulse [W m-2 kg-1].

    Notes
    -----
    ``A sum_i a_i exp(-t / tau_i)``; for CO2 the impulse response of Joos et
    al. (2013) [2]_, for CH4 and N2O one exponential decay (AR5 8.SM.11 [1]_).
    """
    g, t = _gas(gas, params), _as_years(t)
    return g.efficiency_per_kg * sum(a * (np.ones_like(t) if np.isinf(tau) else np.exp(-t / tau))
                                     for a, tau in zip(g.amplitudes, g.timescales))


def agwp(gas: str, horizon, params: ClimateParameters) -> np.ndarray:
    """Absolute global warming potential: forcing of a 1 kg pulse integrated to ``horizon`` [W m-2 yr kg-1].

    Parameters
    ----------
    gas : str
        ``CO2``, ``CH4`` or ``N2O``.
    horizon : float or array_like
        Time horizon H [yr].
    params : ClimateParameters

    Notes
    -----
    ``AGWP(H) = A sum_i a_i tau_i (1 - exp(-H / tau_i))`` with ``a0 H`` for the
    permanent CO2 fraction: the AGWP expressions of AR5 8.SM.11 [1]_ (for CH4
    and N2O ``A tau (1 - exp(-H / tau))``).
    """
    g, t = _gas(gas, params), _as_years(horizon)
    return g.efficiency_per_kg * sum(a * _decay_integral(tau, t) for a, tau in zip(g.amplitudes, g.timescales))


def agtp(gas: str, horizon, params: ClimateParameters) -> np.ndarray:
    """Absolute global temperature change potential: warming ``horizon`` years after a 1 kg pulse [K kg-1].

    Notes
    -----
    Convolution of the forcing with the two-timescale response
    ``R_T(t) = sum_j c_j / d_j exp(-t / d_j)`` (Boucher and Reddy 2008 [3]_):
    ``AGTP(H) = A sum_i a_i sum_j c_j tau_i / (tau_i - d_j) (exp(-H / tau_i) - exp(-H / d_j))``,
    and ``A a0 sum_j c_j (1 - exp(-H / d_j))`` for the permanent CO2 part (AR5 8.SM.11 [1]_).
    """
    return _two_timescale_sum(gas, horizon, params, _temperature_piece)


def integrated_agtp(gas: str, horizon, params: ClimateParameters) -> np.ndarray:
    """AGTP integrated from 0 to ``horizon``: the warming at ``horizon`` of 1 kg yr-1 emitted from 0 on [K yr kg-1].

    Notes
    -----
    The time integral of :func:`agtp`, in closed form (each term of
    :func:`agtp` integrated exactly).
    """
    return _two_timescale_sum(gas, horizon, params, _temperature_piece_integral)


def _two_timescale_sum(gas: str, horizon, params: ClimateParameters, piece) -> np.ndarray:
    """Sum of ``piece(tau_i, d_j, t)`` over the gas's decay modes i and the climate response modes j."""
    g, t = _gas(gas, params), _as_years(horizon)
    return g.efficiency_per_kg * sum(
        a * c * piece(tau, d, t)
        for a, tau in zip(g.amplitudes, g.timescales)
        for c, d in zip(params.temperature_sensitivity, params.temperature_timescale))


def gwp(gas: str, horizon, params: ClimateParameters) -> np.ndarray:
    """Global warming potential, ``AGWP_gas(H) / AGWP_CO2(H)`` [kg CO2-eq kg-1] (AR5 Eq. 8.1 [1]_)."""
    return agwp(gas, horizon, params) / agwp("CO2", horizon, params)


def gtp(gas: str, horizon, params: ClimateParameters) -> np.ndarray:
    """Global temperature change potential, ``AGTP_gas(H) / AGTP_CO2(H)`` [kg CO2-eq kg-1] (AR5 Eq. 8.2 [1]_)."""
    return agtp(gas, horizon, params) / agtp("CO2", horizon, params)


# --- series from annual emissions ---------------------------------------------------


def _annual_kernel(cumulative, n: int) -> np.ndarray:
    """Response at the end of year j to a release spread evenly over year 0: C(j + 1) - C(j)."""
    return np.diff(cumulative(np.arange(n + 1, dtype=float)))


def _convolve(emissions_t, kernel_fn) -> np.ndarray:
    e = np.asarray(emissions_t, dtype=float)
    if e.ndim != 1:
        raise ValueError("emissions must be a one-dimensional series, one value per year")
    if not np.all(np.isfinite(e)):
        raise ValueError("emissions must be finite numbers (no NaN)")
    n = len(e)
    kernel = _annual_kernel(kernel_fn, n)
    return np.convolve(e * 1e3, kernel)[:n]  # t -> kg


def forcing_series(emissions_t, gas: str, params: ClimateParameters) -> np.ndarray:
    """Radiative forcing at the end of each year from annual emissions [W m-2].

    Parameters
    ----------
    emissions_t : array_like
        Emission of ``gas`` in each consecutive calendar year [t yr-1].
    gas : str
    params : ClimateParameters

    Notes
    -----
    ``F(n) = sum_{k<=n} E_k [AGWP(n - k + 1) - AGWP(n - k)]``: each year's
    release spread evenly over that year (module timing convention),
    convolved with the exact annual increments of :func:`agwp`.
    """
    return _convolve(emissions_t, lambda t: agwp(gas, t, params))


def temperature_series(emissions_t, gas: str, params: ClimateParameters) -> np.ndarray:
    """Temperature response at the end of each year from annual emissions [K].

    Notes
    -----
    ``T(n) = sum_{k<=n} E_k [iAGTP(n - k + 1) - iAGTP(n - k)]`` with iAGTP the
    time integral of AGTP (:func:`integrated_agtp`); same timing as
    :func:`forcing_series`.
    """
    return _convolve(emissions_t, lambda t: integrated_agtp(gas, t, params))


def gwp_star(ch4_t, gwp100: float, params: ClimateParameters, form: str = "smith2021",
             earlier_t=None) -> np.ndarray:
    """Warming-equivalent emissions of CH4 by GWP* [t CO2-we yr-1].

    Parameters
    ----------
    ch4_t : array_like
        CH4 emission of consecutive years [t CH4 yr-1].
    gwp100 : float
        GWP100 of CH4 from the run's GWP set (:func:`compiler.metrics.gwp_table`).
    params : ClimateParameters
        Supplies the GWP* coefficients.
    form : str
        ``smith2021``: ``E*(t) = GWP100 (4.53 E(t) - 4.25 E(t - 20))`` [5]_;
        ``cain2019``: ``E*(t) = GWP_H (r dE/dt H + s E(t))`` with
        ``dE/dt = (E(t) - E(t - dt)) / dt``, r = 0.75, s = 0.25, H = 100,
        dt = 20 [6]_ (that is ``GWP100 (4.0 E(t) - 3.75 E(t - 20))``).
    earlier_t : array_like, optional
        CH4 emissions of the years just before ``ch4_t`` (last element = the
        year before the first of ``ch4_t``) [t CH4 yr-1].

    Returns
    -------
    numpy.ndarray
        E* per year [t CO2-we yr-1]; NaN where the lagged year is not known.
    """
    if form not in GWP_STAR_FORMS:
        raise ValueError(f"unknown GWP* form {form!r}; expected one of {', '.join(GWP_STAR_FORMS)}")
    e = np.asarray(ch4_t, dtype=float)
    before = np.asarray(earlier_t if earlier_t is not None else [], dtype=float)
    p = params.gwp_star
    lag = int(round(p["smith2021_lag"] if form == "smith2021" else p["cain2019_dt"]))
    full = np.concatenate([before, e])
    lagged = np.full(len(e), np.nan)
    idx = np.arange(len(before), len(full)) - lag
    known = idx >= 0
    lagged[known] = full[idx[known]]
    if form == "smith2021":
        return gwp100 * (p["smith2021_current"] * e - p["smith2021_lagged"] * lagged)
    r, s, dt, horizon = p["cain2019_r"], p["cain2019_s"], p["cain2019_dt"], p["cain2019_horizon"]
    return gwp100 * (r * (e - lagged) / dt * horizon + s * e)


def metric_table(params: ClimateParameters, horizons=(20, 100)) -> pd.DataFrame:
    """AGWP, AGTP, GWP and GTP per gas and horizon, for the report.

    Columns: ``gas``, ``horizon_yr``, ``agwp_w_m2_yr_per_kg`` [W m-2 yr kg-1],
    ``agtp_k_per_kg`` [K kg-1], ``gwp`` and ``gtp`` [kg CO2-eq kg-1].
    """
    rows = []
    for gas in params.gases:  # three gases x a few horizons
        for h in horizons:
            rows.append({"gas": gas, "horizon_yr": h, "agwp_w_m2_yr_per_kg": float(agwp(gas, h, params)),
                         "agtp_k_per_kg": float(agtp(gas, h, params)), "gwp": float(gwp(gas, h, params)),
                         "gtp": float(gtp(gas, h, params))})
    return pd.DataFrame(rows)
