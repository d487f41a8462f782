"""Comparisons: one feature vector per candidate pair, computed column-wise.

Every feature is a number in [0, 1], or NaN when either record lacks the value (a
missing value is neither agreement nor disagreement). String similarities run in
rapidfuzz's C++ pair-wise ``cpdist``; TF-IDF cosines are sparse row-wise products.

``agreement_levels`` turns the features into the 0/1 agreement pattern a
Fellegi–Sunter model reads, one column per compared field.

Example
-------
>>> features = compare(pairs, new_prepared, index)         # doctest: +SKIP
>>> pattern = agreement_levels(features, index.fields_)    # doctest: +SKIP
"""
from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd
import scipy.sparse as sp
from rapidfuzz import fuzz, process
from rapidfuzz.distance import DamerauLevenshtein, JaroWinkler

from .register import Field, RegisterIndex

# Jaro-Winkler agreement threshold for names and places: 0.85 is the customary cut-off
# in probabilistic linkage (common practice; recordlinkage's tutorials use it too).
STRING_AGREEMENT = 0.85
STREET_AGREEMENT = 0.9  # street names are short: "Oak" and "Oaks" are different streets
NEAR_HOUSE_NUMBERS = 10  # |difference| within which two house numbers are "near" (same block face)
PAIR_CHUNK = 500_000


class _Pairs:
    """Gathers the two sides' prepared values for every pair; per-record work is done once per side
    (the register side is cached on the register partition, so a chunked run pays it once)."""

    def __init__(self, i: np.ndarray, j: np.ndarray, new: pd.DataFrame, part) -> None:
        self.i, self.j, self.new, self.index = i, j, new, part
        self.register = part.prepared_

    def values(self, column: str) -> tuple[np.ndarray, np.ndarray]:
        return (self.new[column].to_numpy(dtype=object)[self.i],
                self.register[column].to_numpy(dtype=object)[self.j])

    def _register_cached(self, key: tuple, make):
        cache = self.index.__dict__.setdefault("_comparison_cache", {})
        if key not in cache:
            cache[key] = make()
        return cache[key]

    def equal(self, column: str, transform=None) -> np.ndarray:
        """1.0 where the pair's values are equal, 0.0 where different, NaN where either is empty."""
        def register_codes():
            # Each distinct value is converted and transformed once (a partition holds a million
            # rows and a few thousand NAICS codes); codes as int32, kept for every batch.
            raw_codes, raw = pd.factorize(self.register[column].to_numpy(dtype=object), use_na_sentinel=False)
            values = pd.Series(raw, dtype=object).astype(str)
            values = transform(values) if transform else values
            mapping, uniques = pd.factorize(values.to_numpy(dtype=object))
            small = np.int32 if len(uniques) < 2 ** 31 else np.int64
            return (mapping.astype(small)[raw_codes], pd.Index(uniques),
                    (values == "").to_numpy()[raw_codes])
        codes, uniques, register_empty = self._register_cached(("codes", column, transform), register_codes)
        values = self.new[column].astype(str)
        values = transform(values) if transform else values
        new_codes = uniques.get_indexer(values.to_numpy(dtype=object))
        a, b = new_codes[self.i], codes[self.j]
        out = ((a == b) & (a >= 0)).astype(float)
        out[(values == "").to_numpy()[self.i] | register_empty[self.j]] = np.nan
        return out

    def numbers(self, column: str) -> tuple[np.ndarray, np.ndarray]:
        register = self._register_cached(("number", column), lambda: _number(self.register[column]))
        return _number(self.new[column])[self.i], register[self.j]


