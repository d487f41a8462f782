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
from dataclasses import dataclass, replace
from typing import Sequence

import numpy as np
import pandas as pd
import scipy.sparse as sp
from recordlinkage.measures import reduction_ratio

from .partitions import region_columns, region_keys, routing_columns
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
    prefix); records without that value search the whole register, or nothing with
    ``outside=False`` (a rule that never leaves the region reads only the batch's partitions).
    """

    name: str
    k: int = 10
    min_similarity: float = 0.3
    within: str | None = None
    outside: bool = True


def default_rules(fields: Sequence[Field], *, k: int = 10, regional: bool = False) -> list:
    """The blocking rules implied by the field kinds.

    Establishments: the nearest names within the same postcode; the phonetic key of the
    name's first significant word within the same city; rare name words within the same
    city; house number + street name; and the nearest names over the whole register.
    Person records: the phonetic key of each name; each date; each postcode; nearest names.

    ``regional=True`` keeps every rule inside a postcode or a place, so that linking a batch reads
    only the index partitions holding the batch's postcodes and places (``needed_partitions``):
    house number + street and the nearest names over the whole register go, the nearest names
    within the same place come in, and a record without a postcode (place) gets no pairs from the
    rules within one. A record whose postcode and place are both wrong is then not found.
    """
    if regional:
        return _regional(default_rules(fields, k=k), fields, k)
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


def _regional(rules: list, fields: Sequence[Field], k: int) -> list:
    routable = set(routing_columns(fields))
    if not routable:
        raise ValueError("regional blocking needs a postcode or city field")
    out = []
    for rule in rules:
        if isinstance(rule, NeighbourRule):
            if rule.within in routable:
                out.append(replace(rule, outside=False))
        elif isinstance(rule, KeyRule) and routable & set(rule.columns) or \
                isinstance(rule, TokenRule) and rule.within in routable:
            out.append(rule)
    city = next((f for f in fields if f.kind == "city"), None)
    if city is not None and any(f.kind in ("name", "person_name", "string") for f in fields):
        out.append(NeighbourRule(f"{city.name} + name n-grams", k=k, within=f"{city.name}.value", outside=False))
    return out


# --------------------------------------------------------------------------- joins

def _keys(prepared: pd.DataFrame, columns: Sequence[str]) -> np.ndarray:
    parts = [prepared[c].fillna("").astype(str) for c in columns]
    key = parts[0]
    empty = key == ""
    for part in parts[1:]:
        key = key + "|" + part
        empty |= part == ""
    return key.where(~empty, "").to_numpy(dtype=object)


def join_codes(new_rows: np.ndarray, new_codes: np.ndarray, register_rows: np.ndarray,
               register_codes: np.ndarray, max_block: int, skip: np.ndarray | None = None
               ) -> tuple[np.ndarray, np.ndarray, int]:
    """All (new, register) row pairs with equal non-negative codes, skipping blocks over ``max_block``
    (counted here) or, when given, the new keys marked in ``skip`` (blocks counted over the whole
    register, of which these rows may be a partition).

    Returns the pair arrays and the number of new-record keys whose block was too large.
    """
    if skip is not None:
        new_codes = np.where(skip, -1, new_codes)
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
    keep = found & (counts[at] <= max_block) if skip is None else found
    too_large = int((found & ~keep).sum())
    rows, st, ct = new_rows[keep], starts[at[keep]], counts[at[keep]]
    total = int(ct.sum())
    offsets = np.arange(total) - np.repeat(np.cumsum(ct) - ct, ct)
    return (np.repeat(rows, ct).astype(np.int64), register_rows[order[np.repeat(st, ct) + offsets]].astype(np.int64),
            too_large)


# --------------------------------------------------------------------------- block sizes over the whole register
# A key's block is counted over the whole register, whichever partition its records are in, so a
# partitioned index skips exactly the blocks an index in one piece skips. Keys are hashed to 64 bits
# for the count (a collision, about one in 10^8 at 10 million keys, would at worst skip one block).

_MIX = np.uint64(0x9E3779B97F4A7C15)


def _hash(values: np.ndarray) -> np.ndarray:
    """64-bit hash of each string, each distinct string hashed once."""
    codes, uniques = pd.factorize(np.asarray(values, dtype=object))
    return pd.util.hash_array(np.asarray(uniques, dtype=object))[codes] if len(codes) else np.empty(0, np.uint64)


def _key_hashes(keys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(rows with a key, hash of their key)."""
    rows = np.flatnonzero(keys != "")
    return rows, _hash(keys[rows])


def _rare_words(rule: TokenRule, index: RegisterIndex) -> np.ndarray:
    return index.word_frequency_ <= max(1, rule.max_share * len(index))


def _token_hashes(rule: TokenRule, prepared: pd.DataFrame, words: sp.csr_matrix, rare: np.ndarray
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(row, word) of every rare word in ``words`` with the hash of (its region, the word); rows
    outside any region are dropped when the rule is within one."""
    rows = np.repeat(np.arange(words.shape[0]), np.diff(words.indptr))
    tokens = words.indices.astype(np.int64)
    keep = rare[tokens]
    rows, tokens = rows[keep], tokens[keep]
    if rule.within is None:
        region = np.zeros(len(rows), dtype=np.uint64)
    else:
        values = prepared[rule.within].fillna("").astype(str).to_numpy(dtype=object)
        present = values[rows] != ""
        rows, tokens = rows[present], tokens[present]
        region = _hash(values)[rows]
    return rows, tokens, pd.util.hash_array(region ^ (tokens.astype(np.uint64) * _MIX))


def block_sizes(index: RegisterIndex, rule, partitions=None) -> tuple[np.ndarray, np.ndarray]:
    """(sorted key hashes, register records per key) of a key or token rule over ``partitions``
    (default every partition); each partition's count is kept on the index, so a chunked run
    counts it once. A rule that pairs only within a postcode or place needs only the partitions
    holding the batch's postcodes or places (``needed_partitions``): every record of a key the
    batch has is in them, so those keys' counts are exact. Once counted over every partition, the
    keys held by one record are left out (a key not found is then a block of at most one)."""
    return _counts(index, rule, partitions, keep_single=False)


def _counts(index: RegisterIndex, rule, partitions, keep_single: bool) -> tuple[np.ndarray, np.ndarray]:
    cache = index.__dict__.setdefault("_block_sizes", {})
    key = (type(rule).__name__, rule.columns if isinstance(rule, KeyRule) else (rule.within, rule.max_share))
    # Counted over every partition, a rule's blocks serve any batch: a key of a rule confined to a
    # postcode or place has all its records in the partitions holding that value, so its count is
    # the same over any partitions that hold them. Those counts are kept for the run without the
    # keys held once (about 16 bytes a key of the register: most address keys are unique), and the
    # partitions' own counts are let go.
    whole = index.__dict__.setdefault("_block_sizes_whole", {})
    if key in whole and not keep_single:
        return whole[key]
    every = partitions is None or len({int(k) for k in partitions}) == index.n_partitions
    merged = index.__dict__.setdefault("_block_sizes_merged", {})
    scope = None if partitions is None else tuple(int(k) for k in partitions)
    if not every and key in merged and merged[key][0] == scope:
        return merged[key][1]
    result = _block_sizes(index, rule, partitions, cache, key)
    if every and index.n_partitions > 1:
        several = result[1] > 1
        whole[key] = (result[0][several], result[1][several])
        for k in range(index.n_partitions):
            cache.pop((key, k), None)
        merged.pop(key, None)
    else:
        merged[key] = (scope, result)
    return result


def _block_sizes(index: RegisterIndex, rule, partitions, cache: dict, key) -> tuple[np.ndarray, np.ndarray]:
    found = []
    for k in (range(index.n_partitions) if partitions is None else partitions):
        if (key, int(k)) not in cache:
            part = index.partition(int(k))
            if isinstance(rule, KeyRule):
                hashes = _key_hashes(_register_keys(part, rule.columns))[1]
            else:
                hashes = _token_hashes(rule, part.prepared_, part.word_matrix_, _rare_words(rule, index))[2]
            cache[(key, int(k))] = np.unique(hashes, return_counts=True)
        found.append(cache[(key, int(k))])
    if len(found) == 1:
        return found[0]
    if not found:
        return np.empty(0, np.uint64), np.empty(0, np.int64)
    keys, where = np.unique(np.concatenate([h for h, _ in found]), return_inverse=True)
    return keys, np.bincount(where, weights=np.concatenate([c for _, c in found]), minlength=len(keys)).astype(np.int64)


def _oversized(index: RegisterIndex, rule, hashes: np.ndarray, max_block: int, partitions=None) -> np.ndarray:
    # without the keys held once, unless one register record is already too many
    keys, counts = _counts(index, rule, partitions, keep_single=max_block < 1)
    if not len(keys):
        return np.zeros(len(hashes), dtype=bool)
    at = np.minimum(np.searchsorted(keys, hashes), len(keys) - 1)
    return (keys[at] == hashes) & (counts[at] > max_block)


# --------------------------------------------------------------------------- rules on one partition

def _register_keys(part, columns: Sequence[str]) -> np.ndarray:
    """The partition's keys for ``columns``."""
    return _keys(part.prepared_, columns)


def _column_hashes(prepared: pd.DataFrame, columns: Sequence[str]) -> tuple[np.ndarray, np.ndarray]:
    """(64-bit hash of each row's values of ``columns``, rows where every one is non-empty): the key
    of ``_keys`` without writing it out (each distinct value hashed once, the hashes combined)."""
    present = np.ones(len(prepared), dtype=bool)
    combined = None
    for column in columns:
        # distinct values first: a partition's million rows hold far fewer (places, postcodes)
        codes, uniques = pd.factorize(prepared[column].to_numpy(dtype=object), use_na_sentinel=False)
        values = pd.Series(uniques, dtype=object).fillna("").astype(str).to_numpy(dtype=object)
        present &= (values != "")[codes] if len(values) else np.ones(len(codes), dtype=bool)
        hashed = pd.util.hash_array(values)[codes] if len(values) else np.zeros(len(codes), dtype=np.uint64)
        combined = hashed if combined is None else pd.util.hash_array(combined * _MIX ^ hashed)
    if combined is None:
        combined = np.zeros(len(prepared), dtype=np.uint64)
    return combined, present


class _KeyGroups:
    """The rows of a partition grouped by their key for some columns, built once per partition (a
    batch then costs its own records, not the partition's): the distinct non-empty keys' 64-bit
    hashes (sorted), and the rows of key ``c`` are ``order[starts[c]: starts[c] + counts[c]]``
    (ascending). Hashes rather than the keys' text: about 20 bytes a row instead of a string and a
    hash-table entry (a collision, about one in 10^6 at 10 million keys, would add one block's
    pairs, which the comparisons then score)."""

    def __init__(self, hashes: np.ndarray, present: np.ndarray | None = None) -> None:
        rows = np.flatnonzero(present) if present is not None else np.arange(len(hashes))
        hashes = np.asarray(hashes, dtype=np.uint64)[rows]
        order = np.argsort(hashes, kind="stable")
        self.keys, starts, counts = np.unique(hashes[order], return_index=True, return_counts=True)
        small = np.int32 if len(rows) < 2 ** 31 else np.int64
        self.order = rows[order].astype(small)
        self.starts, self.counts = starts.astype(small), counts.astype(small)

    def codes(self, hashes: np.ndarray, present: np.ndarray | None = None) -> np.ndarray:
        """Code of each key: -1 for an empty key, ``len(self.keys)`` for a key no row has."""
        hashes = np.asarray(hashes, dtype=np.uint64)
        n = len(self.keys)
        if n:
            at = np.minimum(np.searchsorted(self.keys, hashes), n - 1)
            codes = np.where(self.keys[at] == hashes, at, n).astype(np.int64)
        else:
            codes = np.zeros(len(hashes), dtype=np.int64)
        if present is not None:
            codes[~present] = -1
        return codes

    def members(self, code: int) -> np.ndarray:
        if not 0 <= code < len(self.keys):
            return np.empty(0, dtype=np.int64)
        return self.order[self.starts[code]: self.starts[code] + self.counts[code]].astype(np.int64)

    def pairs(self, new_rows: np.ndarray, new_codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Every (new row, partition row) with equal keys."""
        found = (new_codes >= 0) & (new_codes < len(self.keys))
        rows, codes = new_rows[found], new_codes[found]
        ct, st = self.counts[codes].astype(np.int64), self.starts[codes].astype(np.int64)
        offsets = np.arange(int(ct.sum())) - np.repeat(np.cumsum(ct) - ct, ct)
        return np.repeat(rows, ct).astype(np.int64), self.order[np.repeat(st, ct) + offsets].astype(np.int64)


def _key_groups(part, columns: Sequence[str]) -> _KeyGroups:
    cache = part.__dict__.setdefault("_key_groups", {})
    if tuple(columns) not in cache:
        cache[tuple(columns)] = _KeyGroups(*_column_hashes(part.prepared_, columns))
    return cache[tuple(columns)]


def _key_pairs(rule: KeyRule, new: pd.DataFrame, part, too_large: np.ndarray):
    """Pairs of a key rule between ``new`` and one partition; ``too_large`` marks new rows whose block
    is over the limit in the whole register."""
    groups = _key_groups(part, rule.columns)
    codes = groups.codes(*_column_hashes(new, rule.columns))
    codes[too_large] = -1
    return groups.pairs(np.arange(len(new)), codes)


def _token_groups(rule: TokenRule, part, rare: np.ndarray) -> tuple[np.ndarray, _KeyGroups]:
    """The partition's rows holding a rare word, grouped by the hash of (region, word): built once per
    partition, as the key rules' groups are, so a batch costs its own words only."""
    cache = part.__dict__.setdefault("_token_groups", {})
    key = (rule.within, rule.max_share)
    if key not in cache:
        register_rows, _, register_hashes = _token_hashes(rule, part.prepared_, part.word_matrix_, rare)
        cache[key] = (register_rows, _KeyGroups(register_hashes))
    return cache[key]


def _token_pairs(rule: TokenRule, new_tokens, part, rare: np.ndarray):
    """Pairs sharing a rare word (in the same region) between the new records' (row, word, hash, too
    large) and one partition."""
    rows, _, hashes, too_large = new_tokens
    register_rows, groups = _token_groups(rule, part, rare)
    codes = groups.codes(hashes)
    codes[too_large] = -1
    i, at = groups.pairs(rows, codes)
    return i, register_rows[at].astype(np.int64)


def top_k(similarity: sp.csr_matrix, k: int, min_similarity: float) -> tuple[np.ndarray, np.ndarray]:
    """Row and column of each row's ``k`` largest entries that reach ``min_similarity``."""
    rows, cols, _ = _top_k(similarity, k, min_similarity)
    return rows, cols


def _top_k(similarity: sp.csr_matrix, k: int, min_similarity: float):
    similarity = similarity.tocsr()
    # Entries under the floor go first, before anything is sorted: a product row holds thousands of
    # weak similarities and keeps a few dozen (no sort of the whole product, no row per entry).
    kept = np.flatnonzero(similarity.data >= min_similarity)
    rows = np.searchsorted(similarity.indptr, kept, side="right") - 1
    cols, data = similarity.indices[kept], similarity.data[kept]
    order = _row_similarity_column_order(rows, cols, data, similarity.shape)
    rows, cols, data = rows[order], cols[order], data[order]
    first = np.searchsorted(rows, rows, side="left")
    keep = (np.arange(len(rows)) - first) < k
    return rows[keep].astype(np.int64), cols[keep].astype(np.int64), data[keep]


_ONE_BITS = 0x3F800000  # the bits of float32 1.0; a non-negative float32's bits order as its value


def _row_similarity_column_order(rows: np.ndarray, cols: np.ndarray, data: np.ndarray, shape) -> np.ndarray:
    """Order by row, then by decreasing similarity (clipped to [0, 1], so rounding above 1 is a
    tie), then by column: ties fall to the smaller column, as in best_k. One integer sort when
    row, similarity and column fit 63 bits together (a chunk of rows always does), else lexsort."""
    clipped = np.clip(data, 0.0, 1.0).astype(np.float32)
    row_bits, col_bits = int(max(shape[0] - 1, 1)).bit_length(), int(max(shape[1] - 1, 1)).bit_length()
    if row_bits + 30 + col_bits > 63:
        return np.lexsort((cols, -clipped, rows))
    weakness = (_ONE_BITS - clipped.view(np.int32)).astype(np.int64)  # 0 for 1.0, < 2^30
    key = (rows.astype(np.int64) << (30 + col_bits)) | (weakness << col_bits) | cols.astype(np.int64)
    return np.argsort(key)


def best_k(rows: np.ndarray, cols: np.ndarray, data: np.ndarray, k: int):
    """Each row's ``k`` entries of largest ``data``, ties to the smaller column: the same choice
    whether the columns come from one register or from several partitions of it."""
    order = np.lexsort((cols, -data, rows))
    rows, cols, data = rows[order], cols[order], data[order]
    first = np.searchsorted(rows, rows, side="left")
    keep = (np.arange(len(rows)) - first) < k
    return rows[keep].astype(np.int64), cols[keep].astype(np.int64), data[keep]


def blocking_matrix(matrix: sp.csr_matrix, keep_columns: np.ndarray) -> sp.csr_matrix:
    """``matrix`` with only the n-gram columns in ``keep_columns`` (a boolean mask)."""
    return (matrix @ sp.diags(keep_columns.astype(matrix.dtype))).tocsr()


def _searchable(part, keep: np.ndarray, max_postings: int) -> sp.csr_matrix:
    """The partition's n-gram rows without the too-common n-grams, transposed for the product; kept
    on the partition (the same for every batch)."""
    cache = part.__dict__.setdefault("_searchable", {})
    if max_postings not in cache:
        cache[max_postings] = blocking_matrix(part.char_matrix_, keep).T.tocsr()
    return cache[max_postings]


PRODUCT_ENTRIES = 2_000_000  # about this many similarities per product: its memory stays small


def _product_blocks(source: sp.csr_matrix, rows: np.ndarray, target: sp.csr_matrix, chunk: int) -> list[np.ndarray]:
    """``rows`` cut into blocks of at most ``chunk`` whose product with ``target`` (n-grams x names)
    holds about ``PRODUCT_ENTRIES`` similarities or fewer. A row's similarities are at most its
    n-grams' postings in ``target`` (and at most its names), so a region or partition of millions
    of names, where a common n-gram is in a quarter of them, gets small blocks instead of a product
    of gigabytes; each row's top k is the same in any block."""
    if len(rows) <= 1:
        return [rows]
    picked = source[rows]
    postings = np.diff(target.indptr).astype(np.float64)
    owner = np.repeat(np.arange(len(rows)), np.diff(picked.indptr))
    size = np.minimum(np.bincount(owner, weights=postings[picked.indices], minlength=len(rows)), target.shape[1])
    before = np.cumsum(size) - size
    window = (before // PRODUCT_ENTRIES).astype(np.int64)
    key = window * (len(rows) + 1) + np.arange(len(rows)) // chunk
    cuts = np.flatnonzero(np.diff(key)) + 1
    return np.split(rows, cuts)


def _neighbour_pairs(rule: NeighbourRule, new: pd.DataFrame, new_chars: sp.csr_matrix, query: sp.csr_matrix,
                     part, keep: np.ndarray, max_postings: int, chunk: int, k: int):
    """Each new record's ``k`` nearest names in one partition: (new row, partition row, similarity)."""
    register_chars = part.char_matrix_
    groups = [(np.arange(len(new)), None)]
    if rule.within:
        regions = _key_groups(part, [rule.within])
        new_region = regions.codes(*_column_hashes(new, [rule.within]))
        outside = [(np.flatnonzero(new_region < 0), None)] if rule.outside else []
        order = np.argsort(new_region, kind="stable")
        codes, starts, counts = np.unique(new_region[order], return_index=True, return_counts=True)
        groups = outside + [(order[s0: s0 + c0], regions.members(code))
                            for code, s0, c0 in zip(codes, starts, counts) if code >= 0]
    out_i, out_j, out_s = [], [], []
    for rows, members in groups:
        if not len(rows) or (members is not None and not len(members)):
            continue
        # Within a region the products are small: every n-gram counts there, however common.
        source = query if members is None else new_chars
        block_target = _searchable(part, keep, max_postings) if members is None else register_chars[members].T.tocsr()
        for block in _product_blocks(source, rows, block_target, chunk):
            i, j, s = _top_k(source[block] @ block_target, k, rule.min_similarity)
            out_i.append(block[i])
            out_j.append(j if members is None else members[j])
            out_s.append(s)
    if not out_i:
        empty = np.empty(0, dtype=np.int64)
        return empty, empty, np.empty(0, dtype=np.float32)
    return np.concatenate(out_i), np.concatenate(out_j), np.concatenate(out_s)


# --------------------------------------------------------------------------- the union over partitions

def needed_partitions(new: pd.DataFrame, index: RegisterIndex, rules: Sequence) -> np.ndarray:
    """The partitions that can hold pairs for ``new``.

    A rule reads only the partitions holding the batch's values of a routing column (postcode or
    place, ``partitions.routing_columns``) when it pairs records with equal values of that column
    only: a ``KeyRule`` with the column among its ``columns``, a ``TokenRule`` or ``NeighbourRule``
    ``within`` it (a neighbour rule only with ``outside=False``, or when every record has a value).
    Any other rule (house number + street anywhere, the nearest names over the whole register)
    can find a pair anywhere, so then every partition is read.
    """
    everything = np.arange(index.n_partitions)
    if index.n_partitions == 1:
        return everything
    routable = routing_columns(index.fields_)
    needed: list[np.ndarray] = []
    for rule in rules:
        if isinstance(rule, KeyRule):
            column = next((c for c in routable if c in rule.columns), None)
        else:
            column = rule.within if rule.within in routable else None
        if column is None:
            return everything
        values = new[column].fillna("").astype(str)
        if isinstance(rule, NeighbourRule) and rule.outside and (values == "").any():
            return everything  # records without the value search the whole register
        found = index.partitions_holding(column, values[values != ""].to_numpy(dtype=object))
        if found is None:  # an index saved before it kept where each value is
            if column not in region_columns(index.fields_):
                return everything
            found = index.partitions_of_regions(region_keys(new, index.fields_))
        needed.append(found)
    return np.unique(np.concatenate(needed)) if needed else everything


def default_max_postings(index: RegisterIndex) -> int:
    """N-grams in more register names than this are left out of the search over a whole partition."""
    return max(2000, int(0.005 * len(index)))


def prepare_partitions(index: RegisterIndex, rules: Sequence, partitions) -> None:
    """Build what the rules keep on each of ``partitions`` (rows grouped by key, the searchable
    n-gram rows) now, in this process: forked workers then share them instead of each building
    its own for every batch."""
    max_postings = default_max_postings(index)
    keep = index.char_postings_ <= max_postings
    for p in partitions:
        part = index.partition(int(p))
        for rule in rules:
            if isinstance(rule, KeyRule):
                _key_groups(part, rule.columns)
            elif isinstance(rule, TokenRule):
                _token_groups(rule, part, _rare_words(rule, index))
            elif isinstance(rule, NeighbourRule):
                if rule.within:
                    _key_groups(part, [rule.within])
                if not rule.within or rule.outside:
                    _searchable(part, keep, max_postings)


def candidate_pairs(new: pd.DataFrame, index: RegisterIndex, rules: Sequence, *,
                    new_chars: sp.csr_matrix | None = None, new_words: sp.csr_matrix | None = None,
                    max_block: int = 100, max_postings: int | None = None, chunk: int = 2000,
                    self_join: bool = False) -> pd.DataFrame:
    """The union of the rules' pairs as a DataFrame of positions ``new`` and ``register``.

    Parameters
    ----------
    new : prepared incoming records (``RegisterIndex.prepare``)
    index : the register index, in one piece or in partitions (each read in turn; the pairs are
        the same either way)
    rules : KeyRule / TokenRule / NeighbourRule objects
    new_chars, new_words : TF-IDF rows of ``new["text"]`` (computed when not given)
    max_block : key blocks with more register records are skipped
    max_postings : n-grams in more register names are skipped by the neighbour search
        (default: 2,000 or 0.5% of the register, whichever is larger)
    self_join : ``new`` is the register itself (deduplication): keep only pairs new < register

    Returns
    -------
    DataFrame with int64 columns ``new`` and ``register`` (positions in the whole register),
    sorted; ``attrs["rules"]`` holds the pairs each rule found and the keys skipped for size.
    """
    found, skipped = partition_candidates(new, index, rules, new_chars=new_chars, new_words=new_words,
                                          max_block=max_block, max_postings=max_postings, chunk=chunk,
                                          self_join=self_join)
    return union_candidates(found, skipped, rules, len(index), self_join=self_join)


def partition_candidates(new: pd.DataFrame, index: RegisterIndex, rules: Sequence, *,
                         new_chars: sp.csr_matrix | None = None, new_words: sp.csr_matrix | None = None,
                         max_block: int = 100, max_postings: int | None = None, chunk: int = 2000,
                         self_join: bool = False, partitions=None, scope=None) -> tuple[dict, dict]:
    """Each rule's pairs in each partition the batch needs (or only those of them in ``partitions``),
    before they are put together: ``({rule name: [(new rows, register positions[, similarities]),
    ...]}, {rule name: keys skipped for size})``. Block sizes are counted over every partition the
    batch needs, whichever are read here, so a batch read a few partitions at a time finds the same
    pairs (``union_candidates`` puts the pieces together). ``scope``: the partitions the whole
    batch needs, when ``new`` is a slice of it (block sizes are then counted over the same
    partitions in every slice, and their union is kept on the index once)."""
    new = new.reset_index(drop=True)
    if new_chars is None or new_words is None:
        new_chars, new_words = index.vectorize(new["text"])
    if max_postings is None:
        max_postings = default_max_postings(index)
    keep = index.char_postings_ <= max_postings
    query = blocking_matrix(new_chars, keep)
    scope = needed_partitions(new, index, rules) if scope is None else np.asarray(scope, dtype=np.int64)
    # What each rule needs about the new records, and which of their keys are over the limit.
    state, skipped = {}, {}
    for rule in rules:
        if isinstance(rule, KeyRule):
            rows, hashes = _key_hashes(_keys(new, rule.columns))
            too_large = np.zeros(len(new), dtype=bool)
            too_large[rows] = _oversized(index, rule, hashes, rule.max_block or max_block, scope)
            state[rule.name], skipped[rule.name] = too_large, int(too_large.sum())
        elif isinstance(rule, TokenRule):
            rare = _rare_words(rule, index)
            rows, tokens, hashes = _token_hashes(rule, new, new_words, rare)
            too_large = _oversized(index, rule, hashes, max_block, scope)
            state[rule.name], skipped[rule.name] = (rare, (rows, tokens, hashes, too_large)), int(too_large.sum())
        elif isinstance(rule, NeighbourRule):
            skipped[rule.name] = 0
        else:
            raise TypeError(f"unknown blocking rule {rule!r}")
    if partitions is not None:
        scope = np.intersect1d(scope, np.asarray(list(partitions), dtype=np.int64))
    found: dict[str, list] = {rule.name: [] for rule in rules}
    for p in scope:
        part = index.partition(int(p))
        for rule in rules:
            if isinstance(rule, KeyRule):
                i, j = _key_pairs(rule, new, part, state[rule.name])
                found[rule.name].append((i, part.positions_[j]))
            elif isinstance(rule, TokenRule):
                rare, new_tokens = state[rule.name]
                i, j = _token_pairs(rule, new_tokens, part, rare)
                found[rule.name].append((i, part.positions_[j]))
            else:
                i, j, s = _neighbour_pairs(rule, new, new_chars, query, part, keep, max_postings, chunk,
                                           rule.k + (1 if self_join else 0))
                found[rule.name].append((i, part.positions_[j], s))
    return found, skipped


def union_candidates(found: dict, skipped: dict, rules: Sequence, n_register: int, *,
                     self_join: bool = False) -> pd.DataFrame:
    """The pairs of ``partition_candidates``'s pieces (from one call, or several over other
    partitions, rows numbered in one batch) as ``candidate_pairs`` returns them: the nearest names
    chosen over every piece, each rule's pairs made unique, the rules' union sorted."""
    report, codes = {}, []
    for rule in rules:
        got = found[rule.name]
        i = np.concatenate([g[0] for g in got]) if got else np.empty(0, dtype=np.int64)
        j = np.concatenate([g[1] for g in got]) if got else np.empty(0, dtype=np.int64)
        if isinstance(rule, NeighbourRule) and len(got) > 1:  # the nearest over all partitions
            i, j, _ = best_k(i, j, np.concatenate([g[2] for g in got]), rule.k + (1 if self_join else 0))
        code = i.astype(np.int64) * n_register + j
        if self_join:
            code = np.minimum(i, j) * n_register + np.maximum(i, j)
            code = code[i != j]
        code = np.unique(code)
        report[rule.name] = {"pairs": int(len(code)), "skipped_keys": skipped[rule.name]}
        codes.append(code)
        log.info("blocking rule %s: %d pairs, %d oversized keys skipped", rule.name, len(code), skipped[rule.name])
    code = np.unique(np.concatenate(codes)) if codes else np.empty(0, dtype=np.int64)
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
