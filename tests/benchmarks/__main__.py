"""Every benchmark: ``python -m tests.benchmarks`` (``--smoke`` for CI, ``--quick`` without 1e6 rows).

Prints, in order: the stage-by-stage scaling table (1e3 to 1e6 stratum-year rows) with its log-log
slopes, including the whole compile with every analysis (``full``), the compute / bare-kernel ratio and
peak memory (:mod:`tests.benchmarks.bench_pipeline`); ``histosol compile --no-report`` against a plain
pandas script doing the irreducible work at 1e5 rows, in CPU seconds (:mod:`tests.benchmarks.peer_baseline`);
the Monte Carlo against its bare kernel on the demo and at scale, with its peak memory at 1e6 rows
and 100,000 iterations and by chunk size (:mod:`tests.benchmarks.bench_montecarlo`); the parcel
aggregation with DuckDB and Dask; the demo end to end (``histosol demo``); the peak memory of a fresh process
that runs the whole compile at the largest size with 10,000 iterations; and a summary of the
project's targets, met or missed. Nothing is asserted: the numbers are for people to read.

``--smoke`` runs the smallest size once, in this process (a few seconds), and exits 0.
"""

from __future__ import annotations

import argparse
import json
import math
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from tests.benchmarks import bench_montecarlo, bench_pipeline, synthetic

ROOT = Path(__file__).resolve().parents[2]


def _mc_child(args: list[str], memory_gib: float) -> dict:
    cmd = [sys.executable, "-m", "tests.benchmarks.bench_montecarlo", *args, "--json",
           "--memory-limit-gib", str(memory_gib)]
    proc = subprocess.run(cmd, capture_output=True, text=True, cwd=ROOT)
    lines = proc.stdout.strip().splitlines()
    for line in lines[:-1]:
        print("  " + line)
    if proc.returncode != 0:
        tail = proc.stderr.strip().splitlines()[-1:] or ["(no message)"]
        print(f"  monte carlo {' '.join(args)} failed: {tail[0]}")
        return {"failed": tail[0]}
    return json.loads(lines[-1])


def _demo_end_to_end(repeat: int = 3) -> dict:
    """Wall time of ``histosol demo`` (all outputs) and of ``--no-report``, median of ``repeat``."""
    out = {}
    for label, extra in (("all outputs", []), ("without the report", ["--no-report"])):
        times = []
        for _ in range(repeat):
            with tempfile.TemporaryDirectory() as tmp:
                start = time.perf_counter()
                proc = subprocess.run([sys.executable, "-m", "compiler", "demo", "--out", str(Path(tmp) / "out"),
                                       "--quiet", *extra], capture_output=True, text=True, cwd=tmp)
                times.append(time.perf_counter() - start)
            if proc.returncode != 0:
                print(f"  histosol demo {' '.join(extra)} failed: {proc.stderr.strip()[-300:]}")
                break
        out[label] = statistics.median(times)
        print(f"  histosol demo ({label}): {out[label]:.1f} s (median of {len(times)})")
    return out


def _full_compile_peak(n_rows: int, workdir: Path, iterations: int = 10_000) -> dict:
    """Peak resident memory of a fresh process that runs the whole compile (every analysis) at ``n_rows``
    stratum-years with ``iterations`` Monte Carlo iterations, and its wall time."""
    settings = synthetic.write_inventory(workdir / f"rows-{n_rows}", n_rows, iterations=iterations)
    code = ("import resource, sys; from compiler import compile_inventory; "
            f"compile_inventory(sys.argv[1], iterations={iterations}); "
            "print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)")  # the child's own peak (Linux: KiB)
    start = time.perf_counter()
    proc = subprocess.run([sys.executable, "-c", code, str(settings)], capture_output=True, text=True, cwd=ROOT)
    seconds = time.perf_counter() - start
    if proc.returncode != 0:
        print(f"  full compile at {n_rows:,} rows failed: {proc.stderr.strip()[-300:]}")
        return {}
    peak_kib = int(proc.stdout.strip().splitlines()[-1])
    out = {"rows": n_rows, "iterations": iterations, "seconds": seconds, "peak_gib": peak_kib / 1024 ** 2}
    print(f"  whole compile with every analysis at {n_rows:,} rows, {iterations:,} iterations, in a fresh process: "
          f"{seconds:.1f} s, peak resident memory {out['peak_gib']:.2f} GiB")
    return out


