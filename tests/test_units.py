"""Molar-mass ratios against a reference library, and unit conversion."""

import pytest
from molmass import Formula  # reference: molmass (PyPI), standard atomic weights

from compiler.units import basis_ratio, conversion_factor, molar_mass, parse_unit, tonnes_of_gas_per_unit


@pytest.mark.parametrize("from_species, to_species, gas_formula, basis_formula, atoms", [
    ("CO2-C", "CO2", "CO2", "C", 1),
    ("CH4-C", "CH4", "CH4", "C", 1),
    ("N2O-N", "N2O", "N2O", "N", 2),
])
def test_basis_ratios_match_molmass(from_species, to_species, gas_formula, basis_formula, atoms):
    # Source: molmass (PyPI) molecular masses from IUPAC standard atomic weights. molmass uses the
    # midpoint of the IUPAC intervals (C 12.0106..) where we use the abridged conventional values
    # (C 12.011), so agreement is to 1e-4 relative, not exact.
    expected = Formula(gas_formula).mass / (atoms * Formula(basis_formula).mass)
    assert basis_ratio(from_species, to_species) == pytest.approx(expected, rel=1e-4)


def test_integer_convention_gives_the_printed_ratios():
    # Source: the ratios printed in the IPCC equations (2013 Wetlands Supplement Eq. 2.3 notes: 44/12;
    # 16/12 for CH4-C; 44/28 for N2O-N).
    assert basis_ratio("CO2-C", "CO2", "integer_masses") == pytest.approx(44 / 12, rel=1e-12)
    assert basis_ratio("CH4-C", "CH4", "integer_masses") == pytest.approx(16 / 12, rel=1e-12)
    assert basis_ratio("N2O-N", "N2O", "integer_masses") == pytest.approx(44 / 28, rel=1e-12)


def test_molar_mass_of_co2():
    # Source: molmass (PyPI), CO2 = 44.0095 g/mol; our abridged weights give 44.009.
    assert molar_mass("CO2") == pytest.approx(Formula("CO2").mass, abs=1e-3)


def test_override_units_convert():
    # t CO2 per ha -> t CO2-C per ha divides by the C -> CO2 ratio.
    assert conversion_factor("t CO2 ha-1 yr-1", "t CO2-C ha-1 yr-1") == pytest.approx(1 / basis_ratio("CO2-C", "CO2"))
    # 1 g m-2 = 10 kg ha-1 (1 ha = 10,000 m2).
    assert conversion_factor("g CH4 m-2 yr-1", "kg CH4 ha-1 yr-1") == pytest.approx(10.0)
    assert conversion_factor("t CO2-C/ha/yr", "t CO2-C ha-1 yr-1") == 1.0
    assert conversion_factor("%", "fraction") == pytest.approx(0.01)


def test_unconvertible_units_are_refused():
    with pytest.raises(ValueError, match="cannot be converted"):
        conversion_factor("kg CH4 ha-1 yr-1", "t CO2-C ha-1 yr-1")
    with pytest.raises(ValueError, match="not understood"):
        parse_unit("bushels per acre")


def test_tonnes_of_gas_per_unit():
    gas, factor = tonnes_of_gas_per_unit("kg CH4-C ha-1 yr-1", "integer_masses")
    assert gas == "CH4" and factor == pytest.approx(16 / 12 / 1000)


@pytest.mark.parametrize("basis, gas, expected_pct", [
    ("CH4-C", "CH4", 0.18), ("CO2-C", "CO2", 0.07), ("N2O-N", "N2O", 0.02)])
def test_the_two_conventions_differ_as_the_module_says(basis, gas, expected_pct):
    # The module docstring's figures: standard atomic weights (IUPAC 2021 abridged table; basis_ratio is held
    # to molmass above) against the whole-number ratios printed in the IPCC equations; CH4 differs most.
    standard = basis_ratio(basis, gas, "standard_atomic_weights")
    integer = basis_ratio(basis, gas, "integer_masses")
    assert abs(standard / integer - 1) * 100 == pytest.approx(expected_pct, abs=0.005)
