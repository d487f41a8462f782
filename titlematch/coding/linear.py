"""A discriminative linear model of codes for titles never seen: softmax regression on sparse features.

The dictionary answers for titles it holds; for the others a linear model over the title's words
is what generalizes (multinomial logistic regression, the published baseline for text coding).
Features, hashed and then pruned to the ``max_features`` most frequent:

- word 1- and 2-grams of the normalized title (``w:``);
- the head word: the word before the first ``of``/``for``/``in``..., else the last word (``h:``),
  since the head noun carries the occupation ("commercial plumber" is a plumber);
- character 2-4-grams inside word boundaries, for inflections and spellings (``char_wb``);
- the context's words, marked as context (``c:``).

Its probabilities are blended, three parts to one, with a nearest-centroid (Rocchio) model on the
same features: the softmax wins with many titles per code, the centroids help with a handful; on real
titles a quarter of centroid beat a half in both regimes (benchmarks/RESULTS.md). Trained on the
distinct (title, context, code) units of the dictionary plus the official titles, each weighted
``1 + log(records)`` so frequent titles do not drown the rare ones the model is for, by minibatch
stochastic gradient descent (Adagrad, fixed seed, fixed order: the same model on every run) with a
sparse gradient: each title pushes down only the codes it finds likeliest.
Weights are kept dense while training (features x codes, float32) and saved sparse (small weights
dropped), as plain arrays: nothing in the artefact executes.
"""
from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np
import scipy.sparse as sp
from sklearn.feature_extraction.text import HashingVectorizer
from sklearn.preprocessing import normalize as l2_normalize

from ..io.artefact import csr_arrays, csr_from
from ..normalize.ngrams import char_wb_counts
from ..runtime.pool import slices, thread_count

HASH_FEATURES = 2 ** 20
CENTROID_TEMPERATURE = 20.0  # turns centroid cosines into a sharp softmax over codes
UPDATE_BUDGET = 100_000  # training units seen in all passes together (see LinearTitleModel.epochs_for)
DENSE_LIMIT = 64_000_000  # weights held dense for prediction up to this many (256 MB of float32)
FULL_GRADIENT_UNITS = 8  # training units per code below which every code is in the gradient
SGD_PARTS = 2  # fixed slices of each SGD step, run on up to this many threads
_PREPOSITIONS = frozenset("of for in at to with on".split())


def _head_at(words: list[str]) -> int:
    """Position of the head noun: the word before the first preposition, else the last (-1: no words)."""
    for i, w in enumerate(words):
        if w in _PREPOSITIONS and i > 0:
            return i - 1
    return len(words) - 1


def head_word(key: str) -> str:
    """The head noun of a normalized title: before the first preposition, else the last word."""
    words = key.split()
    at = _head_at(words)
    return words[at] if at >= 0 else ""


def head_phrase(key: str) -> str:
    """The head word with the word before it ("machine tender" of "forging machine tender"), or ""."""
    words = key.split()
    at = _head_at(words)
    return f"{words[at - 1]} {words[at]}" if at >= 1 else ""


def _word_text(key: str, context_words: str) -> str:
    head = head_word(key)
    return f"{key} h:{head} {context_words}" if head else f"{key} {context_words}"


