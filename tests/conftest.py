"""Shared fixtures: the demo compile, a writable copy of the demo inputs, a small inventory builder."""

from __future__ import annotations

import shutil
import textwrap
from pathlib import Path

import pandas as pd
import pytest

from compiler import compile_inventory
from compiler.resources import resource_dir

DEMO = resource_dir("examples") / "demo"
ACTIVITY_HEADER = ["year", "region", "climate_zone", "land_use", "soil_status", "nutrient_status",
                   "drainage_depth", "subtype", "area_ha"]


@pytest.fixture(scope="session")
def demo_result():
    return compile_inventory(DEMO / "inventory.toml")


@pytest.fixture(scope="session")
def demo_output(demo_result, tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "out"
    demo_result.write(out, report=False)
    return out


@pytest.fixture
def demo_copy(tmp_path):
    """A writable copy of the demo inputs; returns the settings path."""
    target = tmp_path / "demo"
    shutil.copytree(DEMO, target)
    return target / "inventory.toml"


def write_inventory(folder: Path, rows: list[dict], gwp: str = "AR5", factor_set: str = "ipcc2013ws",
                    first: int = 2020, last: int = 2020, extra_inputs: dict | None = None,
                    extra_method: str = "", mass_ratios: str = "standard_atomic_weights") -> Path:
    """Write a small inventory (settings + activity.csv) and return the settings path."""
    folder.mkdir(parents=True, exist_ok=True)
    frame = pd.DataFrame(rows)
    for col in ACTIVITY_HEADER:
        if col not in frame:
            frame[col] = ""
    frame.to_csv(folder / "activity.csv", index=False)
    inputs = "\n".join(f'{k} = "{v}"' for k, v in (extra_inputs or {}).items())
    (folder / "inventory.toml").write_text(textwrap.dedent(f"""\
        [inventory]
        name = "Test inventory"
        submission_year = {last + 2}
        first_year = {first}
        last_year = {last}
        compile_date = "2026-01-01"
        [method]
        factor_set = "{factor_set}"
        gwp = "{gwp}"
        mass_ratios = "{mass_ratios}"
        {extra_method}
        [inputs]
        activity = "activity.csv"
        {inputs}
        """), encoding="utf-8")
    return folder / "inventory.toml"


def stratum(**kw) -> dict:
    row = {"year": 2020, "region": "Testvale", "climate_zone": "temperate", "land_use": "cropland",
           "soil_status": "drained", "nutrient_status": "", "drainage_depth": "", "subtype": "", "area_ha": 1.0}
    row.update(kw)
    return row


def pick(emissions: pd.DataFrame, **kw) -> pd.DataFrame:
    mask = pd.Series(True, index=emissions.index)
    for key, value in kw.items():
        mask &= emissions[key] == value
    return emissions[mask]
