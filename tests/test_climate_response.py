"""Climate metrics and response series against AR5 tables, closed forms and identities of the convolution.

Validation sources named in each test. Values of IPCC AR5 WG1 Chapter 8 Table 8.7 quoted here are
from memory (no stored copy was read); the tolerances are those of the issue: 2 % for AGWP and
GWP, rounding to an integer for GTP100 of CH4 (printed as 4).
"""

import hashlib
import shutil

import numpy as np
import pandas as pd
import pytest

from compiler import climate_response as cr
from compiler.factors import FactorTableError, load_library
from compiler.metrics import gwp_table
from compiler.resources import resource_dir
from compiler.units import molar_mass

TABLE = resource_dir("factor_tables") / "climate_response_ar5.csv"


@pytest.fixture(scope="module")
def params():
    return cr.load_climate_parameters("ar5")


@pytest.fixture(scope="module")
def ar5_gwp100():
    # Source: factor_tables/gwp.csv, AR5 Table 8.7 (checked against the globalwarmingpotentials package).
    return gwp_table(load_library().gwp, "AR5")


# --- the shipped parameter table --------------------------------------------------------


def test_parameter_table_fingerprint():
    # Regression fingerprint (our own table): rows, columns, sum of values, hash. A data edit must
    # change this line on purpose.
    frame = pd.read_csv(TABLE, dtype=str, keep_default_na=False)
    assert (len(frame), len(frame.columns)) == (28, 13)
    values = pd.to_numeric(frame["value"])
    atmosphere = frame["parameter"] == "mass_dry_air"
    assert values[atmosphere].tolist() == [5.1352e18]
    assert values[~atmosphere].sum() == pytest.approx(1168.3673767, abs=1e-9)
    assert hashlib.sha256(TABLE.read_bytes()).hexdigest() == (
        "8ab480c7aaa9052a61280ca1b36f94974b4e9b836ee49df1ffc201eddc9a72eb")


def test_every_parameter_resolves_a_source_and_is_marked(params):
    sources = load_library().sources
    table = params.table
    assert set(table["source_id"]) <= set(sources["source_id"])
    assert set(table["verification"]) <= {"checked", "from_memory"}
    for col in ("table", "row_label", "page", "unit"):
        assert (table[col].str.strip() != "").all(), col


def test_a_table_with_an_unknown_source_is_rejected(tmp_path):
    for name in ("climate_response_ar5.csv", "sources.csv"):
        shutil.copy(resource_dir("factor_tables") / name, tmp_path / name)
    frame = pd.read_csv(tmp_path / "climate_response_ar5.csv", dtype=str, keep_default_na=False)
    frame.loc[0, "source_id"] = "nowhere2013"
    frame.to_csv(tmp_path / "climate_response_ar5.csv", index=False)
    with pytest.raises(FactorTableError, match="nowhere2013"):
        cr.load_climate_parameters("ar5", folder=tmp_path)


def test_impulse_response_fractions_sum_to_one(params):
    # Identity: the CO2 impulse response of Joos et al. (2013) starts at 1 (a0 + a1 + a2 + a3 = 1).
    assert sum(params.gases["CO2"].amplitudes) == pytest.approx(1.0, abs=1e-12)
    assert cr.forcing_after_pulse("CO2", 0.0, params) == pytest.approx(params.gases["CO2"].efficiency_per_kg)


def test_methane_indirect_effects_factor(params):
    # AR5 WG1 8.SM.11 (from memory): CH4 forcing x (1 + 0.5 + 0.15) = 1.65 for ozone and stratospheric water vapour.
    direct = cr.efficiency_per_kg(params.value("CH4", "radiative_efficiency"), "CH4",
                                  params.value("atmosphere", "mass_dry_air"),
                                  params.value("atmosphere", "molar_mass_dry_air"))
    assert params.gases["CH4"].efficiency_per_kg / direct == pytest.approx(1.65, rel=1e-12)


def test_per_kg_efficiency_uses_the_molar_masses_of_units(params):
    # Identity: per-kg efficiency x molar mass (= per-mole efficiency) is the same in both molar-mass
    # conventions of compiler/units.py.
    other = cr.load_climate_parameters("ar5", "integer_masses")
    for gas in ("CO2", "CH4", "N2O"):
        a = params.gases[gas].efficiency_per_kg * molar_mass(gas)
        b = other.gases[gas].efficiency_per_kg * molar_mass(gas, "integer_masses")
        assert a == pytest.approx(b, rel=1e-12)


# --- AR5 WG1 Table 8.7 ---------------------------------------------------------------------


def test_agwp_co2_100_matches_ar5(params):
    # Source: IPCC AR5 WG1 Ch. 8 Table 8.7 (from memory): AGWP_CO2(100) = 9.17e-14 W m-2 yr kg-1; 2 %.
    assert float(cr.agwp("CO2", 100, params)) == pytest.approx(9.17e-14, rel=0.02)


