"""Benchmark of every compile stage at 1e3 to 1e6 stratum-year rows (a script: no timing is asserted).

For each size, a synthetic inventory (:mod:`tests.benchmarks.synthetic`) is written once, then each
stage is timed as the median of several runs (fewer at the larger sizes), each size in a fresh
child process so that its peak memory is its own:

load       activity.load_activity + load_fires + load_overrides (read CSV, validate every cell)
gaps       timeseries.fill_gaps (no gaps here: the cost of looking)
compute    engine.compute (resolve factors on distinct strata, overrides, equations)
aggregate  categories.allocate + categories.category_table
compile    pipeline.compile_inventory(analyses=False), the whole compile without analyses
full       pipeline.compile_inventory(), the compile as a user runs it: QA/QC, Approach 1, Monte Carlo
           (the settings' iterations) and key categories, nothing skipped
approach1  uncertainty.approach1
mc         uncertainty.monte_carlo with a fixed iteration count (default 2000)
workbook   render.workbook.write_workbook (with the uncertainty sheets)
csv        render.tidy.write_csv
report     render.report.write_report (HTML and PDF; only at the smallest sizes)

Beside ``compute`` a bare numpy kernel does the irreducible arithmetic on the same arrays (gather
one factor value per estimate row, multiply by the area basis and the conversion, sum per
category, gas and year with ``np.bincount``); ``compute / kernel`` is the headline ratio. Peak
memory is the peak resident set size of the child process during each stage (Linux VmHWM, reset
before the stage); "held" is what stayed resident after it.

Run from the repository root::

    python -m tests.benchmarks.bench_pipeline [--sizes 1000,10000,100000,1000000] [--iterations 2000]
    python -m tests.benchmarks.bench_pipeline --smoke     # 1e3 rows, one run, in this process

Targets (the project's, no source): compute <= 2 x kernel at 1e6 rows; log-log slope of every
stage <= 1.1 from 1e4 to 1e6 rows; peak <= 2 GiB at 1e6 rows.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import platform
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from tests.benchmarks import synthetic

STAGES = ("load", "gaps", "compute", "kernel", "aggregate", "compile", "full", "approach1", "mc", "qaqc", "workbook",
          "csv", "report")
REPEATS = {1_000: 5, 10_000: 5, 100_000: 3, 1_000_000: 1}
REPORT_SIZES = (1_000, 10_000)
GIB = 1024 ** 3


# --- memory -----------------------------------------------------------------------------------------


def _status() -> dict[str, int]:
    out = {}
    try:
        with open("/proc/self/status") as handle:
            for line in handle:
                if line.startswith(("VmHWM", "VmRSS")):
                    key, value = line.split(":")
                    out[key] = int(value.split()[0]) * 1024
    except OSError:
        pass
    return out


def reset_peak() -> bool:
    """Reset the process's peak resident set size (Linux); False where that is not possible."""
    try:
        with open("/proc/self/clear_refs", "w") as handle:
            handle.write("5")
        return True
    except OSError:
        return False


def peak_bytes() -> int:
    status = _status()
    if "VmHWM" in status:
        return status["VmHWM"]
    import resource

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def rss_bytes() -> int:
    return _status().get("VmRSS", 0)


def measure(run, repeat: int) -> tuple[list[float], int, object]:
    """Times of ``repeat`` runs [s], the peak resident memory over them [bytes], the last value."""
    times, value = [], None
    reset_peak()
    for _ in range(repeat):
        value = None  # drop the previous run's result before the next
        start = time.perf_counter()
        value = run()
        times.append(time.perf_counter() - start)
    return times, peak_bytes(), value


def limit_memory(gib: float) -> None:
    """Cap this process's address space, so that a stage that needs more fails with MemoryError."""
    import resource

    limit = int(gib * GIB)
    resource.setrlimit(resource.RLIMIT_AS, (limit, limit))


# --- the bare kernel --------------------------------------------------------------------------------


