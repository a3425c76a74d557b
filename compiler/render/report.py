"""report.html and report.pdf from report_templates/ (Jinja2, autoescaped; WeasyPrint for the PDF).

Every total, share and series the report shows is computed once by the stage that
owns it (``result.aggregates``, ``result.reporting_tables``, ``result.methods_chapter``,
the analyses' results; see DEVELOPERS.md, "Which output shows which aggregate");
this module picks and formats them, and the templates place them and never hold a
factor or a total of their own. WeasyPrint may fetch only files inside the template folder: any other
URL or path, including one that a user's text might carry, is refused.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import os
from pathlib import Path
from urllib.parse import unquote, urlparse

import numpy as np
import pandas as pd
from jinja2 import Environment, FileSystemLoader, select_autoescape

from ..categories import NOTATION_KEYS
from ..factors import unchecked_factors
from ..row_model import ROW_MODELS
from ..resources import resource_dir
from ..units import basis_ratio
from . import charts

CAUTIONS = [
    ("Tier 1 defaults are coarse.", "They are global or climate-zone means and may not represent national "
     "conditions; the 95 % intervals in the factor register show how coarse."),
    ("Key categories deserve higher tiers.", "Where a category is key, country-specific factors (Tier 2) or "
     "models and measurements (Tier 3) are good practice."),
    ("Shipped factor values.", "The Tier 1 values shipped with the tool have not been checked against the "
     "published text by the tool's authors and must be checked against your copy of the guidance before "
     "official use; record each check in the factor review log."),
    ("National QA/QC.", "These estimates must pass the national QA/QC plan and its review before they are "
     "submitted."),
    ("Rewetting works.", "Rewetting needs hydrological design, permits and compliance with local codes, carried "
     "out by qualified, licensed professionals. Nothing in this report is a design."),
    ("Not a forecast.", "Any scenario or projection built on these numbers describes a pathway under stated "
     "assumptions, not a forecast."),
]

EQUATIONS = {
    "co2_onsite": {
        "title": "On-site CO<sub>2</sub> of drained and rewetted organic soils",
        "source": "2013 Wetlands Supplement Eq. 2.3 (drained, Table 2.1); Chapter 3 (rewetted, Table 3.1)",
        "html": "CO<sub>2</sub>-C<sub>on-site</sub> = &Sigma;<sub>s</sub> A<sub>s</sub> &times; EF<sub>CO2,s</sub>",
        "symbols": [("A<sub>s</sub>", "area of organic soil in stratum s", "ha"),
                    ("EF<sub>CO2,s</sub>", "on-site emission factor (negative: removal)", "t CO2-C ha<sup>-1</sup> yr<sup>-1</sup>")],
    },
    "co2_doc": {
        "title": "Off-site CO<sub>2</sub> from dissolved organic carbon",
        "source": "2013 Wetlands Supplement Eq. 2.4 with Table 2.2 (EF<sub>DOC</sub> from Eq. 2.5); Chapter 3, Table 3.2",
        "html": "CO<sub>2</sub>-C<sub>DOC</sub> = &Sigma;<sub>s</sub> A<sub>s</sub> &times; EF<sub>DOC,s</sub>; "
                "&nbsp; EF<sub>DOC</sub> = DOC<sub>FLUX_NATURAL</sub> &times; (1 + &Delta;DOC<sub>DRAINAGE</sub>) &times; Frac<sub>DOC-CO2</sub>",
        "symbols": [("EF<sub>DOC,s</sub>", "emission factor for DOC exported from the stratum", "t CO2-C ha<sup>-1</sup> yr<sup>-1</sup>")],
    },
    "co2_offsite": {
        "title": "Off-site CO<sub>2</sub> of extracted peat (horticulture and other non-energy uses)",
        "source": "2006 IPCC Guidelines Vol. 4, Chapter 7, Section 7.2.1.1 (off-site equation; carbon fractions of "
                  "air-dry peat by nutrient status); reported in 3.B.4.a.i as its own pathway, beside the on-site "
                  "emissions of the extraction area. Peat burnt for energy is reported in the energy sector",
        "html": "CO<sub>2</sub>-C<sub>off-site</sub> = &Sigma;<sub>p</sub> Wt<sub>dry peat,p</sub> &times; "
                "C<sub>fraction,p</sub>; &nbsp; CO<sub>2</sub> = CO<sub>2</sub>-C &times; 44/12",
        "symbols": [("Wt<sub>dry peat,p</sub>", "air-dry weight of the peat extracted in the year for non-energy use "
                     "(a volume is converted with its bulk density)", "t yr<sup>-1</sup>"),
                    ("C<sub>fraction,p</sub>", "carbon fraction of air-dry peat by weight, by nutrient status",
                     "t C (t air-dry peat)<sup>-1</sup>")],
    },
    "ch4_soil": {
        "title": "CH<sub>4</sub> from the land surface",
        "source": "2013 Wetlands Supplement Eq. 2.6, first term (drained, Table 2.3); Chapter 3 (rewetted, Table 3.3, whole area)",
        "html": "CH<sub>4,land</sub> = &Sigma;<sub>s</sub> A<sub>s</sub> &times; (1 &minus; Frac<sub>ditch,s</sub>) &times; EF<sub>CH4,land,s</sub>",
        "symbols": [("Frac<sub>ditch,s</sub>", "fraction of the drained area occupied by ditches (Table 2.4, or measured); 0 for rewetted land", "fraction"),
                    ("EF<sub>CH4,land,s</sub>", "CH4 emission factor of the land surface", "kg CH4 (Table 2.3) or kg CH4-C (Table 3.3) ha<sup>-1</sup> yr<sup>-1</sup>")],
    },
    "ch4_ditch": {
        "title": "CH<sub>4</sub> from drainage ditches",
        "source": "2013 Wetlands Supplement Eq. 2.6, second term (Table 2.4)",
        "html": "CH<sub>4,ditch</sub> = &Sigma;<sub>s</sub> A<sub>s</sub> &times; Frac<sub>ditch,s</sub> &times; EF<sub>CH4,ditch,s</sub>",
        "symbols": [("EF<sub>CH4,ditch,s</sub>", "CH4 emission factor per ha of ditch surface", "kg CH4 ha<sup>-1</sup> yr<sup>-1</sup>")],
    },
    "n2o_soil": {
        "title": "Direct N<sub>2</sub>O from drained organic soils",
        "source": "2013 Wetlands Supplement Eq. 2.7 (Table 2.5); 2006 IPCC Guidelines Vol. 4 Eq. 11.1, F<sub>OS</sub> term (Table 11.1)",
        "html": "N<sub>2</sub>O-N = &Sigma;<sub>s</sub> A<sub>s</sub> &times; EF<sub>N2O,s</sub>",
        "symbols": [("EF<sub>N2O,s</sub>", "N2O emission factor", "kg N2O-N ha<sup>-1</sup> yr<sup>-1</sup>")],
    },
    "fire": {
        "title": "Emissions from fires on organic soils",
        "source": "2013 Wetlands Supplement Eq. 2.8 (Tables 2.6 and 2.7)",
        "html": "L<sub>fire</sub> = A<sub>burnt</sub> &times; MB &times; C<sub>f</sub> &times; G<sub>ef</sub> &times; 10<sup>&minus;3</sup>",
        "symbols": [("A<sub>burnt</sub>", "area of organic soil burnt", "ha"),
                    ("MB &times; C<sub>f</sub>", "fuel consumed (Table 2.6 gives the product)", "t dry matter ha<sup>-1</sup>"),
                    ("G<sub>ef</sub>", "emission factor (Table 2.7)", "g kg<sup>-1</sup> dry matter burnt"),
                    ("L<sub>fire</sub>", "emission of the gas, or of CO2-C for CO2", "t")],
    },
}
METHOD_OF_PATHWAY = {p: ("fire" if p.startswith("fire_") else p) for p in ROW_MODELS}


class RestrictedFetcher:
    """A WeasyPrint URL fetcher that serves only files inside one folder and refuses everything else."""

    def __init__(self, root: Path):
        from weasyprint.urls import URLFetcher

        self.root = Path(root).resolve()
        self.refused: list[str] = []
        self._inner = URLFetcher(allowed_protocols={"file"})

    def __call__(self, url, *args, **kwargs):  # older WeasyPrint calls the fetcher as a function
        return self.fetch(url, *args, **kwargs)

    def fetch(self, url, headers=None):
        parsed = urlparse(url)
        if parsed.scheme == "file":
            path = Path(unquote(parsed.path)).resolve()
            if path.is_relative_to(self.root) and path.is_file():
                return self._inner.fetch(url, headers)
        self.refused.append(url)
        raise ValueError(f"refused to fetch {url!r}: the report loads files from its template folder only")


def _years_shown(first: int, last: int) -> list[int]:
    years = [first] + [y for y in range(first + 1, last) if y % 5 == 0] + ([last] if last != first else [])
    return sorted(set(years))


def _fmt(value, digits: int = 1) -> str:
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return ""
    return f"{value:,.{digits}f}".replace("-", "\u2212")


def _pct(change: float | None) -> str:
    """A relative change (a fraction, :meth:`Aggregates.change`) as signed percent; blank without one."""
    if change is None:
        return ""
    return f"{change * 100:+.1f} %".replace("-", "\u2212")


def build_context(result, chart_svgs: dict[str, str] | None = None) -> dict:
    s = result.settings
    cats = result.categories
    em = result.emissions
    est = em[em["notation_key"] == ""]
    base, latest = s.first_year, s.last_year
    years = _years_shown(base, latest)
    ends = sorted({base, latest})  # one column when the inventory has one year
    gwp = result.gwp
    agg = result.aggregates

    # Totals, gases and categories from the aggregate stage (t CO2-eq, shown in kt).
    total_base, total_latest = agg.total_base_t / 1000, agg.total_latest_t / 1000
    total_change = agg.change(agg.total_base_t, agg.total_latest_t)
    by_gas = []
    for gas in agg.gas_co2eq_t.columns:
        b, l = float(agg.gas_co2eq_t.at[base, gas]), float(agg.gas_co2eq_t.at[latest, gas])
        by_gas.append({"gas": gas, "base": _fmt(b / 1000), "latest": _fmt(l / 1000), "change": _pct(agg.change(b, l)),
                       "raw_latest": l / 1000})
    categories = agg.category_co2eq_t
    change_t = agg.category_change_co2eq_t
    by_category = [{"code": c, "name": n, "base": _fmt(r[base] / 1000), "latest": _fmt(r[latest] / 1000),
                    "change": _pct(agg.change(r[base], r[latest])), "raw_latest": r[latest] / 1000,
                    "raw_change": change_t[(c, n)] / 1000, "share": agg.gross_share((c, n), latest)}
                   for (c, n), r in categories.iterrows() if r[base] or r[latest]]

    # Regions from the aggregate stage: the largest one by one, beyond REGIONS_SHOWN the rest on one line.
    top, rest, n_rest = result.aggregates.largest_regions()
    by_region = [{"region": name, "base": _fmt(r[base] / 1000), "latest": _fmt(r[latest] / 1000),
                  "change": _pct(agg.change(r[base], r[latest]))} for name, r in top.iterrows()]
    if rest is not None:
        by_region.append({"region": f"{n_rest:,} other regions (each in the workbook)", "base": _fmt(rest[base] / 1000),
                          "latest": _fmt(rest[latest] / 1000), "change": _pct(agg.change(rest[base], rest[latest]))})
    unverified_used = unchecked_factors(result.factors_used)
    factor_sources = _register(result)

    # Results: every category x gas row, kt CO2-eq (kt CO for CO) in the years shown.
    rows = []
    factors_by_cell = est.groupby(["category_code", "gas"])["factor_id"].agg(lambda x: sorted(set(x)))
    params_by_cell = est[est["parameter_id"] != ""].groupby(["category_code", "gas"])["parameter_id"].agg(
        lambda x: sorted(i for i in set(x) if not i.startswith("activity:")))  # values of the input data, not factors
    # The off-site CO2 of extracted peat, shown on its own line under its category (3.B.4.a.i).
    offsite_by_cell = agg.offsite_co2eq_t
    pathways_by_cell = est.groupby(["category_code", "gas"])["pathway"].agg(lambda x: sorted(set(x)))
    for (code, name, gas), g in cats.groupby(["category_code", "category_name", "gas"], sort=False):
        by_year = g.set_index("year")
        cells, keys = [], set()
        for y in years:
            r = by_year.loc[y]
            if r["notation_key"]:
                cells.append(r["notation_key"])
                keys.add(r["notation_key"])
            else:
                v = r["emission_t"] if gas == "CO" else r["co2eq_t"]
                cells.append(_fmt(v / 1000, 2))
        if keys == {"NO"} and not (g["notation_key"] != "NO").any():
            continue  # a category that never occurs is listed once, below the table
        ids = factors_by_cell.get((code, gas), []) + params_by_cell.get((code, gas), [])
        methods = sorted({METHOD_OF_PATHWAY[p] for p in pathways_by_cell.get((code, gas), [])})
        reason = _merge_reasons(g.loc[g["notation_key"] != "", "notation_reason"])
        tonnes = [_fmt(by_year.loc[y, "emission_t"], 1) if not by_year.loc[y, "notation_key"] else by_year.loc[y, "notation_key"]
                  for y in ends]
        part = None
        if (code, gas) in set(offsite_by_cell.index.droplevel("year")):
            part = {"label": "of which off-site CO2 of extracted peat",
                    "cells": [_fmt(offsite_by_cell.get((code, gas, y), 0.0) / 1000, 2) for y in years]}
        rows.append({"code": code, "name": name, "gas": gas, "cells": cells, "factor_ids": ids, "methods": methods,
                     "offsite": part,
                     "reason": reason, "tonnes": tonnes, "unit": "kt CO" if gas == "CO" else "kt CO2-eq",
                     "unverified": any(i in set(unverified_used["factor_id"]) for i in ids)})
    never = sorted(set(cats["category_code"]) - {r["code"] for r in rows})

    findings = result.findings
    # Methods: which strata use each equation.
    methods = []
    for key, eq in EQUATIONS.items():
        pathways = [p for p, m in METHOD_OF_PATHWAY.items() if m == key]
        rows_m = est[est["pathway"].isin(pathways)]
        if rows_m.empty:
            continue
        strata = rows_m.drop_duplicates(["land_use", "climate_zone", "soil_status", "nutrient_status",
                                         "drainage_depth", "subtype"])
        methods.append({**eq, "id": key, "pathways": pathways,
                        "strata": [_describe(r) for _, r in strata.iterrows()],
                        "categories": sorted(set(rows_m["category_code"]))})
    conv = s.mass_ratios
    conversions = [("C to CO<sub>2</sub>", basis_ratio("CO2-C", "CO2", conv)),
                   ("CH<sub>4</sub>-C to CH<sub>4</sub>", basis_ratio("CH4-C", "CH4", conv)),
                   ("N<sub>2</sub>O-N to N<sub>2</sub>O", basis_ratio("N2O-N", "N2O", conv))]
    alloc = em.drop_duplicates(["pathway", "land_use", "subtype", "remaining_or_converted", "category_code"])
    allocation = (alloc.groupby(["category_code", "land_use", "subtype", "remaining_or_converted"])["pathway"]
                  .agg(lambda x: ", ".join(sorted(set(x)))).reset_index().to_dict("records"))

    recalc = None
    if result.recalculation is not None:
        rc = result.recalculation["by_cell"]
        last_common = int(rc["year"].max())
        view = rc[rc["year"].isin([base, last_common])]
        view = view[(view["difference_co2eq_t"].abs() > 0.05) | (view["difference_t"].abs() > 1e-6)]
        recalc = {"file": result.recalculation["file"], "years": (base, last_common),
                  "previous_trend": f"{result.recalculation['previous_trend_pct']:+.2f} %".replace("-", "\u2212"),
                  "current_trend": f"{result.recalculation['current_trend_pct']:+.2f} %".replace("-", "\u2212"),
                  "rows": [{**r, **{k: _fmt(r[k] / 1000, 2) for k in ("previous_co2eq_t", "current_co2eq_t",
                                                                      "difference_co2eq_t", "activity_change",
                                                                      "factor_change", "strata_added", "strata_removed",
                                                                      "allocation_change")},
                            "pct": "" if np.isnan(r["difference_pct"]) else f"{r['difference_pct']:+.1f} %"}
                           for r in view.to_dict("records")],
                  "factor_parts": [(name.replace("_", " "), _fmt(value / 1000, 1)) for name, value in
                                   result.recalculation.get("factor_parts_t", {}).items()]}
    uncertainty = _uncertainty_context(result)
    keycat = _key_category_context(result)
    review = []
    if result.review_log is not None and not result.review_log.empty:
        for r in result.review_log.to_dict("records"):
            related = [f for f in result.finding_list if r["category_code"] and f.category_code == r["category_code"]
                       and f.severity in ("error", "warning") and f.check != "review_open"]
            shown = [f"{f.check}: {f.text}" for f in related[:3]]
            if len(related) > 3:
                shown.append(f"and {len(related) - 3} more findings on {r['category_code']} (see Input findings)")
            review.append({**r, "related": shown})
    paragraph = _trend_paragraph(total_base, total_latest, total_change, base, latest, by_category, by_gas,
                                 agg.area_ha)
    return {
        "s": s, "result": result, "base": base, "latest": latest, "years": years, "ends": ends,
        "single_year": base == latest,
        "version": result.version, "compile_date": result.compile_date,
        "hashes": sorted(result.input_hashes.items()),
        "total_base": _fmt(total_base), "total_latest": _fmt(total_latest), "total_change": _pct(total_change),
        "by_gas": by_gas, "by_category": by_category, "by_region": by_region, "paragraph": paragraph,
        "cautions": CAUTIONS, "unverified": sorted(unverified_used["factor_id"]),
        "unchecked_table": _unchecked_table(unverified_used),
        "rows": rows, "never": never, "notation_keys": NOTATION_KEYS,
        "charts": chart_svgs if chart_svgs is not None else charts.all_charts(result),
        "findings": _findings_context(findings), "findings_total": len(findings),
        "methods": methods, "conversions": [(n, f"{v:.5f}") for n, v in conversions],
        "gwp": sorted(gwp.items()), "allocation": allocation, "register": factor_sources,
        "references": _references(result),
        "settings_table": s.as_table(), "recalc": recalc, "review": review,
        "uncertainty": uncertainty, "keycat": keycat, "qaqc_checks": _qaqc_checks(),
        "glossary": GLOSSARY, "gap_fills": _gap_fill_context(result),
    }


FINDINGS_SHOWN = 3  # per check and severity in the report; the workbook's findings sheet has every one
SEVERITY_ORDER = {"error": 0, "warning": 1, "info": 2}


def _findings_context(findings: pd.DataFrame) -> list[dict]:
    """Findings grouped by severity and check: the first few of each, then how many more."""
    if findings.empty:
        return []
    order = findings.assign(_sev=findings["severity"].map(SEVERITY_ORDER).fillna(3))
    out = []
    for (_, check), group in order.groupby(["_sev", "check"], sort=True):
        records = group.drop(columns="_sev").to_dict("records")
        out.append({"severity": records[0]["severity"], "check": check, "count": len(records),
                    "shown": records[:FINDINGS_SHOWN], "more": max(len(records) - FINDINGS_SHOWN, 0)})
    return out


def _year_ranges(years) -> str:
    """2001, 2002, 2003, 2007 -> '2001-2003, 2007'."""
    years = sorted(int(y) for y in years)
    runs, start = [], years[0]
    for prev, year in zip(years, years[1:] + [None]):
        if year is None or year != prev + 1:
            runs.append(str(start) if start == prev else f"{start}\u2013{prev}")
            start = year
    return ", ".join(runs)


def _gap_fill_context(result) -> list[dict]:
    """One line per stratum, technique and basis: which years were filled and how."""
    fills = result.gap_fills
    if fills.empty:
        return []
    from ..timeseries import SERIES_KEYS as keys

    # Years of one gap share the basis text except for Eq. 5.2, which names each year's driver value: group
    # those by series instead.
    fills = fills.assign(_basis=np.where(fills["activity_source"] == "surrogate",
                                         fills["fill_basis"].str.split(":").str[0] + ": y_t x s_0 / s_t from the "
                                         "nearest reported year", fills["fill_basis"]))
    out = []
    for group, g in fills.groupby(keys + ["activity_source", "_basis"], sort=True):
        stratum = ", ".join(v for v in group[:len(keys)] if v)
        out.append({"stratum": stratum, "source": group[len(keys)], "years": _year_ranges(g["year"]),
                    "basis": group[-1], "area": _fmt(g["area_ha"].sum() / len(g))})
    return out


def _merge_reasons(reasons: pd.Series) -> str:
    """Distinct reasons of a row over the years shown, with "reported under" codes merged."""
    parts, under = [], set()
    for text in reasons:
        for part in str(text).split("; "):
            if part.startswith("reported under "):
                under.update(code.strip() for code in part[len("reported under "):].split(","))
            elif part and part not in parts:
                parts.append(part)
    if under:
        parts.append("IE: reported under " + ", ".join(sorted(under)))
    return "; ".join(parts)


def _describe(r) -> str:
    parts = [r["climate_zone"], r["land_use"].replace("_", " "), r["soil_status"]]
    for key in ("nutrient_status", "drainage_depth", "subtype"):
        if r[key]:
            parts.append(r[key].replace("_", " "))
    return ", ".join(parts)


def _unchecked_table(unchecked: pd.DataFrame) -> list[dict]:
    """The cautions' table of unchecked factors in use: published table, row, value."""
    rows = unchecked.sort_values(["table", "row_label", "factor_id"])
    return [{"id": r["factor_id"], "table": r["table"], "row": r["row_label"],
             "value": f"{r['value']:g} {r['unit']}"} for _, r in rows.iterrows()]


