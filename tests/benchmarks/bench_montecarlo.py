"""Benchmark of the Approach 2 Monte Carlo (a script, not a test: no timings are asserted anywhere).

Times :func:`compiler.uncertainty.monte_carlo` and a bare numpy kernel that draws the same random
numbers (one PCG64 stream per block of RNG_BLOCK iterations) and does the same sums (factor x area
multiplier x coefficient, summed per reported cell, and the CO2-eq totals), then prints both times
and their ratio. The kernel's cell totals are compared with the full run's, to show that both do
the same work (to rounding: the two add the rows of a cell in different groupings).

The kernel works through the rows in slices, as the engine does, so that its arrays stay in cache:
a kernel that multiplies every row by every iteration at once is slower than the engine at
10,000 rows and more, which would flatter the ratio.

Run from the repository root::

    python -m tests.benchmarks.bench_montecarlo [--iterations 100000] [--repeat 3]
    python -m tests.benchmarks.bench_montecarlo --rows 1000000 --iterations 100000 --no-kernel --peak

``--rows N`` uses a synthetic inventory of N stratum-year rows (:mod:`tests.benchmarks.synthetic`)
instead of the demo; ``--peak`` reports the peak resident memory of the process during the run and
what the run itself added (Linux VmHWM); ``--chunk`` sets ``monte_carlo``'s chunk size.

Targets (common practice for this project, no source): at most 10 s for 100,000 iterations over the
demo on a 2-core machine, a ratio below 3, and at most 2 GiB at 1e6 rows and 100,000 iterations.
"""

from __future__ import annotations

import argparse
import os
import platform
import tempfile
import time
from pathlib import Path

import numpy as np

from compiler import compile_inventory
from compiler import uncertainty as U
from compiler.resources import resource_dir

KERNEL_SLICE = 256  # rows per slice in the bare kernel (the fastest of 128 to 4096 tried on a 2-core machine)
GIB = 1024 ** 3


def bare_kernel(result, iterations: int, seed: int, model=None) -> np.ndarray:
    """Cell and total values per iteration, (cells + years) x iterations, with numpy only."""
    model = model or U._build_model(result)  # the same rows, inputs and draws as monte_carlo
    k = U._kernel(model)
    if len(k.kind_index["beta"]) or len(k.kind_index["uniform"]):
        raise SystemExit("the bare kernel covers normal, lognormal and fixed inputs only")
    loc, scale = k.loc[:, None], k.scale[:, None]
    normal = k.kind_index["normal"]
    logn = np.r_[k.kind_index["lognormal"], k.kind_index["negative lognormal"]]
    fixed = k.kind_index["fixed"]
    cell = model.rows["cell"].to_numpy()
    n_rows = len(cell)
    has_param = np.zeros(n_rows, dtype=bool)
    has_param[k.param_rows] = True
    slices = []
    for a in range(0, n_rows, KERNEL_SLICE):
        b = min(a + KERNEL_SLICE, n_rows)
        c = cell[a:b]
        starts = np.flatnonzero(np.r_[True, c[1:] != c[:-1]])
        p = np.flatnonzero(has_param[a:b])
        slices.append((a, b, starts, c[starts], p))
    out = np.empty((k.n_cells + len(model.years), iterations))
    n_blocks = -(-iterations // U.RNG_BLOCK)
    for block in range(n_blocks):
        n = min(U.RNG_BLOCK, iterations - block * U.RNG_BLOCK)
        rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence(seed, spawn_key=(block,))))
        z = rng.standard_normal((k.n_inputs + k.n_draws, n))
        f = np.empty((k.n_inputs, n))
        f[fixed] = k.value[fixed, None]
        f[normal] = loc[normal] + scale[normal] * z[normal]
        f[logn] = k.sign[logn, None] * np.exp(k.mu[logn, None] + k.sigma[logn, None] * z[logn])
        za = z[k.n_inputs:]
        bad = za < k.z_lower[:, None]
        while bad.any():  # truncation at zero area, as the engine draws it
            za[bad] = rng.standard_normal(int(bad.sum()))
            bad = za < k.z_lower[:, None]
        area = 1.0 + k.mult_sd[:, None] * za[k.mult_draw]
        sums = np.zeros((k.n_cells, n))
        for a, b, starts, cells, p in slices:
            v = f[k.fid[a:b]]
            v *= area[k.multiplier[a:b]]
            if len(p):
                v[p] *= k.g0[a + p, None] + k.g1[a + p, None] * f[k.pid[a + p]]
            v *= k.coef[a:b, None]
            sums[cells] += np.add.reduceat(v, starts, axis=0)
        j = block * U.RNG_BLOCK
        out[:k.n_cells, j:j + n] = sums
        out[k.n_cells:, j:j + n] = k.total_weights @ sums
    return out


