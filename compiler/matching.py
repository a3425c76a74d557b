"""Most-specific matching of strata to rule tables (factor tables, category allocation).

A rule row matches a stratum when every key the row gives equals the
stratum's value; a blank key in a rule row means "any value". Among the
matching rows, the one with the largest weight (the sum of the weights of the
keys it gives) wins; two winners with the same weight are an ambiguity, which
is an error of the rule table, never resolved silently.

Strata are matched on their distinct key combinations, so the cost does not
grow with the number of activity rows.
"""

from __future__ import annotations

import numpy as np
import pandas as pd


def most_specific(strata: pd.DataFrame, rules: pd.DataFrame, keys: list[str], weights: dict[str, int],
                  rule_id: str) -> tuple[pd.DataFrame, pd.DataFrame, pd.Index]:
    """Match each row of ``strata`` (distinct key rows, any index) to one row of ``rules``.

    Returns ``(best, ambiguous, unmatched)``: ``best`` has the strata index as
    column ``_sid`` and the winning rule's ``rule_id``; ``ambiguous`` lists
    strata with two or more winners; ``unmatched`` is the index of strata with
    no matching rule.
    """
    left = strata[keys].copy()
    left["_sid"] = strata.index
    right = rules[keys + [rule_id]].copy()
    right.columns = [f"_r_{k}" for k in keys] + [rule_id]
    weight = np.zeros(len(right), dtype=np.int64)
    for k in keys:
        weight += np.where(right[f"_r_{k}"].to_numpy() != "", weights[k], 0)
    right["_weight"] = weight
    pairs = left.merge(right, how="cross")
    ok = np.ones(len(pairs), dtype=bool)
    for k in keys:
        r = pairs[f"_r_{k}"].to_numpy()
        ok &= (r == "") | (r == pairs[k].to_numpy())
    pairs = pairs.loc[ok, ["_sid", rule_id, "_weight"]]
    top = pairs.groupby("_sid")["_weight"].transform("max")
    winners = pairs[pairs["_weight"] == top]
    counts = winners.groupby("_sid")[rule_id].transform("size")
    best = winners[counts == 1].drop(columns="_weight").reset_index(drop=True)
    ambiguous = winners[counts > 1].reset_index(drop=True)
    unmatched = strata.index.difference(pd.Index(pairs["_sid"].unique()))
    return best, ambiguous, unmatched


def distinct_codes(frame: pd.DataFrame, keys: list[str]) -> tuple[np.ndarray, np.ndarray]:
    """Number the distinct combinations of ``keys`` in the rows of ``frame``.

    Returns ``(codes, first)``: each row's combination number, counting combinations in order of
    first appearance (so ``frame[keys].iloc[first]`` is ``frame[keys].drop_duplicates()``), and the
    position of the first row of each. Missing values count as a value of their own, as in
    ``drop_duplicates``. Vectorised: one factorisation per key column.
    """
    codes = np.zeros(len(frame), dtype=np.int64)
    for k in keys:  # combined code, re-factorised after each column so that it cannot overflow
        key_codes, uniques = pd.factorize(frame[k], use_na_sentinel=False)
        codes = pd.factorize(codes * len(uniques) + key_codes)[0].astype(np.int64, copy=False)
    _, first = np.unique(codes, return_index=True)
    return codes, first


def missing_distinctions(stratum: pd.Series, rules: pd.DataFrame, keys: list[str]) -> dict[str, list[str]]:
    """For an unmatched stratum: the keys it leaves blank that some rule would need.

    Returns ``{key: [values the rules accept]}`` over the rules that agree with
    every key the stratum does give.
    """
    ok = np.ones(len(rules), dtype=bool)
    for k in keys:
        value = stratum[k]
        r = rules[k].to_numpy()
        if value != "":
            ok &= (r == "") | (r == value)
    near = rules[ok]
    needed: dict[str, list[str]] = {}
    for k in keys:
        if stratum[k] == "":
            values = sorted(v for v in near[k].unique() if v != "")
            if values:
                needed[k] = values
    return needed
