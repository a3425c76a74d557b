"""The row model: for each pathway, the published equation that computes its rows.

Every estimate row of the inventory is

    emission_t = equation(area_ha, parameter, factor_value) x conversion

where ``equation`` is the function of :mod:`compiler.equations` that implements the pathway's published
equation, ``parameter`` is the pathway's second quantity (Frac_ditch for the two terms of Eq. 2.6, the
fuel consumption for fires, none otherwise) and ``conversion`` takes the product from the factor's own
unit to tonnes of the gas. The engine (:mod:`compiler.engine`), the QA/QC row arithmetic check
(:mod:`compiler.qaqc`), the uncertainty model (:mod:`compiler.uncertainty`) and, through the engine,
the scenarios all evaluate rows through :data:`ROW_MODELS`, so the equation documented in
:mod:`compiler.equations` is the code that makes every reported number. The equation is looked up on
the module at each call, so replacing it (a test's monkeypatch, a national method) changes every stage
at once.

The equations are linear in the factor and in the parameter; the uncertainty model relies on that and
reads the parameter's term from the equation itself (:meth:`RowModel.parameter_term`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import equations


@dataclass(frozen=True)
class RowModel:
    """One pathway: its gas, the quantities it takes from the factor register, and its equation."""

    pathway: str
    gas: str
    factor_quantity: str  # "" where the factor set has no method (a notation key is reported)
    parameter_quantity: str  # "" where the equation takes no second parameter
    equation_name: str  # a function of compiler.equations
    fire: bool = False  # Eq. 2.8: the factor is per mass of dry matter burnt, the parameter the fuel per ha
    # The activity a row rests on: "area" (ha), or "parameter" where the row has no area and its parameter
    # is the activity (off-site CO2 of extracted peat: tonnes of air-dry peat; the equation gives t CO2).
    activity: str = "area"

    @property
    def equation(self):
        """The equation function, looked up now (so a replacement is seen by every stage)."""
        return getattr(equations, self.equation_name)

    def evaluate(self, area_ha, parameter, factor):
        """The equation on the rows: area [ha], parameter (or 0 where none), factor in its own unit."""
        if self.activity == "parameter":
            return self.equation(parameter, factor)
        if self.parameter_quantity:
            return self.equation(area_ha, parameter, factor)
        return self.equation(area_ha, factor)

    def area_basis(self, area_ha, parameter):
        """The area the factor rests on [ha]: the equation with a factor of one (Eq. 2.6: the land
        surface or the ditches; fires and the other pathways: the area itself)."""
        if self.activity == "parameter":
            return np.full(np.shape(area_ha), np.nan)
        if self.fire:
            return np.asarray(area_ha, dtype=float)
        return self.evaluate(area_ha, parameter, 1.0)

    def parameter_term(self, parameter):
        """What the parameter contributes per ha and unit of factor: ``area_basis / area`` outside fires
        (1, 1 - Frac_ditch, Frac_ditch), the fuel consumption for fires (the 10^-3 of Eq. 2.8, g kg-1
        to t t-1, is part of the row's conversion)."""
        if self.activity == "parameter":  # the parameter is the activity: carried in the row's coefficient
            return 1.0
        if self.fire:
            return self.evaluate(1.0, parameter, 1.0) / self.evaluate(1.0, 1.0, 1.0)
        return self.evaluate(1.0, parameter, 1.0)


_MODELS = [
    RowModel("co2_onsite", "CO2", "ef_co2_c_onsite", "", "onsite_co2_c"),
    RowModel("co2_doc", "CO2", "ef_co2_c_doc", "", "doc_co2_c"),
    RowModel("ch4_soil", "CH4", "ef_ch4_soil", "frac_ditch", "ch4_land"),
    RowModel("ch4_ditch", "CH4", "ef_ch4_ditch", "frac_ditch", "ch4_ditch"),
    RowModel("n2o_soil", "N2O", "ef_n2o_n_soil", "", "n2o_n"),
    RowModel("fire_co2", "CO2", "ef_fire_co2_c", "fuel_consumption", "fire_emission", fire=True),
    RowModel("fire_ch4", "CH4", "ef_fire_ch4", "fuel_consumption", "fire_emission", fire=True),
    RowModel("fire_co", "CO", "ef_fire_co", "fuel_consumption", "fire_emission", fire=True),
    RowModel("fire_n2o", "N2O", "", "", "fire_emission", fire=True),
    # 2006 GL Vol. 4 Section 7.2.1.1: computed by compiler.offsite_peat from the production statistics.
    RowModel("co2_offsite", "CO2", "c_fraction_peat", "peat_production", "offsite_peat_co2", activity="parameter"),
]
ROW_MODELS: dict[str, RowModel] = {m.pathway: m for m in _MODELS}


def by_pathway(pathways, compute) -> np.ndarray:
    """``compute(model, mask)`` for each distinct pathway of ``pathways`` (an array), gathered per row.

    ``compute`` returns the values of the rows in ``mask``; rows of an unknown pathway get NaN.
    """
    pathways = np.asarray(pathways, dtype=object)
    out = np.full(len(pathways), np.nan)
    for name in dict.fromkeys(pathways.tolist()):  # distinct pathways: a handful
        model = ROW_MODELS.get(name)
        if model is None:
            continue
        mask = pathways == name
        out[mask] = compute(model, mask)
    return out
