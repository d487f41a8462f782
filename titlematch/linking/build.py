"""Build a register index from a register read in chunks, without holding the register in memory.

``RegisterIndex().fit(frame).save(dir)`` needs the whole register in memory; ``build_index`` reads
it a chunk at a time and writes the same index, file for file:

1. each chunk: ids checked, fields prepared, character and word n-grams counted against the
   chunk's own vocabulary (document frequencies added to the register's), region hashes kept,
   and the chunk spilled to disk inside the staging directory;
2. with the whole register's vocabulary and idf known, each spilled chunk's counts are mapped to
   the register's vocabulary (both are sorted, so the mapping keeps every row's order), weighted
   into TF-IDF rows and cut by partition;
3. each partition's pieces are gathered in register order and written.

Memory: one chunk, one partition, and the register's ids and display columns (written in one
table beside the partitions), which ``link`` holds too. Example::

    build_index((c.frame for c in TableReader("register.csv", chunk_rows=200_000).chunks()),
                "register_index", partition_rows=1_000_000)
"""
from __future__ import annotations

import logging
import os
import shutil
from pathlib import Path
from typing import Iterable

import numpy as np
import pandas as pd
import scipy.sparse as sp
from sklearn.feature_extraction.text import TfidfTransformer, TfidfVectorizer

from ..io import ROW_COLUMN, InputError
from ..io.artefact import MANIFEST, staged_directory
from .partitions import PARTITION_ROWS, RegisterPartition, region_keys, routing_table, sha256_of
from .register import (RegisterIndex, _char_vectorizer, _word_vectorizer, check_fields, prepare_records,
                       register_ids, resolve_fields, write_index_root)
from .tfidf import _count_slice, local_counts, remap, tfidf_idf

log = logging.getLogger(__name__)

SPILL = "spill"


class EmptyRegister(InputError):
    """The chunks held no register row."""


class _Vocabulary:
    """Document frequencies of one vectorizer's terms over the chunks seen so far."""

    def __init__(self, make) -> None:
        self.make = make
        self.df: dict[str, int] = {}

    def add(self, counts: sp.csr_matrix, terms: np.ndarray) -> None:
        df = np.bincount(counts.indices, minlength=len(terms))
        get = self.df.get
        for term, n in zip(terms.tolist(), df.tolist()):
            self.df[term] = get(term, 0) + n

    def fitted(self, n_documents: int) -> tuple[TfidfVectorizer, np.ndarray, np.ndarray]:
        """(vectorizer with vocabulary and idf, sorted terms, register postings per term)."""
        terms = np.asarray(sorted(self.df), dtype=str)
        postings = np.asarray([self.df[t] for t in terms.tolist()], dtype=np.int64)
        fit_df, fit_n = postings, n_documents
        if n_documents == 0:  # an all-empty register: fitted on "_", as RegisterIndex.fit does
            counts, extra = _count_slice(self.make, np.asarray(["_"], dtype=object))
            terms = np.asarray(sorted(set(terms.tolist()) | set(extra.tolist())), dtype=str)
            postings = np.zeros(len(terms), dtype=np.int64)
            fit_df = np.bincount(remap(counts, extra, terms).indices, minlength=len(terms))
            fit_n = 1
        vectorizer = self.make({t: k for k, t in enumerate(terms.tolist())})
        vectorizer.idf_ = tfidf_idf(fit_df, fit_n, vectorizer.dtype)
        return vectorizer, terms, postings


