"""The published equations, one small vectorised function each.

Arrays in, arrays out; no lookups, no I/O. Units are in the parameter names
or docstrings. The assembly of strata and factors is in
:mod:`compiler.engine`.

References
----------
.. [WS2013] IPCC (2014). 2013 Supplement to the 2006 IPCC Guidelines for
   National Greenhouse Gas Inventories: Wetlands. Chapter 2 (Drained Inland
   Organic Soils) and Chapter 3 (Rewetted Organic Soils).
.. [GL2006] IPCC (2006). 2006 IPCC Guidelines for National Greenhouse Gas
   Inventories. Volume 4, Chapter 7 (Wetlands), Section 7.2.1.1.
"""

from __future__ import annotations

import numpy as np

from .units import basis_ratio


def onsite_co2_c(area_ha, ef_t_co2_c_per_ha):
    """On-site CO2-C emission of drained or rewetted organic soil [t CO2-C yr-1].

    Parameters
    ----------
    area_ha : array_like
        Area of organic soil in the stratum [ha].
    ef_t_co2_c_per_ha : array_like
        Emission factor [t CO2-C ha-1 yr-1] (negative for a removal).

    Notes
    -----
    Eq. 2.3 in [WS2013] (drained, Table 2.1 factors); the same product for
    rewetted soils with Table 3.1 factors (Chapter 3).
    """
    return np.asarray(area_ha, dtype=float) * np.asarray(ef_t_co2_c_per_ha, dtype=float)


def doc_co2_c(area_ha, ef_doc_t_co2_c_per_ha):
    """Off-site CO2-C from dissolved organic carbon exported by water [t CO2-C yr-1].

    Notes
    -----
    Eq. 2.4 in [WS2013]: CO2-DOC = A x EF_DOC (Table 2.2 drained, Table 3.2
    rewetted).
    """
    return np.asarray(area_ha, dtype=float) * np.asarray(ef_doc_t_co2_c_per_ha, dtype=float)


def ch4_land(area_ha, frac_ditch, ef_ch4_land_kg_per_ha):
    """CH4 from the land surface of drained organic soil, ditches excluded [kg CH4 yr-1].

    Notes
    -----
    First term of Eq. 2.6 in [WS2013]: A x (1 - Frac_ditch) x EF_CH4_land.
    With ``frac_ditch = 0`` this is the whole-area CH4 of rewetted soils
    (Chapter 3, Table 3.3), after the CH4-C -> CH4 conversion of the caller.
    """
    return (np.asarray(area_ha, dtype=float) * (1.0 - np.asarray(frac_ditch, dtype=float))
            * np.asarray(ef_ch4_land_kg_per_ha, dtype=float))


def ch4_ditch(area_ha, frac_ditch, ef_ch4_ditch_kg_per_ha_ditch):
    """CH4 from drainage ditches [kg CH4 yr-1].

    Parameters
    ----------
    area_ha : array_like
        Total drained area of the stratum, ditches included [ha].
    frac_ditch : array_like
        Fraction of that area occupied by ditches [fraction].
    ef_ch4_ditch_kg_per_ha_ditch : array_like
        Emission factor per ha of ditch surface [kg CH4 ha-1 yr-1].

    Notes
    -----
    Second term of Eq. 2.6 in [WS2013]: A x Frac_ditch x EF_CH4_ditch.
    """
    return (np.asarray(area_ha, dtype=float) * np.asarray(frac_ditch, dtype=float)
            * np.asarray(ef_ch4_ditch_kg_per_ha_ditch, dtype=float))


def n2o_n(area_ha, ef_kg_n2o_n_per_ha):
    """Direct N2O-N from drained organic soil [kg N2O-N yr-1].

    Notes
    -----
    Eq. 2.7 in [WS2013]: N2O-N = A x EF_N2O (Table 2.5); the F_OS term of
    2006 IPCC Guidelines Vol. 4 Eq. 11.1 with Table 11.1 factors.
    """
    return np.asarray(area_ha, dtype=float) * np.asarray(ef_kg_n2o_n_per_ha, dtype=float)


def fire_emission(burned_ha, fuel_t_dm_per_ha, ef_g_per_kg_dm, combustion_factor=1.0):
    """Emission of one gas (or its basis) from burning organic soil [t yr-1].

    Parameters
    ----------
    burned_ha : array_like
        Area of organic soil burnt [ha].
    fuel_t_dm_per_ha : array_like
        Mass of fuel available, MB, or directly MB x Cf where the table gives
        fuel consumption [t dry matter ha-1].
    ef_g_per_kg_dm : array_like
        Emission factor G_ef [g kg-1 dry matter burnt].
    combustion_factor : array_like
        C_f [fraction]; 1 when ``fuel_t_dm_per_ha`` is already the consumption.

    Notes
    -----
    Eq. 2.8 in [WS2013]: L_fire = A x MB x C_f x G_ef x 10^-3 (t of gas).
    """
    return (np.asarray(burned_ha, dtype=float) * np.asarray(fuel_t_dm_per_ha, dtype=float)
            * np.asarray(combustion_factor, dtype=float) * np.asarray(ef_g_per_kg_dm, dtype=float) * 1e-3)


def offsite_peat_co2(air_dry_peat_t, c_fraction_air_dry, convention="standard_atomic_weights"):
    """Off-site CO2 of peat extracted and used in horticulture [t CO2 yr-1].

    Parameters
    ----------
    air_dry_peat_t : array_like
        Air-dry weight of the peat extracted for non-energy use, Wt_dry peat [t yr-1].
    c_fraction_air_dry : array_like
        Carbon fraction of air-dry peat by weight, C_fraction [t C (t air-dry peat)-1].
    convention : str
        Molar masses of the C -> CO2 ratio (:func:`compiler.units.basis_ratio`):
        ``standard_atomic_weights`` (44.009/12.011) or ``integer_masses`` (44/12).

    Notes
    -----
    Off-site CO2-C equation of [GL2006] Section 7.2.1.1 (Eq. 7.5 from memory;
    see the verification note of ``factor_tables/offsite_peat_ipcc2006.csv``):
    CO2-C_off-site = Wt_dry peat x C_fraction, all the carbon of the peat taken
    as emitted in the year of extraction; then x 44/12 for CO2:
    CO2 = Wt_dry peat x C_fraction x 44/12.
    Peat burnt for energy is not in Wt_dry peat (it is reported in the energy sector).
    """
    return (np.asarray(air_dry_peat_t, dtype=float) * np.asarray(c_fraction_air_dry, dtype=float)
            * basis_ratio("CO2-C", "CO2", convention))
