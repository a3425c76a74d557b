"""One compile, from settings to result tables: the Python API behind the CLI.

>>> from compiler import compile_inventory
>>> result = compile_inventory("examples/inventory.toml")   # doctest: +SKIP
>>> result.categories.head()                                 # doctest: +SKIP
>>> result.write("out")                                      # doctest: +SKIP
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from . import __version__, offsite_peat
from .activity import (check_fires_within_strata, load_activity, load_fires, load_overrides, load_review,
                       load_review_log, load_surrogates)
from .aggregate import Aggregates, aggregate
from .allocation_schemes import with_allocation
from .categories import allocate, category_table
from .engine import compute
from .errors import Finding, FindingLog, InputError, QaqcError, findings_table
from .factors import FactorLibrary, file_sha256, load_library
from .metrics import co2_equivalent, gwp_table
from .settings import Settings, load_settings
from .progress import stage
from .schema import compact, GAP_FILL_COLUMNS, SERIES_KEYS
from .timeseries import fill_gaps
from .units import conversion_factor

@dataclass
class InventoryResult:
    """Everything one compile produced, as DataFrames, plus the means to write it."""

    settings: Settings
    activity: pd.DataFrame
    emissions: pd.DataFrame
    categories: pd.DataFrame
    factors_used: pd.DataFrame
    findings: pd.DataFrame
    library: FactorLibrary = field(repr=False)
    input_hashes: dict[str, str] = field(default_factory=dict)
    gwp: dict[str, float] = field(default_factory=dict)
    compile_date: str = ""
    version: str = __version__
    finding_list: list[Finding] = field(default_factory=list, repr=False)
    recalculation: dict | None = None  # by_cell, by_row, trend (when a previous submission is given)
    uncertainty: object = None  # compiler.uncertainty.UncertaintyResult
    key_categories: object = None  # compiler.key_categories.KeyCategoryResult
    review_log: pd.DataFrame = field(default_factory=pd.DataFrame)
    aggregates: Aggregates | None = None  # every total and cross-table an output shows (compiler.aggregate)
    peat_production: pd.DataFrame = field(default_factory=pd.DataFrame)  # validated [inputs] peat_production
    # the submission aggregates (compiler.reporting_tables) and the methods chapter's blocks
    # (compiler.methods_chapter), made once by compile_inventory after the analyses
    reporting_tables: object = field(default=None, repr=False)
    methods_chapter: list | None = field(default=None, repr=False)
    _frozen: bool = field(default=False, init=False, repr=False, compare=False)

    def __setattr__(self, name: str, value) -> None:
        if getattr(self, "_frozen", False):
            raise AttributeError(f"a compiled result is read-only (cannot set {name!r}); make a changed copy with "
                                 "dataclasses.replace(result, ...)")
        object.__setattr__(self, name, value)

    def _freeze(self) -> None:
        """End of :func:`compile_inventory`: from here on no attribute may be assigned."""
        object.__setattr__(self, "_frozen", True)

    @property
    def totals(self) -> pd.DataFrame:
        """Net emissions per year and gas, and CO2-eq over all gases with a GWP [t]."""
        em = self.emissions
        est = em.loc[(em["notation_key"] == "").to_numpy(dtype=bool), ["year", "gas", "emission_t"]]
        return est.pivot_table(index="year", columns="gas", values="emission_t", aggfunc="sum", fill_value=0.0)

    @property
    def gap_fills(self) -> pd.DataFrame:
        """Every gap-filled stratum-year: keys, area, technique (activity_source) and how it was made."""
        act = self.activity
        if "activity_source" not in act:
            return pd.DataFrame(columns=GAP_FILL_COLUMNS)
        filled = act[act["activity_source"] != "reported"]
        return filled.reindex(columns=GAP_FILL_COLUMNS).sort_values([*SERIES_KEYS, "year"]).reset_index(drop=True)

    def write(self, out_dir: str | Path, **options) -> Path:
        """Write every output into ``out_dir`` atomically (see :mod:`compiler.render.outputs`)."""
        from .render.outputs import write_outputs

        return write_outputs(self, Path(out_dir), **options)


def check_inventory(settings: Settings | str | Path, **setting_overrides) -> list[Finding]:
    """Validate every input, compile, run the QA/QC checks; return all findings. Writes nothing."""
    try:
        result = compile_inventory(settings, **setting_overrides)
    except (InputError, QaqcError) as exc:
        return exc.findings
    return result.finding_list


def compile_inventory(settings: Settings | str | Path, progress=None, analyses: bool = True,
                      **setting_overrides) -> InventoryResult:
    """Compile the inventory described by ``settings`` (a path to a TOML file or a :class:`Settings`).

    ``setting_overrides`` replace settings keys by name (e.g. ``iterations=5000, seed=1``);
    ``progress(done, total)`` is called during the Monte Carlo, and ``progress.stage(name)`` (where
    it has one, see :mod:`compiler.progress`) as each step begins; ``analyses=False`` skips the
    uncertainty and key category analyses. Raises :class:`compiler.errors.InputError` with every
    blocking finding when the inputs cannot be compiled.
    """
    stage(progress, "reading the inputs")
    if not isinstance(settings, Settings):
        settings = load_settings(settings, setting_overrides or None)
    library = with_allocation(load_library(), settings.allocation)
    log = FindingLog()
    if settings.factor_set == "ipcc2006" and not settings.ipcc2006_temperate:
        log.add("error", "settings", "factor_set ipcc2006 needs method.ipcc2006_temperate (Tables 5.6 and 6.3 "
                "split temperate into cold and warm)", file=str(settings.source), column="method.ipcc2006_temperate",
                expected="cold_temperate | warm_temperate")
    activity = load_activity(settings, log)
    fires = load_fires(settings, log)
    overrides = load_overrides(settings, log)
    review = load_review(settings, log, set(library.register["factor_id"]))
    review_log = load_review_log(settings, log, set(library.categories["category_code"]))
    surrogates = load_surrogates(settings, log)
    previous, national = _load_other_inputs(settings, log)
    log.raise_if_errors()
    stage(progress, "filling gaps in the area series")
    activity = fill_gaps(activity, settings.years, settings.fill, settings.trend_years, log, settings.fill_by_region,
                         surrogates, settings.fill_by_land_use)
    log.raise_if_errors()
    check_fires_within_strata(fires, activity, log)
    log.raise_if_errors()
    # One order whatever the order of the input rows, so that every sum below adds in the same order and
    # the outputs do not depend on how the rows were sorted in the file (the index still names the record).
    activity = _in_order(activity, ["year", *SERIES_KEYS])
    if fires is not None and not fires.empty:
        fires = _in_order(fires, [k for k in ["year", *SERIES_KEYS, "fire_type", "burned_ha"] if k in fires])

    stage(progress, "computing emissions and removals")
    engine = compute(activity, fires, overrides, library, settings, log)
    log.raise_if_errors()
    emissions, register = engine.emissions, engine.register
    del engine  # the results table is held once, by ``emissions``: each step below replaces it
    # Off-site CO2 of extracted peat from [inputs] peat_production (pathway co2_offsite; nothing without it).
    emissions, peat_production = offsite_peat.extend(emissions, activity, overrides, library, register, settings, log)
    emissions["year"] = emissions["year"].astype("int64")
    emissions["input_row"] = emissions["input_row"].astype("int64")

    _check_overrides_against_defaults(emissions, register, overrides, settings, log)
    _check_review(emissions, review, settings, log)
    log.raise_if_errors()

    gwp = gwp_table(library.gwp, settings.gwp)
    emissions["co2eq_t"] = co2_equivalent(emissions["emission_t"], emissions["gas"], gwp)
    emissions = allocate(emissions, library)
    names = {p: (Path(p).name if p else "") for p in emissions["input_file"].unique()}
    emissions["input_file"] = emissions["input_file"].map(names)  # once per distinct file, not per row
    # Text columns as categoricals with sorted categories (small integer codes per row; see schema.compact).
    held = [compact(emissions)]
    del emissions  # _sorted takes the table out of ``held``, so that each reordered column frees its original
    emissions = _sorted(held, ["year", "region", "category_code", "pathway", *SERIES_KEYS[1:], "fire_type",
                               "area_ha", "input_row"])
    categories = category_table(emissions, library, settings.years)

    _check_area_balance(activity, emissions, log)
    recalculation = None
    if previous is not None:
        from .recalculations import FACTOR_PARTS, category_totals, compare, trend_effect, year_totals

        current = emissions[emissions["notation_key"] == ""]
        by_cell, by_row = compare(previous, current,
                                  factor_sets=dict(zip(library.register["factor_id"], library.register["factor_set"])))
        parts = [c for c in FACTOR_PARTS if c in by_cell]
        recalculation = {"by_cell": by_cell, "by_row": by_row, "file": settings.previous_submission.name,
                         "factor_parts_t": by_cell[parts].sum().to_dict(),  # all cells and common years [t CO2-eq]
                         "by_year": year_totals(by_cell), "by_category": category_totals(by_cell),
                         **trend_effect(by_cell, settings.first_year, min(settings.last_year, int(previous["year"].max())))}
    used_ids = set(emissions["factor_id"].unique()) | set(emissions["parameter_id"].unique())
    factors_used = register[register["factor_id"].isin(used_ids)].copy()
    factors_used = _attach_review(factors_used, review)

    hashes = {name: file_sha256(path) for name, path in settings.input_paths().items()}
    hashes.update({f"factor_tables/{k}": v for k, v in library.hashes().items()})
    findings = findings_table(log.findings)
    compile_date = settings.compile_date or _dt.date.today().isoformat()
    activity = activity[~activity["_bad"]].astype({"year": "int64"})
    result = InventoryResult(settings=settings, activity=activity, emissions=emissions,
                             categories=categories, factors_used=factors_used, findings=findings, library=library,
                             input_hashes=hashes, gwp=gwp, compile_date=compile_date,
                             finding_list=list(log.findings), recalculation=recalculation, review_log=review_log,
                             aggregates=aggregate(categories, emissions, activity, settings.years),
                             peat_production=peat_production)
    if analyses:
        _analyse(result, progress, national)
    _report_tables(result)
    result._freeze()
    return result


def _report_tables(result: InventoryResult) -> None:
    """The submission aggregates and the methods chapter, once, from the analysed result (the chapter reads the
    uncertainty, key categories and findings; the organic-soils table the QA/QC findings)."""
    from .methods_chapter import chapter
    from .reporting_tables import reporting_tables

    result.reporting_tables = reporting_tables(result)
    result.methods_chapter = chapter(result)


def _load_other_inputs(settings: Settings, log: FindingLog) -> tuple[pd.DataFrame | None, pd.DataFrame | None]:
    """The previous submission and the national totals, read with the other inputs, before anything is computed.

    Their problems join the log, so that every input problem is reported at once and nothing is computed
    from inputs that cannot be read.
    """
    from .key_categories import load_national_totals
    from .recalculations import load_export

    previous = national = None
    if settings.previous_submission is not None:
        try:
            previous = load_export(settings.previous_submission, settings.max_input_mb)
        except InputError as exc:
            log.extend(exc.findings)
    if settings.national_totals:
        try:
            national = load_national_totals(settings.national_totals, settings.max_input_mb)
        except InputError as exc:
            log.extend(exc.findings)
    return previous, national


def _sort_codes(column: pd.Series) -> np.ndarray:
    """Integer codes that sort as ``column`` sorts (missing values last)."""
    if pd.api.types.is_numeric_dtype(column.dtype) and not isinstance(column.dtype, pd.CategoricalDtype):
        values = column.to_numpy(dtype=float, na_value=np.nan)
        return np.where(np.isnan(values), np.inf, values)
    codes, uniques = pd.factorize(column, sort=True)
    return np.where(codes < 0, len(uniques), codes)


def _order(frame: pd.DataFrame, keys: list[str]) -> np.ndarray:
    """Row positions of ``frame`` in the stable lexicographic order of ``keys`` (missing values last)."""
    return np.lexsort([_sort_codes(frame[k]) for k in reversed(keys)])


def _in_order(frame: pd.DataFrame, keys: list[str]) -> pd.DataFrame:
    """``frame`` in the order of ``keys``, its index kept (the index names the input record)."""
    return frame.iloc[_order(frame, keys)]


def _sorted(held: list[pd.DataFrame], keys: list[str]) -> pd.DataFrame:
    """``frame.sort_values(keys, kind="stable")`` with a fresh index, holding about one extra column at a time.

    ``held`` is a one-item list with the frame, emptied here (the caller keeps no reference to it).

    The order comes from one stable lexicographic sort of the key codes; the text columns (each its own
    array) are then reordered one by one, each original freed once it is reordered, and the numeric
    columns together. A million stratum-years make a results table of several GiB, which a whole-table
    sort would hold twice.
    """
    frame = held.pop()
    order = _order(frame, keys)
    columns = list(frame.columns)
    text = [c for c in columns if not pd.api.types.is_numeric_dtype(frame[c].dtype)
            and not pd.api.types.is_bool_dtype(frame[c].dtype)]
    reordered = {}
    for c in text:
        reordered[c] = frame[c].array.take(order)
        frame = frame.drop(columns=c)
    rest = frame.take(order)
    rest.index = pd.RangeIndex(len(rest))
    out = pd.concat([rest, pd.DataFrame(reordered, index=rest.index)], axis=1)
    return out[columns]


def _analyse(result: InventoryResult, progress, national: pd.DataFrame | None = None) -> None:
    """QA/QC, uncertainty (Approach 1 and/or 2) and key categories; their findings join the result's."""
    from .key_categories import key_categories
    from .qaqc import QaqcThresholds, run_checks
    from .uncertainty import run_uncertainty

    evidence = result.activity["evidence"] if "evidence" in result.activity else None
    if evidence is not None and not (evidence != "").any():
        evidence = None
    stage(progress, "QA/QC checks")
    checks = run_checks(result, QaqcThresholds.from_mapping(result.settings.qaqc), national_totals=national,
                        evidence=evidence)
    _merge_findings(result.finding_list, checks)
    if any(f.severity == "error" for f in checks):
        raise QaqcError(checks)
    stage(progress, "uncertainty (Approach 1, Monte Carlo)")
    result.uncertainty = run_uncertainty(result, progress=progress)
    stage(progress, "key categories")
    result.key_categories = key_categories(result, result.uncertainty, national_totals=national)
    extra = list(result.uncertainty.findings) + list(result.key_categories.findings)
    _merge_findings(result.finding_list, extra)
    result.findings = findings_table(result.finding_list)