def test_agwp_co2_20_matches_ar5(params):
    # Source: IPCC AR5 WG1 Ch. 8 Table 8.7 (from memory): AGWP_CO2(20) = 2.49e-14 W m-2 yr kg-1; 2 %.
    assert float(cr.agwp("CO2", 20, params)) == pytest.approx(2.49e-14, rel=0.02)


@pytest.mark.parametrize("gas", ["CH4", "N2O"])
def test_gwp100_matches_ar5(params, ar5_gwp100, gas):
    # Source: IPCC AR5 WG1 Ch. 8 Table 8.7 via factor_tables/gwp.csv (CH4 28, N2O 265); 2 %.
    assert float(cr.gwp(gas, 100, params)) == pytest.approx(ar5_gwp100[gas], rel=0.02)


def test_gwp20_methane_matches_ar5(params):
    # Source: IPCC AR5 WG1 Ch. 8 Table 8.7 (from memory): GWP20 of CH4 = 84 (no climate-carbon feedback); 2 %.
    assert float(cr.gwp("CH4", 20, params)) == pytest.approx(84, rel=0.02)


def test_gtp100_methane_matches_ar5(params):
    # Source: IPCC AR5 WG1 Ch. 8 Table 8.7 (from memory): GTP100 of CH4 = 4, printed as an integer.
    assert round(float(cr.gtp("CH4", 100, params))) == 4


def test_gtp100_nitrous_oxide_matches_ar5(params):
    # Source: IPCC AR5 WG1 Ch. 8 Table 8.7 (from memory): GTP100 of N2O = 234; 2 %.
    assert float(cr.gtp("N2O", 100, params)) == pytest.approx(234, rel=0.02)


# --- closed forms against numerical integration (identities of calculus) ----------------


@pytest.mark.parametrize("gas", ["CO2", "CH4", "N2O"])
def test_agwp_is_the_integral_of_the_pulse_forcing(params, gas):
    t = np.linspace(0.0, 100.0, 200_001)
    numeric = np.trapezoid(cr.forcing_after_pulse(gas, t, params), t)
    assert float(cr.agwp(gas, 100, params)) == pytest.approx(numeric, rel=1e-8)


@pytest.mark.parametrize("gas", ["CO2", "CH4", "N2O"])
def test_agtp_is_the_forcing_convolved_with_the_temperature_response(params, gas):
    # AGTP(H) = int_0^H RF(s) R_T(H - s) ds with R_T = sum_j c_j / d_j exp(-t / d_j) (Boucher and Reddy 2008).
    horizon = 60.0
    s = np.linspace(0.0, horizon, 400_001)
    response = sum(c / d * np.exp(-(horizon - s) / d)
                   for c, d in zip(params.temperature_sensitivity, params.temperature_timescale))
    numeric = np.trapezoid(cr.forcing_after_pulse(gas, s, params) * response, s)
    assert float(cr.agtp(gas, horizon, params)) == pytest.approx(numeric, rel=1e-7)


@pytest.mark.parametrize("gas", ["CO2", "CH4"])
def test_integrated_agtp_is_the_integral_of_agtp(params, gas):
    t = np.linspace(0.0, 80.0, 160_001)
    numeric = np.trapezoid(cr.agtp(gas, t, params), t)
    assert float(cr.integrated_agtp(gas, 80.0, params)) == pytest.approx(numeric, rel=1e-8)


def test_temperature_piece_limit_when_timescales_coincide():
    # Identity: the tau -> d limit of tau / (tau - d) (exp(-t/tau) - exp(-t/d)) is (t / d) exp(-t/d).
    t = np.array([1.0, 10.0, 50.0])
    limit = cr._temperature_piece(20.0, 20.0, t)
    near = cr._temperature_piece(20.0 * (1 + 1e-7), 20.0, t)
    assert limit == pytest.approx(near, rel=1e-5)
    limit_i = cr._temperature_piece_integral(20.0, 20.0, t)
    near_i = cr._temperature_piece_integral(20.0 * (1 + 1e-7), 20.0, t)
    assert limit_i == pytest.approx(near_i, rel=1e-5)


# --- series by convolution ---------------------------------------------------------------------


@pytest.mark.parametrize("horizon", [20, 50, 100])
def test_constant_emission_forcing_ratio_equals_gwp(params, horizon):
    # Identity of the convolution: for constant emissions from year 0, F_CH4(H) / F_CO2(H) equals the
    # mass ratio times GWP_H computed by the same code (both are E x AGWP(H)); to 1e-9.
    ch4, co2 = np.full(horizon, 3.0), np.full(horizon, 1000.0)
    ratio = cr.forcing_series(ch4, "CH4", params)[-1] / cr.forcing_series(co2, "CO2", params)[-1]
    assert ratio == pytest.approx(3.0 / 1000.0 * float(cr.gwp("CH4", horizon, params)), rel=1e-9)
    n2o = np.full(horizon, 0.5)
    ratio = cr.forcing_series(n2o, "N2O", params)[-1] / cr.forcing_series(co2, "CO2", params)[-1]
    assert ratio == pytest.approx(0.5 / 1000.0 * float(cr.gwp("N2O", horizon, params)), rel=1e-9)