def _missing(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    return (a == "") | (b == "")


def string_similarity(a: np.ndarray, b: np.ndarray, scorer=JaroWinkler.normalized_similarity,
                      workers: int = -1) -> np.ndarray:
    """Pair-wise similarity in [0, 1] (rapidfuzz ``cpdist``), NaN where either side is empty."""
    if not len(a):
        return np.empty(0)
    scores = process.cpdist(a, b, scorer=scorer, workers=workers, dtype=np.float32).astype(float)
    if scorer in (fuzz.token_set_ratio, fuzz.ratio, fuzz.token_sort_ratio, fuzz.partial_ratio):
        scores /= 100.0
    scores[_missing(a, b)] = np.nan
    return scores


def equal(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """1.0 where equal, 0.0 where different, NaN where either side is empty."""
    out = (a == b).astype(float)
    out[_missing(a, b)] = np.nan
    return out


def cosine(left: sp.csr_matrix, right: sp.csr_matrix, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Row-wise dot products of L2-normalized TF-IDF rows: cosine of each pair, NaN for an empty row."""
    out = np.empty(len(i))
    for start in range(0, len(i), PAIR_CHUNK):
        a, b = left[i[start: start + PAIR_CHUNK]], right[j[start: start + PAIR_CHUNK]]
        out[start: start + PAIR_CHUNK] = np.asarray(a.multiply(b).sum(axis=1)).ravel()
    empty = (np.diff(left.indptr)[i] == 0) | (np.diff(right.indptr)[j] == 0)
    out[empty] = np.nan
    return np.clip(out, 0.0, 1.0)


def _number(values: pd.Series) -> np.ndarray:
    """The leading number of each value (``"12-14"`` -> 12, ``"100A"`` -> 100), NaN if none."""
    codes, uniques = pd.factorize(values.astype(str).to_numpy(dtype=object))
    digits = pd.Series(uniques, dtype=object).str.extract(r"^\D*(\d{1,9})", expand=False)
    numbers = pd.to_numeric(digits, errors="coerce").to_numpy(dtype=float)
    return numbers[codes] if len(numbers) else np.full(len(codes), np.nan)


def _compare_name(f: Field, p: _Pairs, workers: int, tfidf: dict) -> dict[str, np.ndarray]:
    a, b = p.values(f"{f.name}.key")
    out = {f"{f.name}_jaro_winkler": string_similarity(a, b, workers=workers),
           f"{f.name}_token_set": string_similarity(a, b, fuzz.token_set_ratio, workers),
           f"{f.name}_exact": p.equal(f"{f.name}.key")}
    if tfidf:
        out[f"{f.name}_words"] = tfidf["words"]
        out[f"{f.name}_chars"] = tfidf["chars"]
    # A trade name ("doing business as") on one side may be the legal name on the other: both ways.
    ta, tb = p.values(f"{f.name}.trade")
    trade = np.full(len(a), np.nan)
    some = (ta != "") | (tb != "")
    if some.any():
        ta, tb, ka, kb = ta[some], tb[some], a[some], b[some]
        cross = np.fmax(string_similarity(ta, kb, fuzz.token_set_ratio, workers),
                        string_similarity(ka, tb, fuzz.token_set_ratio, workers))
        trade[some] = np.fmax(cross, string_similarity(ta, tb, fuzz.token_set_ratio, workers))
    out["trade_name"] = trade
    out["legal_form"] = p.equal(f"{f.name}.legal_form")
    out["branch"] = p.equal(f"{f.name}.branch")
    return out


def _compare_address(f: Field, p: _Pairs, workers: int) -> dict[str, np.ndarray]:
    na, nb = p.numbers(f"{f.name}.house_number")
    # Near: within a block face, or one mistyped or swapped digit (Damerau-Levenshtein 1).
    typo = string_similarity(*p.values(f"{f.name}.house_number"), DamerauLevenshtein.distance, workers) <= 1
    near = ((np.abs(na - nb) <= NEAR_HOUSE_NUMBERS) | typo).astype(float)
    near[np.isnan(na) | np.isnan(nb)] = np.nan
    return {"house_number": p.equal(f"{f.name}.house_number"), "house_number_near": near,
            "street": string_similarity(*p.values(f"{f.name}.street_name"), workers=workers),
            "street_suffix": p.equal(f"{f.name}.suffix"), "street_direction": p.equal(f"{f.name}.direction"),
            "unit": p.equal(f"{f.name}.unit"),
            "address_exact": p.equal(f"{f.name}.key")}


def _compare_postcode(f: Field, p: _Pairs, workers: int) -> dict[str, np.ndarray]:
    return {f.name: p.equal(f"{f.name}.value"), f"{f.name}_prefix": p.equal(f"{f.name}.prefix")}


def _prefix(digits: int):
    def cut(values: pd.Series) -> pd.Series:
        return values.str[:digits].where(values.str.len() >= digits, "")
    cut.__name__ = f"prefix{digits}"
    return cut


_NAICS_PREFIXES = {digits: _prefix(digits) for digits in (2, 3, 4, 6)}


def _compare_industry(f: Field, p: _Pairs, workers: int) -> dict[str, np.ndarray]:
    # NAICS is hierarchical: sector (2), subsector (3), industry group (4), national industry (6);
    # prefixes nest, so the last level that agrees is the shared depth.
    present = p.equal(f"{f.name}.value")
    depth = np.zeros(len(present))
    for digits, cut in _NAICS_PREFIXES.items():
        depth = np.where(p.equal(f"{f.name}.value", cut) == 1, float(digits), depth)
    out = depth / 6.0
    out[np.isnan(present)] = np.nan
    return {f.name: out}


def _compare_text(f: Field, p: _Pairs, workers: int) -> dict[str, np.ndarray]:
    a, b = p.values(f"{f.name}.value")
    out = {f.name: string_similarity(a, b, workers=workers)}
    if f.kind == "person_name":
        out[f"{f.name}_phonetic"] = p.equal(f"{f.name}.phonetic")
    return out


def _compare_exactish(f: Field, p: _Pairs, workers: int) -> dict[str, np.ndarray]:
    out = {f.name: p.equal(f"{f.name}.value")}
    if f.kind in ("number", "date"):
        # One typed digit wrong or two swapped: Damerau-Levenshtein distance 1.
        distance = string_similarity(*p.values(f"{f.name}.value"), DamerauLevenshtein.distance, workers)
        out[f"{f.name}_typo"] = np.where(np.isnan(distance), np.nan, (distance <= 1).astype(float))
    return out


def compare(pairs: pd.DataFrame, new: pd.DataFrame, index: RegisterIndex, *,
            new_chars: sp.csr_matrix | None = None, new_words: sp.csr_matrix | None = None,
            workers: int = -1) -> pd.DataFrame:
    """Feature vectors for candidate ``pairs`` (positions ``new``, ``register``).

    Parameters
    ----------
    pairs : DataFrame from ``blocking.candidate_pairs``
    new : prepared incoming records
    index : the register index (its ``prepared_`` and TF-IDF rows)
    new_chars, new_words : TF-IDF rows of ``new["text"]`` (computed when not given)
    workers : threads for rapidfuzz (-1 = all cores)

    Returns
    -------
    DataFrame aligned with ``pairs``, one float column per feature (NaN = value missing).
    """
    i = pairs["new"].to_numpy(dtype=np.int64)
    j = pairs["register"].to_numpy(dtype=np.int64)
    if new_chars is None or new_words is None:
        new_chars, new_words = index.vectorize(new["text"])
    new = new.reset_index(drop=True)
    # Each partition compares its own pairs; rows come back in the pairs' order.
    owner = index.partition_of_[j] if len(j) else np.empty(0, dtype=np.int64)
    parts, blocks = [], []
    for k in np.unique(owner) if index.n_partitions > 1 else [0]:
        part = index.partition(int(k))
        at = np.flatnonzero(owner == k) if index.n_partitions > 1 else np.arange(len(j))
        local = np.searchsorted(part.positions_, j[at])
        parts.append(at)
        blocks.append(_compare_part(i[at], local, new, part, index.fields_, new_chars, new_words, workers))
    if not blocks:
        blocks, parts = [_compare_part(i, j, new, index.partition(0), index.fields_, new_chars, new_words,
                                       workers)], [np.arange(0)]
    features = pd.concat(blocks, ignore_index=True) if len(blocks) > 1 else blocks[0]
    order = np.empty(len(j), dtype=np.int64)
    order[np.concatenate(parts)] = np.arange(len(j))
    features = features.iloc[order].reset_index(drop=True) if len(blocks) > 1 else features
    features.index = pairs.index
    return features


def prepare_comparisons(index: RegisterIndex, partitions, new: pd.DataFrame, new_chars: sp.csr_matrix,
                        new_words: sp.csr_matrix) -> None:
    """Build the register side of every comparison (codes, numbers) on ``partitions`` now, in this
    process, by comparing no pairs: forked workers then share it instead of each building its own
    for every batch."""
    none = np.empty(0, dtype=np.int64)
    for k in partitions:
        _compare_part(none, none, new.head(0), index.partition(int(k)), index.fields_, new_chars[:0],
                      new_words[:0], workers=1)


def _compare_part(i: np.ndarray, j: np.ndarray, new: pd.DataFrame, part, fields: Sequence[Field],
                  new_chars: sp.csr_matrix, new_words: sp.csr_matrix, workers: int) -> pd.DataFrame:
    """Features of pairs (new row ``i``, partition row ``j``) within one register partition."""
    p = _Pairs(i, j, new, part)
    tfidf = {"words": cosine(new_words, part.word_matrix_, i, j),
             "chars": cosine(new_chars, part.char_matrix_, i, j)}
    features: dict[str, np.ndarray] = {}
    first_name = True
    for f in fields:
        if f.kind == "name":
            features.update(_compare_name(f, p, workers, tfidf if first_name else {}))
            first_name = False
        elif f.kind == "address":
            features.update(_compare_address(f, p, workers))
        elif f.kind == "postcode":
            features.update(_compare_postcode(f, p, workers))
        elif f.kind == "industry":
            features.update(_compare_industry(f, p, workers))
        elif f.kind in ("city", "string", "person_name"):
            features.update(_compare_text(f, p, workers))
        else:
            features.update(_compare_exactish(f, p, workers))
    if not any(f.kind == "name" for f in fields):
        features["text_chars"] = tfidf["chars"]
    return pd.DataFrame(features)


def agreement_levels(features: pd.DataFrame, fields: Sequence[Field]) -> pd.DataFrame:
    """0/1 agreement per compared field for a Fellegi–Sunter model; NaN = missing (weight 0).

    Columns: ``name`` (the name, or a trade name against the other side's name, is close),
    ``legal_form``, ``branch``, ``address`` (same house number on the same street),
    ``street`` (same street, scored only when the house numbers differ by a typo or one is
    missing, so the two do not count one fact twice and a chain's branch further down the
    street gets no credit), ``unit``, then one column per other field.
    A string agrees at Jaro-Winkler ``STRING_AGREEMENT`` or more.
    """
    out: dict[str, pd.Series] = {}

    def at_least(column: str, threshold: float) -> pd.Series:
        values = features[column]
        return (values >= threshold).astype(float).where(values.notna())

    for f in fields:
        if f.kind == "name":
            columns = [c for c in (f"{f.name}_words", f"{f.name}_chars", f"{f.name}_token_set") if c in features]
            score = features[columns].max(axis=1, skipna=True)
            agree = (score >= STRING_AGREEMENT) | (features["trade_name"] >= 0.9)
            out[f.name] = agree.astype(float).where(score.notna() | features["trade_name"].notna())
            out["legal_form"] = features["legal_form"]
            out["branch"] = features["branch"]
        elif f.kind == "address":
            street = features["street"]
            same_street = ((street >= STREET_AGREEMENT) & (features["street_suffix"] != 0)
                           & (features["street_direction"] != 0)).astype(float).where(street.notna())
            house = features["house_number"]
            address = ((house == 1) & (same_street == 1)).astype(float).where(house.notna() & street.notna())
            out["address"] = address
            # The street alone speaks only when the house numbers could be one mistyped number.
            out["street"] = same_street.where((address != 1) & (features["house_number_near"] != 0))
            name_field = next((g for g in fields if g.kind == "name"), None)
            if name_field is not None and name_field.name in out:
                # Name and address together: one fact that a chain's branch or a neighbour in the
                # same building rarely shares, and that two separate weights would understate. With
                # the same street and a house number one typo away it is left open (a typing error
                # or the branch next door: for a person to judge).
                both = ((out[name_field.name] == 1) & (address == 1)).astype(float)
                out[f"{name_field.name}+address"] = both.where(address.notna() & (out["street"] != 1))
            out["unit"] = features["unit"]
        elif f.kind in ("postcode", "number", "date", "exact"):
            out[f.name] = features[f.name]
        elif f.kind == "industry":
            # Same subsector (3 digits): respondents often pick a neighbouring 4- or 6-digit industry.
            out[f.name] = at_least(f.name, 3 / 6)
        else:  # city, string, person_name
            out[f.name] = at_least(f.name, STRING_AGREEMENT)
    return pd.DataFrame(out, index=features.index)
