"""Character n-grams inside word boundaries, counted once per distinct word.

scikit-learn's ``char_wb`` analyzer lower-cases a text, splits it on white space, pads each word
with a space on either side and cuts that word's n-grams: a text's n-grams are its words' n-grams
put together. Titles share most of their words (the 9,000 distinct titles of a dictionary hold
about 4,000 distinct words, and a batch of new titles mostly words already seen), so counting each
distinct word once and adding the rows up with one sparse product (texts x words, times words x
n-grams) gives the vectorizer's own matrix, entry for entry, for a fraction of its Python work: the
analyzer runs once per distinct word instead of once per word of every text.
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from sklearn.feature_extraction.text import CountVectorizer, HashingVectorizer
from sklearn.preprocessing import normalize


def word_counts(texts, lowercase: bool = True) -> tuple[sp.csr_matrix, list[str]]:
    """Texts x distinct words counts (float32), and the distinct words in order of first appearance.

    Words are what ``char_wb`` cuts its n-grams from: the white-space split of the text, lower-cased
    as the vectorizer does when ``lowercase``."""
    position: dict[str, int] = {}
    indices: list[int] = []
    indptr = [0]
    for text in texts:
        for word in (text.lower() if lowercase else text).split():
            indices.append(position.setdefault(word, len(position)))
        indptr.append(len(indices))
    counts = sp.csr_matrix((np.ones(len(indices), dtype=np.float32), np.asarray(indices, dtype=np.int64),
                            np.asarray(indptr, dtype=np.int64)), shape=(len(indptr) - 1, len(position)))
    counts.sum_duplicates()
    return counts, list(position)


def _check_char_wb(vectorizer) -> None:
    if vectorizer.analyzer != "char_wb" or vectorizer.preprocessor is not None or vectorizer.strip_accents is not None:
        raise ValueError("per-word counting reproduces only a char_wb analyzer with the default preprocessing")
    if isinstance(vectorizer, HashingVectorizer) and (vectorizer.norm is not None or vectorizer.alternate_sign):
        raise ValueError("per-word counting adds raw counts: the hashing vectorizer needs norm=None and "
                         "alternate_sign=False")


def char_wb_counts(vectorizer, texts, fit: bool = False) -> sp.csr_matrix:
    """Raw n-gram counts of ``texts`` as ``vectorizer`` counts them (before any TF-IDF weighting).

    ``vectorizer`` is a ``char_wb`` ``CountVectorizer`` or ``TfidfVectorizer`` (fitted, or fitted here
    when ``fit``: the vocabulary of the distinct words is the texts' vocabulary), or a
    ``HashingVectorizer`` with ``norm=None`` and ``alternate_sign=False``. Rows have sorted columns,
    as the vectorizer's own."""
    _check_char_wb(vectorizer)
    if fit and (vectorizer.min_df != 1 or vectorizer.max_df != 1.0 or vectorizer.max_features is not None):
        raise ValueError("a vocabulary pruned by document frequency is not the distinct words' vocabulary")
    counts, words = word_counts(texts, vectorizer.lowercase)
    if isinstance(vectorizer, HashingVectorizer):  # (which cannot transform an empty list)
        per_word = (vectorizer.transform(words) if words
                    else sp.csr_matrix((0, vectorizer.n_features), dtype=vectorizer.dtype))
    elif fit:  # CountVectorizer's own fit (a TfidfVectorizer's counts, before weighting)
        per_word = CountVectorizer.fit_transform(vectorizer, words)
    else:
        per_word = CountVectorizer.transform(vectorizer, words)
    out = (counts @ per_word.astype(np.float32)).tocsr().astype(vectorizer.dtype)
    out.sort_indices()
    return out


def tfidf_weights(counts: sp.csr_matrix, idf: np.ndarray, sublinear_tf: bool = True) -> sp.csr_matrix:
    """scikit-learn's ``TfidfTransformer.transform`` (l2 norm), operation for operation: sublinear
    tf (1 + ln tf) when asked, times idf, rows scaled to unit length. ``counts`` is changed in place."""
    if sublinear_tf:
        np.log(counts.data, counts.data)
        counts.data += 1.0
    counts.data *= idf[counts.indices]
    return normalize(counts, norm="l2", copy=False)
