"""The methods chapter of the national inventory report, per category, written from the compiled numbers.

One text, three renderings: Markdown (``methods_chapter.md``), a Word document
(``methods_chapter.docx``, python-docx, tables as real tables) and the report's
appendix. The text is a list of blocks made once by :func:`chapter` (at the end of
:func:`compiler.compile_inventory`, kept as ``result.methods_chapter``); the renderers
only lay them out. Every number comes from the result: its aggregates
(``result.aggregates``: category emissions and areas), its reporting tables
(``result.reporting_tables``: the figures of the workbook's timeseries_categories
sheet), its recalculation totals and its analyses; the chapter sums no emission or area.

Per category: description (areas, emissions, trend, share), methodological
issues (equations, factors with sources and tiers, overrides with citations,
allocation), uncertainty and time-series consistency (gap filling),
category-specific QA/QC (findings and review items), recalculations (with their
causes), planned improvements (key categories on Tier 1, factors not yet
verified).
"""

from __future__ import annotations

import datetime as _dt
import io
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .allocation_schemes import SCHEME_NAMES
from .factors import unchecked_factors

SECTIONS = ("Description", "Methodological issues", "Uncertainty and time-series consistency",
            "Category-specific QA/QC", "Recalculations", "Planned improvements")
FINDINGS_LISTED = 3
TIER1 = "Tier 1 default"
CHAPTER_COLUMNS = ["year", "region", "input_row", "land_use", "climate_zone", "soil_status", "nutrient_status",
                   "drainage_depth", "subtype", "pathway", "equation", "factor_id", "activity_source"]


@dataclass
class Block:
    kind: str  # "h1", "h2", "h3", "p", "table"
    text: str = ""
    header: list[str] = field(default_factory=list)
    rows: list[list[str]] = field(default_factory=list)


def _kt(value) -> str:
    """kt with three decimals, as the workbook's number format shows it (a notation key as it is)."""
    if isinstance(value, str):
        return value
    if value is None or np.isnan(value):
        return ""
    return f"{value:,.3f}"


def _pct(value) -> str:
    return "" if value is None or np.isnan(value) else f"{value:+.1f} %"


def _join(items) -> str:
    items = list(items)
    if len(items) <= 1:
        return "".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]


def reported_categories(result) -> list[str]:
    """Categories with a number in at least one year, in the order of the reporting table."""
    cats = result.categories
    has = set(cats.loc[cats["emission_t"].notna(), "category_code"])
    return [c for c in dict.fromkeys(cats["category_code"].tolist()) if c in has]


def chapter(result) -> list[Block]:
    """The chapter's blocks (made once by :func:`compiler.compile_inventory`, which keeps them as
    ``result.methods_chapter``; the renderings read that field)."""
    s = result.settings
    tables = result.reporting_tables
    base, latest = tables.base_year, tables.latest_year
    blocks = [Block("h1", f"Methods: organic soils - {s.name}")]
    scheme = SCHEME_NAMES.get(s.allocation, s.allocation)
    blocks.append(Block("p", (
        f"This chapter describes the estimates of emissions and removals from drained and rewetted organic soils "
        f"for {base}-{latest}, compiled on {result.compile_date} with factor set {s.factor_set}, GWP100 values of "
        f"{s.gwp}, allocated to the {scheme}. Land converted to another use is reported as converted for "
        f"{s.transition_years} years after the conversion where the activity data give the year of conversion.")))
    blocks.append(Block("p", _allocation_note(s.allocation)))
    gas_series = tables.gas_series.set_index(["quantity", "unit"])
    total_latest = gas_series.loc[("Total", "kt CO2-eq"), str(latest)]
    for code in reported_categories(result):
        blocks.extend(_category(result, tables, code, total_latest))
    return blocks


def _allocation_note(scheme: str) -> str:
    here = ("reported under the land category where the soils lie (3.B.1)" if scheme == "ipcc2006"
            else "reported in the table of drainage and rewetting of organic soils of forest land, 4(II).A")
    return (f"N2O of drained forest soils is {here}. The two allocation schemes place it differently: with the 2006 "
            "IPCC category codes it stays with the forest land category, while N2O of drained cropland and "
            "grassland soils goes to 3.C.4 (direct N2O from managed soils); in the common reporting tables of the "
            "enhanced transparency framework it goes to Table 4(II) of the land sector, while N2O of drained "
            "cropland and grassland soils goes to the agriculture sector (3.D.1.f, cultivation of organic soils). "
            "Fire gases (3.C.1 or Table 4(V)) and off-site CO2 from dissolved organic carbon (with the land "
            "category or Table 4(II)) differ likewise; the totals are the same under both schemes.")


