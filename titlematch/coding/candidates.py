"""Candidate codes for normalized titles: the searchable index over a dictionary.

Sources, each cheap and each catching what the others miss:
exact key; key after spelling correction; the primary role of a multi-role title;
IDF-weighted word overlap (word TF-IDF cosine); character n-gram TF-IDF neighbours
(misspellings, word order, run-together words); and a discriminative linear model
(``linear.LinearTitleModel``: softmax regression over words, head word, character
n-grams and context words) for titles never seen. Candidates from all
sources are aggregated per code, since many dictionary entries share one.
"""
from __future__ import annotations

from typing import NamedTuple

import numpy as np
import pandas as pd
import scipy.sparse as sp
from sklearn.feature_extraction.text import TfidfTransformer, TfidfVectorizer

from ..io.artefact import ArtefactError, csr_arrays, csr_from
from .dictionary import TitleDictionary
from .linear import LinearTitleModel, head_phrase, head_word
from ..normalize.ngrams import char_wb_counts, tfidf_weights
from ..normalize.spelling import SpellingCorrector
from ..runtime.pool import map_threads, slices, thread_count

CHUNK = 2048
SEARCH_THREADS = 2  # threads of the neighbour search (see TitleIndex.neighbours)
def _char_vectorizer(**kw) -> TfidfVectorizer:
    return TfidfVectorizer(analyzer="char_wb", ngram_range=(3, 3), sublinear_tf=True, dtype=np.float32, **kw)


def _word_vectorizer(**kw) -> TfidfVectorizer:
    return TfidfVectorizer(analyzer="word", token_pattern=r"\S+", dtype=np.float32, **kw)


def _restore_tfidf(make, vocabulary: pd.DataFrame, idf: np.ndarray) -> TfidfVectorizer:
    vec = make(vocabulary=dict(zip(vocabulary["term"], vocabulary["index"].astype(int))))
    vec.idf_ = idf
    return vec


RARE_WORD_COUNT = 20    # below this, a word one edit from a far more frequent word is a misspelling
MISSPELLING_RATIO = 50  # ... when that word is this many times more frequent


def _corrector(dictionary: TitleDictionary) -> SpellingCorrector:
    """The spelling corrector over the dictionary's own words.

    Past records hold misspellings too, and a misspelling repeated a few times must not become a
    "known word" that is never corrected. So rare words one edit away from a word at least 50 times
    as frequent (and that the corrector would turn into it: same first letter) are left out of what
    counts as correct (the frequency-ratio rule of symmetric-delete spelling correction). Every other
    word counts, even one seen once: in real titles a word seen once is mostly a real word, and
    correcting it to a neighbour ("chaplain" to "captain") costs more than leaving a typo, which the
    character search still finds. On ESCO's real titles, trusting words seen once (together with
    keeping the first letter) rights 20 more new records of 5,263 (benchmarks/RESULTS.md).
    """
    vocabulary = dictionary.vocabulary
    vocabulary = vocabulary[vocabulary > 0]
    frequent = SpellingCorrector(max_distance=1).fit(vocabulary[vocabulary >= RARE_WORD_COUNT])
    suspects = []
    for word, count in vocabulary[vocabulary < RARE_WORD_COUNT].items():
        if len(word) < frequent.min_length:
            continue
        near = [c for d, c, w in frequent.nearest(word) if d == 1 and w != word and frequent.allows(word, w)]
        if near and near[0] >= MISSPELLING_RATIO * count:
            suspects.append(word)
    return SpellingCorrector().fit(vocabulary.drop(suspects))


def _context_words(context: str) -> str:
    """Context tokens as classifier words of their own (``ctx_school``), apart from title words."""
    from .dictionary import context_tokens
    return " ".join("ctx_" + t for t in context_tokens(context) if not t.startswith("="))


