"""Candidate pairs and their features for a batch of records, on every core.

Blocking and comparison treat each incoming record on its own: its pairs and their features do
not depend on the other records of the batch. So the batch is cut into contiguous slices, each
slice goes through ``candidate_pairs`` and ``compare`` in a forked process (which starts with the
register index already in memory), and the slices' results are put back together in order. The
pairs and features are the same, value for value and in the same order, for any number of workers.

Example
-------
>>> pairs, features = pairs_and_features(prepared, index, rules, workers=-1)   # doctest: +SKIP
"""
from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd
import scipy.sparse as sp

from ..runtime.pool import map_slices, resolve_workers, slices
from .blocking import (KeyRule, TokenRule, block_sizes, candidate_pairs, needed_partitions, partition_candidates,
                       prepare_partitions, union_candidates)
from .comparison import compare, prepare_comparisons
from .register import RegisterIndex

SLICE_ROWS = 500  # fewer records per process than this are not worth a fork


def pairs_and_features(new: pd.DataFrame, index: RegisterIndex, rules: Sequence, *,
                       new_chars: sp.csr_matrix | None = None, new_words: sp.csr_matrix | None = None,
                       max_block: int = 100, workers: int = -1) -> tuple[pd.DataFrame, pd.DataFrame]:
    """``candidate_pairs`` then ``compare`` for the prepared records ``new``, by ``workers`` processes
    (-1 = every core). Returns (pairs, features) as the two functions would in one process."""
    new = new.reset_index(drop=True)
    if new_chars is None or new_words is None:
        new_chars, new_words = index.vectorize(new["text"], workers=workers)
    parts = slices(len(new), resolve_workers(workers), SLICE_ROWS)
    needed = needed_partitions(new, index, rules)
    groups = index.partition_groups(needed)
    if len(groups) > 1:
        return _by_partition_groups(new, index, rules, new_chars, new_words, max_block, workers, parts, needed,
                                    groups)
    if len(parts) <= 1:
        pairs = candidate_pairs(new, index, rules, new_chars=new_chars, new_words=new_words, max_block=max_block)
        return pairs, compare(pairs, new, index, new_chars=new_chars, new_words=new_words, workers=workers)
    for rule in rules:  # counted once here, before the fork, instead of once in every worker
        if isinstance(rule, (KeyRule, TokenRule)):
            block_sizes(index, rule, needed)
    # Partitions read here are shared by the forked workers, and so is what blocking and comparison
    # keep on them (built here once, not in every worker for every batch); an index too large for
    # the cache is read by each worker, a partition at a time.
    if index.preload(needed):
        prepare_partitions(index, rules, needed)
        prepare_comparisons(index, needed, new, new_chars, new_words)

    def one(rows: slice):
        records = new.iloc[rows].reset_index(drop=True)
        chars, words = new_chars[rows], new_words[rows]
        pairs = candidate_pairs(records, index, rules, new_chars=chars, new_words=words, max_block=max_block)
        # One thread per process: the processes already fill the cores.
        return pairs, compare(pairs, records, index, new_chars=chars, new_words=words, workers=1)

    done = map_slices(one, parts, workers)
    pairs = pd.concat([p.assign(new=p["new"] + rows.start) for (p, _), rows in zip(done, parts)],
                      ignore_index=True)
    features = pd.concat([f for _, f in done], ignore_index=True)
    report: dict = {}
    for p, _ in done:
        for name, info in p.attrs.get("rules", {}).items():
            total = report.setdefault(name, {"pairs": 0, "skipped_keys": 0})
            total["pairs"] += info["pairs"]
            total["skipped_keys"] += info["skipped_keys"]
    pairs["new"] = pairs["new"].astype(np.int64)
    pairs.attrs["rules"] = report
    return pairs, features


def _by_partition_groups(new: pd.DataFrame, index: RegisterIndex, rules: Sequence, new_chars: sp.csr_matrix,
                         new_words: sp.csr_matrix, max_block: int, workers: int, parts: list, needed: np.ndarray,
                         groups: list) -> tuple[pd.DataFrame, pd.DataFrame]:
    """``pairs_and_features`` for a batch whose partitions do not fit the cache together: the
    partitions are read a group at a time (each group fits), once per batch, here before the fork,
    so the workers share them. Each group's pairs are compared while it is in memory; a pair's
    features depend on the pair alone, and each register row is in one partition, so the features
    of the pairs kept once every group has been searched (the nearest names chosen over all of
    them) are the ones comparing those pairs would give."""
    n = len(index)
    for rule in rules:  # block sizes over every partition the batch needs, counted once
        if isinstance(rule, (KeyRule, TokenRule)):
            block_sizes(index, rule, needed)
    found: dict[str, list] = {rule.name: [] for rule in rules}
    skipped: dict[str, int] = {}
    codes, blocks = [], []  # per slice and group: codes (new * n + register) of the compared pairs, features
    for number, group in enumerate(groups):
        index.preload(group)
        prepare_partitions(index, rules, group)
        prepare_comparisons(index, group, new, new_chars, new_words)

        def one(rows: slice, group=group):
            records = new.iloc[rows].reset_index(drop=True)
            chars, words = new_chars[rows], new_words[rows]
            got, skip = partition_candidates(records, index, rules, new_chars=chars, new_words=words,
                                             max_block=max_block, partitions=group, scope=needed)
            pieces = [np.asarray(g[0], dtype=np.int64) * n + g[1] for pieces in got.values() for g in pieces]
            code = np.unique(np.concatenate(pieces)) if pieces else np.empty(0, dtype=np.int64)
            pairs = pd.DataFrame({"new": code // max(n, 1), "register": code % max(n, 1)})
            return got, skip, code, compare(pairs, records, index, new_chars=chars, new_words=words, workers=1)

        for (got, skip, code, features), rows in zip(map_slices(one, parts, workers), parts):
            for name, pieces in got.items():
                found[name].extend((g[0] + rows.start, *g[1:]) for g in pieces)
            if number == 0:  # the same counts for every group
                for name, count in skip.items():
                    skipped[name] = skipped.get(name, 0) + count
            codes.append(code + rows.start * n)
            blocks.append(features)
    pairs = union_candidates(found, skipped, rules, n)
    # every compared pair is in one slice and one group: its code is found once
    compared = np.concatenate(codes)
    order = np.argsort(compared, kind="stable")
    wanted = pairs["new"].to_numpy(dtype=np.int64) * n + pairs["register"].to_numpy(dtype=np.int64)
    at = order[np.searchsorted(compared[order], wanted)] if len(wanted) else np.empty(0, dtype=np.int64)
    features = pd.concat(blocks, ignore_index=True).iloc[at].reset_index(drop=True)
    features.index = pairs.index
    return pairs, features