def _category(result, tables, code: str, total_latest: float) -> list[Block]:
    s = result.settings
    base, latest = tables.base_year, tables.latest_year
    cats = result.categories
    mine = cats[cats["category_code"] == code]
    name = mine["category_name"].iloc[0]
    series = tables.category_series[tables.category_series["category_code"] == code]
    agg = result.aggregates
    area = agg.category_area_ha.loc[code].div(1000.0)
    has_eq = (code, name) in agg.category_co2eq_t.index  # an estimate of a gas with a GWP in some year
    eq = agg.category_co2eq_t.loc[(code, name)].div(1000.0) if has_eq else pd.Series(dtype=float)
    eq_base, eq_latest = eq.get(base, 0.0), eq.get(latest, 0.0)
    blocks = [Block("h2", f"{code} {name}"), Block("h3", SECTIONS[0])]
    sentence = f"{name} ({code}) "
    if not np.isnan(area.get(latest, np.nan)):
        sentence += f"covers {area[latest]:,.2f} kha of organic soils in {latest}"
        sentence += (f" ({area[base]:,.2f} kha in {base}). " if not np.isnan(area.get(base, np.nan))
                     else f" (none in {base}). ")
    else:
        sentence += f"has no organic-soil area in {latest}. "
    if has_eq:
        sentence += f"Emissions were {_kt(eq_latest)} kt CO2-eq in {latest} and {_kt(eq_base)} kt CO2-eq in {base}"
        if eq_base:
            sentence += f", a change of {_pct((eq_latest - eq_base) / abs(eq_base) * 100)}"
        if total_latest:
            sentence += f"; {eq_latest / total_latest * 100:.1f} % of the total of these estimates in {latest}"
        sentence += "."
    blocks.append(Block("p", sentence))
    header = ["Gas", "Unit", str(base), str(latest), "Trend"]
    rows = [[r["gas"], r["unit"], _kt(r[str(base)]), _kt(r[str(latest)]), _pct(r["trend_pct"])]
            for r in series.to_dict("records")]
    blocks.append(Block("table", header=header, rows=rows))

    em = result.emissions
    mask = ((em["category_code"] == code) & (em["notation_key"] == "")).to_numpy(dtype=bool)
    rows_c = em.loc[mask, CHAPTER_COLUMNS]  # the columns read below, not the whole results table
    blocks.append(Block("h3", SECTIONS[1]))
    equations = sorted(e for e in rows_c["equation"].unique() if e)
    pathways = sorted(rows_c["pathway"].unique())
    land = sorted(rows_c["land_use"].unique())
    text = (f"Estimated pathways: {_join(p.replace('_', ' ') for p in pathways)}, on "
            f"{_join(u.replace('_', ' ') for u in land)}. ")
    if equations:
        text += f"Equations: {_join(equations)}. "
    text += f"Allocated to {code} under the {SCHEME_NAMES.get(s.allocation, s.allocation)}."
    blocks.append(Block("p", text))
    used = result.factors_used[result.factors_used["factor_id"].isin(rows_c["factor_id"].unique())]
    if not used.empty:
        frows = [[r["factor_id"], f"{r['value']:g} {r['unit']}", r["tier"],
                  (f"{r['source_id']}, {r['table']}" if r["table"] else r["source_id"]) or r["citation"][:80]]
                 for r in used.sort_values("factor_id").to_dict("records")]
        blocks.append(Block("table", header=["Factor", "Value", "Tier", "Source"], rows=frows))
    overrides = used[used["tier"] != TIER1]
    if not overrides.empty:
        cited = [f"{r['factor_id']} ({r['tier']}; {r['citation']})" for r in overrides.to_dict("records")]
        blocks.append(Block("p", f"National factors replace the defaults: {_join(cited)}."))
    else:
        blocks.append(Block("p", "Only Tier 1 default factors are used."))

    blocks.append(Block("h3", SECTIONS[2]))
    blocks.append(Block("p", _uncertainty_text(result, code, latest)))
    blocks.append(Block("p", _gap_fill_text(rows_c)))

    blocks.append(Block("h3", SECTIONS[3]))
    blocks.append(Block("p", _qaqc_text(result, code)))

    blocks.append(Block("h3", SECTIONS[4]))
    blocks.append(Block("p", _recalculation_text(result, code)))

    blocks.append(Block("h3", SECTIONS[5]))
    blocks.append(Block("p", _improvement_text(result, code, used)))
    return blocks


