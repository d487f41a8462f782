"""TF-IDF counting in slices: each slice counted against its own vocabulary, then joined.

scikit-learn numbers a fitted vocabulary's terms in sorted order, so counts made against any
sorted vocabulary map into a larger sorted one by an increasing renumbering that keeps every row's
columns in order: counts of slices (of one register chunk, or of chunks) join into exactly what one
``CountVectorizer`` would count over the whole, and the idf follows from the summed document
frequencies. ``register.fit_tfidf`` and ``build.build_index`` both count this way.
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from sklearn.feature_extraction.text import TfidfVectorizer

from ..normalize.ngrams import char_wb_counts
from ..runtime.pool import map_slices, resolve_workers, slices

PARALLEL_ROWS = 2_000  # fewer rows per process than this are not worth a fork


def tfidf_idf(document_frequency: np.ndarray, n_documents: int, dtype=np.float32) -> np.ndarray:
    """Smoothed idf as scikit-learn's ``TfidfTransformer.fit`` computes it, operation for operation:
    ln((1 + n) / (1 + df)) + 1 in ``dtype`` (tests check it against the transformer)."""
    df = np.asarray(document_frequency).astype(dtype, copy=True)
    df += 1.0
    idf = np.full_like(df, fill_value=n_documents + 1, dtype=dtype)
    idf /= df
    np.log(idf, out=idf)
    idf += 1.0
    return idf


def local_counts(make, values: np.ndarray, workers: int = 1) -> tuple[sp.csr_matrix, np.ndarray]:
    """Raw term counts of ``values`` against their own sorted vocabulary: (counts, terms).

    Counted by ``workers`` processes over slices, each with its slice's vocabulary, then put in the
    union vocabulary; the result is what one ``CountVectorizer.fit_transform`` gives."""
    parts = slices(len(values), resolve_workers(workers), PARALLEL_ROWS)
    done = map_slices(lambda rows: _count_slice(make, values[rows]), parts, workers)
    if len(done) == 1:
        return done[0]
    terms = np.unique(np.concatenate([t for _, t in done]))
    return sp.vstack([remap(c, t, terms) for c, t in done], format="csr"), terms


def _count_slice(make, values: np.ndarray) -> tuple[sp.csr_matrix, np.ndarray]:
    vectorizer = make()
    if not any(values != ""):  # no text, no vocabulary (scikit-learn refuses an empty one)
        return sp.csr_matrix((len(values), 0), dtype=vectorizer.dtype), np.empty(0, dtype=str)
    if vectorizer.analyzer == "char_wb":
        # each distinct word's n-grams counted once (normalize.ngrams): the same counts as the
        # vectorizer's own, in its sorted vocabulary, rows sorted
        counts = char_wb_counts(vectorizer, values, fit=True)
    else:
        counts = super(TfidfVectorizer, vectorizer).fit_transform(values).tocsr()  # CountVectorizer's counts
        counts.sort_indices()  # fit renumbers the terms in sorted order without re-sorting each row
    terms = np.asarray(vectorizer.get_feature_names_out(), dtype=str)
    return counts, terms


def remap(counts: sp.csr_matrix, terms: np.ndarray, vocabulary: np.ndarray) -> sp.csr_matrix:
    """``counts`` over sorted ``terms`` as columns of the sorted ``vocabulary`` (a superset): the
    mapping is increasing, so each row's columns stay sorted."""
    where = np.searchsorted(vocabulary, terms).astype(counts.indices.dtype)
    return sp.csr_matrix((counts.data, where[counts.indices], counts.indptr),
                         shape=(counts.shape[0], len(vocabulary)))