def smoke(workdir: Path) -> int:
    print(bench_pipeline.machine())
    result = bench_pipeline.run_size(synthetic.SIZES[0], workdir, 1, 1000, report=False,
                                     stages=tuple(s for s in bench_pipeline.STAGES if s != "report"))
    bench_pipeline.print_tables([result])
    print("")
    bench_montecarlo.main(["--rows", str(synthetic.SIZES[0]), "--iterations", "2000", "--repeat", "1",
                           "--workdir", str(workdir)])
    try:
        import dask.dataframe  # noqa: F401
        import duckdb  # noqa: F401
        import pyarrow  # noqa: F401
    except ImportError:
        print("parcels: duckdb or dask[dataframe] not installed (optional extra 'parcels'); skipped")
    else:
        print("")
        bench_pipeline.parcels_benchmark(synthetic.SIZES[0], workdir)
    return 0


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--smoke", action="store_true", help="smallest size once, in this process; exit 0")
    parser.add_argument("--quick", action="store_true", help="sizes up to 1e5 rows only")
    parser.add_argument("--workdir", help="folder for generated inputs (default: system temporary folder)")
    parser.add_argument("--memory-limit-gib", type=float, default=20.0)
    args = parser.parse_args(argv)
    workdir = Path(args.workdir or Path(tempfile.gettempdir()) / "histosol-bench")
    workdir.mkdir(parents=True, exist_ok=True)
    if args.smoke:
        return smoke(workdir)
    big = 100_000 if args.quick else 1_000_000
    sizes = [s for s in synthetic.SIZES if s <= big]

    print("== Pipeline stages ==")
    print(bench_pipeline.machine())
    results = []
    for size in sizes:
        start = time.perf_counter()
        results.append(bench_pipeline.run_child(size, workdir, bench_pipeline.REPEATS.get(size, 1), 2000,
                                                size in bench_pipeline.REPORT_SIZES,
                                                ",".join(bench_pipeline.STAGES), args.memory_limit_gib))
        print(f"  {size:,} rows done in {time.perf_counter() - start:.0f} s", flush=True)
    summary = bench_pipeline.print_tables(results)

    print("\n== Monte Carlo ==")
    w = ["--workdir", str(workdir)]
    mc = {"demo": _mc_child(["--iterations", "100000", "--repeat", "3"], args.memory_limit_gib)}
    mc["1e5"] = _mc_child(["--rows", "100000", "--iterations", "100000", "--repeat", "1", *w], args.memory_limit_gib)
    if not args.quick:
        mc["1e6 ratio"] = _mc_child(["--rows", "1000000", "--iterations", "10000", "--repeat", "1", *w],
                                    args.memory_limit_gib)
        for chunk in (1000, 2000, 4000):
            mc[f"1e6 chunk {chunk}"] = _mc_child(["--rows", "1000000", "--iterations", "4000", "--repeat", "1",
                                                  "--no-kernel", "--peak", "--chunk", str(chunk), *w],
                                                 args.memory_limit_gib)

    print("\n== Parcels (Parquet -> stratum table) ==")
    try:
        parcels = bench_pipeline.parcels_benchmark(big, workdir)
    except ImportError as exc:
        parcels = None
        print(f"  skipped: {exc} (optional extra 'parcels')")

    print("\n== histosol compile against a plain pandas script ==")
    peer = bench_pipeline.cli_against_peer(100_000, workdir)

    print("\n== Demo end to end ==")
    demo = _demo_end_to_end()

    print("\n== Whole compile, peak memory ==")
    compile_peak = _full_compile_peak(big, workdir)

    if not args.quick:  # the longest run last: 1e6 rows, 100,000 iterations, the default chunk
        print("\n== Monte Carlo at 1e6 rows and 100,000 iterations ==")
        mc["1e6 full"] = _mc_child(["--rows", "1000000", "--iterations", "100000", "--repeat", "1", "--no-kernel",
                                    "--peak", *w], args.memory_limit_gib)

    print("\n== Targets ==")
    largest = max(sizes)
    ratio = summary["ratio"].get(largest, math.nan)
    print(f"  engine <= 5 x bare kernel at {largest:,} rows: {ratio:,.0f} x -> {'met' if ratio <= 5 else 'MISSED'}")
    print(f"  histosol compile --no-report (Approach 1) <= 3 x a plain pandas script at {peer['rows']:,} rows: "
          f"{peer['ratio']:.1f} x -> {'met' if peer['ratio'] <= 3 else 'MISSED'}")
    full_slope = summary["slopes"].get("full")
    if full_slope is not None:
        print(f"  the whole compile with its analyses scales with slope {full_slope:.2f} from 1e4 to {largest:.0e} "
              f"rows -> {'met' if full_slope <= 1.1 else 'MISSED'}")
    over = {s: v for s, v in summary["slopes"].items() if s != "kernel" and not math.isnan(v) and v > 1.1}
    failed = sorted({s for r in results for s in r.get("failed", {})})
    if failed:
        print(f"  stages that failed (out of memory under the {args.memory_limit_gib:g} GiB cap): {', '.join(failed)}")
    print(f"  every stage's slope <= 1.1 from 1e4 to {largest:.0e} rows: "
          + ("met" if not over else "MISSED by " + ", ".join(f"{s} ({v:.2f})" for s, v in over.items())))
    for key in ("demo", "1e5", "1e6 ratio"):
        r = mc.get(key, {}).get("ratio")
        if r is not None:
            print(f"  Monte Carlo <= 3 x its kernel ({key}): {r:.2f} x -> {'met' if r <= 3 else 'MISSED'}")
    full = mc.get("1e6 full", {})
    if "peak_gib" in full:
        print(f"  peak <= 2 GiB at 1e6 rows and 100,000 iterations: process peak {full['peak_gib']:.2f} GiB "
              f"(the Monte Carlo itself added {full['added_gib']:.2f} GiB to the {full['held_gib']:.2f} GiB "
              f"compiled inventory; chunk {full['chunk']:,}) -> {'met' if full['peak_gib'] <= 2 else 'MISSED'}")
    if "peak_gib" in compile_peak:
        p = compile_peak["peak_gib"]
        print(f"  whole compile at {compile_peak['rows']:,} rows with {compile_peak['iterations']:,} iterations "
              f"<= 2 GiB peak: {p:.2f} GiB -> {'met' if p <= 2 else 'MISSED'}")
    for chunk in (1000, 2000, 4000):
        r = mc.get(f"1e6 chunk {chunk}", {})
        if "added_gib" in r:
            print(f"    chunk {chunk:,}: the Monte Carlo added {r['added_gib']:.2f} GiB")
    if largest in summary["peak_gib"]:
        print(f"  peak of the pipeline stages at {largest:,} rows: {summary['peak_gib'][largest]:.2f} GiB")
    if "all outputs" in demo:
        t = demo["all outputs"]
        print(f"  histosol demo, all outputs, <= 5 s: {t:.1f} s -> {'met' if t <= 5 else 'MISSED'}"
              + (f" ({demo['without the report']:.1f} s without the report)" if "without the report" in demo else ""))
    if parcels:
        print(f"  parcels: duckdb and dask tables identical: {parcels['identical']}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