def top_k_sparse(scores: sp.csr_matrix, k: int, min_score: float = 0.0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Rows, columns and values of the ``k`` largest entries of each row of a CSR matrix."""
    scores = scores.tocsr()
    rows, cols, vals = [], [], []
    indptr, indices, data = scores.indptr, scores.indices, scores.data
    for r in range(scores.shape[0]):
        start, end = indptr[r], indptr[r + 1]
        if start == end:
            continue
        v = data[start:end]
        if end - start > k:
            pick = np.argpartition(-v, k - 1)[:k]
        else:
            pick = np.arange(end - start)
        pick = pick[v[pick] > min_score]
        rows.append(np.full(len(pick), r, dtype=np.int64))
        cols.append(indices[start:end][pick])
        vals.append(v[pick])
    if not rows:
        return np.empty(0, np.int64), np.empty(0, np.int64), np.empty(0, np.float32)
    return np.concatenate(rows), np.concatenate(cols).astype(np.int64), np.concatenate(vals)


class CodeTable(NamedTuple):
    """Codes' record weights per label (a head word, a phrase, a word): ``positions`` maps a label to
    its row (None: rows given by the caller), ``numbers`` are sorted ``row x n_codes + code``,
    ``weights`` theirs, ``total`` each row's records."""
    positions: dict | None
    numbers: np.ndarray
    weights: np.ndarray
    total: np.ndarray
    n_codes: int

    def rows(self, labels) -> np.ndarray:
        """Each label's row, -1 for a label never seen."""
        return np.fromiter((self.positions.get(label, -1) for label in labels), dtype=np.int64)

    def weights_of(self, rows: np.ndarray, codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Whether each (row, code) holds records, and their weight (0 where not; rows of -1 hold none)."""
        wanted = rows * self.n_codes + codes
        if not len(self.numbers):
            return np.zeros(len(wanted), dtype=bool), np.zeros(len(wanted))
        at = np.minimum(np.searchsorted(self.numbers, wanted), len(self.numbers) - 1)
        found = (self.numbers[at] == wanted) & (rows >= 0)
        return found, np.where(found, self.weights[at], 0.0)


class TitleIndex:
    """Everything needed to find candidate codes for a normalized title, built from a dictionary.

    Parameters
    ----------
    n_neighbours : int
        Dictionary keys kept per title from each similarity source.
    classifier_top : int
        Codes the text classifier contributes per title.
    """

    def __init__(self, n_neighbours: int = 10, classifier_top: int = 3, random_state: int = 0):
        self.n_neighbours = n_neighbours
        self.classifier_top = classifier_top
        self.random_state = random_state

    # ---------------------------------------------------------------- fitting
    def fit(self, dictionary: TitleDictionary) -> "TitleIndex":
        entries = dictionary.entries
        self.keys_ = np.array(sorted(entries["key"].unique()), dtype=object)
        self.codes_ = np.array(sorted(entries["code"].unique()), dtype=object)
        self._fit_key_codes(entries)
        # fitted and applied to the keys in one pass (the same matrices as fit then transform)
        self.char_vectorizer_, self.word_vectorizer_ = _char_vectorizer(min_df=1), _word_vectorizer()
        counts = char_wb_counts(self.char_vectorizer_, self.keys_, fit=True)
        self.char_vectorizer_.idf_ = TfidfTransformer(sublinear_tf=True).fit(counts).idf_
        self.char_matrix_ = tfidf_weights(counts, self.char_vectorizer_.idf_).T.tocsr()
        self.word_matrix_ = self.word_vectorizer_.fit_transform(self.keys_).T.tocsr()
        self._fit_groups(dictionary)
        self._fit_code_profiles()
        self._fit_classifier(dictionary)
        self.corrector_ = _corrector(dictionary)
        return self

    def _fit_groups(self, dictionary: TitleDictionary) -> None:
        """Each code's parent group in the classification, as positions (``groups_`` holds the codes)."""
        parents = dictionary.hierarchy.parent_of(self.codes_)
        self.groups_ = np.array(sorted(set(parents)), dtype=object)
        self.code_group_ = pd.Index(self.groups_).get_indexer(parents).astype(np.int64)
        self.group_matrix_ = sp.csr_matrix((np.ones(len(parents)), (np.arange(len(parents)), self.code_group_)),
                                           shape=(len(parents), len(self.groups_)))

    def _fit_code_profiles(self) -> None:
        """What each code's dictionary titles say as a whole, derived from the keys (nothing saved):
        the codes' records among the titles sharing each head word (``head_codes_``), since the head
        noun carries the occupation, each head phrase (``phrase_codes_``) and each word of the word
        search's vocabulary (``word_codes_``, rows in the vocabulary's order)."""
        self.head_codes_ = self._code_table([head_word(k) for k in self.keys_])
        self.phrase_codes_ = self._code_table([head_phrase(k) for k in self.keys_])
        self.word_codes_ = self._code_table(self.word_matrix_.astype(bool))

    def _code_table(self, labels) -> "CodeTable":
        """The codes' record weights per label of the keys: ``labels`` is one string per key (keys
        labelled "" are left out) or a 0/1 matrix, labels x keys."""
        positions = None
        if isinstance(labels, list):
            names = pd.Index(labels)
            positions = {h: i for i, h in enumerate(h for h in names.unique() if h)}
            key_label = np.fromiter((positions.get(h, -1) for h in names), dtype=np.int64, count=len(names))
            keep = np.flatnonzero(key_label >= 0)
            labels = sp.csr_matrix((np.ones(len(keep)), (key_label[keep], keep)),
                                   shape=(len(positions), len(self.keys_)))
        codes = (labels.astype(np.float64) @ self.key_codes_).tocoo()
        # as sorted (label x codes + code) numbers with their weights: looked up by searchsorted
        numbers = codes.row.astype(np.int64) * len(self.codes_) + codes.col
        order = np.argsort(numbers, kind="stable")
        return CodeTable(positions, numbers[order], codes.data[order],
                         np.bincount(codes.row, weights=codes.data, minlength=labels.shape[0]), len(self.codes_))

    def _fit_key_codes(self, entries: pd.DataFrame) -> None:
        key_pos = pd.Index(self.keys_).get_indexer(entries["key"])
        code_pos = pd.Index(self.codes_).get_indexer(entries["code"])
        self.key_codes_ = sp.csr_matrix((entries["weight"].to_numpy(np.float64), (key_pos, code_pos)),
                                        shape=(len(self.keys_), len(self.codes_)))
        self.key_lookup_ = {k: i for i, k in enumerate(self.keys_)}

    def _fit_key_matrices(self) -> None:
        chars, words = self.query_rows(self.keys_)
        self.char_matrix_, self.word_matrix_ = chars.T.tocsr(), words.T.tocsr()

    def _fit_classifier(self, dictionary: TitleDictionary) -> None:
        # The discriminative model for titles the dictionary does not hold (see ``linear``), trained
        # on the distinct (title, context, code) units plus the official titles. The context's words
        # are features too: "driver" at a bus company is not "driver" at a trucking firm.
        units = dictionary.units.groupby(["key", "context", "code"], sort=True)["count"].sum().reset_index()
        official = dictionary.official.assign(context="", count=1)
        train = pd.concat([units, official[["key", "context", "code", "count"]]], ignore_index=True)
        train = train[train["code"].isin(set(self.codes_))]
        y = pd.Index(self.codes_).get_indexer(train["code"])
        weight = 1.0 + np.log(train["count"].to_numpy(np.float64))  # damp the largest titles
        contexts = [_context_words(c) for c in train["context"]]
        self.linear_ = LinearTitleModel(random_state=self.random_state).fit(train["key"], contexts, y,
                                                                            len(self.codes_), weight)
        self.classifier_classes_ = np.arange(len(self.codes_), dtype=np.int64)

    # ---------------------------------------------------------------- persistence
    def tables(self) -> dict[str, pd.DataFrame]:
        def vocab(vec):
            items = sorted(vec.vocabulary_.items(), key=lambda kv: kv[1])
            return pd.DataFrame({"term": [t for t, _ in items], "index": [i for _, i in items]})
        return {"index_char_vocabulary": vocab(self.char_vectorizer_),
                "index_word_vocabulary": vocab(self.word_vectorizer_), **self.corrector_.tables("spelling_")}

    def arrays(self) -> dict[str, np.ndarray]:
        return {"index_char_idf": self.char_vectorizer_.idf_, "index_word_idf": self.word_vectorizer_.idf_,
                "classifier_classes": self.classifier_classes_, **self.corrector_.arrays("spelling_"),
                **csr_arrays("index_char_matrix", self.char_matrix_), **csr_arrays("index_word_matrix", self.word_matrix_)} | \
            self.linear_.arrays("linear_")

    def params(self) -> dict:
        return {"n_neighbours": self.n_neighbours, "classifier_top": self.classifier_top,
                "random_state": self.random_state, "linear": self.linear_.params()}

    @classmethod
    def _restore(cls, dictionary: TitleDictionary, tables: dict, arrays: dict, params: dict,
                 spelling: dict | None = None) -> "TitleIndex":
        """The index as saved by ``tables()``/``arrays()``; ``spelling`` is the corrector's parameters."""
        params = dict(params)
        linear = params.pop("linear", None)
        if linear is None or "linear_coef_shape" not in arrays:
            raise ArtefactError("the dictionary was saved by an older titlematch without its linear model; "
                                "rebuild it with titlematch dictionary")
        self = cls(**params)
        entries = dictionary.entries
        self.keys_ = np.array(sorted(entries["key"].unique()), dtype=object)
        self.codes_ = np.array(sorted(entries["code"].unique()), dtype=object)
        self._fit_key_codes(entries)
        self.char_vectorizer_ = _restore_tfidf(_char_vectorizer, tables["index_char_vocabulary"], arrays["index_char_idf"])
        self.word_vectorizer_ = _restore_tfidf(_word_vectorizer, tables["index_word_vocabulary"], arrays["index_word_idf"])
        if "index_char_matrix_shape" in arrays:  # stored: loading need not transform every key again
            self.char_matrix_ = csr_from(arrays, "index_char_matrix")
            self.word_matrix_ = csr_from(arrays, "index_word_matrix")
        else:
            self._fit_key_matrices()
        self._fit_groups(dictionary)
        self._fit_code_profiles()
        self.linear_ = LinearTitleModel.restore(arrays, linear, "linear_")
        self.classifier_classes_ = arrays["classifier_classes"]
        if spelling is not None and "spelling_hashes" in arrays:  # saved with the dictionary: not rebuilt
            self.corrector_ = SpellingCorrector.restore(tables, arrays, spelling, prefix="spelling_")
        else:
            self.corrector_ = _corrector(dictionary)
        return self

    # ---------------------------------------------------------------- searching
    def query_rows(self, queries) -> tuple[sp.csr_matrix, sp.csr_matrix]:
        """The queries' TF-IDF rows for the character and the word search: the vectorizers' own
        ``transform``, with the character n-grams counted once per distinct word (``normalize.ngrams``)."""
        chars = tfidf_weights(char_wb_counts(self.char_vectorizer_, queries), self.char_vectorizer_.idf_)
        return chars, self.word_vectorizer_.transform(queries)

    def neighbours(self, rows: sp.csr_matrix, source: str) -> pd.DataFrame:
        """Top dictionary keys per query row (``query_rows``) by ``source`` ("char" or "word") cosine:
        query, key, sim.

        The rows are searched in slices of at most ``CHUNK`` on up to ``SEARCH_THREADS`` threads: the
        sparse product and the partial sorts run without the interpreter lock, and each row's
        neighbours do not depend on the slice it is in, so the result is the same on any number."""
        matrix = self.char_matrix_ if source == "char" else self.word_matrix_
        n = rows.shape[0]

        def search(part: slice) -> pd.DataFrame:
            at, cols, vals = top_k_sparse(rows[part] @ matrix, self.n_neighbours, min_score=0.05)
            return pd.DataFrame({"query": at + part.start, "key": cols, "sim": vals.astype(np.float64)})

        out = map_threads(search, slices(n, max(-(-n // CHUNK), thread_count(SEARCH_THREADS))), SEARCH_THREADS)
        return pd.concat(out, ignore_index=True) if out else pd.DataFrame({"query": [], "key": [], "sim": []})

    def classify(self, queries, contexts=None, pairs: tuple[np.ndarray, np.ndarray] | None = None):
        """The text classifier's top codes per query: query, code (position), prob (softmax over codes)
        and group_prob (its probabilities summed over the code's parent group).

        With ``pairs`` (query positions, code positions), also return the probability and the group
        probability of each pair, read from the same pass over the queries (a second pass would redo
        the costly product).
        """
        out = []
        if pairs is not None:
            pair_query, pair_code = (np.asarray(p) for p in pairs)
            pair_prob, pair_group = np.zeros(len(pair_query)), np.zeros(len(pair_query))
            order = np.argsort(pair_query, kind="stable")
            bounds = np.searchsorted(pair_query[order], np.arange(0, len(queries) + CHUNK, CHUNK))
        for n, start in enumerate(range(0, len(queries), CHUNK)):
            part = None if contexts is None else contexts[start:start + CHUNK]
            prob = self.classifier_proba(queries[start:start + CHUNK], part)
            grouped = np.asarray(prob @ self.group_matrix_)  # each group's codes summed
            k = min(self.classifier_top, prob.shape[1])
            top = np.argpartition(-prob, k - 1, axis=1)[:, :k]
            rows = np.repeat(np.arange(len(top)), k)
            out.append(pd.DataFrame({"query": rows + start, "code": self.classifier_classes_[top.ravel()],
                                     "prob": prob[rows, top.ravel()],
                                     "group_prob": grouped[rows, self.code_group_[top.ravel()]]}))
            if pairs is not None:
                here = order[bounds[n]:bounds[n + 1]]
                pair_prob[here] = prob[pair_query[here] - start, pair_code[here]]
                pair_group[here] = grouped[pair_query[here] - start, self.code_group_[pair_code[here]]]
        top_codes = (pd.concat(out, ignore_index=True) if out
                     else pd.DataFrame({"query": [], "code": [], "prob": [], "group_prob": []}))
        return top_codes if pairs is None else (top_codes, pair_prob, pair_group)

    def classifier_proba(self, queries, contexts=None) -> np.ndarray:
        """The linear model's probabilities over all codes (columns in ``classifier_classes_`` order)."""
        words = [""] * len(queries) if contexts is None else [_context_words(c) for c in contexts]
        return self.linear_.predict_proba(list(queries), words)

    def exact(self, queries) -> pd.DataFrame:
        """Queries whose text is a dictionary key: query, key."""
        hits = [(i, self.key_lookup_[q]) for i, q in enumerate(queries) if q in self.key_lookup_]
        return pd.DataFrame(hits, columns=["query", "key"], dtype=np.int64)
