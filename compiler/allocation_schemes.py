"""Which reporting categories a compile allocates to: the 2006 IPCC codes or the transparency framework's.

``[method] allocation`` chooses the scheme; each is data in ``factor_tables/``:

ipcc2006
    ``reporting_categories.csv`` and ``reporting_allocation.csv``: 2006 IPCC
    Guidelines Vol. 1 Ch. 8 codes (3.B land categories, 3.C.1 biomass burning,
    3.C.4 direct N2O of managed soils).
etf
    ``reporting_categories_etf.csv`` and ``reporting_allocation_etf.csv``: the
    common reporting tables of the enhanced transparency framework under the
    Paris Agreement (decision 18/CMA.1; tables adopted in decision 5/CMA.3).
    On-site CO2 stays with the land category (4.A-4.F, carbon stock change);
    off-site CO2 (DOC), CH4 and N2O of drained and rewetted organic soils go to
    the drainage and rewetting table 4(II) of the land category, except N2O of
    cropland and grassland, which goes to the agriculture sector (3.D.1.f,
    cultivation of organic soils); every gas of organic-soil fires goes to the
    biomass burning table 4(V).

Both are matched by :func:`compiler.categories.allocate` in the same way.
"""

from __future__ import annotations

import dataclasses

from .factors import FactorLibrary, FactorTableError, read_shipped_csv

SCHEME_FILES = {
    "ipcc2006": ("reporting_categories.csv", "reporting_allocation.csv"),
    "etf": ("reporting_categories_etf.csv", "reporting_allocation_etf.csv"),
}
SCHEME_NAMES = {
    "ipcc2006": "2006 IPCC Guidelines category codes",
    "etf": "common reporting tables of the enhanced transparency framework (decisions 18/CMA.1 and 5/CMA.3)",
}


def with_allocation(library: FactorLibrary, scheme: str) -> FactorLibrary:
    """``library`` with the categories and allocation rules of ``scheme``."""
    if scheme == "ipcc2006":
        return library
    categories_file, allocation_file = SCHEME_FILES[scheme]
    missing = [n for n in (categories_file, allocation_file) if n not in library.files]
    if missing:
        raise FactorTableError(f"factor_tables is missing {', '.join(missing)} (allocation = {scheme!r})")
    categories = read_shipped_csv(library.files[categories_file])
    allocation = read_shipped_csv(library.files[allocation_file])
    unresolved = (set(categories["source_id"]) | set(allocation["source_id"])) - set(library.sources["source_id"])
    if unresolved:
        raise FactorTableError(f"{allocation_file}: source_id {sorted(unresolved)} not in sources.csv")
    gases = {c: set(g.split(";")) for c, g in zip(categories["category_code"], categories["gases"])}
    unknown = sorted(set(allocation["category_code"]) - set(gases))
    if unknown:
        raise FactorTableError(f"{allocation_file}: categories {unknown} not in {categories_file}")
    return dataclasses.replace(library, categories=categories, allocation=allocation)
