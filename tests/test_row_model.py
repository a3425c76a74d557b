"""The published equation functions are the code that makes the reported numbers.

Each test replaces one function of :mod:`compiler.equations` and shows that the compiled inventory
follows it, in the engine and in every stage that recomputes a row (QA/QC row arithmetic, the
uncertainty model), so a docstring that names an equation belongs to the function that runs.
"""

from __future__ import annotations

import numpy as np
import pytest

from compiler import compile_inventory, equations
from compiler.row_model import ROW_MODELS

from conftest import stratum, write_inventory


def _doubled(function):
    def doubled(*args, **kwargs):
        return 2.0 * function(*args, **kwargs)
    return doubled


@pytest.fixture
def small(tmp_path):
    rows = [stratum(year=y, land_use=lu, nutrient_status=ns, drainage_depth=dd, area_ha=a)
            for y in (2020, 2021)
            for lu, ns, dd, a in (("cropland", "", "", 100.0), ("grassland", "rich", "deep", 50.0))]
    return write_inventory(tmp_path / "inv", rows, first=2020, last=2021,
                           extra_method="", extra_inputs=None)


def _by_pathway(result):
    est = result.emissions[result.emissions["notation_key"] == ""]
    return est.groupby("pathway")["emission_t"].sum()


@pytest.mark.parametrize("pathway", ["co2_onsite", "co2_doc", "ch4_soil", "ch4_ditch", "n2o_soil"])
def test_replacing_an_equation_changes_the_compiled_totals(small, monkeypatch, pathway):
    before = _by_pathway(compile_inventory(small, iterations=200))
    name = ROW_MODELS[pathway].equation_name
    monkeypatch.setattr(equations, name, _doubled(getattr(equations, name)))
    # The whole compile runs with the analyses: the QA/QC row arithmetic and the uncertainty model
    # evaluate rows through the same function, so nothing contradicts the replaced equation.
    after = _by_pathway(compile_inventory(small, iterations=200))
    assert after[pathway] == pytest.approx(2.0 * before[pathway])
    others = before.index.difference([pathway])
    np.testing.assert_allclose(after[others].to_numpy(), before[others].to_numpy(), rtol=0, atol=0)


def test_replacing_the_fire_equation_changes_the_fire_rows(demo_copy, monkeypatch):
    before = _by_pathway(compile_inventory(demo_copy, iterations=200))
    monkeypatch.setattr(equations, "fire_emission", _doubled(equations.fire_emission))
    after = _by_pathway(compile_inventory(demo_copy, iterations=200))
    for pathway in ("fire_co2", "fire_ch4", "fire_co"):
        assert after[pathway] == pytest.approx(2.0 * before[pathway])
    assert after["co2_onsite"] == before["co2_onsite"]


def test_every_pathway_of_the_coverage_table_has_a_row_model():
    from compiler.factors import load_library

    coverage = load_library().coverage
    assert set(coverage["pathway"]) <= set(ROW_MODELS)


def test_area_basis_and_parameter_terms_follow_eq_2_6():
    # Source: 2013 Wetlands Supplement Eq. 2.6: CH4 = A x (1 - Frac_ditch) x EF_land + A x Frac_ditch x EF_ditch.
    land, ditch = ROW_MODELS["ch4_soil"], ROW_MODELS["ch4_ditch"]
    assert land.area_basis(100.0, 0.05) == pytest.approx(95.0)
    assert ditch.area_basis(100.0, 0.05) == pytest.approx(5.0)
    assert (land.parameter_term(0.0), land.parameter_term(1.0)) == (1.0, 0.0)
    assert (ditch.parameter_term(0.0), ditch.parameter_term(1.0)) == (0.0, 1.0)
    # Eq. 2.8: the fuel consumption is the parameter term of a fire row; the 10^-3 is in the conversion.
    assert ROW_MODELS["fire_ch4"].parameter_term(336.0) == pytest.approx(336.0)