def _merge_findings(into: list[Finding], new) -> None:
    """Append the findings of ``new`` not yet in ``into``, in order (a set lookup: linear in both)."""
    seen = set(into)
    for finding in new:
        if finding not in seen:
            seen.add(finding)
            into.append(finding)


def _check_overrides_against_defaults(emissions, register, overrides, settings, log) -> None:
    """Warning: an override outside the 95 % interval of the default it replaces."""
    if overrides is None or overrides.empty:
        return
    replaced = emissions[(emissions["factor_id"] != emissions["default_factor_id"])
                         & (emissions["default_factor_id"] != "") & (emissions["factor_id"] != "")]
    pairs = replaced[["factor_id", "default_factor_id"]].drop_duplicates()
    reg = register.set_index("factor_id")
    for _, pair in pairs.iterrows():  # distinct override/default pairs: a handful
        ov, de = reg.loc[pair["factor_id"]], reg.loc[pair["default_factor_id"]]
        if np.isnan(de["ci_low"]) or np.isnan(de["ci_high"]):
            continue
        value = ov["value"] * conversion_factor(ov["unit"], de["unit"], settings.mass_ratios)
        if not de["ci_low"] <= value <= de["ci_high"]:
            row = overrides.loc[overrides["override_id"] == pair["factor_id"], "_row"]
            log.add("warning", "override_outside_default_interval",
                    f"override {pair['factor_id']} ({value:.4g} {de['unit']}) lies outside the 95 % interval of the "
                    f"default it replaces, {pair['default_factor_id']} ({de['ci_low']:g} to {de['ci_high']:g}); "
                    "accepted - document why in the inventory report",
                    file=str(settings.overrides), row=int(row.iloc[0]) if len(row) else None, column="value",
                    found=f"{ov['value']:g} {ov['unit']}")


