"""Controlled terms of the activity data and their accepted spellings.

Every input reader normalises a term the same way: lower case, surrounding
space removed, ``-`` and inner spaces read as ``_``; then the accepted
spellings below map to the one internal term. Anything else is an error that
lists the accepted values and the closest match.
"""

from __future__ import annotations

import difflib

import pandas as pd

from .schema import TERM_KEYS

BLANK = ""

TERMS: dict[str, tuple[str, ...]] = {
    "climate_zone": ("boreal", "temperate", "tropical"),
    "land_use": ("forest_land", "cropland", "grassland", "wetlands", "settlements", "other_land"),
    "soil_status": ("drained", "rewetted"),
    "nutrient_status": ("rich", "poor", BLANK),
    "drainage_depth": ("deep", "shallow", BLANK),
    "subtype": (BLANK, "peat_extraction", "acacia", "oil_palm", "sago_palm", "paddy_rice"),
    "remaining_or_converted": ("remaining", "converted"),
    "previous_land_use": ("forest_land", "cropland", "grassland", "wetlands", "settlements", "other_land", BLANK),
    "fire_type": ("wildfire", "prescribed"),
    "evidence": ("measured", "mapped", "statistics", "assumed", BLANK),
}

# Equivalent spellings, after normalisation (lower case, "_" for "-" and space).
ALIASES: dict[str, dict[str, str]] = {
    "nutrient_status": {"nutrient_rich": "rich", "nutrient_poor": "poor"},
    "drainage_depth": {"deep_drained": "deep", "shallow_drained": "shallow"},
    "land_use": {"forest": "forest_land", "wetland": "wetlands", "settlement": "settlements"},
    "soil_status": {"re_wetted": "rewetted"},
    "fire_type": {"prescribed_fire": "prescribed", "wild_fire": "wildfire"},
    "subtype": {"rice": "paddy_rice", "peat_extraction_site": "peat_extraction"},
}

KEY_COLUMNS = tuple(TERM_KEYS)  # compiler.schema


def normalise_text(value) -> str:
    """Lower case, trimmed, ``-`` and whitespace runs read as ``_``; missing -> blank."""
    if value is None or (isinstance(value, float) and value != value):
        return BLANK
    text = str(value).strip().lower()
    text = "_".join(text.replace("-", " ").split())
    return text


def closest(term: str, accepted: tuple[str, ...]) -> str:
    """The closest accepted spelling, or blank when nothing is near."""
    choices = [a for a in accepted if a]
    match = difflib.get_close_matches(term, choices, n=1, cutoff=0.5)
    return match[0] if match else BLANK


def describe_accepted(column: str) -> str:
    values = [v if v else "(blank)" for v in TERMS[column]]
    return " | ".join(values)


def normalise_column(values: pd.Series, column: str) -> tuple[pd.Series, dict[str, str]]:
    """Map a column to internal terms, working on distinct values only.

    Returns the normalised series (unknown terms left as found) and a dict of
    the distinct raw values that are not accepted, each with its closest match.
    """
    accepted = TERMS[column]
    aliases = ALIASES.get(column, {})
    raw = values.astype("object").where(values.notna(), BLANK)
    distinct = pd.unique(raw)
    mapping: dict = {}
    unknown: dict[str, str] = {}
    for item in distinct:  # distinct terms only: a handful, whatever the row count
        norm = normalise_text(item)
        norm = aliases.get(norm, norm)
        if norm in accepted:
            mapping[item] = norm
        else:
            mapping[item] = str(item)
            unknown[str(item)] = closest(norm, accepted)
    return raw.map(mapping).astype(str), unknown
