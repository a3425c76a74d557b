"""Command line: a thin layer over the Python API.

Exit codes: 0 success; 1 blocking findings in the results or an internal
error; 2 bad input (message printed, nothing written).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from . import __version__
from .errors import CompilerError, Finding, InputError

EXIT_OK, EXIT_FINDINGS, EXIT_INPUT = 0, 1, 2


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="histosol", description="Greenhouse-gas inventory of drained and rewetted "
                                "organic soils (IPCC Tier 1 defaults with documented overrides).")
    p.add_argument("--version", action="version", version=f"histosol {__version__}")
    p.add_argument("--traceback", action="store_true", help="show the Python traceback of an internal error")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    d = sub.add_parser("demo", help="compile the bundled invented demo region and write every output")
    d.add_argument("--out", default="demo-output", help="output folder (default: demo-output)")
    d.add_argument("--quiet", action="store_true", help="print nothing but errors")
    d.add_argument("--scenarios", action="store_true",
                   help="also run the demo's rewetting scenarios into OUT/scenarios")
    _report_options(d)

    c = sub.add_parser("compile", help="compile an inventory from its settings file")
    c.add_argument("settings", help="settings file (TOML)")
    c.add_argument("--out", default="output", help="output folder (default: output)")
    c.add_argument("--quiet", action="store_true", help="print nothing but errors")
    _report_options(c)

    k = sub.add_parser("check", help="validate all inputs and print the findings by check; writes nothing")
    k.add_argument("settings", help="settings file (TOML)")
    k.add_argument("--all", action="store_true", help="print every finding (default: the first few of each check)")

    r = sub.add_parser("compare", help="recalculations: differences between two submissions, with their causes")
    r.add_argument("previous", help="output folder or emissions.csv(.gz) of the previous submission")
    r.add_argument("current", help="output folder or emissions.csv(.gz) of the current submission")
    r.add_argument("--year", type=int, help="only this year (default: every year, summary of the latest)")
    r.add_argument("--csv", metavar="FILE", help="write the full table (category x gas x year) to FILE")

    t = sub.add_parser("trace", help="show how one reported number was made")
    t.add_argument("output", help="output folder of a compile")
    t.add_argument("--category", required=True, help="category code, e.g. 3.B.2.a")
    t.add_argument("--gas", required=True, type=str.upper, choices=["CO2", "CH4", "N2O", "CO"],
                   help="CO2, CH4, N2O or CO (any case)")
    t.add_argument("--year", required=True, type=int)
    t.add_argument("--region", help="only this region")

    sc = sub.add_parser("scenarios", help="rewetting scenarios to the horizon and their climate effect over time")
    sc.add_argument("settings", help="settings file (TOML) of the inventory the scenarios start from")
    sc.add_argument("--scenarios", help="scenario file (TOML); default: [inputs] scenarios of the settings")
    sc.add_argument("--out", default="scenarios-output", help="output folder (default: scenarios-output)")
    sc.add_argument("--no-report", action="store_true", help="skip scenario-report.html and .pdf")
    sc.add_argument("--quiet", action="store_true", help="print nothing but errors")

    f = sub.add_parser("factors", help="print the factor register")
    f.add_argument("--factor-set", choices=["ipcc2013ws", "ipcc2006"], help="only this factor set")
    f.add_argument("--quantity", help="only this quantity (e.g. ef_co2_c_onsite)")
    f.add_argument("--climate-zone", help="only rows for this climate zone (rows that apply to any zone included)")
    f.add_argument("--land-use", help="only rows for this land use (rows that apply to any land use included)")
    f.add_argument("--soil-status", choices=["drained", "rewetted"], help="only drained or rewetted rows")
    f.add_argument("--csv", action="store_true", help="print CSV instead of a table")
    f.add_argument("--notes", action="store_true",
                   help="also print the shipped tables' own notes: the rows not yet checked against the published "
                        "text whose readings disagree, with what differs (factor_tables/ verification_note)")
    return p


def _report_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--iterations", type=int, help="Monte Carlo iterations (overrides [uncertainty] iterations)")
    p.add_argument("--seed", type=int, help="Monte Carlo seed (overrides [uncertainty] seed)")
    p.add_argument("--no-report", action="store_true", help="skip report.html and report.pdf")
    p.add_argument("--archive", action="store_true",
                   help="also write report-archive.pdf (PDF/A-3b with emissions.csv, datapackage.json and "
                        "manifest.json attached)")


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    try:
        return _run(args)
    except BrokenPipeError:  # output piped into a pager or head that closed early: the work is done
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK
    except CompilerError as exc:
        print(str(exc), file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("interrupted; nothing was written", file=sys.stderr)
        return 130
    except Exception as exc:  # the last guard: no traceback for the user unless asked
        if args.traceback:
            raise
        print(f"internal error: {type(exc).__name__}: {exc}\nnothing was written; rerun with --traceback and "
              "report it with the inputs that caused it", file=sys.stderr)
        return EXIT_FINDINGS


def _run(args) -> int:
    if args.command == "factors":
        return _factors(args)
    if args.command == "scenarios":
        return _scenarios(args)
    if args.command == "compare":
        return _compare(args)
    if args.command == "trace":
        return _trace(args)
    if args.command == "check":
        return _check(Path(args.settings), args.all)
    if args.command == "demo":
        from .resources import resource_dir

        settings = resource_dir("examples") / "demo" / "inventory.toml"
    else:
        settings = Path(args.settings)
    code = _compile(settings, Path(args.out), args.quiet, not args.no_report, args.archive,
                    {"iterations": args.iterations, "seed": args.seed})
    if args.command == "demo" and args.scenarios:
        scen = argparse.Namespace(settings=str(settings), scenarios=None, out=str(Path(args.out) / "scenarios"),
                                  no_report=args.no_report, quiet=args.quiet)
        code = code or _scenarios(scen)
    return code


def _compile(settings: Path, out: Path, quiet: bool, report: bool, archive: bool, overrides: dict) -> int:
    from .pipeline import compile_inventory

    from .progress import Progress

    if archive and not report:
        raise InputError("--archive needs the report: drop --no-report")
    with Progress(quiet) as progress:
        result = compile_inventory(settings, progress=progress, **overrides)
        progress.stage("writing the CSV tables")
        folder = result.write(out, report=report, archive=archive, progress=progress)
    if not quiet:
        _print_summary(result, folder)
    return EXIT_OK


def _print_summary(result, folder: Path) -> None:
    s = result.settings
    agg = result.aggregates
    counts = result.findings["severity"].value_counts()
    span = f"{s.first_year}-{s.last_year}" if s.last_year != s.first_year else f"{s.first_year}"
    print(f"{s.name}: {span}, factor set {s.factor_set}, GWP100 {s.gwp}")
    shown = dict.fromkeys([agg.base_year, agg.latest_year])  # a one-year inventory: its year once
    print("  net emissions " + "; ".join(f"{y}: {agg.total_co2eq_t[y] / 1000:,.1f} kt CO2-eq" for y in shown))
    print(f"  {len(result.activity)} activity rows, {len(result.emissions)} result rows, "
          f"{len(result.factors_used)} factors used")
    print(f"  findings: {counts.get('warning', 0)} warnings, {counts.get('info', 0)} notes "
          "(see the findings sheet)")
    by_check: dict[str, list] = {}
    for f in result.finding_list:
        if f.severity == "warning":
            by_check.setdefault(f.check, []).append(f)
    for check, items in by_check.items():
        more = f" (and {len(items) - 1} more)" if len(items) > 1 else ""
        print(f"  warning{more}: {items[0].render(short=True).split(': ', 1)[1]}")
    print(f"  wrote {folder}")


def _scenarios(args) -> int:
    from .pipeline import compile_inventory
    from .render.scenario_outputs import write_scenario_outputs
    from .scenarios import load_scenarios, run_scenarios

    from .progress import Progress

    with Progress(args.quiet) as progress:
        result = compile_inventory(Path(args.settings), progress=progress, analyses=False)
        path = Path(args.scenarios) if args.scenarios else result.settings.scenarios
        if path is None:
            raise InputError("no scenario file: give --scenarios FILE or set [inputs] scenarios in the settings")
        scenarios = load_scenarios(path, result.settings)
        progress.stage("running the scenarios")
        outcome = run_scenarios(result, scenarios)
        progress.stage("writing the scenario outputs")
        folder = write_scenario_outputs(result, outcome, Path(args.out), report=not args.no_report,
                                        scenario_file=path)
    if not args.quiet:
        _print_scenarios(result, outcome, folder)
    return EXIT_OK


def _print_scenarios(result, outcome, folder: Path) -> None:
    summary = outcome.summary
    print(f"{result.settings.name}: {len(summary)} scenarios from {result.settings.last_year} to "
          f"{int(outcome.climate['year'].max())} (GWP100 {result.settings.gwp}; temperature response against baseline)")
    for _, r in summary.iterrows():
        line = f"  {r['scenario']}: cumulative {r['cumulative_co2eq_t_vs_baseline'] / 1e6:+,.2f} Mt CO2-eq vs baseline"
        for col in [c for c in summary.columns if c.startswith("temperature_vs_baseline_mk_")]:
            line += f"; {col.rsplit('_', 1)[-1]}: {r[col] * 1000:+.2f} uK"
        if isinstance(r.get("crossing"), str) and r["crossing"]:
            line += f"; warming below baseline from {r['crossing']}"
        print(line)
    print("  scenarios are not forecasts; rewetting works need hydrological design, permits and licensed professionals")
    print(f"  wrote {folder}")


def _compare(args) -> int:
    import pandas as pd

    from .recalculations import PARTS, compare, load_export, year_totals

    if args.csv:
        _refuse_csv_over_inputs(Path(args.csv), [Path(args.previous), Path(args.current)])
    previous, current = load_export(args.previous), load_export(args.current)
    by_cell, _ = compare(previous, current)
    if args.csv:
        by_cell.to_csv(args.csv, index=False, lineterminator="\n")
    covered = sorted(int(y) for y in by_cell["year"].unique())
    if not covered:
        raise InputError("the two exports share no year: nothing to compare")
    year = args.year or covered[-1]
    if year not in covered:
        raise InputError(Finding("error", "compare", "this year is not in both exports", column="--year",
                                 found=str(year), expected=f"a year both cover, {covered[0]} to {covered[-1]}"))
    view = by_cell[by_cell["year"] == year]
    view = view[(view["difference_co2eq_t"].abs() > 1e-9) | (view["difference_t"].abs() > 1e-9)]
    print(f"Recalculations for {year}: current minus previous, t CO2-eq, split by cause")
    print("  dE = (A1 - A0) x EF0 [activity change] + A1 x (EF1 - EF0) [factor change, incl. GWP]; "
          "strata added / removed; allocation change")
    cols = ["category_code", "gas", "previous_co2eq_t", "current_co2eq_t", "difference_co2eq_t", "difference_pct",
            *PARTS]
    def one_decimal(value: float) -> str:  # never "-0.0"
        text = f"{value:,.1f}"
        return "0.0" if text == "-0.0" else text

    with pd.option_context("display.width", 250, "display.max_columns", None, "display.float_format", one_decimal):
        print(view[cols].to_string(index=False) if not view.empty else "  no differences")
    total = year_totals(by_cell).loc[year]
    print(f"Total {year}: {total['previous_co2eq_t'] / 1000:,.1f} -> {total['current_co2eq_t'] / 1000:,.1f} kt CO2-eq")
    return EXIT_OK


def _refuse_csv_over_inputs(target: Path, given: list[Path]) -> None:
    """``compare --csv`` may not write over what it compares, nor into an output folder it reads."""
    import os

    where = Path(os.path.realpath(target))
    for path in given:
        real = Path(os.path.realpath(path))
        if where == real or (real.is_dir() and real in where.parents):
            raise InputError(Finding("error", "compare", "the CSV file would overwrite or change an export being "
                                     "compared; write it elsewhere", column="--csv", found=str(target),
                                     expected=f"a path outside {path}"))


def _trace(args) -> int:
    from .trace import load_outputs, trace_text

    emissions, factors = load_outputs(args.output)
    text, _ = trace_text(emissions, factors, args.category, args.gas, args.year, args.region)
    print(text)
    return EXIT_OK


CHECK_SHOWN = {"error": 10, "warning": 3, "info": 3}  # findings printed per check by `histosol check`


def _check(settings: Path, every: bool = False) -> int:
    from .pipeline import check_inventory

    findings = check_inventory(settings)
    groups: dict[tuple, list] = {}
    for f in findings:  # by severity and check, in the order they were raised
        groups.setdefault((f.severity, f.check), []).append(f)
    order = {"error": 0, "warning": 1, "info": 2}
    for (severity, check), items in sorted(groups.items(), key=lambda kv: order.get(kv[0][0], 3)):
        shown = items if every else items[:CHECK_SHOWN.get(severity, 3)]
        for f in shown:
            print(f.render())
        if len(items) > len(shown):
            print(f"  ... and {len(items) - len(shown)} more {severity} findings of [{check}] "
                  f"({len(items)} in all; --all lists every one)")
    errors = sum(f.severity == "error" for f in findings)
    warnings = sum(f.severity == "warning" for f in findings)
    print(f"{errors} errors, {warnings} warnings, {len(findings) - errors - warnings} notes")
    return EXIT_INPUT if errors else EXIT_OK


def _factors(args) -> int:
    import pandas as pd

    from .factors import load_library

    reg = load_library().register
    if args.factor_set:
        reg = reg[reg["factor_set"] == args.factor_set]
    if args.quantity:
        reg = reg[reg["quantity"] == args.quantity]
    for column, value in (("climate_zone", args.climate_zone), ("land_use", args.land_use),
                          ("soil_status", args.soil_status)):
        if value:
            reg = reg[(reg[column] == value) | (reg[column] == "")]
    cols = ["factor_id", "quantity", "value", "unit", "ci_low", "ci_high", "table", "row_label"]
    if reg.empty:
        raise InputError("no factor matches these filters")
    if args.csv:
        extra = ["verification", "verification_note"] if args.notes else []
        sys.stdout.write(reg[cols + ["citation", *extra]].to_csv(index=False, lineterminator="\n"))
        return EXIT_OK
    view = reg[cols].copy()
    view["95% interval"] = [("" if pd.isna(lo) else f"{lo:g} to {hi:g}") for lo, hi in zip(view["ci_low"], view["ci_high"])]
    view["value"] = view["value"].map(lambda v: f"{v:g}")
    view = view[["factor_id", "quantity", "value", "unit", "95% interval", "table", "row_label"]]
    view = view.rename(columns={"row_label": "row"})
    # One block per quantity; the row label takes what is left of FACTORS_WIDTH, wrapped onto further lines.
    import textwrap

    shown = [c for c in view.columns if c != "quantity"]
    widths = {c: max(view[c].astype(str).str.len().max(), len(c)) for c in shown if c != "row"}
    widths["row"] = max(FACTORS_WIDTH - sum(w + 2 for w in widths.values()), 24)

    def line(cells) -> str:
        return "  ".join(str(v).rjust(widths[c]) if c == "value" else str(v).ljust(widths[c])
                         for c, v in zip(shown, cells)).rstrip()

    print(line(shown))
    for quantity, block in view.groupby("quantity", sort=False):
        print(f"{quantity}:")
        for cells in block[shown].itertuples(index=False):
            *head, row = cells
            parts = textwrap.wrap(str(row), widths["row"]) or [""]
            print(line([*head, parts[0]]))
            for more in parts[1:]:
                print(line([""] * len(head) + [more]))
    print(f"\n{len(reg)} factors. The shipped values have not been checked against the published text by the "
          "tool's authors:\ncheck each against your copy of the guidance before official use and record the "
          "result in a factor\nreview log ([inputs] factor_review); --csv gives the full row labels and citations.")
    if args.notes:
        # Rows whose readings of the published table disagree: the shipped note says what differs.
        noted = reg["verification_note"].fillna("").str.startswith("conflict")
        conflicts = reg[(reg["verification"] == "from_memory") & noted]
        print(f"\n{len(conflicts)} of them with a known conflict between readings of the published table; "
              "check these first:")
        for fid, note in zip(conflicts["factor_id"], conflicts["verification_note"]):
            print(f"  {fid}: {note}")
    return EXIT_OK


FACTORS_WIDTH = 118  # characters of a `histosol factors` line


if __name__ == "__main__":
    sys.exit(main())