def build_index(chunks: Iterable[pd.DataFrame], directory: str | os.PathLike, *, fields=None,
                id_column: str = "register_id", partition_rows: int | None = None, workers: int = -1,
                source: str = "<register>") -> Path:
    """Index a register given as frames of rows (in register order) and save it at ``directory``,
    as ``RegisterIndex(fields, id_column).fit(whole, source=source).save(directory, partition_rows=...)``
    would, but one chunk in memory at a time. Written beside ``directory`` and swapped in whole;
    an InputError (empty or repeated id, missing column, no rows) leaves the old index."""
    rows_per_partition = partition_rows or PARTITION_ROWS
    if rows_per_partition < 1:
        raise ValueError(f"partition_rows must be at least 1, got {rows_per_partition}")
    with staged_directory(directory) as staging:
        spill = staging / SPILL
        spill.mkdir()
        index = RegisterIndex(fields, id_column, workers=workers)
        chars, words = _Vocabulary(_char_vectorizer), _Vocabulary(_word_vectorizer)
        sizes, n_documents = [], 0
        for chunk in chunks:
            if not len(chunk):
                continue
            if not sizes:
                index.fields_ = check_fields(chunk, resolve_fields(fields), source, "register")
            n_documents += _spill_chunk(chunk, index, spill / f"c{len(sizes):06d}", sum(sizes), chars, words,
                                        source, workers)
            sizes.append(len(chunk))
        total = sum(sizes)
        if not total:
            raise EmptyRegister(f"{source}: no register rows to index")
        register = pd.concat([pd.read_parquet(spill / f"c{c:06d}" / "register.parquet") for c in range(len(sizes))],
                             ignore_index=True)
        # ids repeated across chunks (each chunk was checked alone), named by their source rows
        register_ids(pd.DataFrame({id_column: register["register_id"], ROW_COLUMN: register["row"]}), id_column, source)
        char_vectorizer, char_terms, char_postings = chars.fitted(n_documents)
        word_vectorizer, word_terms, word_frequency = words.fitted(n_documents)
        count = max(1, -(-total // rows_per_partition))
        cut = [_cut_chunk(spill / f"c{c:06d}", spill, c, count, (char_vectorizer, char_terms),
                          (word_vectorizer, word_terms), index.fields_) for c in range(len(sizes))]
        owner = np.concatenate([o for o, _ in cut])
        routing = pd.concat([r for _, r in cut], ignore_index=True).drop_duplicates()
        routing = routing.sort_values(["column", "value", "partition"], kind="stable").reset_index(drop=True)
        entries = []
        for k in range(count):
            name = f"part-{k:05d}"
            pieces = [RegisterPartition.read(p, _sha(p)) for p in sorted((spill / f"p{k:05d}").glob("c*"))]
            part = _concat(pieces, name)
            entries.append({"name": name, "rows": len(part), "manifest_sha256": part.write(staging / name)})
            shutil.rmtree(spill / f"p{k:05d}", ignore_errors=True)
        shutil.rmtree(spill)
        write_index_root(staging, id_column=id_column, fields=index.fields_,
                         register=register[["register_id", "register_name", "register_address"]],
                         char_vectorizer=char_vectorizer, word_vectorizer=word_vectorizer,
                         char_postings=char_postings, word_frequency=word_frequency, partition_of=owner,
                         entries=entries, routing=routing)
        log.info("%s: register index of %d records in %d partition(s), built from %d chunk(s)", source, total,
                 count, len(sizes))
    return Path(directory)


def _spill_chunk(chunk: pd.DataFrame, index: RegisterIndex, where: Path, offset: int, chars: _Vocabulary,
                 words: _Vocabulary, source: str, workers: int) -> int:
    """Pass 1 on one chunk; returns how many of its records have text (the documents idf counts)."""
    check_fields(chunk, [f for f in index.fields_ if not f.optional], source, "register")
    ids, rows = register_ids(chunk, index.id_column, source, first_row=offset + 1)
    display = index._display(chunk)
    prepared = prepare_records(chunk, index.fields_, side="register", workers=workers)
    text = prepared["text"].fillna("").astype(str).to_numpy(dtype=object)
    where.mkdir()
    pd.DataFrame({"register_id": ids.to_numpy(dtype=object), "register_name": display["register_name"].to_numpy(),
                  "register_address": display["register_address"].to_numpy(),
                  "row": rows.to_numpy(dtype=np.int64)}).to_parquet(where / "register.parquet", index=False)
    regions = region_keys(prepared, index.fields_).fillna("").astype(str)
    np.save(where / "region_hash.npy", pd.util.hash_array(regions.to_numpy(dtype=object)), allow_pickle=False)
    np.save(where / "region_empty.npy", (regions == "").to_numpy(), allow_pickle=False)
    for name, vocabulary in (("char", chars), ("word", words)):
        counts, terms = local_counts(vocabulary.make, text, workers)
        vocabulary.add(counts, terms)
        np.save(where / f"{name}_terms.npy", terms, allow_pickle=False)
        for part, array in (("data", counts.data), ("indices", counts.indices), ("indptr", counts.indptr)):
            np.save(where / f"{name}_{part}.npy", array, allow_pickle=False)
    RegisterPartition(np.arange(offset, offset + len(chunk)), prepared, sp.csr_matrix((len(chunk), 0)),
                      sp.csr_matrix((len(chunk), 0)), "prepared").write(where / "prepared")
    return int((text != "").sum())


def _tfidf(where: Path, name: str, fitted) -> sp.csr_matrix:
    vectorizer, vocabulary = fitted
    indptr = np.load(where / f"{name}_indptr.npy")
    counts = sp.csr_matrix((np.load(where / f"{name}_data.npy"), np.load(where / f"{name}_indices.npy"), indptr),
                           shape=(len(indptr) - 1, len(np.load(where / f"{name}_terms.npy"))))
    counts = remap(counts, np.load(where / f"{name}_terms.npy"), vocabulary)
    # the weighting TfidfVectorizer applies, with the register's idf (as register.fit_tfidf)
    transformer = TfidfTransformer(norm=vectorizer.norm, use_idf=True, smooth_idf=vectorizer.smooth_idf,
                                   sublinear_tf=vectorizer.sublinear_tf)
    transformer.idf_ = vectorizer.idf_
    return transformer.transform(counts).tocsr()


def _cut_chunk(where: Path, spill: Path, c: int, count: int, chars, words, fields):
    """Pass 2 on one spilled chunk: TF-IDF rows in the register's vocabulary, cut by partition;
    returns the partition of each of its records and their routing table."""
    prepared = RegisterPartition.read(where / "prepared", _sha(where / "prepared"))
    hashed = np.load(where / "region_hash.npy")
    empty = np.load(where / "region_empty.npy")
    # as partitions.assign_partitions over the whole register: the region's hash, else the position
    owner = (hashed % np.uint64(count)).astype(np.int64)
    owner[empty] = prepared.positions_[empty] % count
    whole = RegisterPartition(prepared.positions_, prepared.prepared_, _tfidf(where, "char", chars),
                              _tfidf(where, "word", words))
    for k in np.unique(owner):
        target = spill / f"p{k:05d}"
        target.mkdir(exist_ok=True)
        whole.take(np.flatnonzero(owner == k), "piece").write(target / f"c{c:06d}")
    shutil.rmtree(where)
    return owner, routing_table(prepared.prepared_, owner, fields)


def _concat(pieces: list[RegisterPartition], name: str) -> RegisterPartition:
    if len(pieces) == 1:
        only = pieces[0]
        return RegisterPartition(only.positions_, only.prepared_, only.char_matrix_, only.word_matrix_, name)
    return RegisterPartition(np.concatenate([p.positions_ for p in pieces]),
                             pd.concat([p.prepared_ for p in pieces], ignore_index=True),
                             sp.vstack([p.char_matrix_ for p in pieces], format="csr"),
                             sp.vstack([p.word_matrix_ for p in pieces], format="csr"), name)


def _sha(directory: Path) -> str:
    return sha256_of(directory / MANIFEST)