def test_constant_emission_forcing_equals_agwp(params):
    # Identity of the timing convention: constant E [t yr-1] from year 0 gives F(H) = E x 1000 x AGWP(H).
    forcing = cr.forcing_series(np.full(100, 2.0), "CO2", params)
    assert forcing[-1] == pytest.approx(2.0e3 * float(cr.agwp("CO2", 100, params)), rel=1e-12)
    temperature = cr.temperature_series(np.full(100, 2.0), "CH4", params)
    assert temperature[-1] == pytest.approx(2.0e3 * float(cr.integrated_agtp("CH4", 100, params)), rel=1e-12)


def test_series_is_linear_and_shift_invariant(params):
    # Identities of a convolution: superposition and time invariance.
    rng = np.random.default_rng(1)
    a, b = rng.uniform(0, 10, 60), rng.uniform(0, 10, 60)
    fa, fb = cr.temperature_series(a, "CO2", params), cr.temperature_series(b, "CO2", params)
    assert cr.temperature_series(a + 2 * b, "CO2", params) == pytest.approx(fa + 2 * fb, rel=1e-12)
    shifted = cr.forcing_series(np.concatenate([np.zeros(5), a[:-5]]), "CH4", params)
    assert shifted[5:] == pytest.approx(cr.forcing_series(a[:-5], "CH4", params), rel=1e-12)


def test_methane_forcing_reaches_a_steady_state_while_co2_grows(params):
    # Closed form: constant CH4 emission E gives F(t) = E A tau (1 - exp(-t / tau)), steady E A tau;
    # after 50 years with tau = 12.4 yr it is within 2 % of it (1 - exp(-50/12.4) = 0.982).
    e = 1.0
    forcing = cr.forcing_series(np.full(200, e), "CH4", params)
    g = params.gases["CH4"]
    steady = e * 1e3 * g.efficiency_per_kg * g.timescales[0]
    assert forcing[49] / steady > 0.98
    assert forcing[-1] == pytest.approx(steady, rel=1e-6)
    co2 = cr.forcing_series(np.full(200, e), "CO2", params)
    assert (np.diff(co2) > 0).all()  # the permanent fraction a0 keeps CO2 forcing growing


def test_series_rejects_missing_values(params):
    with pytest.raises(ValueError, match="finite"):
        cr.forcing_series([1.0, np.nan], "CO2", params)


# --- GWP* ---------------------------------------------------------------------------------------


def test_gwp_star_smith2021_constant_methane(params, ar5_gwp100):
    # Smith et al. (2021): E* = GWP100 x (4.53 E_t - 4.25 E_(t-20)); constant E after 20 years gives
    # 0.28 x GWP100 x E. Before the lagged year is known, NaN.
    e = np.full(40, 10.0)
    star = cr.gwp_star(e, ar5_gwp100["CH4"], params, "smith2021")
    assert np.isnan(star[:20]).all()
    assert star[20:] == pytest.approx(np.full(20, 0.28 * ar5_gwp100["CH4"] * 10.0), rel=1e-12)


def test_gwp_star_cain2019_constant_methane(params, ar5_gwp100):
    # Cain et al. (2019): E* = GWP_H (r dE/dt H + s E), r = 0.75, s = 0.25, H = 100, dt = 20:
    # constant E gives s x GWP100 x E = 0.25 x GWP100 x E; a step from 0 to E gives (0.75 x 100/20 + 0.25) = 4.0.
    e = np.full(30, 10.0)
    star = cr.gwp_star(e, ar5_gwp100["CH4"], params, "cain2019", earlier_t=np.zeros(20))
    assert star[0] == pytest.approx(4.0 * ar5_gwp100["CH4"] * 10.0, rel=1e-12)
    assert star[20:] == pytest.approx(np.full(10, 0.25 * ar5_gwp100["CH4"] * 10.0), rel=1e-12)


def test_gwp_star_uses_earlier_emissions(params):
    earlier = np.arange(20, dtype=float)  # emissions of the 20 years before
    star = cr.gwp_star(np.full(3, 5.0), 28.0, params, "smith2021", earlier_t=earlier)
    assert star == pytest.approx(28.0 * (4.53 * 5.0 - 4.25 * earlier[:3]), rel=1e-12)


def test_metric_table_lists_every_gas_and_horizon(params):
    table = cr.metric_table(params)
    assert len(table) == 6
    assert table.loc[(table["gas"] == "CO2"), "gwp"].tolist() == [1.0, 1.0]
