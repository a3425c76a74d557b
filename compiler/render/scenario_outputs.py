"""Outputs of `histosol scenarios`: tidy CSVs, a workbook and a scenario report (same templates folder)."""

from __future__ import annotations

import io
from pathlib import Path

import matplotlib.pyplot as plt
import pandas as pd
from jinja2 import Environment, FileSystemLoader, select_autoescape
from openpyxl import Workbook

from ..resources import resource_dir
from . import charts
from ..errors import findings_table
from .outputs import atomic_folder, input_files
from .report import RestrictedFetcher
from .workbook import FORMATS, finish_workbook, sheet_records, write_sheet

SCENARIO_CAUTIONS = [
    ("Scenarios are not forecasts.", "They show what the stated assumptions imply, on the same strata and factors as "
     "the inventory."),
    ("Tier 1 defaults are coarse.", "Rewetted-soil factors in particular span wide intervals; site conditions decide."),
    ("Rewetting works.", "Rewetting needs hydrological design, permits and compliance with local codes, carried out "
     "by qualified, licensed professionals."),
    ("Methane peaks.", "Methane peaks can follow flooding of nutrient-rich topsoil and fresh biomass; site design "
     "(topsoil removal, water-level management) can reduce them."),
]
COLOURS = ["#2f4858", "#9b6b43", "#1f6f5c", "#c8a434", "#7a1f0a", "#3f7fa8", "#777777"]
STYLES = ["-", "--", "-.", ":", (0, (5, 1)), (0, (3, 1, 1, 1)), (0, (1, 1))]


def _lines(frame: pd.DataFrame, column: str, ylabel: str, title: str, scale: float = 1.0) -> str:
    fig, ax = plt.subplots(figsize=(6.2, 2.8))
    for i, (name, g) in enumerate(frame.groupby("scenario", sort=False)):
        ax.plot(g["year"], g[column] * scale, color=COLOURS[i % len(COLOURS)], linestyle=STYLES[i % len(STYLES)],
                linewidth=1.5, label=name.replace("_", " "))
    ax.axhline(0, color="#444444", linewidth=0.5)
    charts.year_axis(ax, frame["year"])
    ax.set_ylabel(ylabel)
    ax.set_title(title, loc="left")
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False)
    return charts.svg_text(fig, column)


def scenario_charts(outcome) -> dict[str, str]:
    climate = outcome.climate
    areas = outcome.rewetted_area
    return {
        "emissions": _lines(climate, "co2eq_t", "kt CO2-eq per year", "Emissions by scenario (GWP100)", 1e-3),
        "forcing": _lines(climate, "forcing_w_m2", "nW m-2", "Radiative forcing from the organic soils", 1e9),
        "temperature": _lines(climate, "temperature_k", "micro-K", "Global-mean temperature response", 1e6),
        "vs_baseline": _lines(climate, "temperature_k_vs_baseline", "micro-K", "Temperature response against baseline",
                              1e6),
        "areas": _lines(areas, "area_ha", "thousand ha", "Rewetted area", 1e-3),
    }


def write_scenario_outputs(result, outcome, out_dir: Path, report: bool = True, scenario_file: Path | None = None
                           ) -> Path:
    def fill(tmp: Path) -> None:
        outcome.climate.to_csv(tmp / "scenario_climate.csv", index=False, lineterminator="\n")
        em = outcome.emissions  # already one row per scenario, year, region, soil status, pathway and gas
        em.to_csv(tmp / "scenario_emissions.csv", index=False, lineterminator="\n")
        areas = outcome.area_totals
        areas.to_csv(tmp / "scenario_areas.csv", index=False, lineterminator="\n")
        _workbook(result, outcome, em, areas, tmp / "scenarios.xlsx")
        if report:
            _report(result, outcome, tmp)

    return atomic_folder(Path(out_dir), fill, inputs=[*input_files(result.settings), scenario_file])


def _workbook(result, outcome, em, areas, path: Path) -> None:
    import datetime as _dt

    wb = Workbook(write_only=True)
    notes = [f"{result.settings.name}: scenarios from {result.settings.last_year}. Scenarios are not forecasts.",
             f"Timing: {outcome.timing}. GWP100 set {result.settings.gwp}; GWP* for CH4 (Smith et al. 2021)."]
    for title, frame in (("summary", outcome.summary), ("climate", outcome.climate), ("emissions", em),
                         ("areas", areas), ("metrics", outcome.metrics)):
        frame = frame.reset_index(drop=True)
        cols = [str(c) for c in frame.columns]
        fmt = {c: "0.000E+00" if ("forcing" in c or "temperature" in c or "agwp" in c or "agtp" in c) else FORMATS["t"]
               for c in cols if pd.api.types.is_float_dtype(frame[c])}
        write_sheet(wb, title, cols, sheet_records(frame, cols), fmt, notes=notes if title == "summary" else ())
    findings = findings_table(outcome.findings)
    write_sheet(wb, "findings", list(findings.columns), sheet_records(findings, list(findings.columns)), widths={"message": 80})
    stamp = _dt.datetime.fromisoformat(result.compile_date + "T00:00:00")
    wb.properties.created = stamp
    buffer = io.BytesIO()
    wb.save(buffer)
    finish_workbook(buffer.getvalue(), stamp, None, path)


def _report(result, outcome, folder: Path) -> None:
    from weasyprint import HTML

    root = resource_dir("report_templates")
    env = Environment(loader=FileSystemLoader(str(root)), autoescape=select_autoescape(["html", "j2"]),
                      trim_blocks=True, lstrip_blocks=True)
    css = (root / "report.css").read_text(encoding="utf-8")
    summary = outcome.summary.to_dict("records")
    html = env.get_template("scenarios.html.j2").render(
        s=result.settings, version=result.version, compile_date=result.compile_date, css=css,
        cautions=SCENARIO_CAUTIONS, summary=summary, charts=scenario_charts(outcome), timing=outcome.timing,
        metrics=outcome.metrics.to_dict("records"),
        findings=[f.render(short=True) for f in outcome.findings],
        temp_cols=[c for c in outcome.summary.columns if c.startswith("temperature_vs_baseline_mk_")],
        extra_cols=[c for c in outcome.summary.columns if c.startswith("extra_warming_mk_")])
    (folder / "scenario-report.html").write_text(html, encoding="utf-8")
    HTML(string=html, base_url=str(root) + "/", url_fetcher=RestrictedFetcher(root)).write_pdf(
        folder / "scenario-report.pdf")