def _register(result) -> list[dict]:
    f = result.factors_used
    em = result.emissions[result.emissions["notation_key"] == ""]
    use = pd.concat([em[["factor_id", "category_code", "land_use", "climate_zone", "soil_status", "nutrient_status",
                         "drainage_depth", "subtype"]],
                     em.loc[em["parameter_id"] != "", ["parameter_id", "category_code", "land_use", "climate_zone",
                                                       "soil_status", "nutrient_status", "drainage_depth", "subtype"]]
                     .rename(columns={"parameter_id": "factor_id"})])
    out = []
    reg = result.library.register.set_index("factor_id")
    replaced = em[(em["default_factor_id"] != em["factor_id"]) & (em["default_factor_id"] != "")]
    replaced = replaced.groupby("factor_id")["default_factor_id"].agg(lambda x: sorted(set(x)))
    for _, row in f.sort_values(["factor_set", "factor_id"]).iterrows():
        u = use[use["factor_id"] == row["factor_id"]].drop_duplicates(
            ["land_use", "climate_zone", "soil_status", "nutrient_status", "drainage_depth", "subtype"])
        interval = "" if pd.isna(row["ci_low"]) else f"{row['ci_low']:g} to {row['ci_high']:g}"
        defaults = []
        for d in replaced.get(row["factor_id"], []):
            if d in reg.index:
                defaults.append(f"{d} ({reg.loc[d, 'value']:g} {reg.loc[d, 'unit']})")
        out.append({
            "id": row["factor_id"], "quantity": row["quantity"], "value": f"{row['value']:g}", "unit": row["unit"],
            "interval": interval, "tier": row["tier"],
            "agency_check": row.get("agency_check", "not yet checked"),
            "unchecked": row["factor_set"] != "override" and row.get("agency_check", "") != "agrees",
            "citation": row["citation"], "ref": row["source_id"] or "override",
            "locator": ", ".join(x for x in (row["table"], row["row_label"],
                                             f"p. {row['page']}" if row["page"] not in ("", "not recorded") else "")
                                 if x),
            "strata": [_describe(r) for _, r in u.iterrows()],
            "categories": sorted(set(u["category_code"])),
            "is_override": row["factor_set"] == "override", "replaces": defaults,
            "region": row["region"], "years": (f"{int(row['first_year'])}-{int(row['last_year'])}"
                                               if row["factor_set"] == "override" else ""),
            "review": row.get("review_result", ""), "reviewed_by": row.get("reviewed_by", ""),
        })
    return out