def kernel_arrays(emissions):
    """The arrays the bare kernel works on, from the engine's estimate rows (built outside the timing)."""
    import pandas as pd

    est = emissions[(emissions["notation_key"] == "") & emissions["emission_t"].notna()]
    factor_code, factor_ids = pd.factorize(est["factor_id"], sort=True)
    values = est.groupby("factor_id")["factor_value"].first().reindex(factor_ids).to_numpy(float)
    cell_code, cells = pd.MultiIndex.from_frame(est[["category_code", "gas", "year"]]).factorize(sort=True)
    return {
        "factor": np.ascontiguousarray(factor_code, dtype=np.int64), "values": values,
        "area": est["area_basis_ha"].to_numpy(float), "conversion": est["conversion"].to_numpy(float),
        "fuel": np.where(est["pathway"].str.startswith("fire_").to_numpy(),
                         est["parameter_value"].to_numpy(float), 1.0),
        "cell": np.ascontiguousarray(cell_code, dtype=np.int64), "n_cells": len(cells), "cells": cells,
    }


def bare_kernel(a) -> np.ndarray:
    """Gather a factor per row, x area basis x conversion (x fuel for fires), sum per cell."""
    v = a["values"][a["factor"]]
    v *= a["area"]
    v *= a["conversion"]
    v *= a["fuel"]
    return np.bincount(a["cell"], weights=v, minlength=a["n_cells"])


# --- one size ---------------------------------------------------------------------------------------


