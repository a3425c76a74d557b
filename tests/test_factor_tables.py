"""The shipped tables: every row sourced, units controlled, fingerprints, no ambiguous matches."""

import hashlib
import itertools

import pandas as pd
import pytest

from compiler.factors import KEYS, QUANTITIES, VERIFICATION, load_library, resolve_defaults
from compiler.resources import resource_dir
from compiler.units import CANONICAL_UNITS
from compiler.vocabulary import TERMS

TABLES = resource_dir("factor_tables")

# (file, rows, columns, sum of the value column, sha256). A data edit must change this line on
# purpose, with an entry in the data changelog of DEVELOPERS.md.
FINGERPRINTS = [
    ("climate_zones_ipcc2006.csv", 20, 6, None, "ee1baceed4c01e93ee7d6f8f8f6f902755511804cd51d971e78975691ab329cb"),
    ("drained_ipcc2006.csv", 29, 19, 124.63, "71e62254df6cc393c7c3cdb813c43dbbfe92c0edf0255dee6a39ccc32ffe5320"),
    ("drained_ipcc2013ws.csv", 87, 19, 9443.21, "ca2651eff3d0c960377486e735a5ce9d974e3101fd7d8967bf29a67d4e097b32"),
    ("fire_ipcc2013ws.csv", 13, 15, 2865.2, "0524c5ea079091037eab2f7374a0ea259fe1e05d5473a47235355fcb3019da0a"),
    ("gwp.csv", 13, 11, 1280.8, "57182511af089f33525d168ae3e8f379e5b927f8173d3944d7aeecc5c87e5aa3"),
    ("pathway_coverage.csv", 28, 9, None, "5bc91ce74f65346f582517592b3a390301beb7b1a4eecc47f5742d8087b5c060"),
    ("reporting_allocation.csv", 28, 7, None, "bf4ecb1c13b20ff58f38c1a05ed12ca8d8059c559145192298bd1f82809fbcf4"),
    ("reporting_categories.csv", 18, 5, None, "5e99e555e12484e1b71df1435db9ea07cd200042ddb96f87f89325f1797bb645"),
    ("rewetted_ipcc2013ws.csv", 13, 19, 527.21, "2d0dd3f0216cef86b883531ef90a762c6846f1a14ee11537c71ee838553176fe"),
    ("climate_response_ar5.csv", 28, 13, None, "8ab480c7aaa9052a61280ca1b36f94974b4e9b836ee49df1ffc201eddc9a72eb"),
    ("sources.csv", 19, 5, None, "2088d399e8df1998cc6afab6888c5a7e3bf3f93bf1353a1fb0e7e5e404d6e65f"),
]


@pytest.fixture(scope="module")
def library():
    return load_library()


def test_every_table_has_a_fingerprint():
    assert sorted(p.name for p in TABLES.glob("*.csv")) == sorted(f[0] for f in FINGERPRINTS)


@pytest.mark.parametrize("name, rows, columns, total, digest", FINGERPRINTS)
def test_fingerprint(name, rows, columns, total, digest):
    path = TABLES / name
    frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    assert (len(frame), len(frame.columns)) == (rows, columns)
    if total is not None:
        assert pd.to_numeric(frame["value"]).sum() == pytest.approx(total, abs=1e-6)
    assert hashlib.sha256(path.read_bytes()).hexdigest() == digest, (
        f"{name} changed: update its fingerprint and the data changelog in DEVELOPERS.md")


def test_every_row_resolves_a_source_and_has_a_locator(library):
    reg = library.register
    assert set(reg["source_id"]) <= set(library.sources["source_id"])
    for col in ("factor_id", "table", "row_label", "page", "unit", "verification"):
        assert (reg[col].str.strip() != "").all(), col
    assert reg["factor_id"].is_unique
    assert set(reg["verification"]) <= set(VERIFICATION)
    assert set(library.categories["source_id"]) | set(library.allocation["source_id"]) <= set(
        library.sources["source_id"])


def test_units_are_in_the_controlled_list(library):
    assert set(library.register["unit"]) <= set(CANONICAL_UNITS)
    assert set(library.register["quantity"]) <= set(QUANTITIES)


def test_values_lie_in_their_intervals(library):
    reg = library.register.dropna(subset=["ci_low", "ci_high"])
    assert ((reg["ci_low"] <= reg["value"]) & (reg["value"] <= reg["ci_high"])).all()


@pytest.mark.parametrize("factor_set", ["ipcc2013ws", "ipcc2006"])
def test_no_stratum_matches_two_rows_equally(library, factor_set):
    # Every combination of the controlled vocabulary: the most specific row is unique or absent.
    combos = list(itertools.product(TERMS["climate_zone"] + ("cold_temperate", "warm_temperate"), TERMS["land_use"],
                                    TERMS["soil_status"], TERMS["nutrient_status"], TERMS["drainage_depth"],
                                    TERMS["subtype"], ("",) + TERMS["fire_type"]))
    strata = pd.DataFrame(combos, columns=KEYS)
    for quantity in QUANTITIES:
        _, ambiguous, _ = resolve_defaults(strata, library, factor_set, quantity)
        assert ambiguous.empty, (quantity, ambiguous.head())


def test_shipped_values_spot_checks(library):
    # Spot checks of the values most often used in the demo (WS2013 Tables 2.1, 2.5, 3.3; from memory,
    # see the verification column; a change here means the shipped table changed).
    reg = library.register.set_index("factor_id")
    assert reg.loc["ws13-t2.1-tem-crop", "value"] == 7.9
    assert reg.loc["ws13-t2.5-tem-crop", "value"] == 13
    assert reg.loc["ws13-t3.3-tem-rich", ["value", "unit"]].tolist() == [216, "kg CH4-C ha-1 yr-1"]