def _uncertainty_context(result) -> dict | None:
    unc = result.uncertainty
    if unc is None:
        return None
    from ..uncertainty import METHOD_RULES

    s = result.settings
    out = {"approach": unc.approach, "rules": list(METHOD_RULES.items()), "rows": [], "total": [], "trend": None}
    a1 = unc.approach1
    mc = unc.monte_carlo
    for year in sorted({s.first_year, s.last_year}):
        entry = {"year": year}
        if a1 is not None:
            t = a1.total[a1.total["year"] == year].iloc[0]
            entry.update(a1_pct=f"\u00b1{t['uncertainty_pct']:.1f} %", a1_shared=f"\u00b1{t['uncertainty_pct_shared_inputs']:.1f} %",
                         estimate=_fmt(t["co2eq_t"] / 1000))
        if mc is not None:
            m = mc.summary[(mc.summary["year"] == year) & (mc.summary["category_code"] == "total")].iloc[0]
            entry.update(mc=f"\u2212{m['minus_pct']:.1f} % / +{m['plus_pct']:.1f} %", mean=_fmt(m["mean"] / 1000),
                         p2_5=_fmt(m["p2_5"] / 1000), p97_5=_fmt(m["p97_5"] / 1000))
        out["total"].append(entry)
    if a1 is not None:
        tr = a1.trend.iloc[0]
        out["trend"] = {"pct": f"{tr['trend_pct']:+.1f} %", "a1": f"\u00b1{tr['trend_uncertainty_pp']:.1f}",
                        "a1_shared": f"\u00b1{tr['trend_uncertainty_pp_shared_inputs']:.1f}"}
        if mc is not None:
            mt = mc.trend[(mc.trend["category_code"] == "total")]
            if not mt.empty:
                mt = mt.iloc[0]
                out["trend"]["mc"] = f"{mt['p2_5_pct']:+.1f} % to {mt['p97_5_pct']:+.1f} %"
        top = a1.variance_shares.head(3)  # the latest year's largest parts of the variance (uncertainty stage)
        out["drivers"] = [f"{r['category_code']} {r['gas']} ({r['variance_share_pct']:.0f} % of the variance)"
                          for r in top.to_dict("records")]
    if mc is not None:
        rows = mc.summary[(mc.summary["year"] == s.last_year) & (mc.summary["category_code"] != "total")]
        out["rows"] = [{"code": r["category_code"], "gas": r["gas"], "unit": r["unit"], "estimate": _fmt(r["estimate"], 1),
                        "interval": f"\u2212{r['minus_pct']:.0f} % / +{r['plus_pct']:.0f} %"} for _, r in rows.iterrows()]
        out["iterations"] = mc.iterations
        out["seed"] = mc.seed
        out["converged"] = bool(mc.convergence["converged"].all()) if "converged" in mc.convergence else True
    return out


