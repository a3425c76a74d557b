"""Molar masses, basis conversions (C -> CO2, CH4-C -> CH4, N2O-N -> N2O) and units.

This is the only module that knows a molar mass. Two conventions are offered
and the run settings choose one (``[method] mass_ratios``):

``standard_atomic_weights`` (default)
    IUPAC/CIAAW conventional standard atomic weights, as printed in the
    abridged table of standard atomic weights [1]_: H 1.008, C 12.011,
    N 14.007, O 15.999. C -> CO2 is then 44.009/12.011 = 3.6641.
``integer_masses``
    The whole-number ratios printed in the IPCC equations (44/12, 16/12,
    44/28), for agencies whose QA/QC plan fixes them. C -> CO2 = 3.6667.

The two differ by at most 0.18 % (CH4-C -> CH4: 16.043/12.011 = 1.3357 against 16/12 = 1.3333;
C -> CO2 by 0.07 %, N2O-N -> N2O by 0.02 %); the report prints which one was used.

References
----------
.. [1] Prohaska, T. et al. (2022). Standard atomic weights of the elements
   2021 (IUPAC Technical Report). Pure and Applied Chemistry 94(5), 573-600,
   Table 2 (abridged conventional values, five significant figures).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

ATOMIC_WEIGHTS = {
    "standard_atomic_weights": {"H": 1.008, "C": 12.011, "N": 14.007, "O": 15.999},
    "integer_masses": {"H": 1.0, "C": 12.0, "N": 14.0, "O": 16.0},
}
MASS_RATIO_CONVENTIONS = tuple(ATOMIC_WEIGHTS)

# Each species as its atoms, and the family it belongs to. A "basis" species
# (CO2-C, CH4-C, N2O-N) is the mass of the named element carried by one
# molecule of the gas: one C in CO2, one C in CH4, two N in N2O.
_SPECIES = {
    "CO2": ("carbon", {"C": 1, "O": 2}),
    "CO2-C": ("carbon", {"C": 1}),
    "C": ("carbon", {"C": 1}),
    "CH4": ("methane", {"C": 1, "H": 4}),
    "CH4-C": ("methane", {"C": 1}),
    "N2O": ("nitrous_oxide", {"N": 2, "O": 1}),
    "N2O-N": ("nitrous_oxide", {"N": 2}),
    "CO": ("carbon_monoxide", {"C": 1, "O": 1}),
    "CO-C": ("carbon_monoxide", {"C": 1}),
    # Carbon in dissolved organic carbon (the Eq. 2.5 parameter DOC_FLUX_NATURAL): a flux of C that
    # is not yet a gas, so it converts to nothing but other DOC-C units.
    "DOC-C": ("dissolved_organic_carbon", {"C": 1}),
}
GAS_OF_SPECIES = {"CO2": "CO2", "CO2-C": "CO2", "C": "CO2", "CH4": "CH4", "CH4-C": "CH4",
                  "N2O": "N2O", "N2O-N": "N2O", "CO": "CO", "CO-C": "CO"}


def molar_mass(species: str, convention: str = "standard_atomic_weights") -> float:
    """Mass of one mole of ``species`` (a gas or its element basis) [g mol-1]."""
    weights = ATOMIC_WEIGHTS[convention]
    _, atoms = _SPECIES[species]
    return sum(weights[element] * count for element, count in atoms.items())


def basis_ratio(from_species: str, to_species: str, convention: str = "standard_atomic_weights") -> float:
    """Multiplier from a mass of ``from_species`` to the same molecules as ``to_species``.

    ``basis_ratio("CO2-C", "CO2")`` is 44/12 in the integer convention.
    """
    family_from, _ = _SPECIES[from_species]
    family_to, _ = _SPECIES[to_species]
    if family_from != family_to:
        raise ValueError(f"cannot convert {from_species} to {to_species}: different gases")
    return molar_mass(to_species, convention) / molar_mass(from_species, convention)


# --- units --------------------------------------------------------------------

_MASS_TO_KG = {"mg": 1e-6, "g": 1e-3, "kg": 1.0, "t": 1e3, "Mg": 1e3, "kt": 1e6, "Gg": 1e6}
_AREA_TO_HA = {"m2": 1e-4, "ha": 1.0, "km2": 100.0}

# Canonical units of the factor tables; every unit in factor_tables/ is one of these.
CANONICAL_UNITS = (
    "t CO2-C ha-1 yr-1",
    "t DOC-C ha-1 yr-1",
    "kg CH4 ha-1 yr-1",
    "kg CH4-C ha-1 yr-1",
    "kg N2O-N ha-1 yr-1",
    "t dm ha-1",
    "g CO2-C kg-1 dm",
    "g CH4 kg-1 dm",
    "g CO kg-1 dm",
    "fraction",
)


@dataclass(frozen=True)
class FluxUnit:
    """A parsed unit: mass of a species per area per year, a fuel load, a fraction."""

    kind: str  # "flux" (mass species area-1 yr-1), "fuel" (t dm ha-1), "yield" (g species kg-1 dm), "fraction"
    mass_kg: float = 1.0
    species: str = ""
    area_ha: float = 1.0


def _normalise_unit_text(text: str) -> str:
    t = " ".join(str(text).strip().split())
    t = t.replace("·", " ").replace("⁻¹", "-1").replace("⁻²", "-2").replace("²", "2")
    t = re.sub(r"\s*/\s*", " /", t)
    # "/ha" -> " ha-1", "/m2" -> " m-2", "/yr" -> " yr-1", "/kg" -> " kg-1"
    t = re.sub(r" /(ha|yr|year|a|kg)\b", lambda m: f" {m.group(1)}-1", t)
    t = re.sub(r" /(m2|km2)\b", lambda m: f" {m.group(1)[:-1]}-2", t)
    t = re.sub(r"\b(year|a)-1\b", "yr-1", t)
    t = t.replace(" per ", " ")
    return " ".join(t.split())


def parse_unit(text: str) -> FluxUnit:
    """Parse a unit string such as ``t CO2 ha-1 yr-1`` or ``g CH4 m-2 yr-1``.

    Raises ``ValueError`` with the accepted forms when the text is not a unit
    this compiler can convert.
    """
    t = _normalise_unit_text(text)
    if t.lower() in ("fraction", "1", "-", "dimensionless", "ratio"):
        return FluxUnit("fraction")
    if t in ("%", "percent"):
        return FluxUnit("fraction", mass_kg=0.01)
    m = re.fullmatch(r"(mg|g|kg|t|Mg) dm (ha-1|m-2)", t)
    if m:
        area = {"ha-1": 1.0, "m-2": 1e-4}[m.group(2)]
        return FluxUnit("fuel", mass_kg=_MASS_TO_KG[m.group(1)], species="dm", area_ha=area)
    m = re.fullmatch(r"(mg|g|kg) (?:([A-Za-z0-9-]+) )?kg-1 dm", t) or re.fullmatch(
        r"(mg|g|kg) ([A-Za-z0-9-]+) kg-1 dm", t)
    if m:
        species = m.group(2) or ""
        if species and species not in _SPECIES:
            raise ValueError(f"unknown species {species!r} in unit {text!r}")
        return FluxUnit("yield", mass_kg=_MASS_TO_KG[m.group(1)], species=species)
    m = re.fullmatch(r"(mg|g|kg|t|Mg|kt|Gg) ([A-Za-z0-9-]+) (ha-1|m-2|km-2) yr-1", t)
    if m:
        species = m.group(2)
        if species not in _SPECIES:
            raise ValueError(f"unknown species {species!r} in unit {text!r}; expected one of {', '.join(_SPECIES)}")
        area = {"ha-1": 1.0, "m-2": 1e-4, "km-2": 100.0}[m.group(3)]
        return FluxUnit("flux", mass_kg=_MASS_TO_KG[m.group(1)], species=species, area_ha=area)
    raise ValueError(
        f"unit {text!r} is not understood; expected a form like 't CO2-C ha-1 yr-1', "
        "'kg CH4 ha-1 yr-1', 'g N2O-N m-2 yr-1', 't dm ha-1', 'g kg-1 dm' or 'fraction'"
    )


def conversion_factor(from_unit: str, to_unit: str, convention: str = "standard_atomic_weights") -> float:
    """Multiplier that turns a value in ``from_unit`` into ``to_unit``.

    Raises ``ValueError`` when the two are not convertible (another gas,
    another kind of quantity).
    """
    a, b = parse_unit(from_unit), parse_unit(to_unit)
    if a.kind != b.kind:
        raise ValueError(f"unit {from_unit!r} cannot be converted to {to_unit!r}")
    if a.kind == "fraction":
        return a.mass_kg / b.mass_kg
    if a.kind == "fuel":
        return (a.mass_kg / a.area_ha) / (b.mass_kg / b.area_ha)
    if a.kind == "yield":
        if a.species != b.species:
            if not a.species or not b.species:
                raise ValueError(f"unit {from_unit!r} cannot be converted to {to_unit!r}")
            return a.mass_kg / b.mass_kg * basis_ratio(a.species, b.species, convention)
        return a.mass_kg / b.mass_kg
    try:
        species = basis_ratio(a.species, b.species, convention)
    except ValueError:
        raise ValueError(f"unit {from_unit!r} cannot be converted to {to_unit!r}: different gases") from None
    return (a.mass_kg / a.area_ha) / (b.mass_kg / b.area_ha) * species


def tonnes_of_gas_per_unit(unit: str, convention: str = "standard_atomic_weights") -> tuple[str, float]:
    """For a flux unit, the gas it measures and the factor to t of that gas per ha and year."""
    u = parse_unit(unit)
    if u.kind != "flux":
        raise ValueError(f"unit {unit!r} is not a flux per area and year")
    if u.species not in GAS_OF_SPECIES:
        raise ValueError(f"unit {unit!r} is not a flux of a greenhouse gas")
    gas = GAS_OF_SPECIES[u.species]
    return gas, u.mass_kg / 1e3 / u.area_ha * basis_ratio(u.species, gas, convention)
