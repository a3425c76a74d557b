"""The benchmark scripts run (smallest size, once) and their kernels reproduce the engine's sums.

No timing is asserted here or anywhere: speed is read from ``python -m tests.benchmarks``.
"""

from __future__ import annotations

from tests.benchmarks.__main__ import main


def test_smoke_benchmark_runs_and_its_kernels_agree(tmp_path, capsys):
    assert main(["--smoke", "--workdir", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "Median time per stage" in out
    assert "1,000 rows (5,100 result rows)" in out and "agrees: True" in out  # bare kernel = category sums
    assert "kernel reproduces the cell totals: True" in out  # Monte Carlo kernel = monte_carlo's cells
    assert "identical tables: True" in out or "parcels: duckdb or dask[dataframe] not installed" in out
