"""Render time of the demo report and its page count (a script, not a test).

    python -m tests.benchmarks.bench_report
"""

from __future__ import annotations

import statistics
import tempfile
import time
from pathlib import Path


def main(runs: int = 3) -> None:
    from pypdf import PdfReader

    from compiler import compile_inventory
    from compiler.render.report import write_report
    from compiler.resources import resource_dir

    result = compile_inventory(resource_dir("examples") / "demo" / "inventory.toml")
    times = []
    with tempfile.TemporaryDirectory() as tmp:
        for _ in range(runs):
            start = time.perf_counter()
            write_report(result, Path(tmp))
            times.append(time.perf_counter() - start)
        pages = len(PdfReader(Path(tmp) / "report.pdf").pages)
    print(f"demo report (charts, HTML, PDF layout and write): median {statistics.median(times):.2f} s over {runs} runs "
          f"(min {min(times):.2f} s), {pages} pages; target under 5 s on 2 cores")


if __name__ == "__main__":
    main()