def _key_category_context(result) -> dict | None:
    kc = result.key_categories
    if kc is None:
        return None
    table = kc.table
    if table.empty:  # nothing estimated (e.g. every area zero): no category to assess
        return {"note": kc.note, "rows": [], "names": ""}
    key = table[table["key"]]
    return {"note": kc.note,
            "rows": [{"run": r["run"], "code": r["category_code"], "gas": r["gas"],
                      "level_base": f"{r['level_base'] * 100:.1f}", "level_latest": f"{r['level_latest'] * 100:.1f}",
                      "trend": f"{r['trend_share'] * 100:.1f}" if pd.notna(r.get("trend_share")) else "",
                      "assessments": r["assessments"], "tier1": bool(r["tier1_flag"])} for _, r in key.iterrows()],
            "names": ", ".join(f"{r['category_code']} {r['gas']}" for _, r in key.drop_duplicates(["category_code", "gas"]).iterrows())}


def _qaqc_checks() -> list[dict]:
    from ..qaqc import CHECKS

    return [{"check": c.check, "severity": c.severity, "description": c.description, "source": c.source}
            for c in CHECKS]


def _references(result) -> list[tuple[str, str]]:
    used = set(result.factors_used["source_id"]) - {""}
    src = result.library.sources
    return [(sid, cit) for sid, cit in zip(src["source_id"], src["citation"]) if sid in used]


