"""Charts of the report as inline SVG (matplotlib), in colours of our own that stay apart in grey print.

Each chart is drawn from result tables only and returned as SVG text; the
SVG carries no date and fixed ids, so the report is reproducible.
"""

from __future__ import annotations

import io
import re

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib.ticker import MaxNLocator  # noqa: E402

# Pathway colours (dark to light, with hatches, so grey print keeps them apart).
PATHWAY_STYLE = {
    "co2_onsite": ("#4a2f1f", ""), "co2_doc": ("#9b6b43", "//"), "ch4_soil": ("#1f6f5c", ""),
    "ch4_ditch": ("#79c2a8", ".."), "n2o_soil": ("#c8a434", "\\\\"), "fire_co2": ("#7a1f0a", "xx"),
    "fire_ch4": ("#e0874a", "++"), "co2_offsite": ("#c9b49a", "oo"),
}
PATHWAY_LABEL = {
    "co2_onsite": "CO2 on site", "co2_doc": "CO2 from DOC", "ch4_soil": "CH4 soil", "ch4_ditch": "CH4 ditches",
    "n2o_soil": "N2O", "fire_co2": "fire CO2", "fire_ch4": "fire CH4", "co2_offsite": "CO2 of extracted peat",
}
LAND_USE_STYLE = {
    "forest_land": ("#2e5e3e", ""), "cropland": ("#b07c2a", "//"), "grassland": ("#8cbf5a", ".."),
    "wetlands": ("#3f7fa8", "\\\\"), "settlements": ("#777777", "xx"), "other_land": ("#bbbbbb", "++"),
}
# The land categories as the reporting tables name them (3.B.1 Forest land ... 3.B.6 Other land).
LAND_USE_LABEL = {
    "forest_land": "Forest land", "cropland": "Cropland", "grassland": "Grassland", "wetlands": "Wetlands",
    "settlements": "Settlements", "other_land": "Other land",
}
GAS_STYLE = {"CO2": ("#4a2f1f", ""), "CH4": ("#1f6f5c", "//"), "N2O": ("#c8a434", "..")}

# text.parse_math off: every label is plain text, so a region or scenario name with "$" is never math.
plt.rcParams.update({"font.family": "DejaVu Sans", "font.size": 8, "svg.hashsalt": "histosol",
                     "svg.fonttype": "none", "axes.spines.top": False, "axes.spines.right": False,
                     "text.parse_math": False, "hatch.linewidth": 0.6})


def year_axis(ax, years) -> None:
    """Whole years on the x axis, from the first to the last year of the data (a lone year centred)."""
    years = [int(y) for y in years]
    first, last = min(years), max(years)
    if first == last:
        ax.set_xlim(first - 0.75, last + 0.75)
        ax.set_xticks([first])
    else:
        ax.set_xlim(first, last)
        ax.xaxis.set_major_locator(MaxNLocator(nbins=8, integer=True, min_n_ticks=2))
    ax.xaxis.set_major_formatter(lambda value, _pos: f"{value:.0f}")


HALF = (3.55, 2.75)  # inches: a chart of half the page width (two side by side)
_ID = re.compile(r'(\bid="|url\(#|xlink:href="#)')


def svg_text(fig, name: str = "") -> str:
    """The figure as SVG text; its ids prefixed with ``name`` so that charts inlined in one page never share one.

    A figure with a constrained layout keeps its size (charts side by side then share one text size);
    others are cut to their drawing.
    """
    buf = io.StringIO()
    tight = None if fig.get_layout_engine() is not None else "tight"
    fig.savefig(buf, format="svg", bbox_inches=tight, metadata={"Date": None, "Creator": "histosol"})
    plt.close(fig)
    text = buf.getvalue()
    text = text[text.index("<svg"):]
    return _ID.sub(lambda m: m.group(1) + (f"{name}-" if name else ""), text) if name else text


def _half() -> tuple:
    """A figure of half the page width, laid out so that its legend goes below the axes."""
    return plt.subplots(figsize=HALF, layout="constrained")


def _legend_below(ax, handles=None, ncol: int = 3) -> None:
    if handles is None:
        handles, _ = ax.get_legend_handles_labels()
    ax.figure.legend(handles=handles, loc="outside lower left", ncol=ncol, frameon=False, fontsize=7,
                     handlelength=1.6, columnspacing=1.0)