def _check_review(emissions, review, settings, log) -> None:
    """Error: a factor the agency's review found to differ is still in use."""
    if review is None or review.empty:
        return
    differs = review[review["result"] == "differs"]
    used = set(emissions["factor_id"].unique()) | set(emissions["parameter_id"].unique())
    for _, row in differs.iterrows():
        if row["factor_id"] in used:
            log.add("error", "review_differs",
                    f"factor {row['factor_id']} was found to differ from the agency's copy ({row['against']}) and is "
                    "still used; add an override with the correct value and its source",
                    file=str(settings.factor_review), row=int(row["_row"]), column="result", found="differs",
                    expected="an override for every stratum that uses this factor")


AGENCY_CHECK = ("agrees", "differs", "not yet checked", "own factor")


def _attach_review(factors: pd.DataFrame, review: pd.DataFrame) -> pd.DataFrame:
    """The factor review log's last entry per factor, and ``agency_check``: the agency's status of each factor.

    ``agency_check`` is what the outputs print: ``agrees`` / ``differs`` (the review log's result),
    ``not yet checked`` (a shipped value the agency has not checked against its copy of the guidance),
    ``own factor`` (an override the agency supplied with its citation).
    """
    factors = _with_review(factors, review)
    status = factors["review_result"].where(factors["review_result"] != "", "not yet checked")
    factors["agency_check"] = status.where(factors["factor_set"] != "override", "own factor")
    return factors