def _trend_paragraph(total_base, total_latest, change, base, latest, by_category, by_gas, area) -> str:
    """A short paragraph written from the numbers: level, change, largest contributors and changes."""
    if not by_category:
        return "No emissions or removals were estimated."
    direction = "rose" if total_latest > total_base else "fell" if total_latest < total_base else "stayed"
    change = _pct(change)
    top = max(by_category, key=lambda r: abs(r["raw_latest"]))
    share = top["share"] * 100
    mover = max(by_category, key=lambda r: abs(r["raw_change"]))
    gas_top = max(by_gas, key=lambda r: abs(r["raw_latest"]))
    rewet_b, rewet_l = float(area.at[base, "rewetted"]), float(area.at[latest, "rewetted"])
    drained_b, drained_l = float(area.at[base, "drained"]), float(area.at[latest, "drained"])
    if base == latest:
        return (f"Net emissions of organic soils were {_fmt(total_latest)} kt CO2-eq in {latest}. "
                f"The largest category is {top['code']} {top['name']} ({_fmt(top['raw_latest'])} kt CO2-eq, "
                f"{share:.0f} % of the gross total); {gas_top['gas']} is the largest gas. "
                f"Drained area was {_fmt(drained_l / 1000)} thousand ha and rewetted area "
                f"{_fmt(rewet_l / 1000)} thousand ha.")
    if direction == "stayed":
        level = f"stayed at {_fmt(total_latest)} kt CO2-eq from {base} to {latest}. "
    else:
        level = (f"{direction} from {_fmt(total_base)} kt CO2-eq in {base} to "
                 f"{_fmt(total_latest)} kt CO2-eq in {latest} ({change}). ")
    text = (f"Net emissions of organic soils {level}"
            f"The largest category in {latest} is {top['code']} {top['name']} ({_fmt(top['raw_latest'])} kt CO2-eq, "
            f"{share:.0f} % of the gross total); {gas_top['gas']} is the largest gas. "
            f"The largest change since {base} is in {mover['code']} {mover['name']} "
            f"({'+' if mover['raw_change'] >= 0 else chr(8722)}{_fmt(abs(mover['raw_change']))} kt CO2-eq). ")
    text += (f"Drained area went from {_fmt(drained_b / 1000)} to {_fmt(drained_l / 1000)} thousand ha and rewetted "
             f"area from {_fmt(rewet_b / 1000)} to {_fmt(rewet_l / 1000)} thousand ha.")
    return text