def _stack(ax, frame: pd.DataFrame, styles: dict, labels: dict | None = None):
    """Stacked areas with positive and negative parts stacked apart (removals below zero).

    Each layer is a solid fill without an edge (edges drawn in white, or hatch tiles alone, show as light
    seams) with its hatch drawn as a second, unfilled layer on top. A single year is drawn as one stacked bar.
    """
    if frame.empty:
        _nothing(ax, "no emissions or removals estimated")
        return
    years = frame.index.to_numpy()
    single = len(years) == 1
    pos_base = pd.Series(0.0, index=frame.index)
    neg_base = pd.Series(0.0, index=frame.index)
    columns = [c for c in styles if c in frame.columns] + sorted(c for c in frame.columns if c not in styles)
    handles = []
    for col in columns:
        values = frame[col].fillna(0.0)
        colour, hatch = styles.get(col, ("#999999", ""))
        pos, neg = values.clip(lower=0), values.clip(upper=0)
        label = (labels or {}).get(col, col)
        drawn = False
        for part, base in ((pos, pos_base), (neg, neg_base)):
            if not (part != 0).any():
                continue
            if single:
                ax.bar(years, part, bottom=base, width=0.5, color=colour, edgecolor="none", linewidth=0)
                if hatch:
                    ax.bar(years, part, bottom=base, width=0.5, facecolor="none", edgecolor="white", hatch=hatch,
                           linewidth=0, alpha=0.55)
            else:
                ax.fill_between(years, base, base + part, facecolor=colour, edgecolor="none", linewidth=0,
                                antialiased=False)
                if hatch:
                    ax.fill_between(years, base, base + part, facecolor="none", edgecolor="white", hatch=hatch,
                                    linewidth=0, alpha=0.55)
            drawn = True
        pos_base = pos_base + pos
        neg_base = neg_base + neg
        if drawn:
            handles.append(plt.Rectangle((0, 0), 1, 1, facecolor=colour, hatch=hatch or None,
                                         edgecolor="white", linewidth=0, label=label))
    total = frame.sum(axis=1)
    if single:
        (line,) = ax.plot(years, total, linestyle="none", marker="_", markersize=22, markeredgewidth=1.5,
                          color="black", label="net total")
    else:
        (line,) = ax.plot(years, total, color="black", linewidth=1.0, label="net total")
    handles.append(line)
    ax.axhline(0, color="#444444", linewidth=0.5)
    year_axis(ax, years)
    _legend_below(ax, handles)


def _nothing(ax, text: str) -> None:
    ax.text(0.5, 0.5, text, transform=ax.transAxes, ha="center", va="center", color="#555555")
    ax.set_xticks([])
    ax.set_yticks([])


def _stacked_chart(table_t: pd.DataFrame, name: str, styles: dict, title: str, labels: dict | None = None) -> str:
    """Net emissions per year stacked by the columns of ``table_t`` (an aggregate in t CO2-eq), in kt CO2-eq."""
    fig, ax = _half()
    _stack(ax, table_t / 1000, styles, labels)
    ax.set_ylabel("kt CO2-eq per year")
    ax.set_title(title, loc="left")
    return svg_text(fig, name)


def emissions_by_pathway(by_pathway_t: pd.DataFrame) -> str:
    """From :attr:`compiler.aggregate.Aggregates.pathway_co2eq_t`."""
    return _stacked_chart(by_pathway_t, "pathway", PATHWAY_STYLE, "Net emissions by pathway", PATHWAY_LABEL)


def emissions_by_land_use(by_land_use_t: pd.DataFrame) -> str:
    """From :attr:`compiler.aggregate.Aggregates.land_use_co2eq_t`."""
    return _stacked_chart(by_land_use_t, "land_use", LAND_USE_STYLE, "Net emissions by land use", LAND_USE_LABEL)


def area_by_status(activity: pd.DataFrame) -> str:
    table = activity.pivot_table(index="year", columns="soil_status", values="area_ha", aggfunc="sum",
                                 fill_value=0.0) / 1000
    fig, ax = _half()
    styles = {"drained": ("#6b4a2f", "-", None), "rewetted": ("#2f7fa8", "--", "o")}
    for col, (colour, line, marker) in styles.items():
        if col in table:
            ax.plot(table.index, table[col], color=colour, linestyle=line, linewidth=1.6,
                    marker=marker or ("o" if len(table) == 1 else None), markersize=2.5 if len(table) > 1 else 4,
                    markevery=5 if len(table) > 1 else None, label=col)
    year_axis(ax, table.index)
    ax.set_ylabel("thousand ha")
    ax.set_ylim(0, None if table.to_numpy().max() > 0 else 1)
    ax.set_title("Drained and rewetted organic-soil area", loc="left")
    _legend_below(ax)
    return svg_text(fig, "area")


