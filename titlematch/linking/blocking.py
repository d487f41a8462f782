"""Blocking: the candidate pairs worth comparing, as a union of cheap rules.

Rules (each adds pairs; the union is compared):

- ``KeyRule``: records share a key built from prepared columns (house number + street
  name; the phonetic key of the name's first significant word within a city; a date).
- ``TokenRule``: records share a rare name word, within the same city when there is one.
- ``NeighbourRule``: the ``k`` register names nearest by character 3-gram TF-IDF cosine,
  computed as chunked sparse dot products, over the whole register or within a region
  such as a postcode (postcode blocking that stays small when a postcode holds thousands).

Blocks larger than ``max_block`` register records are left out of a key rule: they
would add many pairs and little recall, which the neighbour rules cover better. Christen's
quality measures (pairs completeness, reduction ratio) are in ``blocking_quality``.

Example
-------
>>> pairs = candidate_pairs(new_prepared, index, default_rules(index.fields_))  # doctest: +SKIP
"""
from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pandas as pd
import scipy.sparse as sp
from recordlinkage.measures import reduction_ratio

from .register import Field, RegisterIndex

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class KeyRule:
    """Pairs whose ``columns`` (prepared ``FIELD.PART`` names) are all non-empty and equal;
    ``max_block`` overrides the run's limit on register records per key."""

    name: str
    columns: tuple[str, ...]
    max_block: int | None = None


@dataclass(frozen=True)
class TokenRule:
    """Pairs sharing a name word held by at most ``max_share`` of the register (and the same ``within``)."""

    name: str
    within: str | None = None
    max_share: float = 0.002


@dataclass(frozen=True)
class NeighbourRule:
    """Each record's ``k`` nearest register names by character 3-gram TF-IDF cosine (>= ``min_similarity``).

    ``within`` restricts neighbours to the same value of a prepared column (e.g. a postcode
    prefix); records without that value search the whole register.
    """

    name: str
    k: int = 10
    min_similarity: float = 0.3
    within: str | None = None