GLOSSARY = [
    ("stratum", "one combination of region, climate zone, land use, soil status, nutrient status, drainage depth, "
                "subtype and remaining/converted status, with its area in a year"),
    ("pathway", "a route of emission: on-site CO2, CO2 from dissolved organic carbon (DOC), CH4 from the soil "
                "surface, CH4 from ditches, N2O, and the gases of fires"),
    ("Tier 1 default", "a factor printed in the IPCC guidance for use where no national data exist"),
    ("Tier 2 / Tier 3", "country- or region-specific factors / models and measurements"),
    ("CO2-eq", "mass of a gas times its 100-year global warming potential (GWP100)"),
    ("95 % interval", "the range printed with a factor, within which the true mean lies with 95 % probability"),
    ("DOC", "dissolved organic carbon, exported by drainage water and mostly emitted as CO2 downstream"),
    ("agency check", "the agency's status of a shipped factor, from its factor review log: agrees, differs "
                     "(an error while the factor is used) or not yet checked; own factor for an override"),
]


def side_by_side(items) -> list[tuple]:
    """A long narrow list as rows of two: the first half down the left, the second down the right."""
    items = list(items)
    half = (len(items) + 1) // 2
    return [(items[i], items[half + i] if half + i < len(items) else None) for i in range(half)]