def _uncertainty_text(result, code, latest) -> str:
    unc = result.uncertainty
    if unc is None or unc.approach1 is None:
        return "No uncertainty analysis was run with this compile."
    cells = unc.approach1.cells
    mine = cells[(cells["category_code"] == code) & (cells["year"] == latest)]
    if mine.empty:
        return f"No Approach 1 uncertainty for {latest}."
    parts = [f"{r['gas']} +/-{r['uncertainty_pct']:.1f} % (activity {r['activity_pct']:.1f} %, factor "
             f"{r['factor_pct']:.1f} %)" for r in mine.to_dict("records") if not np.isnan(r["uncertainty_pct"])]
    return (f"Approach 1 uncertainty (2006 IPCC Guidelines Vol. 1 Eq. 3.1 and 3.2) in {latest}, 95 % half-width: "
            f"{_join(parts)}.")


def _gap_fill_text(rows_c: pd.DataFrame) -> str:
    filled = rows_c[rows_c["activity_source"] != "reported"].drop_duplicates(["year", "region", "input_row",
                                                                              "land_use", "climate_zone",
                                                                              "soil_status", "nutrient_status",
                                                                              "drainage_depth", "subtype"])
    if filled.empty:
        return "The time series is consistent: the activity data cover every year and no gap was filled."
    counts = filled["activity_source"].value_counts().sort_index()
    counts = counts[counts > 0]  # a categorical column counts its unused categories too
    used = _join(f"{n} {k}" for k, n in counts.items())
    return (f"{len(filled)} stratum-years were gap-filled with the techniques of 2006 IPCC Guidelines Vol. 1 Ch. 5 "
            f"({used}); the gap_filling sheet lists each with its basis.")


def _qaqc_text(result, code) -> str:
    related = [f for f in result.finding_list if f.severity in ("error", "warning")
               and (f" {code} " in f" {f.message} " or f.message.startswith(code + " ") or f"({code}," in f.message)]
    text = ("The general QC checks of 2006 IPCC Guidelines Vol. 1 Ch. 6 ran on every row: row arithmetic, implied "
            "emission factors against their strata, area balance, time-series steps and factor sources. ")
    if related:
        by_check = pd.Series([f.check for f in related]).value_counts().sort_index()
        many = f"{len(related)} findings concern" if len(related) > 1 else "1 finding concerns"
        text += (f"{many} this category ({_join(f'{n} {k}' for k, n in by_check.items())}); "
                 "for example: " + "; ".join(f.message for f in related[:FINDINGS_LISTED]) + ". ")
    else:
        text += "None of their findings concerns this category. "
    log = result.review_log
    if log is not None and not log.empty:
        for r in log[log["category_code"] == code].to_dict("records"):
            text += f"Review finding {r['id']} ({r['principle']}, {r['year_raised']}) is {r['status'].replace('_', ' ')}"
            text += f": {r['response']} " if r.get("response") else ". "
    return text.strip()


def _recalculation_text(result, code) -> str:
    if result.recalculation is None:
        return "No previous submission was given; recalculations are not assessed."
    rc = result.recalculation["by_cell"]
    mine = rc[rc["category_code"] == code]
    if mine.empty or not (mine["difference_co2eq_t"].abs() > 0.05).any():
        return f"The estimates equal those of the previous submission ({result.recalculation['file']})."
    year = int(mine["year"].max())
    last = result.recalculation["by_category"].loc[(code, year)]  # summed over the gases [t CO2-eq]
    diff = last["difference_co2eq_t"] / 1000.0
    causes = [c for c in ("activity_change", "gwp_change", "factor_set_change", "shipped_value_change",
                          "override_change", "strata_added", "strata_removed", "allocation_change") if c in last]
    if "gwp_change" not in last:
        causes.insert(1, "factor_change")
    detail = [(c, last[c] / 1000.0) for c in causes]
    parts = _join(f"{c.replace('_', ' ')} {v:+,.3f}" for c, v in detail if abs(v) >= 0.0005)
    return (f"Against the previous submission ({result.recalculation['file']}), the estimate of {year} changes by "
            f"{diff:+,.3f} kt CO2-eq: {parts or 'no single cause above 0.0005 kt'} (kt CO2-eq; the recalculations "
            "sheet has every year, gas and cause).")