def contribution_by_gas(by_gas_t: pd.DataFrame) -> str:
    """From :attr:`compiler.aggregate.Aggregates.gas_co2eq_t`."""
    return _stacked_chart(by_gas_t, "gas", GAS_STYLE, "Contribution of each gas")


def all_charts(result) -> dict[str, str]:
    agg = result.aggregates
    out = {
        "pathway": emissions_by_pathway(agg.pathway_co2eq_t),
        "land_use": emissions_by_land_use(agg.land_use_co2eq_t),
        "area": area_by_status(result.activity),
        "gas": contribution_by_gas(agg.gas_co2eq_t.reindex(agg.pathway_co2eq_t.index)),  # years with an estimate
    }
    if result.recalculation is not None:
        out["recalculation"] = recalculation_series(result.recalculation["by_year"])
    unc = result.uncertainty
    if unc is not None and unc.monte_carlo is not None:
        cells = unc.monte_carlo.summary[unc.monte_carlo.summary["category_code"] != "total"]
        out["uncertainty"] = uncertainty_intervals(cells, result.settings.last_year)
    kc = result.key_categories
    if kc is not None and not kc.table.empty:
        table = kc.table[kc.table["run"] == kc.table["run"].iloc[0]]
        out["key_level"] = key_category_shares(table, "level_latest", "cumulative_level_latest", 0.95,
                                               f"Level assessment {result.settings.last_year} (Approach 1)")
    return out


def recalculation_series(by_year: pd.DataFrame) -> str:
    """The previous and the current net total per year (:func:`compiler.recalculations.year_totals`)."""
    tot = by_year / 1000
    fig, ax = plt.subplots(figsize=(6.2, 2.4))
    ax.plot(tot.index, tot["previous_co2eq_t"], color="#9b6b43", linestyle="--", linewidth=1.4, label="previous submission")
    ax.plot(tot.index, tot["current_co2eq_t"], color="#2f4858", linewidth=1.6, label="this submission",
            marker="o" if len(tot) == 1 else None)
    year_axis(ax, tot.index)
    ax.set_ylabel("kt CO2-eq per year")
    ax.set_title("Net emissions: previous and current submission", loc="left")
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False)
    return svg_text(fig, "recalculation")


def uncertainty_intervals(summary: pd.DataFrame, year: int) -> str:
    """Horizontal interval bars: -x % / +y % of each category-gas estimate (Monte Carlo, one year)."""
    rows = summary[(summary["year"] == year)].copy()
    rows["label"] = rows["category_code"] + " " + rows["gas"]
    rows = rows.iloc[::-1]
    fig, ax = plt.subplots(figsize=(6.2, 0.22 * len(rows) + 0.8))
    y = range(len(rows))
    ax.hlines(list(y), -rows["minus_pct"], rows["plus_pct"], color="#2f4858", linewidth=3)
    ax.plot([0] * len(rows), list(y), "|", color="#9a4b00", markersize=8)
    ax.set_yticks(list(y))
    ax.set_yticklabels(rows["label"], fontsize=7)
    ax.axvline(0, color="#444444", linewidth=0.5)
    ax.set_xlabel("95 % interval, percent of the estimate")
    ax.set_title(f"Uncertainty of each category and gas, {year} (Approach 2)", loc="left")
    return svg_text(fig, "uncertainty")


def key_category_shares(table: pd.DataFrame, column: str, cumulative: str, threshold: float, title: str) -> str:
    """Cumulative share of the ranked categories, with the threshold line."""
    rows = table.sort_values(column, ascending=False)
    rows = rows[rows[column] > 0]
    labels = (rows["category_code"] + " " + rows["gas"]).tolist()
    fig, ax = plt.subplots(figsize=(6.2, 2.8))
    x = range(len(rows))
    ax.bar(list(x), rows[column] * 100, color="#79c2a8", edgecolor="#1f6f5c", label="share")
    ax.plot(list(x), rows[cumulative] * 100, color="#2f4858", marker="o", markersize=3, label="cumulative")
    ax.axhline(threshold * 100, color="#9a4b00", linestyle="--", linewidth=1, label=f"threshold {threshold:.0%}")
    ax.set_xticks(list(x))
    ax.set_xticklabels(labels, rotation=60, ha="right", fontsize=6.5)
    ax.set_ylabel("percent")
    ax.set_ylim(0, 105)
    ax.set_title(title, loc="left")
    ax.legend(loc="center right", frameon=False)
    return svg_text(fig, "key-level")