def render_html(result, chart_svgs: dict[str, str] | None = None) -> str:
    env = Environment(loader=FileSystemLoader(str(resource_dir("report_templates"))),
                      autoescape=select_autoescape(["html", "j2"]), trim_blocks=True, lstrip_blocks=True)
    env.filters["side_by_side"] = side_by_side
    context = build_context(result, chart_svgs)
    from .submission import report_context

    context["submission"] = report_context(result)
    css = (resource_dir("report_templates") / "report.css").read_text(encoding="utf-8")
    return env.get_template("report.html.j2").render(**context, css=css)


def write_report(result, folder: Path, progress=None) -> RestrictedFetcher:
    """Write report.html and report.pdf; return the fetcher (its ``refused`` list names what was refused)."""
    return layout_report(result, folder, progress)[1]


def layout_report(result, folder: Path, progress=None):
    """Write report.html and report.pdf; return the laid-out document (:func:`write_archive` reuses it: the
    layout is done once) and the fetcher."""
    from weasyprint import HTML

    from ..progress import stage

    stage(progress, "laying out the report")
    html = render_html(result)
    (folder / "report.html").write_text(html, encoding="utf-8")
    fetcher = RestrictedFetcher(resource_dir("report_templates"))
    document = HTML(string=html, base_url=str(resource_dir("report_templates")) + "/", url_fetcher=fetcher).render()
    with _fixed_font_dates(result):
        document.write_pdf(folder / "report.pdf", pdf_identifier=_identifier(result))
    return document, fetcher