def _with_review(factors: pd.DataFrame, review: pd.DataFrame) -> pd.DataFrame:
    factors = factors.copy()
    for col in ("review_result", "reviewed_by", "reviewed_on", "reviewed_against"):
        factors[col] = ""
    if review is None or review.empty:
        return factors
    last = review.drop_duplicates("factor_id", keep="last").set_index("factor_id")
    hit = factors["factor_id"].isin(last.index)
    ids = factors.loc[hit, "factor_id"]
    factors.loc[hit, "review_result"] = ids.map(last["result"]).to_numpy()
    factors.loc[hit, "reviewed_by"] = ids.map(last["checked_by"]).to_numpy()
    factors.loc[hit, "reviewed_on"] = ids.map(last["checked_on"]).to_numpy()
    factors.loc[hit, "reviewed_against"] = ids.map(last["against"]).to_numpy()
    return factors


def _check_area_balance(activity, emissions, log) -> None:
    """Internal consistency: the area of every year goes into the strata output once."""
    given = activity[~activity["_bad"]].groupby("year")["area_ha"].sum()
    onsite = emissions[(emissions["pathway"] == "co2_onsite")]
    got = onsite.groupby("year")["area_ha"].sum().reindex(given.index, fill_value=0.0)
    off = (given - got).abs() > 1e-6 * given.abs().clip(lower=1.0)
    for year in given.index[off]:
        log.add("error", "area_carried_through", f"area of {year} not carried through to the results",
                found=f"{got[year]:.3f} ha", expected=f"{given[year]:.3f} ha")
