"""Benchmark of the Approach 2 Monte Carlo (a script, not a test: no timings are asserted anywhere).

Times :func:`compiler.uncertainty.monte_carlo` over the demo inventory, and a bare numpy kernel that
draws the same random numbers (one PCG64 stream per block of RNG_BLOCK iterations) and does the same
sums (factor x area multiplier x coefficient, summed per reported cell, and the CO2-eq totals), then
prints both times and their ratio. The kernel's cell totals are compared with the full run's, to show
that both do the same work.

Run from the repository root::

    python -m tests.benchmarks.bench_montecarlo [--iterations 100000] [--repeat 3]

Targets (common practice for this project, no source): at most 10 s for 100,000 iterations on a
2-core machine, and a ratio below 3.
"""

from __future__ import annotations

import argparse
import os
import platform
import time

import numpy as np

from compiler import compile_inventory
from compiler import uncertainty as U
from compiler.resources import resource_dir


def bare_kernel(result, iterations: int, seed: int) -> np.ndarray:
    """Cell and total values per iteration, (cells + years) x iterations, with numpy only."""
    model = U._build_model(result)  # the same rows, inputs and draws as monte_carlo
    k = U._kernel(model)
    if len(k.param_rows) or len(k.kind_index["beta"]) or len(k.kind_index["uniform"]):
        raise SystemExit("the bare kernel covers normal, lognormal and fixed inputs without parameter draws only")
    loc, scale = k.loc[:, None], k.scale[:, None]
    normal = k.kind_index["normal"]
    logn = np.r_[k.kind_index["lognormal"], k.kind_index["negative lognormal"]]
    fixed = k.kind_index["fixed"]
    cell = model.rows["cell"].to_numpy()
    starts = np.flatnonzero(np.r_[True, cell[1:] != cell[:-1]])
    coef = k.coef[:, None]
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
        area = 1.0 + k.mult_sd[:, None] * z[k.n_inputs + k.mult_draw]
        v = f[k.fid] * area[k.multiplier] * coef
        sums = np.add.reduceat(v, starts, axis=0)
        j = block * U.RNG_BLOCK
        out[:k.n_cells, j:j + n] = sums
        out[k.n_cells:, j:j + n] = k.total_weights @ sums
    return out


def best_of(repeat: int, run):
    times, value = [], None
    for _ in range(repeat):
        start = time.perf_counter()
        value = run()
        times.append(time.perf_counter() - start)
    return min(times), value


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--iterations", type=int, default=100_000)
    parser.add_argument("--repeat", type=int, default=3, help="best of this many runs (default 3)")
    args = parser.parse_args(argv)
    result = compile_inventory(resource_dir("examples") / "demo" / "inventory.toml")
    seed = result.settings.seed
    U.monte_carlo(result, iterations=2000)  # warm-up (imports, caches)
    full_time, mc = best_of(args.repeat, lambda: U.monte_carlo(result, iterations=args.iterations, seed=seed))
    kernel_time, raw = best_of(args.repeat, lambda: bare_kernel(result, args.iterations, seed))
    same = np.allclose(mc.samples[:raw.shape[0]], raw, rtol=1e-12, atol=0.0)  # cells and totals
    print(f"machine: {platform.processor() or platform.machine()}, {os.cpu_count()} cores, numpy {np.__version__}")
    print(f"rows x inputs x area draws: {len(U._build_model(result).rows)} x {len(mc.distributions)} x "
          f"{len(mc.activity_draws)}; cells kept: {mc.samples.shape[0]}")
    print(f"monte_carlo, {args.iterations:,} iterations over the demo: {full_time:.3f} s (best of {args.repeat})")
    print(f"bare numpy kernel, same draws and sums:           {kernel_time:.3f} s (best of {args.repeat})")
    print(f"ratio monte_carlo / kernel: {full_time / kernel_time:.2f} (target < 3); "
          f"kernel reproduces the cell totals: {same}")


if __name__ == "__main__":
    main()