def write_archive(result, folder: Path, document=None, progress=None) -> None:
    """report-archive.pdf: PDF/A-3b carrying emissions.csv, datapackage.json and manifest.json as attachments.

    ``document`` is the report's layout from :func:`layout_report`; without it, report.html is laid out again.
    """
    from weasyprint import HTML, Attachment

    from ..progress import stage

    stage(progress, "writing the PDF/A-3b archive")
    if document is None:
        html = (folder / "report.html").read_text(encoding="utf-8")
        fetcher = RestrictedFetcher(resource_dir("report_templates"))
        document = HTML(string=html, base_url=str(resource_dir("report_templates")) + "/", url_fetcher=fetcher).render()
    stamp = _dt.datetime.fromisoformat(result.compile_date + "T00:00:00+00:00")
    attachments = []
    for name, description in (("emissions.csv", "tidy result table"),
                              ("datapackage.json", "table schema of emissions.csv"),
                              ("manifest.json", "run manifest")):
        attachments.append(Attachment(string=(folder / name).read_bytes(), name=name, description=description,
                                      created=stamp, modified=stamp, relationship="Data"))
    with _fixed_font_dates(result):
        document.write_pdf(folder / "report-archive.pdf", pdf_variant="pdf/a-3b", attachments=attachments,
                           pdf_identifier=_identifier(result), finisher=_associated_files_once)


def _associated_files_once(document, pdf) -> None:
    """The catalogue's /AF array with each attachment once (WeasyPrint 70 lists every file spec twice)."""
    import pydyf

    files = pdf.catalog.get("AF")
    if files:
        pdf.catalog["AF"] = pydyf.Array(dict.fromkeys(files))


@contextlib.contextmanager
def _fixed_font_dates(result):
    """Font subsets made by fontTools carry a modification time (the ``head`` table), by default the clock's.

    fontTools takes it from SOURCE_DATE_EPOCH when set (the reproducible-builds convention): set to the
    compile date while the PDF is written, so two runs give the same bytes.
    """
    stamp = _dt.datetime.fromisoformat(result.compile_date + "T00:00:00+00:00")
    before = os.environ.get("SOURCE_DATE_EPOCH")
    os.environ["SOURCE_DATE_EPOCH"] = str(int(stamp.timestamp()))
    try:
        yield
    finally:
        if before is None:
            os.environ.pop("SOURCE_DATE_EPOCH", None)
        else:
            os.environ["SOURCE_DATE_EPOCH"] = before


def _identifier(result) -> bytes:
    import hashlib

    digest = hashlib.sha256("|".join(f"{k}={v}" for k, v in sorted(result.input_hashes.items())).encode())
    return digest.hexdigest()[:32].encode()