def default_rules(fields: Sequence[Field], *, k: int = 10) -> list:
    """The blocking rules implied by the field kinds.

    Establishments: the nearest names within the same postcode; the phonetic key of the
    name's first significant word within the same city; rare name words within the same
    city; house number + street name; and the nearest names over the whole register.
    Person records: the phonetic key of each name; each date; each postcode; nearest names.
    """
    rules: list = []
    city = next((f for f in fields if f.kind == "city"), None)
    postcode = next((f for f in fields if f.kind == "postcode"), None)
    has_name = any(f.kind == "name" for f in fields)
    for f in fields:
        if f.kind == "postcode":
            if has_name:
                # A postcode holds hundreds of establishments: its most similar names are the candidates.
                rules.append(NeighbourRule(f"{f.name} + name n-grams", k=max(2, k // 2), min_similarity=0.1,
                                           within=f"{f.name}.value"))
            else:
                rules.append(KeyRule(f.name, (f"{f.name}.value",)))
        elif f.kind == "name":
            where = (f"{city.name}.value",) if city else ()
            rules.append(KeyRule(f"{f.name} phonetic" + (f" + {city.name}" if city else ""),
                                 (f"{f.name}.phonetic",) + where))
            rules.append(TokenRule(f"{city.name} + {f.name} words" if city else f"{f.name} words",
                                   within=f"{city.name}.value" if city else None))
        elif f.kind == "address":
            house = (f"{f.name}.house_number", f"{f.name}.street_name")
            rules.append(KeyRule("house number + street", house))
            # "100 Main St" is in every town: within a postcode or city its block stays small.
            for where in (postcode, city):
                if where is not None:
                    rules.append(KeyRule(f"house number + street + {where.name}", house + (f"{where.name}.value",)))
        elif f.kind == "person_name":
            rules.append(KeyRule(f"{f.name} phonetic", (f"{f.name}.phonetic",)))
        elif f.kind == "date":
            rules.append(KeyRule(f.name, (f"{f.name}.value",)))
    if any(f.kind in ("name", "person_name", "string") for f in fields):
        rules.append(NeighbourRule("name n-grams", k=k))
    return rules


# --------------------------------------------------------------------------- joins

def _keys(prepared: pd.DataFrame, columns: Sequence[str]) -> np.ndarray:
    parts = [prepared[c].fillna("").astype(str) for c in columns]
    key = parts[0]
    empty = key == ""
    for part in parts[1:]:
        key = key + "|" + part
        empty |= part == ""
    return key.where(~empty, "").to_numpy(dtype=object)


def _codes(new_keys: np.ndarray, register_keys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Integer codes for keys on both sides; -1 for an empty key."""
    codes, uniques = pd.factorize(np.concatenate([register_keys, new_keys]))
    empty = np.flatnonzero(uniques == "")
    if len(empty):
        codes = np.where(codes == empty[0], -1, codes)
    return codes[len(register_keys):].astype(np.int64), codes[: len(register_keys)].astype(np.int64)


def join_codes(new_rows: np.ndarray, new_codes: np.ndarray, register_rows: np.ndarray,
               register_codes: np.ndarray, max_block: int) -> tuple[np.ndarray, np.ndarray, int]:
    """All (new, register) row pairs with equal non-negative codes, skipping blocks over ``max_block``.

    Returns the pair arrays and the number of new-record keys whose block was too large.
    """
    ok = register_codes >= 0
    register_rows, register_codes = register_rows[ok], register_codes[ok]
    ok = new_codes >= 0
    new_rows, new_codes = new_rows[ok], new_codes[ok]
    empty = np.empty(0, dtype=np.int64)
    if not len(register_codes) or not len(new_codes):
        return empty, empty, 0
    order = np.argsort(register_codes, kind="stable")
    uniq, starts, counts = np.unique(register_codes[order], return_index=True, return_counts=True)
    at = np.minimum(np.searchsorted(uniq, new_codes), len(uniq) - 1)
    found = uniq[at] == new_codes
    keep = found & (counts[at] <= max_block)
    too_large = int((found & ~keep).sum())
    rows, st, ct = new_rows[keep], starts[at[keep]], counts[at[keep]]
    total = int(ct.sum())
    offsets = np.arange(total) - np.repeat(np.cumsum(ct) - ct, ct)
    return (np.repeat(rows, ct).astype(np.int64), register_rows[order[np.repeat(st, ct) + offsets]].astype(np.int64),
            too_large)


def _key_pairs(rule: KeyRule, new: pd.DataFrame, register: pd.DataFrame, max_block: int):
    new_codes, register_codes = _codes(_keys(new, rule.columns), _keys(register, rule.columns))
    return join_codes(np.arange(len(new)), new_codes, np.arange(len(register)), register_codes,
                      rule.max_block or max_block)


def _token_pairs(rule: TokenRule, new: pd.DataFrame, new_words: sp.csr_matrix, index: RegisterIndex,
                 max_block: int):
    words = index.word_matrix_
    n_words = words.shape[1]
    document_frequency = np.bincount(words.indices, minlength=n_words)
    rare = document_frequency <= max(1, rule.max_share * len(index))

    def explode(matrix: sp.csr_matrix, within: np.ndarray | None):
        rows = np.repeat(np.arange(matrix.shape[0]), np.diff(matrix.indptr))
        tokens = matrix.indices.astype(np.int64)
        keep = rare[tokens]
        rows, tokens = rows[keep], tokens[keep]
        if within is None:
            return rows, tokens
        region = within[rows]
        return rows, np.where(region >= 0, region * n_words + tokens, -1)

    if rule.within:
        new_region, register_region = _codes(_keys(new, [rule.within]), _keys(index.prepared_, [rule.within]))
    else:
        new_region = register_region = None
    new_rows, new_codes = explode(new_words, new_region)
    register_rows, register_codes = explode(words, register_region)
    return join_codes(new_rows, new_codes, register_rows, register_codes, max_block)


def top_k(similarity: sp.csr_matrix, k: int, min_similarity: float) -> tuple[np.ndarray, np.ndarray]:
    """Row and column of each row's ``k`` largest entries that reach ``min_similarity``."""
    similarity = similarity.tocsr()
    rows = np.repeat(np.arange(similarity.shape[0]), np.diff(similarity.indptr))
    cols, data = similarity.indices, similarity.data
    keep = data >= min_similarity
    rows, cols, data = rows[keep], cols[keep], data[keep]
    # One float sort orders by row, then by decreasing similarity (similarities lie in [0, 1]).
    order = np.argsort(rows.astype(np.float64) * 2.0 + (1.0 - np.clip(data, 0.0, 1.0)), kind="stable")
    rows, cols = rows[order], cols[order]
    first = np.searchsorted(rows, rows, side="left")
    rank = np.arange(len(rows)) - first
    keep = rank < k
    return rows[keep].astype(np.int64), cols[keep].astype(np.int64)


def blocking_matrix(matrix: sp.csr_matrix, keep_columns: np.ndarray) -> sp.csr_matrix:
    """``matrix`` with only the n-gram columns in ``keep_columns`` (a boolean mask)."""
    return (matrix @ sp.diags(keep_columns.astype(matrix.dtype))).tocsr()


def _regions(new_region: np.ndarray, register_region: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
    """(new rows, register rows) for every region code present among the new records."""
    new_order = np.argsort(new_region, kind="stable")
    new_uniq, new_starts, new_counts = np.unique(new_region[new_order], return_index=True, return_counts=True)
    order = np.argsort(register_region, kind="stable")
    uniq, starts, counts = np.unique(register_region[order], return_index=True, return_counts=True)
    groups = []
    for code, s0, c0 in zip(new_uniq, new_starts, new_counts):
        if code < 0:
            continue
        at = np.searchsorted(uniq, code)
        members = order[starts[at]: starts[at] + counts[at]] if at < len(uniq) and uniq[at] == code \
            else np.empty(0, dtype=np.int64)
        groups.append((new_order[s0: s0 + c0], members))
    return groups


def _neighbour_pairs(rule: NeighbourRule, new: pd.DataFrame, new_chars: sp.csr_matrix, index: RegisterIndex,
                     max_postings: int, chunk: int, self_join: bool):
    register_chars = index.char_matrix_
    # N-grams in very many register names cost most in a sparse product and rank little:
    # they are left out of the neighbour search (they still count in the comparisons).
    postings = np.bincount(register_chars.indices, minlength=register_chars.shape[1])
    keep = postings <= max_postings
    query = blocking_matrix(new_chars, keep)
    target_t = blocking_matrix(register_chars, keep).T.tocsr()
    k = rule.k + (1 if self_join else 0)
    groups = [(np.arange(len(new)), None)]
    if rule.within:
        new_region, register_region = _codes(_keys(new, [rule.within]), _keys(index.prepared_, [rule.within]))
        groups = [(np.flatnonzero(new_region < 0), None)] + _regions(new_region, register_region)
    out_i, out_j = [], []
    for rows, members in groups:
        if not len(rows) or (members is not None and not len(members)):
            continue
        # Within a region the products are small: every n-gram counts there, however common.
        source = query if members is None else new_chars
        block_target = target_t if members is None else register_chars[members].T.tocsr()
        for start in range(0, len(rows), chunk):
            block = rows[start: start + chunk]
            i, j = top_k(source[block] @ block_target, k, rule.min_similarity)
            out_i.append(block[i])
            out_j.append(j if members is None else members[j])
    if not out_i:
        empty = np.empty(0, dtype=np.int64)
        return empty, empty, 0
    return np.concatenate(out_i), np.concatenate(out_j), 0


def candidate_pairs(new: pd.DataFrame, index: RegisterIndex, rules: Sequence, *,
                    new_chars: sp.csr_matrix | None = None, new_words: sp.csr_matrix | None = None,
                    max_block: int = 100, max_postings: int | None = None, chunk: int = 2000,
                    self_join: bool = False) -> pd.DataFrame:
    """The union of the rules' pairs as a DataFrame of positions ``new`` and ``register``.

    Parameters
    ----------
    new : prepared incoming records (``RegisterIndex.prepare``)
    index : the register index
    rules : KeyRule / TokenRule / NeighbourRule objects
    new_chars, new_words : TF-IDF rows of ``new["text"]`` (computed when not given)
    max_block : key blocks with more register records are skipped
    max_postings : n-grams in more register names are skipped by the neighbour search
        (default: 2,000 or 0.5% of the register, whichever is larger)
    self_join : ``new`` is the register itself (deduplication): keep only pairs new < register

    Returns
    -------
    DataFrame with int64 columns ``new`` and ``register``, sorted; ``attrs["rules"]`` holds
    the pairs each rule found and the keys skipped for size.
    """
    if new_chars is None or new_words is None:
        new_chars, new_words = index.vectorize(new["text"])
    if max_postings is None:
        max_postings = max(2000, int(0.005 * len(index)))
    n_register = len(index)
    found, report = [], {}
    for rule in rules:
        if isinstance(rule, KeyRule):
            i, j, skipped = _key_pairs(rule, new, index.prepared_, max_block)
        elif isinstance(rule, TokenRule):
            i, j, skipped = _token_pairs(rule, new, new_words, index, max_block)
        elif isinstance(rule, NeighbourRule):
            i, j, skipped = _neighbour_pairs(rule, new, new_chars, index, max_postings, chunk, self_join)
        else:
            raise TypeError(f"unknown blocking rule {rule!r}")
        code = i * n_register + j
        if self_join:
            code = np.minimum(i, j) * n_register + np.maximum(i, j)
            code = code[i != j]
        code = np.unique(code)
        report[rule.name] = {"pairs": int(len(code)), "skipped_keys": int(skipped)}
        found.append(code)
        log.info("blocking rule %s: %d pairs, %d oversized keys skipped", rule.name, len(code), skipped)
    code = np.unique(np.concatenate(found)) if found else np.empty(0, dtype=np.int64)
    pairs = pd.DataFrame({"new": code // max(n_register, 1), "register": code % max(n_register, 1)})
    pairs.attrs["rules"] = report
    return pairs


def blocking_quality(pairs: pd.DataFrame, true_pairs: pd.DataFrame, n_new: int, n_register: int | None = None
                     ) -> dict:
    """Pairs completeness and reduction ratio (Christen, Data Matching, 2012, ch. 4).

    ``true_pairs`` holds positions ``new`` and ``register`` of the true links; with
    ``n_register`` None the task is deduplication (pairs counted once, new < register).
    """
    found = set(zip(pairs["new"].tolist(), pairs["register"].tolist()))
    truth = list(zip(true_pairs["new"].tolist(), true_pairs["register"].tolist()))
    if n_register is None:
        truth = [(min(a, b), max(a, b)) for a, b in truth]
    covered = sum(1 for t in truth if t in found)
    sizes = (n_new,) if n_register is None else (n_new, n_register)
    return {"pairs": len(pairs), "true_links": len(truth),
            "pairs_completeness": covered / len(truth) if truth else float("nan"),
            "reduction_ratio": float(reduction_ratio(len(pairs), *sizes))}