class LinearTitleModel:
    """Softmax regression over hashed-and-pruned title features.

    Parameters
    ----------
    max_features : int
        Features kept (the most frequent among those in at least ``min_df`` training units).
    min_df : int
        Training units a feature must appear in.
    epochs, batch_size, learning_rate, alpha : SGD settings; ``alpha`` is the L2 penalty; ``epochs`` is the
        most passes (``epochs_for``: fewer on large dictionaries).
    prune : float
        Weights below this magnitude are dropped when the model is stored.
    gradient_top : int
        Codes each training title pushes down per step: its likeliest wrong ones (see ``_sgd``).
    """

    def __init__(self, max_features: int = 2 ** 16, min_df: int = 1, epochs: int = 10, batch_size: int = 1024,
                 learning_rate: float = 1.0, alpha: float = 1e-6, prune: float = 1e-3, blend: float = 0.25,
                 gradient_top: int = 10, random_state: int = 0):
        self.blend = blend
        self.gradient_top = gradient_top
        self.max_features = max_features
        self.min_df = min_df
        self.epochs = epochs
        self.batch_size = batch_size
        self.learning_rate = learning_rate
        self.alpha = alpha
        self.prune = prune
        self.random_state = random_state

    # ---------------------------------------------------------------- features
    @staticmethod
    def _hashers():
        words = HashingVectorizer(analyzer="word", token_pattern=r"\S+", ngram_range=(1, 2), alternate_sign=False,
                                  n_features=HASH_FEATURES, norm=None, dtype=np.float32)
        chars = HashingVectorizer(analyzer="char_wb", ngram_range=(2, 4), alternate_sign=False,
                                  n_features=HASH_FEATURES, norm=None, dtype=np.float32)
        return words, chars

    def _hashed(self, keys, context_words) -> sp.csr_matrix:
        words, chars = self._hashers()
        keys = list(keys)
        texts = [_word_text(k, c) for k, c in zip(keys, context_words)]
        X = (words.transform(texts) + char_wb_counts(chars, keys)).tocsr()
        X.data = np.log1p(X.data)  # sublinear tf
        return X

    def transform(self, keys, context_words) -> sp.csr_matrix:
        """Rows of kept features, TF-IDF weighted and L2-normalized."""
        return self._weighted(self._hashed(keys, context_words))

    def _weighted(self, X: sp.csr_matrix) -> sp.csr_matrix:
        col = self.column_of_[X.indices]
        keep = col >= 0
        rows = np.repeat(np.arange(X.shape[0]), np.diff(X.indptr))
        out = sp.csr_matrix((X.data[keep] * self.idf_[col[keep]], (rows[keep], col[keep])),
                            shape=(X.shape[0], len(self.idf_)))
        out.sort_indices()
        return l2_normalize(out)

    # ---------------------------------------------------------------- fitting
    def fit(self, keys, context_words, y, n_classes: int, sample_weight=None) -> "LinearTitleModel":
        """Fit on titles ``keys`` (normalized), context words and class positions ``y``."""
        y = np.asarray(y, dtype=np.int64)
        w = np.ones(len(y), dtype=np.float32) if sample_weight is None else np.asarray(sample_weight, np.float32)
        X = self._hashed(keys, context_words)
        df = np.bincount(X.indices, minlength=HASH_FEATURES)
        candidates = np.flatnonzero(df >= self.min_df)
        if len(candidates) > self.max_features:
            candidates = candidates[np.argsort(-df[candidates], kind="stable")[:self.max_features]]
            candidates.sort()
        self.column_of_ = np.full(HASH_FEATURES, -1, dtype=np.int32)
        self.column_of_[candidates] = np.arange(len(candidates), dtype=np.int32)
        self.features_ = candidates.astype(np.int64)
        n_units = len(y)
        self.idf_ = (np.log((1 + n_units) / (1 + df[candidates])) + 1).astype(np.float32)
        X = self._weighted(X)
        self._sgd(X, y, w, n_classes)
        # the nearest-centroid (Rocchio) model on the same features, blended in: with a handful of
        # titles per code it generalizes better than the softmax, which needs examples to find weights
        membership = sp.csr_matrix((w, (y, np.arange(len(y)))), shape=(n_classes, len(y)))
        centroids = l2_normalize((membership @ X).tocsr())
        centroids.data[np.abs(centroids.data) < 1e-4] = 0.0  # negligible weights only bloat the file
        centroids.eliminate_zeros()
        self.centroids_ = centroids.T.tocsr().astype(np.float32)
        return self

    def epochs_for(self, n_units: int) -> int:
        """Passes over ``n_units`` training units: ``epochs``, fewer when the units are many, so that the
        model sees about ``UPDATE_BUDGET`` units in all (at least two passes). A larger sample needs
        fewer passes for the same fit, and a 1M-record dictionary then builds in minutes, not tens."""
        return int(max(2, min(self.epochs, np.ceil(UPDATE_BUDGET / max(n_units, 1)))))

    def gradient_codes(self, n_units: int, n_classes: int) -> int:
        """Codes in each title's gradient: ``gradient_top``, or all of them when the dictionary holds
        fewer than ``FULL_GRADIENT_UNITS`` training units per code. With a handful of titles per code
        the model stays unsure, the dropped probabilities are not small, and the full gradient (cheap
        at that size) kept the ECE at 0.011 where ten codes gave 0.024 (ESCO, two labels per code)."""
        if n_units < FULL_GRADIENT_UNITS * n_classes:
            return n_classes
        return min(self.gradient_top, n_classes)

    def _sgd(self, X: sp.csr_matrix, y: np.ndarray, w: np.ndarray, n_classes: int) -> None:
        # Adagrad: a step per weight that shrinks with its own gradient history, so rare features
        # (most of a title's words) still move fast while frequent ones settle. The minibatches are
        # drawn once and visited in a new random order each epoch.
        # The gradient is kept sparse: each title pushes up its own code and down only the
        # ``gradient_top`` codes it finds likeliest, the rest having probabilities too small to matter.
        # On real titles this codes as well as the full gradient (ESCO dev half, linear model alone,
        # four seeds: 0.793 against 0.794), trains faster, and leaves a fifth of the weights, so the
        # model is smaller on disk and quicker to load (``gradient_codes`` says when all codes count).
        # Each step is cut into SGD_PARTS fixed slices (of the batch's rows for the scores, of its
        # features for the update) run on threads: the arithmetic per slice does not depend on the
        # number of threads, so the model is the same on one core or many.
        rng = np.random.default_rng(self.random_state)
        W = np.zeros((X.shape[1], n_classes), dtype=np.float32)
        acc = np.full((X.shape[1], n_classes), 1e-6, dtype=np.float32)
        W_flat, acc_flat = W.reshape(-1), acc.reshape(-1)
        b = np.zeros(n_classes, dtype=np.float32)
        acc_b = np.full(n_classes, 1e-6, dtype=np.float32)
        w = (w / w.mean()).astype(np.float32)
        order = rng.permutation(len(y))
        batches = []
        for start in range(0, len(y), self.batch_size):
            rows = np.sort(order[start:start + self.batch_size])
            Xb = X[rows]
            cols = np.unique(Xb.indices)
            XsT = sp.csr_matrix((Xb.data, np.searchsorted(cols, Xb.indices), Xb.indptr),
                                shape=(len(rows), len(cols))).T.tocsr()
            row_parts = [(part, Xb[part]) for part in slices(len(rows), SGD_PARTS)]
            col_parts = [(part, XsT[part]) for part in slices(len(cols), SGD_PARTS)]
            batches.append((rows, cols, row_parts, col_parts, w[rows], y[rows]))
        lr, alpha = np.float32(self.learning_rate), np.float32(self.alpha)
        k = self.gradient_codes(len(y), n_classes)
        threads = thread_count(SGD_PARTS)
        with ThreadPoolExecutor(threads) as executor:
            def run(f, parts):
                return list(executor.map(f, parts)) if threads > 1 else [f(p) for p in parts]

            for _ in range(self.epochs_for(len(y))):
                for kb in rng.permutation(len(batches)):
                    rows, cols, row_parts, col_parts, wb, yb = batches[kb]
                    n = len(rows)
                    P = np.empty((n, n_classes), dtype=np.float32)
                    top = np.empty((n, k) if k < n_classes else (0, 0), dtype=np.int64)

                    def probabilities(part):  # and each title's k likeliest codes, on the same thread
                        sl, Xp = part
                        scores = Xp @ W
                        scores += b
                        P[sl] = _softmax(scores)
                        if k < n_classes:
                            top[sl] = np.argpartition(-P[sl], k - 1, axis=1)[:, :k]

                    run(probabilities, row_parts)
                    if k < n_classes:
                        values = np.take_along_axis(P, top, axis=1) * wb[:, None]
                        G = sp.csr_matrix((np.concatenate([values.ravel(), -wb]),
                                           (np.concatenate([np.repeat(np.arange(n), k), np.arange(n)]),
                                            np.concatenate([top.ravel(), yb]))), shape=(n, n_classes))
                    else:
                        G = P * wb[:, None]
                        G[np.arange(n), yb] -= wb

                    def update(part):  # Adagrad on the weights of the batch's features sl
                        sl, XpT = part
                        grad = XpT @ G
                        if sp.issparse(grad):
                            grad = grad.tocoo()
                            at = (cols[sl][grad.row].astype(np.int64) * n_classes) + grad.col
                            g = grad.data.astype(np.float32)
                        else:
                            at = (cols[sl].astype(np.int64)[:, None] * n_classes + np.arange(n_classes)).ravel()
                            g = grad.ravel()
                        weights = W_flat[at]
                        g += alpha * weights
                        a = acc_flat[at] + g * g
                        acc_flat[at] = a
                        weights -= lr * g / np.sqrt(a)
                        W_flat[at] = weights

                    run(update, col_parts)
                    P[np.arange(n), yb] -= 1.0
                    gb = (P * wb[:, None]).sum(axis=0)
                    acc_b += gb * gb
                    b -= lr * gb / np.sqrt(acc_b)
        keep = np.abs(W) >= self.prune
        self.coef_ = sp.csr_matrix((W[keep], np.nonzero(keep)[1].astype(np.int32),
                                    np.concatenate([[0], np.cumsum(keep.sum(axis=1))]).astype(np.int64)),
                                   shape=W.shape)
        self.intercept_ = b

    # ---------------------------------------------------------------- predicting
    def decision_function(self, keys, context_words) -> np.ndarray:
        return self._scores(self.transform(keys, context_words))

    def _scores(self, X: sp.csr_matrix) -> np.ndarray:
        if not hasattr(self, "_dense"):  # sparse rows times dense weights is the quick product
            size = self.coef_.shape[0] * self.coef_.shape[1]
            self._dense = self.coef_.toarray() if size <= DENSE_LIMIT else None
        if self._dense is not None:
            return X @ self._dense + self.intercept_
        return np.asarray((X @ self.coef_).todense()) + self.intercept_

    def predict_proba(self, keys, context_words) -> np.ndarray:
        """The softmax model's probabilities blended with the centroid model's (``blend`` of the latter)."""
        X = self.transform(keys, context_words)
        P = _softmax(self._scores(X))
        if self.blend > 0:
            cosine = np.asarray((X @ self.centroids_).todense())
            P = (1 - self.blend) * P + self.blend * _softmax(CENTROID_TEMPERATURE * cosine)
        return P

    # ---------------------------------------------------------------- persistence
    def arrays(self, prefix: str = "linear_") -> dict[str, np.ndarray]:
        return {f"{prefix}features": self.features_, f"{prefix}idf": self.idf_, f"{prefix}intercept": self.intercept_,
                **csr_arrays(f"{prefix}coef", self.coef_.tocsr()), **csr_arrays(f"{prefix}centroid", self.centroids_)}

    def params(self) -> dict:
        return {"max_features": self.max_features, "min_df": self.min_df, "epochs": self.epochs,
                "batch_size": self.batch_size, "learning_rate": self.learning_rate, "alpha": self.alpha,
                "prune": self.prune, "blend": self.blend, "gradient_top": self.gradient_top, "random_state": self.random_state}

    @classmethod
    def restore(cls, arrays: dict, params: dict, prefix: str = "linear_") -> "LinearTitleModel":
        self = cls(**params)
        self.features_ = arrays[f"{prefix}features"].astype(np.int64)
        self.column_of_ = np.full(HASH_FEATURES, -1, dtype=np.int32)
        self.column_of_[self.features_] = np.arange(len(self.features_), dtype=np.int32)
        self.idf_ = arrays[f"{prefix}idf"].astype(np.float32)
        self.coef_ = csr_from(arrays, f"{prefix}coef")
        self.intercept_ = arrays[f"{prefix}intercept"].astype(np.float32)
        self.centroids_ = csr_from(arrays, f"{prefix}centroid")
        return self


def _softmax(scores: np.ndarray) -> np.ndarray:
    scores = scores - scores.max(axis=1, keepdims=True)
    P = np.exp(scores)
    return P / P.sum(axis=1, keepdims=True)
