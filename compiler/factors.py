"""The factor register: shipped Tier 1 tables, user overrides, and their provenance.

Every factor the engine uses is one row of the register with its value,
unit, 95 % interval, tier, source and locator. Precedence when several apply
to a stratum, region and year is explicit and reported:

1. an override for the region (``region`` given in the overrides file);
2. a national override (``region`` blank);
3. the Tier 1 default of the chosen factor set.

Within a level, the row that names more stratum keys wins; two rows of the
same level and weight that overlap in years are an input error.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import CompilerError, Finding
from .matching import most_specific
from .resources import resource_dir
from .schema import FACTOR_KEYS
from .units import CANONICAL_UNITS, conversion_factor, parse_unit

# quantity -> (description, kind of unit accepted, bounds of the value or None)
QUANTITIES: dict[str, tuple[str, str, tuple[float, float] | None]] = {
    "ef_co2_c_onsite": ("on-site CO2 emission factor (Eq. 2.3 / 3.4)", "t CO2-C ha-1 yr-1", None),
    "ef_co2_c_doc": ("off-site CO2 from dissolved organic carbon (Eq. 2.4 / 3.5)", "t CO2-C ha-1 yr-1", None),
    "doc_flux_natural": ("natural DOC flux, Eq. 2.5 parameter", "t DOC-C ha-1 yr-1", None),
    "delta_doc_drainage": ("increase of DOC flux by drainage, Eq. 2.5 parameter", "fraction", None),
    "frac_doc_co2": ("fraction of DOC converted to CO2, Eq. 2.5 parameter", "fraction", (0.0, 1.0)),
    "ef_ch4_soil": ("CH4 emission factor of the land surface (Eq. 2.6 / 3.8)", "kg CH4 ha-1 yr-1", None),
    "ef_ch4_ditch": ("CH4 emission factor of drainage ditches, per ha of ditch (Eq. 2.6)", "kg CH4 ha-1 yr-1", None),
    "frac_ditch": ("fraction of the drained area occupied by ditches (Eq. 2.6)", "fraction", (0.0, 1.0)),
    "ef_n2o_n_soil": ("N2O emission factor (Eq. 2.7)", "kg N2O-N ha-1 yr-1", None),
    "fuel_consumption": ("mass of organic soil burnt per ha of fire (Eq. 2.8, MB x Cf)", "t dm ha-1", None),
    "ef_fire_co2_c": ("CO2-C emitted per mass of organic soil burnt (Eq. 2.8, Gef)", "g CO2-C kg-1 dm", None),
    "ef_fire_ch4": ("CH4 emitted per mass of organic soil burnt (Eq. 2.8, Gef)", "g CH4 kg-1 dm", None),
    "ef_fire_co": ("CO emitted per mass of organic soil burnt (Eq. 2.8, Gef)", "g CO kg-1 dm", None),
    "c_fraction_peat": ("carbon fraction of air-dry extracted peat, off-site CO2 (2006 GL Vol. 4 Section 7.2.1.1)",
                        "fraction", (0.0, 1.0)),
}

KEYS = FACTOR_KEYS  # the stratum keys a factor row can name (compiler.schema)
# A subtype outweighs everything else: a plantation row beats the land-use row.
WEIGHTS = {"climate_zone": 1, "soil_status": 1, "land_use": 4, "nutrient_status": 2, "drainage_depth": 2,
           "subtype": 16, "fire_type": 2}
REGISTER_COLUMNS = ["factor_id", "factor_set", "quantity", *KEYS, "value", "unit", "ci_low", "ci_high", "tier",
                    "source_id", "table", "row_label", "page", "verification", "verification_note", "citation",
                    "region", "first_year", "last_year", "origin"]
REQUIRED_TEXT = ["factor_id", "factor_set", "quantity", "unit", "source_id", "table", "row_label",
                 "verification"]
VERIFICATION = ("checked", "from_memory")
TABLE_PATTERNS = ("drained_*.csv", "rewetted_*.csv", "fire_*.csv", "offsite_*.csv")


class FactorTableError(CompilerError):
    """A shipped factor table breaks its own rules (a defect of the package data)."""


def read_shipped_csv(path: Path) -> pd.DataFrame:
    return pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8")


def file_sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


@dataclass(frozen=True)
class FactorLibrary:
    """All shipped tables, loaded and checked once."""

    register: pd.DataFrame  # every published row of every factor set
    sources: pd.DataFrame
    gwp: pd.DataFrame
    categories: pd.DataFrame
    allocation: pd.DataFrame
    coverage: pd.DataFrame
    climate_2006: pd.DataFrame
    files: dict[str, Path]

    def hashes(self) -> dict[str, str]:
        return {name: file_sha256(path) for name, path in sorted(self.files.items())}

    def citation(self, source_id: str) -> str:
        row = self.sources.loc[self.sources["source_id"] == source_id, "citation"]
        if row.empty:
            raise FactorTableError(f"source_id {source_id!r} does not resolve in sources.csv")
        return row.iloc[0]


def load_library(folder: Path | None = None) -> FactorLibrary:
    """Load and check every shipped table in ``factor_tables/``."""
    folder = Path(folder) if folder else resource_dir("factor_tables")
    files = {p.name: p for p in sorted(folder.glob("*.csv"))}
    needed = ["sources.csv", "gwp.csv", "reporting_categories.csv", "reporting_allocation.csv",
              "pathway_coverage.csv", "climate_zones_ipcc2006.csv"]
    missing = [n for n in needed if n not in files]
    if missing:
        raise FactorTableError(f"factor_tables is missing {', '.join(missing)} (looked in {folder})")
    sources = read_shipped_csv(files["sources.csv"])
    frames = []
    for path in sorted(p for pattern in TABLE_PATTERNS for p in folder.glob(pattern)):
        table = read_shipped_csv(path)
        table["origin"] = path.name
        frames.append(table)
    if not frames:
        raise FactorTableError(f"no factor tables matching {TABLE_PATTERNS} in {folder}")
    register = pd.concat(frames, ignore_index=True).fillna("")
    for col in REGISTER_COLUMNS:
        if col not in register:
            register[col] = ""
    register["tier"] = "Tier 1 default"
    register = _check_register(register, sources)
    register["citation"] = register["source_id"].map(dict(zip(sources["source_id"], sources["citation"])))
    gwp = read_shipped_csv(files["gwp.csv"])
    gwp["value"] = pd.to_numeric(gwp["value"])
    unresolved = set(gwp["source_id"]) - set(sources["source_id"])
    if unresolved:
        raise FactorTableError(f"gwp.csv: source_id {sorted(unresolved)} not in sources.csv")
    return FactorLibrary(
        register=register[REGISTER_COLUMNS], sources=sources, gwp=gwp,
        categories=read_shipped_csv(files["reporting_categories.csv"]),
        allocation=read_shipped_csv(files["reporting_allocation.csv"]),
        coverage=read_shipped_csv(files["pathway_coverage.csv"]),
        climate_2006=read_shipped_csv(files["climate_zones_ipcc2006.csv"]),
        files=files,
    )


def _check_register(register: pd.DataFrame, sources: pd.DataFrame) -> pd.DataFrame:
    problems = []
    for col in REQUIRED_TEXT:
        empty = register[register[col].str.strip() == ""]
        for _, row in empty.iterrows():
            problems.append(f"{row['origin']}: factor {row['factor_id'] or '(no id)'} has an empty {col}")
    dup = register[register["factor_id"].duplicated(keep=False)]
    if not dup.empty:
        problems.append(f"duplicate factor_id: {sorted(dup['factor_id'].unique())}")
    unknown_q = sorted(set(register["quantity"]) - set(QUANTITIES))
    if unknown_q:
        problems.append(f"unknown quantity: {unknown_q}")
    bad_units = sorted(set(register["unit"]) - set(CANONICAL_UNITS))
    if bad_units:
        problems.append(f"unit not in the controlled list: {bad_units}")
    problems += source_and_verification_problems(register, sources)
    for col in ("value", "ci_low", "ci_high"):
        numbers = pd.to_numeric(register[col].replace("", np.nan), errors="coerce")
        bad = register[(register[col] != "") & numbers.isna()]
        if not bad.empty:
            problems.append(f"{col} is not a number in {list(bad['factor_id'])}")
        register[col] = numbers
    if register["value"].isna().any():
        problems.append(f"missing value in {list(register.loc[register['value'].isna(), 'factor_id'])}")
    inside = (register["ci_low"].isna() | (register["ci_low"] <= register["value"])) & (
        register["ci_high"].isna() | (register["value"] <= register["ci_high"]))
    if not inside.all():
        problems.append(f"value outside its own interval in {list(register.loc[~inside, 'factor_id'])}")
    for quantity, (_, unit_kind, _) in QUANTITIES.items():
        rows = register[register["quantity"] == quantity]
        for unit in rows["unit"].unique():
            try:
                conversion_factor(unit, unit_kind)
            except ValueError:
                problems.append(f"quantity {quantity} carries an unconvertible unit {unit!r}")
    if problems:
        raise FactorTableError("shipped factor tables are inconsistent:\n" + "\n".join(problems))
    return register


def source_and_verification_problems(table: pd.DataFrame, sources: pd.DataFrame) -> list[str]:
    """Rows of a shipped table whose source_id does not resolve, or whose verification is not allowed."""
    problems = []
    unresolved = sorted(set(table["source_id"]) - set(sources["source_id"]))
    if unresolved:
        problems.append(f"source_id not in sources.csv: {unresolved}")
    bad_ver = sorted(set(table["verification"]) - set(VERIFICATION))
    if bad_ver:
        problems.append(f"verification must be one of {VERIFICATION}: {bad_ver}")
    return problems


def defaults_for(library: FactorLibrary, factor_set: str, quantity: str) -> pd.DataFrame:
    reg = library.register
    return reg[(reg["factor_set"] == factor_set) & (reg["quantity"] == quantity)]


def resolve_defaults(strata: pd.DataFrame, library: FactorLibrary, factor_set: str, quantity: str):
    """Most-specific Tier 1 row for each distinct stratum (index preserved).

    Returns ``(best, ambiguous, unmatched)`` as :func:`compiler.matching.most_specific`.
    """
    rules = defaults_for(library, factor_set, quantity)
    return most_specific(strata, rules, KEYS, WEIGHTS, "factor_id")


# --- overrides -----------------------------------------------------------------

OVERRIDE_COLUMNS = {
    "required": ["quantity", "value", "unit", "source"],
    "optional": ["override_id", *KEYS, "ci_low", "ci_high", "tier", "region", "first_year", "last_year", "note"],
}


def override_rows_to_register(overrides: pd.DataFrame) -> pd.DataFrame:
    """Turn validated overrides (see :mod:`compiler.activity`) into register rows."""
    out = pd.DataFrame({
        "factor_id": overrides["override_id"],
        "factor_set": "override",
        "quantity": overrides["quantity"],
        **{k: overrides[k] for k in KEYS},
        "value": overrides["value"],
        "unit": overrides["unit"],
        "ci_low": overrides["ci_low"],
        "ci_high": overrides["ci_high"],
        "tier": overrides["tier"],
        "source_id": "",
        "table": "",
        "row_label": overrides["note"],
        "page": "",
        "verification": "supplied",
        "verification_note": "override supplied by the inventory team with its citation",
        "citation": overrides["source"],
        "region": overrides["region"],
        "first_year": overrides["first_year"],
        "last_year": overrides["last_year"],
        "origin": overrides["origin"],
    })
    return out[REGISTER_COLUMNS]


def apply_overrides(frame: pd.DataFrame, overrides: pd.DataFrame, quantity: str) -> pd.Series:
    """Factor id per row of ``frame`` after overrides of ``quantity`` (region > national > default).

    ``frame`` needs the stratum keys, ``region``, ``year`` and the default
    ``factor_id``. Overrides are applied from the weakest to the strongest, so
    each later one replaces the earlier where both apply. The loop runs over
    override rows (a handful), each step vectorised over all rows.
    """
    result = frame["factor_id"].to_numpy(dtype=object).copy()
    if overrides is None or overrides.empty:
        return pd.Series(result, index=frame.index, dtype=object)  # ids and NaN: no text column to build
    rows = overrides[overrides["quantity"] == quantity]
    if rows.empty:
        return pd.Series(result, index=frame.index, dtype=object)  # ids and NaN: no text column to build
    order = rows.assign(_level=(rows["region"] != "").astype(int), _weight=rows["_weight"]).sort_values(
        ["_level", "_weight"], kind="stable")
    years = frame["year"].to_numpy()
    for _, ov in order.iterrows():
        mask = np.ones(len(frame), dtype=bool)
        for k in KEYS:
            if ov[k] != "" and k in frame:
                mask &= frame[k].to_numpy() == ov[k]
            elif ov[k] != "":
                mask &= False
        if ov["region"] != "":
            mask &= frame["region"].to_numpy() == ov["region"]
        mask &= (years >= ov["first_year"]) & (years <= ov["last_year"])
        result[mask] = ov["override_id"]
    return pd.Series(result, index=frame.index, dtype=object)


def override_weight(overrides: pd.DataFrame) -> pd.Series:
    weight = pd.Series(0, index=overrides.index)
    for k in KEYS:
        weight += np.where(overrides[k] != "", WEIGHTS[k], 0)
    return weight


def check_override_conflicts(overrides: pd.DataFrame, file: str) -> list[Finding]:
    """Two overrides of one quantity, level and key set that overlap in region and years."""
    problems = []
    if overrides.empty:
        return problems
    keycols = ["quantity", "region", *KEYS]
    for _, group in overrides.groupby(keycols, sort=False):
        if len(group) < 2:
            continue
        g = group.sort_values("first_year")
        ends = g["last_year"].to_numpy()
        starts = g["first_year"].to_numpy()
        for i in range(1, len(g)):
            if starts[i] <= ends[:i].max():
                problems.append(Finding(
                    "error", "override_conflict",
                    f"two overrides of {g['quantity'].iloc[i]} for the same strata and region overlap in years "
                    f"(rows {int(g['_row'].iloc[i - 1])} and {int(g['_row'].iloc[i])})",
                    file=file, row=int(g["_row"].iloc[i]), column="first_year",
                    found=f"{starts[i]}..{ends[i]}", expected="one override per strata, region and year"))
    return problems


def unit_kind_ok(unit: str, quantity: str) -> str:
    """Blank when ``unit`` converts to the quantity's unit, else the reason."""
    target = QUANTITIES[quantity][1]
    try:
        parse_unit(unit)
        conversion_factor(unit, target)
    except ValueError as exc:
        return str(exc)
    return ""


def unchecked_factors(factors_used: pd.DataFrame) -> pd.DataFrame:
    """Shipped factors in use that the agency has not marked ``agrees`` in its factor review log."""
    status = (factors_used["agency_check"] if "agency_check" in factors_used
              else pd.Series("not yet checked", index=factors_used.index))
    return factors_used[(factors_used["factor_set"] != "override") & (status != "agrees")]
