"""Rewetting and drainage scenarios from the last inventory year to a horizon, and their climate effect.

A scenario file (TOML, settings ``[inputs] scenarios``) names scenarios,
each a list of measures applied to the strata of the last inventory year
``Y0 = settings.last_year``. Every scenario runs from ``Y0`` (the inventory
itself) to the horizon (default 2100).

Rules (each one is also stated in the docstring of the function that applies it)
--------------------------------------------------------------------------------
* **baseline**: a scenario without measures holds the areas of ``Y0``
  constant. The scenario named by the top-level key ``baseline`` is the one
  every other is compared with.
* **rewet**: ``share`` of the area that was *drained in Y0* in the strata
  matched by the measure's filters (region, climate_zone, land_use and
  optionally nutrient_status, drainage_depth, subtype) is rewetted by
  ``target_year``, starting in ``start_year``. The cumulative rewetted share
  ``R(y)`` follows the ramp (:func:`rewetted_share`); the tranche of year
  ``y`` counts as rewetted for the whole of year ``y``. Rewetted area keeps
  its region, climate zone, land use and conversion status; its
  ``soil_status`` becomes ``rewetted`` and drainage depth, ditch fraction and
  subtype are cleared, so the engine applies the Chapter 3 factors
  (rewetted CO2, DOC, CH4; N2O not estimated). A blank nutrient status is
  replaced by the measure's ``assume_nutrient_status`` where the rewetted
  factors distinguish it (the loader says so when it is needed and missing).
  Area drained after ``Y0`` by a ``more_drainage`` measure is not rewetted.
* **more_drainage**: ``area_ha_per_year`` is added every year from
  ``start_year`` to ``end_year`` (default: the horizon) to one drained
  stratum. The new area is taken from undrained organic soil, which is not
  in the inventory and is counted as emitting nothing before it is drained
  (the inventory reports managed, drained or rewetted organic soils only).
* **initial CH4** (optional, per rewet measure): for the first ``years``
  years after rewetting (the year of rewetting and the ``years - 1``
  following) the CH4 factor of the land surface (pathway ``ch4_soil``) of
  the area rewetted by that measure is replaced by ``value`` [unit] or
  multiplied by ``value``. Area is tracked by rewetting cohort (the year its
  tranche was rewetted); area already rewetted in ``Y0`` is of unknown age
  and keeps the Chapter 3 factor.
* **overrides** apply as in the inventory, through the same engine. With
  ``overrides_after_last_year = "carry_forward"`` (default) an override in
  force in ``Y0`` stays in force to the horizon (projections keep the last
  inventory year's factors); with ``"as_given"`` its own year range is kept.
* Fires are not projected: scenario emissions exclude the fire pathways, in
  every year including ``Y0``.
* The off-site CO2 of extracted peat (``co2_offsite``, from production
  statistics, :mod:`compiler.offsite_peat`) is not projected either: a
  scenario moves areas, not peat production.
* A scenario may declare ``postpones = "<other>"``: it must have the same
  measures as the other, except that every rewet measure starts the same
  number of years later (the target year may differ). The summary then
  gives the extra warming from the postponement.

Climate response
----------------
CO2-eq uses the run's GWP100 set (``settings.gwp`` via
:func:`compiler.metrics.gwp_table`). CO2-we (warming-equivalent) uses GWP*
for CH4 (:func:`compiler.climate_response.gwp_star`, form from the file,
default Smith et al. 2021), and GWP100 for CO2 and N2O, which are long-lived
(Cain et al. 2019). The lagged CH4 emission of GWP* for the first 20
scenario years comes from the inventory (fires excluded). Forcing and
temperature are the response to the scenario's emissions from ``Y0`` on
(earlier emissions are common to all scenarios and left out), with the AR5
parameters and the timing convention of :mod:`compiler.climate_response`.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from . import climate_response as cr
from .activity import load_overrides
from .engine import compute
from .errors import Finding, FindingLog, InputError
from .schema import plain
from .metrics import co2_equivalent
from .readers import check_size, printable
from .settings import Settings, parse_toml
from .textrules import MAX_NAME_CHARS, MAX_NOTE_CHARS, shorten, text_problem
from .units import tonnes_of_gas_per_unit
from .vocabulary import ALIASES, TERMS, normalise_text

DEFAULT_HORIZON = 2100
MAX_HORIZON = 2200  # the settings' own upper year
RAMPS = ("linear", "front_loaded")
MEASURE_KINDS = ("rewet", "more_drainage")
OVERRIDE_RULES = ("carry_forward", "as_given")
INITIAL_CH4_MODES = ("replace", "multiply")
GASES = ("CO2", "CH4", "N2O")
STRATUM = ["region", "climate_zone", "land_use", "soil_status", "nutrient_status", "drainage_depth", "subtype"]
FILTER_TERMS = ("climate_zone", "land_use", "nutrient_status", "drainage_depth", "subtype")
AREA_COLUMNS = ["scenario", "year", *STRATUM, "ditch_fraction", "remaining_or_converted", "previous_land_use",
                "origin", "measure", "initial_ch4", "activity_source", "source_row", "area_ha"]

MAX_MAGNITUDE = 1e9  # any number of a scenario file (areas: the readers' 1e9 ha; factors are far smaller)
LONG_TEXT_KEYS = ("description", "citation")  # up to MAX_NOTE_CHARS; every other text is a name (MAX_NAME_CHARS)
_REQUIRED = object()
_TEXT_OR_LIST = (str, list)
# key -> (python types, default, allowed values or None, description)
TOP_KEYS: dict[str, tuple] = {
    "horizon": ((int,), DEFAULT_HORIZON, None, "last year of every scenario"),
    "baseline": ((str,), "baseline", None, "name of the scenario the others are compared with"),
    "gwp_star": ((str,), "smith2021", cr.GWP_STAR_FORMS, "form of GWP* for warming-equivalent CH4"),
    "overrides_after_last_year": ((str,), "carry_forward", OVERRIDE_RULES,
                                  "whether overrides in force in the last inventory year stay in force"),
    "scenario": ((list,), _REQUIRED, None, "the scenarios, one [[scenario]] table each"),
}
SCENARIO_KEYS: dict[str, tuple] = {
    "name": ((str,), _REQUIRED, None, "unique name"),
    "description": ((str,), "", None, "one line for the report"),
    "postpones": ((str,), "", None, "name of the scenario this one postpones"),
    "measure": ((list,), [], None, "the measures, one [[scenario.measure]] table each"),
}
REWET_KEYS: dict[str, tuple] = {
    "kind": ((str,), _REQUIRED, MEASURE_KINDS, "rewet | more_drainage"),
    "region": (_TEXT_OR_LIST, [], None, "region(s) of the inventory; absent = all"),
    "climate_zone": (_TEXT_OR_LIST, [], None, "climate zone(s); absent = all"),
    "land_use": (_TEXT_OR_LIST, [], None, "land use(s); absent = all"),
    "nutrient_status": (_TEXT_OR_LIST, [], None, "nutrient status(es); absent = all"),
    "drainage_depth": (_TEXT_OR_LIST, [], None, "drainage depth(s); absent = all"),
    "subtype": (_TEXT_OR_LIST, [], None, "subtype(s); absent = all"),
    "share": ((int, float), _REQUIRED, None, "fraction of the drained area rewetted by the target year"),
    "start_year": ((int,), None, None, "first year of rewetting (default: the year after the inventory)"),
    "target_year": ((int,), _REQUIRED, None, "year by which the share is reached"),
    "ramp": ((str,), "linear", RAMPS, "shape of the cumulative rewetted share"),
    "assume_nutrient_status": ((str,), "", ("rich", "poor", ""), "nutrient status of blank strata when rewetted"),
    "initial_ch4": ((dict,), None, None, "CH4 factor for the first years after rewetting"),
}
DRAIN_KEYS: dict[str, tuple] = {
    "kind": ((str,), _REQUIRED, MEASURE_KINDS, "rewet | more_drainage"),
    "region": ((str,), _REQUIRED, None, "region of the inventory"),
    "climate_zone": ((str,), _REQUIRED, None, "climate zone of the new drained area"),
    "land_use": ((str,), _REQUIRED, None, "land use of the new drained area"),
    "nutrient_status": ((str,), "", None, "nutrient status of the new drained area"),
    "drainage_depth": ((str,), "", None, "drainage depth of the new drained area"),
    "subtype": ((str,), "", None, "subtype of the new drained area"),
    "previous_land_use": ((str,), "", None, "land use before drainage (reporting only)"),
    "ditch_fraction": ((int, float), None, None, "ditch fraction of the new area (default: the Tier 1 value)"),
    "area_ha_per_year": ((int, float), _REQUIRED, None, "area drained each year [ha yr-1]"),
    "start_year": ((int,), None, None, "first year of new drainage (default: the year after the inventory)"),
    "end_year": ((int,), None, None, "last year of new drainage (default: the horizon)"),
}
INITIAL_CH4_KEYS: dict[str, tuple] = {
    "mode": ((str,), _REQUIRED, INITIAL_CH4_MODES, "replace the CH4 factor, or multiply it"),
    "value": ((int, float), _REQUIRED, None, "the factor (replace) or the multiplier (multiply)"),
    "unit": ((str,), "", None, "unit of the factor (replace), e.g. kg CH4 ha-1 yr-1; blank for multiply"),
    "years": ((int,), _REQUIRED, None, "number of years from rewetting the value applies"),
    "citation": ((str,), _REQUIRED, None, "source of the value"),
}


# --- the scenario definitions ------------------------------------------------------


@dataclass(frozen=True)
class InitialMethane:
    """CH4 of the land surface for the first ``years`` years after rewetting."""

    mode: str  # "replace" | "multiply"
    value: float  # [unit] for replace, [1] for multiply
    unit: str
    years: int
    citation: str
    tonnes_ch4_per_ha: float = float("nan")  # replace: value in [t CH4 ha-1 yr-1]


@dataclass(frozen=True)
class Measure:
    """One rewet or more_drainage measure of a scenario (fields unused by its kind stay at their defaults)."""

    kind: str
    location: str  # "scenario.<name>.measure[<i>]", for messages
    regions: tuple[str, ...] = ()
    climate_zones: tuple[str, ...] = ()
    land_uses: tuple[str, ...] = ()
    nutrient_statuses: tuple[str, ...] = ()
    drainage_depths: tuple[str, ...] = ()
    subtypes: tuple[str, ...] = ()
    share: float = 0.0
    start_year: int = 0
    target_year: int = 0
    ramp: str = "linear"
    assume_nutrient_status: str = ""
    initial_ch4: InitialMethane | None = None
    stratum: dict = field(default_factory=dict)  # more_drainage: region and stratum keys of the new area
    ditch_fraction: float = float("nan")
    area_ha_per_year: float = 0.0
    end_year: int = 0

    def timing_free(self) -> tuple:
        """Everything but the location and the timing (start and target years)."""
        skip = {"location", "start_year", "target_year"}
        return tuple((f.name, repr(getattr(self, f.name))) for f in dataclasses.fields(self) if f.name not in skip)


@dataclass(frozen=True)
class Scenario:
    """One scenario of a scenario file."""

    name: str
    description: str
    measures: tuple[Measure, ...]
    horizon: int
    is_baseline: bool
    postpones: str
    file: str
    gwp_star_form: str = "smith2021"
    overrides_after_last_year: str = "carry_forward"

    @property
    def kind(self) -> str:
        """``baseline`` without measures, else the measure kinds joined by ``+``."""
        kinds = sorted({m.kind for m in self.measures})
        return "+".join(kinds) if kinds else "baseline"


class _Problems:
    """Collects findings about one scenario file."""

    def __init__(self, file: str):
        self.file, self.findings = file, []

    def add(self, message: str, key: str, found: Any = "", expected: str = "") -> None:
        # A key or scenario name in the location is shown escaped and cut: it is the file's text too.
        self.findings.append(Finding("error", "scenarios", message, file=self.file,
                                     column=shorten(printable(key), 120),
                                     found="" if found == "" else str(found), expected=expected))

    def raise_if_any(self) -> None:
        if self.findings:
            raise InputError(self.findings)


def _near(word: str, choices) -> str:
    match = difflib.get_close_matches(str(word), [c for c in choices if c], n=1, cutoff=0.5)
    return f" (did you mean {match[0]}?)" if match else ""


def _check_table(data: dict, schema: dict[str, tuple], where: str, problems: _Problems) -> dict | None:
    """Unknown keys, missing keys, types and allowed values of one TOML table; the values with defaults."""
    ok = True
    for key in data:
        if key not in schema:
            problems.add("unknown key", f"{where}.{key}" if where else key, key,
                         f"one of {', '.join(schema)}" + _near(key, schema))
            ok = False
    values = {}
    for key, (types, default, allowed, _) in schema.items():
        label = f"{where}.{key}" if where else key
        if key not in data:
            if default is _REQUIRED:
                problems.add("required key missing", label, expected=" or ".join(t.__name__ for t in types))
                ok = False
            values[key] = default
            continue
        value = data[key]
        if (isinstance(value, bool) and bool not in types) or not isinstance(value, types):
            problems.add("wrong type", label, repr(value), " or ".join(t.__name__ for t in types))
            ok = False
            continue
        problem = _value_problem(key, value)
        if problem:
            problems.add(problem[0], label, problem[1], problem[2])
            ok = False
            continue
        if allowed is not None and value not in allowed:
            problems.add("value not accepted", label, value,
                         " | ".join(a for a in allowed if a) + _near(value, allowed))
            ok = False
            continue
        values[key] = value
    return values if ok else None


def _value_problem(key: str, value) -> tuple[str, str, str] | None:
    """(message, found, expected) for a number or text no input file may hold (the readers' limits)."""
    if isinstance(value, list):
        for item in value:
            problem = _value_problem(key, item)
            if problem:
                return problem
        return None
    if isinstance(value, bool):
        return None
    if isinstance(value, float) and not math.isfinite(value):
        return "not a finite number", repr(value), "a finite number"
    if isinstance(value, (int, float)) and abs(value) > MAX_MAGNITUDE:
        return "above 1e9 in magnitude", f"{value:.6g}", f"at most {MAX_MAGNITUDE:,.0f} in magnitude"
    if isinstance(value, str):
        if key in LONG_TEXT_KEYS:
            return text_problem(value, MAX_NOTE_CHARS, one_line=True, name=False)
        return text_problem(value, MAX_NAME_CHARS)
    return None


def _terms(value, term: str, label: str, problems: _Problems) -> tuple[str, ...]:
    """A term or list of terms of the activity vocabulary, normalised; unknown ones reported."""
    items = value if isinstance(value, list) else [value]
    out = []
    for item in items:
        if not isinstance(item, str):
            problems.add("wrong type", label, repr(item), "text")
            continue
        norm = normalise_text(item)
        norm = ALIASES.get(term, {}).get(norm, norm)
        accepted = TERMS[term]
        if norm not in accepted:
            shown = " | ".join(a if a else "(blank)" for a in accepted)
            problems.add(f"unknown {term}", label, item, shown + _near(norm, accepted))
            continue
        out.append(norm)
    return tuple(out)


def _texts(value, label: str, problems: _Problems) -> tuple[str, ...]:
    items = value if isinstance(value, list) else [value]
    bad = [i for i in items if not isinstance(i, str) or not i.strip()]
    for item in bad:
        problems.add("wrong type", label, repr(item), "a region name")
    return tuple(i.strip() for i in items if isinstance(i, str) and i.strip())


def load_scenarios(path: str | Path | None, settings: Settings) -> list[Scenario]:
    """Read and validate a scenario file; raise :class:`compiler.errors.InputError` listing every problem.

    Parameters
    ----------
    path : str or Path or None
        The scenario file (TOML); ``None`` takes ``settings.scenarios``.
    settings : Settings
        The inventory settings; ``last_year`` is the scenarios' start year.

    Returns
    -------
    list of Scenario
        In the order of the file. Regions are checked against the inventory
        by :func:`run_scenarios`, which has the activity data.
    """
    if path is None:
        path = settings.scenarios
    if path is None:
        raise InputError(Finding("error", "scenarios", "no scenario file: set [inputs] scenarios in the settings",
                                 file=str(settings.source or ""), column="inputs.scenarios",
                                 expected="a TOML file of scenarios"))
    path = Path(path)
    fname = str(path)
    problems = _Problems(fname)
    if not path.is_file():
        problems.add("scenario file not found", "", expected=f"a file at {path}")
        problems.raise_if_any()
    check_size(path, settings.max_input_mb)  # refused unread above [limits] max_input_mb, as every input
    raw_bytes = path.read_bytes()
    try:
        text = raw_bytes[3:].decode("utf-8") if raw_bytes.startswith(b"\xef\xbb\xbf") else raw_bytes.decode("utf-8")
    except UnicodeDecodeError:
        problems.add("not valid TOML: the file is not UTF-8 text", "", expected="the scenario file saved as UTF-8 text")
        problems.raise_if_any()
    try:
        data = parse_toml(text)
    except ValueError as exc:
        problems.add(str(exc), "")
        problems.raise_if_any()

    top = _check_table(data, TOP_KEYS, "", problems)
    if top is None:
        problems.raise_if_any()
    first = settings.last_year + 1
    horizon = top["horizon"]
    if not settings.last_year < horizon <= MAX_HORIZON:
        problems.add("horizon out of range", "horizon", horizon, f"{first} to {MAX_HORIZON}")
        problems.raise_if_any()

    scenarios: list[Scenario] = []
    names: list[str] = []
    for index, raw in enumerate(top["scenario"], start=1):
        where = f"scenario[{index}]"
        if not isinstance(raw, dict):
            problems.add("must be a table ([[scenario]])", where, repr(raw))
            continue
        if isinstance(raw.get("name"), str) and raw["name"].strip() and not text_problem(raw["name"]):
            where = f"scenario.{raw['name'].strip()}"
        values = _check_table(raw, SCENARIO_KEYS, where, problems)
        if values is None:
            continue
        name = values["name"].strip()
        if not name:
            problems.add("name is blank", f"{where}.name", expected="a unique name")
            continue
        if name in names:
            problems.add("scenario name used twice", f"{where}.name", name, "unique names")
            continue
        names.append(name)
        measures = []
        for m_index, m_raw in enumerate(values["measure"], start=1):
            measure = _measure(m_raw, f"{where}.measure[{m_index}]", settings, horizon, problems)
            if measure is not None:
                measures.append(measure)
        scenarios.append(Scenario(
            name=name, description=values["description"], measures=tuple(measures), horizon=horizon,
            is_baseline=(name == top["baseline"]), postpones=values["postpones"].strip(), file=fname,
            gwp_star_form=top["gwp_star"], overrides_after_last_year=top["overrides_after_last_year"]))
    if not scenarios and not problems.findings:
        problems.add("no scenarios", "scenario", expected="at least one [[scenario]] table")
    if scenarios and top["baseline"] not in names:
        problems.add("baseline scenario not found", "baseline", top["baseline"],
                     "the name of a scenario in this file" + _near(top["baseline"], names))
    problems.raise_if_any()
    _check_postponements(scenarios, problems)
    problems.raise_if_any()
    return scenarios


def _measure(raw, where: str, settings: Settings, horizon: int, problems: _Problems) -> Measure | None:
    if not isinstance(raw, dict):
        problems.add("must be a table ([[scenario.measure]])", where, repr(raw))
        return None
    kind = raw.get("kind")
    if kind not in MEASURE_KINDS:
        if kind is None:
            problems.add("required key missing", f"{where}.kind", expected=" | ".join(MEASURE_KINDS))
        else:
            problems.add("value not accepted", f"{where}.kind", kind, " | ".join(MEASURE_KINDS) + _near(kind, MEASURE_KINDS))
        return None
    first = settings.last_year + 1
    n_before = len(problems.findings)
    if kind == "rewet":
        v = _check_table(raw, REWET_KEYS, where, problems)
        if v is None:
            return None
        filters = {t: _terms(v[t], t, f"{where}.{t}", problems) for t in FILTER_TERMS}
        regions = _texts(v["region"], f"{where}.region", problems)
        share = float(v["share"])
        if not 0.0 < share <= 1.0:
            problems.add("share out of range", f"{where}.share", v["share"], "a fraction above 0 and at most 1")
        start = v["start_year"] if v["start_year"] is not None else first
        target = v["target_year"]
        if not first <= start <= horizon:
            problems.add("start_year out of range", f"{where}.start_year", start,
                         f"{first} (the year after the last inventory year) to {horizon} (the horizon)")
        if not start <= target <= horizon:
            problems.add("target_year out of range", f"{where}.target_year", target,
                         f"start_year ({start}) to the horizon ({horizon})")
        initial = None
        if v["initial_ch4"] is not None:
            initial = _initial_ch4(v["initial_ch4"], f"{where}.initial_ch4", settings, problems)
        if len(problems.findings) > n_before:
            return None
        return Measure(kind="rewet", location=where, regions=regions, climate_zones=filters["climate_zone"],
                       land_uses=filters["land_use"], nutrient_statuses=filters["nutrient_status"],
                       drainage_depths=filters["drainage_depth"], subtypes=filters["subtype"], share=share,
                       start_year=start, target_year=target, ramp=v["ramp"],
                       assume_nutrient_status=v["assume_nutrient_status"], initial_ch4=initial)
    v = _check_table(raw, DRAIN_KEYS, where, problems)
    if v is None:
        return None
    stratum = {"region": v["region"].strip()}
    for term in FILTER_TERMS:
        got = _terms(v[term], term, f"{where}.{term}", problems)
        stratum[term] = got[0] if got else ""
    previous = _terms(v["previous_land_use"], "previous_land_use", f"{where}.previous_land_use", problems)
    stratum["previous_land_use"] = previous[0] if previous else ""
    if stratum["previous_land_use"] and stratum["previous_land_use"] == stratum.get("land_use"):
        problems.add("previous_land_use equals land_use", f"{where}.previous_land_use", v["previous_land_use"],
                     "another land use, or blank")
    for required in ("climate_zone", "land_use"):
        if stratum.get(required) == "" and len(problems.findings) == n_before:
            problems.add(f"{required} is blank", f"{where}.{required}", expected="a value")
    ditch = float("nan") if v["ditch_fraction"] is None else float(v["ditch_fraction"])
    if not np.isnan(ditch) and not 0.0 <= ditch <= 1.0:
        problems.add("ditch_fraction outside [0, 1]", f"{where}.ditch_fraction", v["ditch_fraction"], "a fraction")
    rate = float(v["area_ha_per_year"])
    if not rate > 0:
        problems.add("area_ha_per_year must be positive", f"{where}.area_ha_per_year", v["area_ha_per_year"], "> 0")
    start = v["start_year"] if v["start_year"] is not None else first
    end = v["end_year"] if v["end_year"] is not None else horizon
    if not first <= start <= horizon:
        problems.add("start_year out of range", f"{where}.start_year", start,
                     f"{first} (the year after the last inventory year) to {horizon} (the horizon)")
    if not start <= end <= horizon:
        problems.add("end_year out of range", f"{where}.end_year", end, f"start_year ({start}) to the horizon ({horizon})")
    if len(problems.findings) > n_before:
        return None
    return Measure(kind="more_drainage", location=where, stratum=stratum, ditch_fraction=ditch,
                   area_ha_per_year=rate, start_year=start, end_year=end, regions=(stratum["region"],))


def _initial_ch4(raw: dict, where: str, settings: Settings, problems: _Problems) -> InitialMethane | None:
    v = _check_table(raw, INITIAL_CH4_KEYS, where, problems)
    if v is None:
        return None
    n_before = len(problems.findings)
    if v["years"] < 1:
        problems.add("years must be at least 1", f"{where}.years", v["years"], ">= 1")
    if not v["citation"].strip():
        problems.add("citation is blank", f"{where}.citation", expected="the source of the value")
    value = float(v["value"])
    per_ha = float("nan")
    if v["mode"] == "replace":
        try:
            gas, per_ha = tonnes_of_gas_per_unit(v["unit"], settings.mass_ratios)
        except ValueError as exc:
            gas = ""
            problems.add(f"unit not understood: {exc}", f"{where}.unit", v["unit"], "a CH4 flux such as kg CH4 ha-1 yr-1")
        if gas and gas != "CH4":
            problems.add("unit is not a CH4 flux", f"{where}.unit", v["unit"], "kg CH4 ha-1 yr-1, kg CH4-C ha-1 yr-1, ...")
        if value < 0:
            problems.add("a CH4 factor below zero", f"{where}.value", v["value"], ">= 0")
        per_ha = value * per_ha
    else:
        if v["unit"].strip() not in ("", "1", "multiplier", "fraction"):
            problems.add("a multiplier has no unit", f"{where}.unit", v["unit"], "blank (or 'multiplier')")
        if value < 0:
            problems.add("multiplier below zero", f"{where}.value", v["value"], ">= 0")
    if len(problems.findings) > n_before:
        return None
    return InitialMethane(mode=v["mode"], value=value, unit=v["unit"], years=v["years"],
                          citation=v["citation"].strip(), tonnes_ch4_per_ha=per_ha)


def _check_postponements(scenarios: list[Scenario], problems: _Problems) -> None:
    """A scenario that postpones another has its measures, rewet ones starting N > 0 years later."""
    by_name = {s.name: s for s in scenarios}
    for s in scenarios:
        if not s.postpones:
            continue
        key = f"scenario.{s.name}.postpones"
        other = by_name.get(s.postpones)
        if other is None or other is s:
            problems.add("postpones names no other scenario", key, s.postpones,
                         "the name of another scenario" + _near(s.postpones, [n for n in by_name if n != s.name]))
            continue
        delays = postponement_years(other, s)
        if delays is None:
            problems.add(f"scenario {s.name!r} differs from {other.name!r} by more than the timing of its rewet "
                         "measures", key, s.postpones,
                         "the same measures, each rewet measure starting the same number of years later")


def postponement_years(reference: Scenario, later: Scenario) -> int | None:
    """Years by which ``later`` postpones ``reference``, or None when they differ otherwise."""
    if len(reference.measures) != len(later.measures):
        return None
    delays = set()
    for a, b in zip(reference.measures, later.measures):
        if a.timing_free() != b.timing_free():
            return None
        if a.kind == "rewet":
            delays.add(b.start_year - a.start_year)
        elif (a.start_year, a.end_year) != (b.start_year, b.end_year):
            return None
    if len(delays) != 1:
        return None
    delay = delays.pop()
    return delay if delay > 0 else None


# --- ramps and areas -----------------------------------------------------------------


def rewetted_share(years, share: float, start_year: int, target_year: int, ramp: str = "linear") -> np.ndarray:
    """Cumulative share of the drained area rewetted by the end of each year [fraction].

    Parameters
    ----------
    years : array_like of int
    share : float
        Share reached in ``target_year`` [fraction].
    start_year, target_year : int
        First year of rewetting and the year the share is reached.
    ramp : str
        ``linear``: equal tranches in each year from ``start_year`` to
        ``target_year``, ``R = share x`` with
        ``x = (year - start_year + 1) / (target_year - start_year + 1)`` clipped to [0, 1];
        ``front_loaded``: ``R = share (1 - (1 - x)^2)``, larger tranches first
        (a shape chosen here: common practice, no source).

    Returns
    -------
    numpy.ndarray
        0 before ``start_year``, ``share`` from ``target_year`` on.
    """
    y = np.asarray(years, dtype=float)
    x = np.clip((y - start_year + 1.0) / (target_year - start_year + 1.0), 0.0, 1.0)
    if ramp == "linear":
        return share * x
    if ramp == "front_loaded":
        return share * (1.0 - (1.0 - x) ** 2)
    raise ValueError(f"unknown ramp {ramp!r}; expected one of {', '.join(RAMPS)}")


def added_drainage_area(years, area_ha_per_year: float, start_year: int, end_year: int) -> np.ndarray:
    """Cumulative area drained by a more_drainage measure in each year [ha]."""
    y = np.asarray(years, dtype=float)
    return area_ha_per_year * np.clip(y - start_year + 1.0, 0.0, end_year - start_year + 1.0)


def _matches(strata: pd.DataFrame, m: Measure) -> np.ndarray:
    mask = (strata["soil_status"] == "drained").to_numpy().copy()
    for column, wanted in (("region", m.regions), ("climate_zone", m.climate_zones), ("land_use", m.land_uses),
                           ("nutrient_status", m.nutrient_statuses), ("drainage_depth", m.drainage_depths),
                           ("subtype", m.subtypes)):
        if wanted:
            mask = mask & strata[column].isin(list(wanted)).to_numpy()
    return mask


def _grid(strata: pd.DataFrame, years: np.ndarray, area: np.ndarray, scenario: str, origin: str, measure: int,
          initial: bool) -> pd.DataFrame:
    """Strata x years in long form, with an area matrix of shape (len(strata), len(years))."""
    n = len(years)
    out = strata.loc[strata.index.repeat(n), [*STRATUM, "ditch_fraction", "remaining_or_converted",
                                              "previous_land_use", "activity_source", "source_row"]
                     ].reset_index(drop=True)
    out.insert(0, "year", np.tile(years, len(strata)))
    out.insert(0, "scenario", scenario)
    out["origin"], out["measure"], out["initial_ch4"] = origin, measure, initial
    out["area_ha"] = np.asarray(area, dtype=float).reshape(-1)
    return out[AREA_COLUMNS]


def _rewetted_keys(strata: pd.DataFrame, m: Measure) -> pd.DataFrame:
    """The strata a measure rewets, as rewetted strata (Chapter 3 keys)."""
    out = strata.copy()
    out["soil_status"] = "rewetted"
    out["drainage_depth"] = ""
    out["subtype"] = ""
    out["ditch_fraction"] = np.nan
    if m.assume_nutrient_status:
        out["nutrient_status"] = out["nutrient_status"].where(out["nutrient_status"] != "", m.assume_nutrient_status)
    return out


def _scenario_areas(scenario: Scenario, strata: pd.DataFrame, years: np.ndarray) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Area of every stratum in every year of one scenario, and the rewetting cohorts."""
    a0 = strata["area_ha"].to_numpy(dtype=float)
    rewet = [(j, m) for j, m in enumerate(scenario.measures, start=1) if m.kind == "rewet"]
    cumulative = np.zeros((len(strata), len(years)))
    pieces, cohorts = [], []
    for j, m in rewet:  # a handful of measures; each step is vectorised over strata and years
        mask = _matches(strata, m)
        ramp = rewetted_share(years, m.share, m.start_year, m.target_year, m.ramp)
        cumulative += mask[:, None] * ramp[None, :]
        chosen = strata[mask]
        if chosen.empty:
            continue
        area = chosen["area_ha"].to_numpy(dtype=float)[:, None] * ramp[None, :]
        keys = _rewetted_keys(chosen, m)
        if m.initial_ch4 is not None:
            earlier = rewetted_share(years - m.initial_ch4.years, m.share, m.start_year, m.target_year, m.ramp)
            young = chosen["area_ha"].to_numpy(dtype=float)[:, None] * (ramp - earlier)[None, :]
            pieces.append(_grid(keys, years, young, scenario.name, "rewetted", j, True))
            pieces.append(_grid(keys, years, area - young, scenario.name, "rewetted", j, False))
        else:
            pieces.append(_grid(keys, years, area, scenario.name, "rewetted", j, False))
        cohort_years = np.arange(m.start_year, m.target_year + 1)
        tranche = (rewetted_share(cohort_years, m.share, m.start_year, m.target_year, m.ramp)
                   - rewetted_share(cohort_years - 1, m.share, m.start_year, m.target_year, m.ramp))
        c = chosen.loc[chosen.index.repeat(len(cohort_years)), STRATUM + ["source_row"]].reset_index(drop=True)
        c.insert(0, "measure", j)
        c.insert(0, "scenario", scenario.name)
        c["cohort_year"] = np.tile(cohort_years, len(chosen))
        c["area_ha"] = (chosen["area_ha"].to_numpy(dtype=float)[:, None] * tranche[None, :]).reshape(-1)
        cohorts.append(c)
    # What stays drained; shares summing to 1 may leave -1e-16 by rounding, which is no area.
    remaining = np.clip(1.0 - cumulative, 0.0, None)
    pieces.insert(0, _grid(strata, years, a0[:, None] * remaining, scenario.name, "inventory", 0, False))
    for j, m in enumerate(scenario.measures, start=1):
        if m.kind != "more_drainage":
            continue
        new = pd.DataFrame([{**{k: "" for k in STRATUM}, **m.stratum, "soil_status": "drained",
                             "ditch_fraction": m.ditch_fraction, "activity_source": "scenario",
                             "source_row": pd.NA}])
        new["remaining_or_converted"] = "converted" if m.stratum.get("previous_land_use") else "remaining"
        new["previous_land_use"] = m.stratum.get("previous_land_use", "")
        area = added_drainage_area(years, m.area_ha_per_year, m.start_year, m.end_year)[None, :]
        pieces.append(_grid(new, years, area, scenario.name, "added_drainage", j, False))
    cohort_frame = (pd.concat(cohorts, ignore_index=True) if cohorts
                    else pd.DataFrame(columns=["scenario", "measure", *STRATUM, "source_row", "cohort_year", "area_ha"]))
    return pd.concat(pieces, ignore_index=True), cohort_frame


# --- the result ---------------------------------------------------------------------


@dataclass
class ScenarioResult:
    """Scenario tables as DataFrames (pure results; the renderers write them).

    Attributes
    ----------
    areas : DataFrame
        One row per scenario, year and stratum piece: ``scenario``, ``year``,
        ``region``, ``climate_zone``, ``land_use``, ``soil_status``,
        ``nutrient_status``, ``drainage_depth``, ``subtype``,
        ``ditch_fraction``, ``remaining_or_converted``, ``previous_land_use``,
        ``origin`` (``inventory``: a stratum of the last inventory year and
        what is left of it drained; ``rewetted``: area rewetted by a
        measure; ``added_drainage``), ``measure`` (1-based index in the
        scenario, 0 for inventory strata), ``initial_ch4`` (True for area
        within the initial-CH4 period of its measure), ``activity_source``
        (how the inventory got the start-year area of the stratum:
        ``reported``, or a filled value; ``scenario`` for added drainage),
        ``source_row`` (row of the activity file the stratum comes from;
        blank for a filled year or added drainage), ``area_ha`` [ha].
    cohorts : DataFrame
        Area rewetted per measure, stratum and year of rewetting:
        ``scenario``, ``measure``, stratum keys (as drained), ``source_row``,
        ``cohort_year``, ``area_ha`` [ha].
    detail : DataFrame
        The engine rows (every column of :data:`compiler.engine.RESULT_COLUMNS`;
        ``input_file`` and ``input_row`` name the activity row of the stratum,
        or the scenario file for added drainage) with ``scenario``, ``origin``, ``measure``, ``initial_ch4``,
        ``source_row``, ``adjustment`` (the initial-CH4 rule applied, or
        blank) and ``co2eq_t`` [t CO2-eq]; notation rows (e.g. N2O ``NA`` on
        rewetted soil) included.
    emissions : DataFrame
        Estimates summed by ``scenario``, ``year``, ``region``,
        ``soil_status``, ``pathway``, ``gas``: ``emission_t`` [t gas yr-1]
        and ``co2eq_t`` [t CO2-eq yr-1, GWP100 of the run's set].
    climate : DataFrame
        One row per scenario and year: ``area_ha`` [ha]; ``co2_t``,
        ``ch4_t``, ``n2o_t`` [t yr-1]; ``co2eq_t`` [t CO2-eq yr-1];
        ``co2we_t`` [t CO2-we yr-1, GWP* for CH4, NaN where the lagged year is
        unknown]; ``forcing_co2_w_m2``, ``forcing_ch4_w_m2``,
        ``forcing_n2o_w_m2``, ``forcing_w_m2`` [W m-2, end of year];
        ``temperature_co2_k``, ``temperature_ch4_k``, ``temperature_n2o_k``,
        ``temperature_k`` [K, end of year]; ``temperature_mk_per_kha``
        [mK per 1000 ha of the scenario's organic-soil area in that year];
        ``cumulative_co2_t``, ``cumulative_ch4_t``, ``cumulative_n2o_t``
        [t gas], ``cumulative_co2eq_t``, ``cumulative_co2we_t`` [t, summed
        from the start year; years without a CO2-we value are skipped]; and against the baseline scenario (scenario minus baseline):
        ``co2eq_t_vs_baseline``, ``co2we_t_vs_baseline``,
        ``forcing_w_m2_vs_baseline``, ``temperature_k_vs_baseline``,
        ``temperature_mk_per_kha_vs_baseline`` (the difference per 1000 ha of
        the scenario), ``cumulative_co2eq_t_vs_baseline``,
        ``cumulative_co2we_t_vs_baseline``.
    summary : DataFrame
        One row per scenario: ``scenario``, ``description``, ``kind``,
        ``is_baseline``, ``area_ha_start``, ``area_ha_horizon``,
        ``rewetted_ha_horizon`` [ha], ``cumulative_co2eq_t_vs_baseline``,
        ``cumulative_co2we_t_vs_baseline`` [t, to the horizon],
        ``temperature_vs_baseline_mk_<year>`` [mK] for each report year,
        ``crossing_year`` (first year from which the warming stays below the
        baseline's to the horizon; rewetting scenarios only), ``crossing``
        (that year as text, or ``not by horizon``), ``postpones``,
        ``delay_years``, ``extra_warming_mk_<year>`` [mK, this scenario minus
        the one it postpones] and ``extra_cumulative_co2eq_t`` [t, to the
        horizon].
    area_totals : DataFrame
        ``areas`` summed by ``scenario``, ``year``, ``region``, ``land_use``,
        ``soil_status``: ``area_ha`` [ha] (``scenario_areas.csv``).
    rewetted_area : DataFrame
        Rewetted area per ``scenario`` and ``year``: ``area_ha`` [ha] (the
        report's chart).
    """

    scenarios: list[Scenario]
    start_year: int
    horizon: int
    areas: pd.DataFrame
    cohorts: pd.DataFrame
    detail: pd.DataFrame
    emissions: pd.DataFrame
    climate: pd.DataFrame
    summary: pd.DataFrame
    metrics: pd.DataFrame
    parameters: cr.ClimateParameters = field(repr=False)
    gwp: dict[str, float] = field(default_factory=dict)
    gwp_star_form: str = "smith2021"
    timing: str = cr.TIMING_CONVENTION
    findings: list[Finding] = field(default_factory=list, repr=False)
    area_totals: pd.DataFrame = field(default_factory=pd.DataFrame)
    rewetted_area: pd.DataFrame = field(default_factory=pd.DataFrame)


def run_scenarios(result, scenarios: list[Scenario], horizon: int | None = None,
                  report_years: tuple[int, ...] = (2050, 2100)) -> ScenarioResult:
    """Emissions, CO2-eq, CO2-we, forcing and temperature of each scenario, year by year.

    Parameters
    ----------
    result : compiler.pipeline.InventoryResult
        The compiled inventory; its last year's strata are the start.
    scenarios : list of Scenario
        From :func:`load_scenarios`.
    horizon : int, optional
        Last year [year]; default: the file's ``horizon``. A shorter run cuts
        the measures at the horizon (reported as a note).
    report_years : tuple of int
        Years of the summary's warming columns (those inside the run).

    Returns
    -------
    ScenarioResult

    Raises
    ------
    compiler.errors.InputError
        With the scenario file and key of each problem (unknown region, a
        filter that matches no drained area, shares above 1, a factor the
        engine cannot find for a scenario stratum).
    """
    settings: Settings = result.settings
    if not scenarios:
        raise InputError("no scenarios to run")
    file = scenarios[0].file
    problems = _Problems(file)
    start = settings.last_year
    horizon = int(horizon if horizon is not None else scenarios[0].horizon)
    if not start < horizon <= MAX_HORIZON:
        problems.add("horizon out of range", "horizon", horizon, f"{start + 1} to {MAX_HORIZON}")
        problems.raise_if_any()
    baseline = [s for s in scenarios if s.is_baseline]
    if len(baseline) != 1:
        problems.add("exactly one baseline scenario needed", "baseline", len(baseline), "1")
        problems.raise_if_any()
    baseline = baseline[0]
    years = np.arange(start, horizon + 1)
    notes = []
    cut = [m.location for s in scenarios for m in s.measures
           if (m.target_year if m.kind == "rewet" else m.end_year) > horizon]
    if cut:
        notes.append(Finding("info", "scenarios", f"the run stops in {horizon}, before {len(cut)} measure(s) end; "
                             "their ramps are cut at the horizon", file=file, column=", ".join(cut)))

    strata = result.activity[result.activity["year"] == start].copy()
    strata = strata.reset_index(drop=True)
    # Row of the activity file; a year the inventory filled (interpolated, extrapolated) has none.
    strata["source_row"] = strata["_row"].where(strata["_row"] > 0).astype("Int64")
    if "activity_source" not in strata:
        strata["activity_source"] = "reported"
    _check_against_inventory(scenarios, strata, result, problems)
    problems.raise_if_any()

    areas, cohorts = [], []
    for s in scenarios:  # a handful of scenarios
        a, c = _scenario_areas(s, strata, years)
        areas.append(a)
        cohorts.append(c)
    areas = pd.concat(areas, ignore_index=True)
    cohorts = pd.concat(cohorts, ignore_index=True)

    detail, findings = _emissions_detail(result, scenarios, areas, horizon, file)
    detail["co2eq_t"] = co2_equivalent(detail["emission_t"], detail["gas"], result.gwp)
    estimates = detail[detail["notation_key"] == ""]
    emissions = (estimates.groupby(["scenario", "year", "region", "soil_status", "pathway", "gas"], sort=True)
                 [["emission_t", "co2eq_t"]].sum().reset_index())

    params = cr.load_climate_parameters("ar5", settings.mass_ratios)
    form = scenarios[0].gwp_star_form
    climate = _climate(result, scenarios, baseline, emissions, areas, years, params, form)
    summary = _summary(scenarios, baseline, climate, areas, years, report_years)
    return ScenarioResult(scenarios=scenarios, start_year=start, horizon=horizon, areas=areas, cohorts=cohorts,
                          detail=detail, emissions=emissions, climate=climate, summary=summary,
                          metrics=cr.metric_table(params), parameters=params, gwp=dict(result.gwp),
                          gwp_star_form=form, findings=notes + findings,
                          area_totals=areas.groupby(["scenario", "year", "region", "land_use", "soil_status"],
                                                    sort=False, as_index=False)["area_ha"].sum(),
                          rewetted_area=(areas[areas["soil_status"] == "rewetted"]
                                         .groupby(["scenario", "year"], sort=False)["area_ha"].sum().reset_index()))


def _check_against_inventory(scenarios, strata: pd.DataFrame, result, problems: _Problems) -> None:
    """Regions exist, rewet filters match drained area, shares do not exceed 1, blank nutrient status is resolved."""
    regions = sorted(strata["region"].unique())
    library, factor_set = result.library, result.settings.factor_set
    reg = library.register[(library.register["factor_set"] == factor_set)
                           & (library.register["soil_status"] == "rewetted")]
    for s in scenarios:
        total = np.zeros(len(strata))
        for m in s.measures:
            unknown = [r for r in m.regions if r not in regions]
            for r in unknown:
                problems.add("region not in the inventory's last year", f"{m.location}.region", r,
                             " | ".join(regions) + _near(r, regions))
            if unknown or m.kind != "rewet":
                continue
            mask = _matches(strata, m)
            if not mask.any():
                problems.add(f"the filters match no drained area in {result.settings.last_year}", m.location,
                             expected="filters that select drained strata of the last inventory year")
                continue
            total += mask * m.share
            chosen = strata[mask & (strata["nutrient_status"] == "").to_numpy()]
            if m.assume_nutrient_status or chosen.empty:
                continue
            # Zones whose rewetted factors distinguish nutrient status (a blank zone: all zones).
            zones = set(reg.loc[reg["nutrient_status"] != "", "climate_zone"])
            needing = chosen if "" in zones else chosen[chosen["climate_zone"].isin(list(zones))]
            if not needing.empty:
                listed = ", ".join(sorted(set(needing["region"] + " " + needing["climate_zone"] + " "
                                              + needing["land_use"])))
                problems.add(f"strata with a blank nutrient_status are rewetted ({listed}) and the {factor_set} "
                             "rewetted factors distinguish nutrient status there", f"{m.location}.assume_nutrient_status",
                             expected="rich | poor")
        over = total > 1.0 + 1e-12
        if over.any():
            listed = ", ".join(sorted(set(strata.loc[over, "region"] + " " + strata.loc[over, "land_use"])))
            problems.add(f"rewet measures of scenario {s.name!r} together rewet more than the drained area "
                         f"({listed})", f"scenario.{s.name}.measure", f"{total.max():.3g}", "shares summing to at most 1")


def _emissions_detail(result, scenarios, areas: pd.DataFrame, horizon: int, file: str):
    """Engine rows for every scenario stratum and year, with the initial-CH4 rule applied."""
    settings = dataclasses.replace(result.settings, last_year=horizon)
    log = FindingLog()
    overrides = load_overrides(settings, log) if settings.overrides is not None else pd.DataFrame()
    if not overrides.empty and scenarios[0].overrides_after_last_year == "carry_forward":
        in_force = overrides["last_year"] >= result.settings.last_year
        overrides.loc[in_force, "last_year"] = horizon
        if in_force.any():
            log.add("info", "scenarios", f"{int(in_force.sum())} override(s) in force in {result.settings.last_year} "
                    f"carried forward to {horizon} (overrides_after_last_year = carry_forward)", file=file)
    log.raise_if_errors()
    frame = areas[areas["area_ha"] > 0].reset_index(drop=True)
    engine_in = frame[["year", *STRATUM, "area_ha", "ditch_fraction", "remaining_or_converted",
                       "previous_land_use", "activity_source"]].copy()
    engine_in["year"] = engine_in["year"].astype(int)
    engine_in["_row"] = np.arange(1, len(frame) + 1)
    engine_in["_bad"] = False
    engine_in.attrs["file"] = file
    engine = compute(engine_in, None, overrides, result.library, settings, log)
    if log.errors:
        raise InputError(_remap_findings(log.errors, frame, scenarios, result))
    detail = plain(engine.emissions)  # text columns: the measures below write new texts into them
    meta = frame.iloc[detail["input_row"].to_numpy() - 1]
    for col in ("scenario", "origin", "measure", "initial_ch4", "source_row"):
        detail[col] = meta[col].to_numpy()
    # Trace to the inventory: the activity file and row of the stratum (the scenario file for added drainage).
    added = (detail["origin"] == "added_drainage").to_numpy()
    detail["input_file"] = np.where(added, Path(file).name, Path(result.settings.activity).name)
    detail["input_row"] = detail["source_row"].astype("Int64")
    detail["adjustment"] = ""
    by_name = {s.name: s for s in scenarios}
    young = detail["initial_ch4"].to_numpy(dtype=bool) & (detail["pathway"] == "ch4_soil").to_numpy() & (
        detail["notation_key"] == "").to_numpy()
    if young.any():
        keys = detail.loc[young, ["scenario", "measure"]].drop_duplicates()
        for scenario, j in keys.itertuples(index=False):  # one step per measure with an initial-CH4 rule
            rule = by_name[scenario].measures[int(j) - 1].initial_ch4
            rows = young & (detail["scenario"] == scenario).to_numpy() & (detail["measure"] == j).to_numpy()
            if rule.mode == "replace":
                detail.loc[rows, "emission_t"] = detail.loc[rows, "area_basis_ha"] * rule.tonnes_ch4_per_ha
                detail.loc[rows, "emission_basis"] = "t CH4"
                detail.loc[rows, "emission_basis_t"] = detail.loc[rows, "emission_t"]
                detail.loc[rows, "factor_value"] = rule.value
                detail.loc[rows, "factor_unit"] = rule.unit
                detail.loc[rows, "conversion"] = rule.tonnes_ch4_per_ha / rule.value if rule.value else 0.0
                detail.loc[rows, "factor_id"] = f"scenario:{scenario}:measure{int(j)}:initial_ch4"
                text = f"initial CH4 {rule.value:g} {rule.unit} for {rule.years} years ({rule.citation})"
            else:
                for col in ("emission_t", "emission_basis_t", "conversion"):
                    detail.loc[rows, col] = detail.loc[rows, col] * rule.value
                text = f"initial CH4 x {rule.value:g} for {rule.years} years ({rule.citation})"
            detail.loc[rows, "adjustment"] = text
    front = ["scenario", "origin", "measure", "initial_ch4", "source_row"]
    detail = detail[front + [c for c in detail.columns if c not in front]]
    # Notes on inventory strata repeat the inventory's own; the rest are pointed at the scenario file.
    notes = [f for f in log.findings if f.severity != "error" and not (
        f.check == "not_distinguished" and f.row is not None and 1 <= f.row <= len(frame)
        and frame["origin"].iloc[f.row - 1] == "inventory")]
    return detail, _remap_findings(notes, frame, scenarios, result)


def _remap_findings(errors: list[Finding], frame: pd.DataFrame, scenarios, result) -> list[Finding]:
    """Engine findings on synthetic rows, pointed back at the scenario, measure and inventory stratum."""
    activity_name = Path(result.settings.activity).name
    by_name = {s.name: s for s in scenarios}
    out = []
    for f in errors:
        message = f.message  # without the list of rows, which are the scenario's own synthetic rows
        key, origin = "", ""
        if f.row is not None and 1 <= f.row <= len(frame):
            row = frame.iloc[f.row - 1]
            scenario = by_name[row["scenario"]]
            key = scenario.measures[int(row["measure"]) - 1].location if row["measure"] else f"scenario.{scenario.name}"
            if not pd.isna(row["source_row"]):
                origin = f" (stratum of {activity_name} row {int(row['source_row'])})"
            message = f"scenario {scenario.name!r}: {message}{origin}"
        out.append(Finding(f.severity, f.check, message, file=f.file, column=key or f.column, found=f.found,
                           expected=f.expected))
    return out


# --- climate -------------------------------------------------------------------------


def _inventory_ch4_before(result, start: int) -> np.ndarray:
    """CH4 of the inventory years before ``start``, fires excluded [t CH4 yr-1], oldest first."""
    em = result.emissions
    rows = em[(em["notation_key"] == "") & (em["gas"] == "CH4") & ~em["pathway"].str.startswith("fire_")
              & (em["year"] < start)]
    years = range(result.settings.first_year, start)
    return rows.groupby("year")["emission_t"].sum().reindex(years, fill_value=0.0).to_numpy(dtype=float)


def _climate(result, scenarios, baseline: Scenario, emissions: pd.DataFrame, areas: pd.DataFrame,
             years: np.ndarray, params: cr.ClimateParameters, form: str) -> pd.DataFrame:
    gwp = result.gwp
    totals = emissions.pivot_table(index=["scenario", "year"], columns="gas", values="emission_t", aggfunc="sum",
                                   fill_value=0.0)
    area = areas.groupby(["scenario", "year"])["area_ha"].sum()
    history = _inventory_ch4_before(result, int(years[0]))
    frames = []
    for s in scenarios:  # one convolution per scenario and gas
        idx = pd.MultiIndex.from_arrays([[s.name] * len(years), years])
        gas = totals.reindex(idx, fill_value=0.0)
        out = pd.DataFrame({"scenario": s.name, "year": years,
                            "area_ha": area.reindex(idx, fill_value=0.0).to_numpy()})
        for g in GASES:
            out[f"{g.lower()}_t"] = gas[g].to_numpy() if g in gas else np.zeros(len(years))
        out["co2eq_t"] = sum(out[f"{g.lower()}_t"] * gwp[g] for g in GASES)
        out["co2we_t"] = (out["co2_t"] + out["n2o_t"] * gwp["N2O"]
                          + cr.gwp_star(out["ch4_t"].to_numpy(), gwp["CH4"], params, form, history))
        for g in GASES:
            out[f"forcing_{g.lower()}_w_m2"] = cr.forcing_series(out[f"{g.lower()}_t"].to_numpy(), g, params)
        out["forcing_w_m2"] = sum(out[f"forcing_{g.lower()}_w_m2"] for g in GASES)
        for g in GASES:
            out[f"temperature_{g.lower()}_k"] = cr.temperature_series(out[f"{g.lower()}_t"].to_numpy(), g, params)
        out["temperature_k"] = sum(out[f"temperature_{g.lower()}_k"] for g in GASES)
        out["temperature_mk_per_kha"] = _per_kha(out["temperature_k"], out["area_ha"])
        for g in GASES:
            out[f"cumulative_{g.lower()}_t"] = out[f"{g.lower()}_t"].cumsum()
        out["cumulative_co2eq_t"] = out["co2eq_t"].cumsum()
        out["cumulative_co2we_t"] = out["co2we_t"].cumsum()
        frames.append(out)
    climate = pd.concat(frames, ignore_index=True)
    base = climate[climate["scenario"] == baseline.name].set_index("year")
    for col in ("co2eq_t", "co2we_t", "forcing_w_m2", "temperature_k", "cumulative_co2eq_t", "cumulative_co2we_t"):
        climate[f"{col}_vs_baseline"] = climate[col].to_numpy() - climate["year"].map(base[col]).to_numpy()
    climate["temperature_mk_per_kha_vs_baseline"] = _per_kha(climate["temperature_k_vs_baseline"], climate["area_ha"])
    order = ["scenario", "year", "area_ha", "co2_t", "ch4_t", "n2o_t", "co2eq_t", "co2we_t",
             "forcing_co2_w_m2", "forcing_ch4_w_m2", "forcing_n2o_w_m2", "forcing_w_m2",
             "temperature_co2_k", "temperature_ch4_k", "temperature_n2o_k", "temperature_k", "temperature_mk_per_kha",
             "cumulative_co2_t", "cumulative_ch4_t", "cumulative_n2o_t", "cumulative_co2eq_t", "cumulative_co2we_t",
             "co2eq_t_vs_baseline", "co2we_t_vs_baseline", "forcing_w_m2_vs_baseline", "temperature_k_vs_baseline",
             "temperature_mk_per_kha_vs_baseline", "cumulative_co2eq_t_vs_baseline", "cumulative_co2we_t_vs_baseline"]
    return climate[order]


def _per_kha(temperature_k: pd.Series, area_ha: pd.Series) -> np.ndarray:
    """[K] -> [mK per 1000 ha]; NaN where the area is zero."""
    kha = area_ha.to_numpy(dtype=float) / 1e3
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(kha > 0, temperature_k.to_numpy(dtype=float) * 1e3 / kha, np.nan)


def crossing_year(years: np.ndarray, difference: np.ndarray) -> int | None:
    """First year from which ``difference`` stays below zero to the last year, or None.

    Parameters
    ----------
    years : array_like of int
    difference : array_like
        Scenario minus baseline warming per year [K].
    """
    d = np.asarray(difference, dtype=float)
    below = d < 0
    if len(d) == 0 or not below[-1]:
        return None
    not_below = np.flatnonzero(~below)
    first = 0 if len(not_below) == 0 else not_below[-1] + 1
    return int(np.asarray(years)[first])


def _summary(scenarios, baseline: Scenario, climate: pd.DataFrame, areas: pd.DataFrame, years: np.ndarray,
             report_years) -> pd.DataFrame:
    shown = [y for y in report_years if years[0] <= y <= years[-1]]
    by_name = {s.name: s for s in scenarios}
    clim = {name: frame.set_index("year") for name, frame in climate.groupby("scenario")}
    rewetted = areas[areas["soil_status"] == "rewetted"].groupby(["scenario", "year"])["area_ha"].sum()
    rows = []
    for s in scenarios:  # one row per scenario
        c = clim[s.name]
        row = {"scenario": s.name, "description": s.description, "kind": s.kind, "is_baseline": s.is_baseline,
               "area_ha_start": c["area_ha"].iloc[0], "area_ha_horizon": c["area_ha"].iloc[-1],
               "rewetted_ha_horizon": float(rewetted.get((s.name, int(years[-1])), 0.0)),
               "cumulative_co2eq_t_vs_baseline": c["cumulative_co2eq_t_vs_baseline"].iloc[-1],
               "cumulative_co2we_t_vs_baseline": c["cumulative_co2we_t_vs_baseline"].iloc[-1]}
        for y in shown:
            row[f"temperature_vs_baseline_mk_{y}"] = c.loc[y, "temperature_k_vs_baseline"] * 1e3
        crossing, text = None, ""
        if any(m.kind == "rewet" for m in s.measures) and not s.is_baseline:
            crossing = crossing_year(c.index.to_numpy(), c["temperature_k_vs_baseline"].to_numpy())
            text = str(crossing) if crossing is not None else "not by horizon"
        row["crossing_year"], row["crossing"] = crossing, text
        row["postpones"], row["delay_years"] = s.postpones, None
        for y in shown:
            row[f"extra_warming_mk_{y}"] = np.nan
        row["extra_cumulative_co2eq_t"] = np.nan
        if s.postpones:
            ref = clim[s.postpones]
            row["delay_years"] = postponement_years(by_name[s.postpones], s)
            for y in shown:
                row[f"extra_warming_mk_{y}"] = (c.loc[y, "temperature_k"] - ref.loc[y, "temperature_k"]) * 1e3
            row["extra_cumulative_co2eq_t"] = c["cumulative_co2eq_t"].iloc[-1] - ref["cumulative_co2eq_t"].iloc[-1]
        rows.append(row)
    out = pd.DataFrame(rows)
    out["crossing_year"] = out["crossing_year"].astype("Int64")
    out["delay_years"] = out["delay_years"].astype("Int64")
    return out
