"""Build the demo's "previous submission" (deterministic; run from the repository root).

It stands for last year's export of the invented demo region: submission 2025 covering 1990-2023,
compiled with AR4 GWPs, before the Quillfen monitoring network's factor was adopted, and with the
older Vennmarsh cropland statistics (3 % less area), and before the off-site CO2 of extracted peat
was estimated (no peat production input). Written to examples/demo/previous/emissions.csv.gz.
"""

from __future__ import annotations

import shutil
import tempfile
from pathlib import Path

import pandas as pd

from compiler import compile_inventory

HERE = Path(__file__).resolve().parent / "demo"


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp) / "demo"
        shutil.copytree(HERE, work, ignore=shutil.ignore_patterns("previous"))
        settings = (work / "inventory.toml").read_text()
        settings = settings.replace("submission_year = 2026", "submission_year = 2025")
        settings = settings.replace("last_year = 2024", "last_year = 2023").replace('gwp = "AR5"', 'gwp = "AR4"')
        settings = settings.replace('overrides = "overrides.csv"\n', "")
        settings = "\n".join(line for line in settings.splitlines()
                             if not line.startswith(("previous_submission", "peat_production")))
        (work / "inventory.toml").write_text(settings + "\n")
        activity = pd.read_csv(work / "activity.csv", dtype=str, keep_default_na=False)
        activity = activity[activity["year"].astype(int) <= 2023]
        crop = (activity["region"] == "Vennmarsh") & (activity["land_use"] == "cropland")
        activity.loc[crop, "area_ha"] = (activity.loc[crop, "area_ha"].astype(float) * 0.97).round(1).astype(str)
        activity.to_csv(work / "activity.csv", index=False)
        result = compile_inventory(work / "inventory.toml")
        out = HERE / "previous"
        out.mkdir(exist_ok=True)
        from compiler.pipeline import EXPORT_COLUMNS

        result.emissions[EXPORT_COLUMNS].to_csv(out / "emissions.csv.gz", index=False, lineterminator="\n",
                                                compression={"method": "gzip", "mtime": 0})
    print(f"wrote {out / 'emissions.csv.gz'}")


if __name__ == "__main__":
    main()
