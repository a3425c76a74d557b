"""GWP100 sets and CO2 equivalents.

Values come from ``factor_tables/gwp.csv`` only. Methane from organic soils
is biogenic: with AR6, the non-fossil CH4 value of Table 7.15 applies.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .errors import FactorLookupError

ORGANIC_SOIL_CH4_ORIGIN = "non_fossil"


def gwp_table(gwp: pd.DataFrame, gwp_set: str) -> dict[str, float]:
    """GWP100 per gas for one set; CH4 taken as non-fossil where the set distinguishes origin."""
    rows = gwp[gwp["gwp_set"] == gwp_set]
    if rows.empty:
        raise FactorLookupError(f"GWP set {gwp_set!r} is not in gwp.csv")
    out: dict[str, float] = {}
    for gas, group in rows.groupby("gas"):
        if len(group) > 1:
            group = group[group["origin"] == ORGANIC_SOIL_CH4_ORIGIN]
            if len(group) != 1:
                raise FactorLookupError(f"GWP set {gwp_set!r}: no single {ORGANIC_SOIL_CH4_ORIGIN} value for {gas}")
        out[gas] = float(group["value"].iloc[0])
    return out


def co2_equivalent(emission_t: pd.Series, gas: pd.Series, gwp: dict[str, float]) -> pd.Series:
    """t CO2-eq = t gas x GWP100; blank (NaN) for a gas without a GWP (CO)."""
    factor = gas.map(gwp).astype(float)
    return pd.Series(np.asarray(emission_t, dtype=float) * factor.to_numpy(), index=emission_t.index)