def _improvement_text(result, code, used) -> str:
    items = []
    kc = result.key_categories
    if kc is not None and not kc.table.empty:
        key = kc.table[(kc.table["category_code"] == code) & kc.table["key"].astype(bool)
                       & kc.table["tier1_flag"].astype(bool)]
        gases = sorted(set(key["gas"]))
        if gases:
            items.append(f"{code} is a key category for {_join(gases)} and rests on Tier 1 defaults: moving to "
                         "country-specific factors (Tier 2 or higher) is good practice")
    unverified = unchecked_factors(used)
    if not unverified.empty:
        n = len(unverified)
        items.append(f"{n} shipped {'factors' if n > 1 else 'factor'} in use {'are' if n > 1 else 'is'} not yet "
                     "checked by the agency against its copy of the guidance (factor review log) and "
                     f"{'are' if n > 1 else 'is'} to be checked before official use "
                     f"({_join(sorted(unverified['factor_id']))})")
    if not items:
        return "No improvement is planned for this category."
    return "; ".join(items) + "."


# --- renderings -----------------------------------------------------------------------------------


def to_markdown(blocks: list[Block]) -> str:
    out = []
    for b in blocks:
        if b.kind in ("h1", "h2", "h3"):
            out.append("#" * int(b.kind[1]) + " " + b.text)
        elif b.kind == "p":
            out.append(b.text)
        else:
            cells = [[c.replace("|", "\\|") for c in row] for row in [b.header, *b.rows]]
            lines = ["| " + " | ".join(cells[0]) + " |", "|" + "|".join(" --- " for _ in b.header) + "|"]
            lines += ["| " + " | ".join(r) + " |" for r in cells[1:]]
            out.append("\n".join(lines))
    return "\n\n".join(out) + "\n"


def to_html(blocks: list[Block]) -> list[dict]:
    """The blocks for the report's template (which escapes the text)."""
    shift = {"h1": "h3", "h2": "h3", "h3": "h4"}
    return [{"kind": shift.get(b.kind, b.kind), "text": b.text, "header": b.header, "rows": b.rows}
            for b in blocks if b.kind != "h1"]


def write_docx(blocks: list[Block], path: Path, compile_date: str) -> None:
    """The Word document; byte-identical for identical blocks and compile date."""
    from docx import Document

    document = Document()
    stamp = _dt.datetime.fromisoformat(compile_date + "T00:00:00")
    props = document.core_properties
    props.author = "histosol"
    props.created = props.modified = props.last_printed = stamp
    props.revision = 1
    for b in blocks:
        if b.kind in ("h1", "h2", "h3"):
            document.add_heading(b.text, level=int(b.kind[1]) - 1 if b.kind != "h1" else 0)
        elif b.kind == "p":
            document.add_paragraph(b.text)
        else:
            table = document.add_table(rows=1, cols=len(b.header))
            table.style = "Table Grid"
            for cell, text in zip(table.rows[0].cells, b.header):
                cell.text = text
                for run in cell.paragraphs[0].runs:
                    run.bold = True
            for row in b.rows:  # a row's cells at a time (table.cell(i, j) walks the whole table each call)
                for cell, text in zip(table.add_row().cells, row):
                    cell.text = text
    buffer = io.BytesIO()
    document.save(buffer)
    _fixed_zip(buffer.getvalue(), stamp, path)


def _fixed_zip(data: bytes, stamp: _dt.datetime, path: Path) -> None:
    """The package with every entry dated ``stamp`` (a zip stores the time of writing otherwise)."""
    with zipfile.ZipFile(io.BytesIO(data)) as src, zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            entry = zipfile.ZipInfo(info.filename, date_time=stamp.timetuple()[:6])
            entry.compress_type = zipfile.ZIP_DEFLATED
            entry.external_attr = info.external_attr
            dst.writestr(entry, src.read(info.filename))


def write_chapter(result, folder: Path) -> list[Block]:
    """methods_chapter.md and methods_chapter.docx in ``folder``; returns the blocks."""
    blocks = result.methods_chapter
    (folder / "methods_chapter.md").write_text(to_markdown(blocks), encoding="utf-8")
    write_docx(blocks, folder / "methods_chapter.docx", result.compile_date)
    return blocks