def run_size(n_rows: int, workdir: Path, repeat: int, iterations: int, report: bool,
             stages: tuple[str, ...] = STAGES) -> dict:
    """Every stage at one size, in this process. Returns times [s] and peaks [bytes] per stage.

    A stage that runs out of memory is recorded as failed (with the peak reached) and the stages
    that need its result are skipped.
    """

    from compiler.activity import load_activity, load_fires, load_overrides
    from compiler.categories import allocate, category_table
    from compiler.engine import compute
    from compiler.errors import FindingLog
    from compiler.factors import load_library
    from compiler.metrics import co2_equivalent, gwp_table
    from compiler.pipeline import compile_inventory
    from compiler.schema import EXPORT_COLUMNS
    from compiler.render.tidy import write_csv
    from compiler.render.workbook import SHEET_ROW_LIMIT, write_workbook
    from compiler.settings import load_settings
    from compiler.timeseries import fill_gaps
    from compiler import uncertainty as U

    folder = workdir / f"rows-{n_rows}"
    start = time.perf_counter()
    settings_path = synthetic.write_inventory(folder, n_rows, iterations=iterations)
    generated = time.perf_counter() - start
    settings = load_settings(settings_path)
    library = load_library()
    out: dict = {"rows": n_rows, "repeat": repeat, "iterations": iterations, "times": {}, "peak": {},
                 "before": {}, "failed": {}, "generate_s": generated, "baseline": rss_bytes(),
                 "csv_mb": (folder / "activity.csv").stat().st_size / 1e6, "emission_rows": 0,
                 "kernel_agrees": None, "strata_sheets": 0, "workbook_mb": 0.0, "workbook_sheets": [],
                 "emissions_csv_mb": 0.0}

    class Skipped(Exception):
        pass

    def stage(name, run, times=repeat):
        if name not in stages:
            raise Skipped(name)
        before = rss_bytes()
        try:
            t, peak, value = measure(run, times)
        except MemoryError:
            out["failed"][name], out["peak"][name], out["before"][name] = "MemoryError", peak_bytes(), before
            raise Skipped(name) from None
        out["times"][name], out["peak"][name], out["before"][name] = t, peak, before
        return value

    def load():
        log = FindingLog()
        return load_activity(settings, log), load_fires(settings, log), load_overrides(settings, log)

    def aggregate():
        allocated = allocate(emissions, library)
        return allocated, category_table(allocated, library, settings.years)

    try:
        log = FindingLog()
        activity, fires, overrides = (stage("load", load) if "load" in stages else
                                      (load_activity(settings, log), load_fires(settings, log),
                                       load_overrides(settings, log)))
        filled = stage("gaps", lambda: fill_gaps(activity, settings.years, settings.fill, settings.trend_years,
                                                 FindingLog(), settings.fill_by_region))
        engine = stage("compute", lambda: compute(filled, fires, overrides, library, settings, FindingLog()))
        emissions = engine.emissions
        out["emission_rows"] = len(emissions)
        emissions["year"] = emissions["year"].astype("int64")
        emissions["input_row"] = emissions["input_row"].astype("int64")
        gwp = gwp_table(library.gwp, settings.gwp)
        emissions["co2eq_t"] = co2_equivalent(emissions["emission_t"], emissions["gas"], gwp)
        allocated, categories = stage("aggregate", aggregate)
        arrays = kernel_arrays(allocated)
        sums = stage("kernel", lambda: bare_kernel(arrays), times=max(repeat, 5))
        check = categories.dropna(subset=["emission_t"]).set_index(["category_code", "gas", "year"])["emission_t"]
        out["kernel_agrees"] = bool(np.allclose(check.reindex(arrays["cells"]).to_numpy(), sums, rtol=1e-9,
                                                atol=1e-9))
        del engine, emissions, allocated, categories, arrays, filled, activity
    except Skipped:
        pass
    try:
        result = stage("compile", lambda: compile_inventory(settings, analyses=False))
    except Skipped:
        return out
    try:
        stage("full", lambda: compile_inventory(settings), times=max(1, repeat // 2))
    except Skipped:
        pass
    tmp = Path(tempfile.mkdtemp(prefix="bench-out-", dir=workdir))
    try:
        try:
            a1 = stage("approach1", lambda: U.approach1(result))
            mc = stage("mc", lambda: U.monte_carlo(result, iterations=iterations))
            import dataclasses  # a compiled result is read-only: a copy carries the analyses

            result = dataclasses.replace(result, uncertainty=U.UncertaintyResult(approach="both", approach1=a1,
                                                                                 monte_carlo=mc))
            del mc
        except Skipped:
            pass
        try:
            from compiler.qaqc import QaqcThresholds, run_checks  # in progress elsewhere: timed where present

            thresholds = QaqcThresholds.from_mapping(getattr(result.settings, "qaqc", {}))
            stage("qaqc", lambda: run_checks(result, thresholds))
        except (ImportError, AttributeError, TypeError, Skipped):
            pass
        out["strata_sheets"] = max(1, math.ceil(len(result.emissions) / (SHEET_ROW_LIMIT - 1)))
        try:
            stage("workbook", lambda: write_workbook(result, tmp / "inventory.xlsx"))
            out["workbook_mb"] = (tmp / "inventory.xlsx").stat().st_size / 1e6
            out["workbook_sheets"] = _sheet_names(tmp / "inventory.xlsx")
        except Skipped:
            pass
        try:
            stage("csv", lambda: write_csv(result.emissions, tmp / "emissions.csv", EXPORT_COLUMNS))
            out["emissions_csv_mb"] = (tmp / "emissions.csv").stat().st_size / 1e6
        except Skipped:
            pass
        if report and "report" in stages:
            from compiler.render.report import write_report

            try:
                full = compile_inventory(settings)  # the report needs every analysis (not timed)
                stage("report", lambda: write_report(full, tmp), times=1)
            except Skipped:
                pass
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return out


def _sheet_names(path: Path) -> list[str]:
    import re
    import zipfile

    with zipfile.ZipFile(path) as z:
        book = z.read("xl/workbook.xml").decode("utf-8")
    return re.findall(r'<sheet[^>]* name="([^"]+)"', book)


# --- the table ----------------------------------------------------------------------------------


def slope(rows: list[int], times: list[float]) -> float:
    """Least-squares slope of log(time) against log(rows)."""
    if len(rows) < 2 or any(t <= 0 for t in times):
        return math.nan
    return float(np.polyfit(np.log10(rows), np.log10(times), 1)[0])


def _fmt_time(t: float | None) -> str:
    if t is None or (isinstance(t, float) and math.isnan(t)):
        return "-"
    if t < 0.01:
        return f"{t * 1000:.2f} ms"
    if t < 1:
        return f"{t * 1000:.0f} ms"
    return f"{t:.2f} s"


def print_tables(results: list[dict], stream=None) -> dict:
    """The scaling table, slopes, ratios and peaks. Returns the summary figures."""
    p = lambda *a: print(*a, file=stream or sys.stdout)  # noqa: E731
    results = sorted(results, key=lambda r: r["rows"])
    sizes = [r["rows"] for r in results]
    med = {r["rows"]: {s: statistics.median(t) for s, t in r["times"].items()} for r in results}
    failed = {r["rows"]: r.get("failed", {}) for r in results}
    width = 12

    def cell(n, s):
        if s in failed[n]:
            return failed[n][s]
        return _fmt_time(med[n].get(s))

    p("")
    p("Median time per stage (runs per size: " + ", ".join(f"{r['rows']:,}: {r['repeat']}" for r in results) + ")")
    p("stage".ljust(10) + "".join(f"{n:>{width},}" for n in sizes) + "   slope 1e4-1e6")
    summary: dict = {"slopes": {}, "ratio": {}, "peak_gib": {}, "median": med}
    for s in STAGES:
        if all(s not in med[n] and s not in failed[n] for n in sizes):
            continue
        span = [(n, med[n][s]) for n in sizes if 10_000 <= n <= 1_000_000 and s in med[n]]
        sl = slope([n for n, _ in span], [t for _, t in span]) if len(span) >= 2 else math.nan
        gone = [n for n in sizes if 10_000 <= n <= 1_000_000 and s in failed[n]]
        if gone:  # a size that failed cannot be on the line: the slope says nothing
            sl = math.nan
        summary["slopes"][s] = sl
        if s == "kernel":
            flag = "  (the reference)"
        else:
            flag = "" if math.isnan(sl) else ("  ok" if sl <= 1.1 else "  MISS (target <= 1.1)")
        p(s.ljust(10) + "".join(f"{cell(n, s):>{width}}" for n in sizes)
          + (f"   {sl:5.2f}{flag}" if not math.isnan(sl) else
             "   - (failed at " + ", ".join(f"{n:,}" for n in gone) + " rows)" if gone else "   -"))
    p("")
    p("compute / bare kernel (target <= 2 at 1e6 rows); kernel reproduces the category sums:")
    for r in results:
        n = r["rows"]
        if "compute" not in med[n] or "kernel" not in med[n]:
            continue
        ratio = med[n]["compute"] / med[n]["kernel"]
        summary["ratio"][n] = ratio
        p(f"  {n:>9,} rows ({r['emission_rows']:,} result rows): compute {_fmt_time(med[n]['compute'])}, "
          f"kernel {_fmt_time(med[n]['kernel'])}, ratio {ratio:,.0f}; agrees: {r['kernel_agrees']}")
    p("")
    p("Peak resident memory of the process during each stage, GiB (what the stage added to the memory held "
      "before it in brackets):")
    p("stage".ljust(10) + "".join(f"{n:>{width + 7},}" for n in sizes))
    for s in STAGES:
        row = [(r["peak"].get(s), r["before"].get(s)) for r in results]
        if all(v is None for v, _ in row):
            continue
        p(s.ljust(10) + "".join(("-" if v is None else f"{v / GIB:.2f} (+{max(v - b, 0) / GIB:.2f})").rjust(width + 7)
                                for v, b in row))
    for r in results:
        summary["peak_gib"][r["rows"]] = max(r["peak"].values()) / GIB if r["peak"] else math.nan
    p("")
    for r in results:
        sheets = [n for n in r["workbook_sheets"] if n.startswith("strata")]
        p(f"  {r['rows']:>9,} rows: activity.csv {r['csv_mb']:.1f} MB (generated in {r['generate_s']:.1f} s), "
          f"emissions.csv {r['emissions_csv_mb']:.1f} MB, inventory.xlsx {r['workbook_mb']:.1f} MB with "
          f"{len(sheets) or r['strata_sheets']} strata sheet(s){': ' + ', '.join(sheets) if sheets else ''}; "
          f"Monte Carlo {r['iterations']:,} iterations")
    return summary


def parcels_benchmark(n_rows: int, workdir: Path, parcels_per_stratum: int = 3, stream=None) -> dict:
    """Aggregation of a Parquet file of ``n_rows`` x ``parcels_per_stratum`` parcels with DuckDB and Dask."""
    import dask

    from compiler.parcels import aggregate_parcels

    path = workdir / f"parcels-{n_rows}x{parcels_per_stratum}.parquet"
    if not path.exists():
        synthetic.write_parcels(path, synthetic.activity_table(n_rows), parcels_per_stratum)
    out = {"parcels": n_rows * parcels_per_stratum, "file_mb": path.stat().st_size / 1e6}
    tables = {}
    for engine in ("duckdb", "dask"):
        with dask.config.set(scheduler="threads"):
            times, peak, tables[engine] = measure(lambda: aggregate_parcels(path, engine=engine), 1)
        out[engine] = (times[0], peak)
    out["identical"] = tables["duckdb"].equals(tables["dask"])
    print(f"parcels: {out['parcels']:,} parcel-years ({out['file_mb']:.0f} MB Parquet) -> {len(tables['duckdb']):,} "
          f"strata: duckdb {out['duckdb'][0]:.2f} s (peak {out['duckdb'][1] / GIB:.2f} GiB), dask (threaded "
          f"scheduler) {out['dask'][0]:.2f} s (peak {out['dask'][1] / GIB:.2f} GiB); identical tables: "
          f"{out['identical']}", file=stream or sys.stdout)
    return out


# --- entry points ---------------------------------------------------------------------------------


def run_child(n_rows: int, workdir: Path, repeat: int, iterations: int, report: bool, stages: str,
              memory_gib: float, module: str = "tests.benchmarks.bench_pipeline") -> dict:
    """One size in a fresh interpreter; its result comes back as JSON on the last line of stdout."""
    cmd = [sys.executable, "-m", module, "--child", str(n_rows), "--workdir", str(workdir), "--repeat", str(repeat),
           "--iterations", str(iterations), "--stages", stages, "--memory-limit-gib", str(memory_gib)]
    cmd += ["--report"] if report else []
    proc = subprocess.run(cmd, capture_output=True, text=True, cwd=Path(__file__).resolve().parents[2])
    if proc.returncode != 0:
        raise SystemExit(f"benchmark at {n_rows:,} rows failed:\n{proc.stderr[-4000:]}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def machine() -> str:
    import pandas as pd

    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else math.nan
    return (f"machine: {platform.processor() or platform.machine()}, {os.cpu_count()} cores, Python "
            f"{platform.python_version()}, numpy {np.__version__}, pandas {pd.__version__}; load average at "
            f"start {load:.2f}")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default=",".join(str(s) for s in synthetic.SIZES))
    parser.add_argument("--iterations", type=int, default=2000, help="Monte Carlo iterations per run (default 2000)")
    parser.add_argument("--repeat", type=int, help="runs per stage (default: 5, 5, 3, 1 by size)")
    parser.add_argument("--stages", default=",".join(STAGES), help="stages to time (default: all)")
    parser.add_argument("--memory-limit-gib", type=float, default=20.0,
                        help="address-space cap of each size's process (default 20): a stage beyond it fails "
                             "with MemoryError instead of exhausting the machine")
    parser.add_argument("--workdir", help="folder for the generated inputs (kept between runs; default: a "
                        "folder in the system's temporary directory)")
    parser.add_argument("--smoke", action="store_true", help="the smallest size, once, in this process")
    parser.add_argument("--child", type=int, help=argparse.SUPPRESS)
    parser.add_argument("--report", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    workdir = Path(args.workdir or Path(tempfile.gettempdir()) / "histosol-bench")
    workdir.mkdir(parents=True, exist_ok=True)
    stages = tuple(s.strip() for s in args.stages.split(",") if s.strip())
    if args.child:
        limit_memory(args.memory_limit_gib)
        result = run_size(args.child, workdir, args.repeat or REPEATS.get(args.child, 1), args.iterations,
                          args.report, stages)
        print(json.dumps(result))
        return 0
    print(machine())
    if args.smoke:
        size = synthetic.SIZES[0]
        result = run_size(size, workdir, 1, min(args.iterations, 1000), report=False,
                          stages=tuple(s for s in stages if s != "report"))
        print_tables([result])
        return 0
    results = []
    for size in (int(s) for s in args.sizes.split(",")):
        start = time.perf_counter()
        results.append(run_child(size, workdir, args.repeat or REPEATS.get(size, 1), args.iterations,
                                 size in REPORT_SIZES, ",".join(stages), args.memory_limit_gib))
        print(f"  {size:,} rows done in {time.perf_counter() - start:.0f} s", flush=True)
    print_tables(results)
    return 0


if __name__ == "__main__":
    sys.exit(main())


# --- the compile as a user runs it, against a plain pandas script -------------------------------------

def _cpu_of(command: list[str], cwd: Path) -> float:
    """CPU seconds (user + system) of one child process running ``command``."""
    import resource

    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    proc = subprocess.run(command, cwd=cwd, capture_output=True, text=True)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if proc.returncode != 0:
        raise RuntimeError(f"{' '.join(command[:4])} failed: {proc.stderr.strip()[-300:]}")
    return (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def cli_against_peer(n_rows: int, workdir: Path, repeat: int = 3) -> dict:
    """``histosol compile --no-report`` with Approach 1 against the peer baseline, CPU seconds, medians."""
    from tests.benchmarks import peer_baseline

    folder = workdir / f"rows-{n_rows}"
    settings = synthetic.write_inventory(folder, n_rows)
    approach1 = folder / "inventory-approach1.toml"
    approach1.write_text(settings.read_text(encoding="utf-8").replace('approach = "both"', 'approach = "1"'),
                         encoding="utf-8")
    sample = synthetic.write_inventory(workdir / "rows-1000", 1_000)
    factors = folder / "peer-factors.csv"
    peer_baseline.factor_rows(sample).to_csv(factors, index=False)
    root = Path(__file__).resolve().parents[2]
    ours, peer = [], []
    for _ in range(repeat):  # interleaved, so both see the same machine state
        with tempfile.TemporaryDirectory(dir=workdir) as tmp:
            ours.append(_cpu_of([sys.executable, "-m", "compiler", "compile", str(approach1), "--no-report",
                                 "--quiet", "--out", str(Path(tmp) / "out")], root))
            peer.append(_cpu_of([sys.executable, "-m", "tests.benchmarks.peer_baseline", str(folder / "activity.csv"),
                                 str(factors), str(Path(tmp) / "peer.csv")], root))
    out = {"rows": n_rows, "ours_cpu_s": statistics.median(ours), "peer_cpu_s": statistics.median(peer)}
    out["ratio"] = out["ours_cpu_s"] / out["peer_cpu_s"]
    print(f"histosol compile --no-report (Approach 1) at {n_rows:,} stratum-years: {out['ours_cpu_s']:.2f} s CPU; "
          f"plain pandas script: {out['peer_cpu_s']:.2f} s CPU; ratio {out['ratio']:.1f} (target <= 3; median of "
          f"{repeat}, interleaved)")
    return out
