"""manifest.json: what was run, on what, and what came out."""

from __future__ import annotations

import platform
from pathlib import Path

from .. import __version__
from ..factors import file_sha256


def manifest(result, folder: Path, files: list[str]) -> dict:
    s = result.settings
    activity = result.activity
    areas = result.aggregates.area_total_ha
    return {
        "tool": "histosol",
        "version": __version__,
        "python": platform.python_version(),
        "compile_date": result.compile_date,
        "settings": {key: value for key, value, _ in s.as_table()},
        "inputs_sha256": {k: v for k, v in sorted(result.input_hashes.items()) if not k.startswith("factor_tables/")},
        "factor_tables_sha256": {k.split("/", 1)[1]: v for k, v in sorted(result.input_hashes.items())
                                 if k.startswith("factor_tables/")},
        "gwp100": result.gwp,
        "row_counts": {
            "activity_rows": int(len(activity)),
            "emission_rows": int(len(result.emissions)),
            "estimate_rows": int((result.emissions["notation_key"] == "").sum()),
            "category_cells": int(len(result.categories)),
            "factors_used": int(len(result.factors_used)),
            "findings": {sev: int((result.findings["severity"] == sev).sum()) for sev in ("error", "warning", "info")},
        },
        "area_ha_by_year": {str(int(y)): round(float(a), 6) for y, a in areas.items()},
        "outputs_sha256": {name: file_sha256(folder / name) for name in files},
    }