def best_of(repeat: int, run):
    times, value = [], None
    for _ in range(repeat):
        value = None
        start = time.perf_counter()
        value = run()
        times.append(time.perf_counter() - start)
    return min(times), value


def _status(key: str) -> int:
    try:
        with open("/proc/self/status") as handle:
            for line in handle:
                if line.startswith(key):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 0


def _reset_peak() -> None:
    try:
        with open("/proc/self/clear_refs", "w") as handle:
            handle.write("5")
    except OSError:
        pass


def inventory(rows: int | None, workdir: Path):
    """The compiled demo, or a synthetic inventory of ``rows`` stratum-years (analyses not run)."""
    if not rows:
        return compile_inventory(resource_dir("examples") / "demo" / "inventory.toml", analyses=False), "the demo"
    from tests.benchmarks import synthetic

    settings = synthetic.write_inventory(workdir / f"rows-{rows}", rows)
    return compile_inventory(settings, analyses=False), f"{rows:,} synthetic stratum-years"


def main(argv=None) -> dict:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--iterations", type=int, default=100_000)
    parser.add_argument("--repeat", type=int, default=3, help="best of this many runs (default 3)")
    parser.add_argument("--rows", type=int, help="a synthetic inventory of this many stratum-year rows (default: demo)")
    parser.add_argument("--chunk", type=int, default=U.DEFAULT_CHUNK, help="monte_carlo chunk size")
    parser.add_argument("--no-kernel", action="store_true", help="time monte_carlo only")
    parser.add_argument("--peak", action="store_true", help="report peak resident memory")
    parser.add_argument("--workdir", help="folder for generated inputs (default: system temporary folder)")
    parser.add_argument("--memory-limit-gib", type=float, help="cap the address space of this process")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON on the last line")
    args = parser.parse_args(argv)
    if args.memory_limit_gib:
        import resource

        limit = int(args.memory_limit_gib * GIB)
        resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
    workdir = Path(args.workdir or Path(tempfile.gettempdir()) / "histosol-bench")
    result, what = inventory(args.rows, workdir)
    seed = result.settings.seed
    model = U._build_model(result)
    print(f"machine: {platform.processor() or platform.machine()}, {os.cpu_count()} cores, numpy {np.__version__}")
    print(f"{what}: estimate rows x inputs x area draws of the reported years: {len(model.rows):,} x "
          f"{len(model.inputs)} x {len(model.draws):,}; cells {len(model.cells)}")
    if not args.rows:
        U.monte_carlo(result, iterations=2000)  # warm-up (imports, caches)
    held = _status("VmRSS")
    _reset_peak()
    full_time, mc = best_of(args.repeat, lambda: U.monte_carlo(result, iterations=args.iterations, seed=seed,
                                                                chunk_size=args.chunk))
    peak = _status("VmHWM")
    out = {"rows": args.rows, "iterations": args.iterations, "chunk": mc.chunk_size, "mc_s": full_time}
    print(f"monte_carlo, {args.iterations:,} iterations (chunk {mc.chunk_size:,}): {full_time:.3f} s "
          f"(best of {args.repeat})")
    if args.peak:
        out.update(peak_gib=peak / GIB, held_gib=held / GIB, added_gib=(peak - held) / GIB)
        print(f"peak resident memory during monte_carlo: {peak / GIB:.2f} GiB, of which the run added "
              f"{(peak - held) / GIB:.2f} GiB (the compiled inventory held before it: {held / GIB:.2f} GiB)")
    if not args.no_kernel:
        kernel_time, raw = best_of(args.repeat, lambda: bare_kernel(result, args.iterations, seed, model))
        same = np.allclose(mc.samples[:raw.shape[0]], raw, rtol=1e-9, atol=0.0)  # cells and totals
        out.update(kernel_s=kernel_time, ratio=full_time / kernel_time, same=bool(same))
        print(f"bare numpy kernel, same draws and sums:           {kernel_time:.3f} s (best of {args.repeat})")
        print(f"ratio monte_carlo / kernel: {full_time / kernel_time:.2f} (target < 3); "
              f"kernel reproduces the cell totals: {same}")
    if args.json:
        import json

        print(json.dumps(out))
    return out


if __name__ == "__main__":
    main()
