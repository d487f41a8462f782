"""Spelling correction for job-title words by the symmetric-delete method.

Every vocabulary word is indexed under the strings left after deleting up to ``max_distance``
characters from its first seven letters (Wolf Garbe's symmetric-delete idea, with his prefix
trick to keep the index small). A misspelled word generates its own deletes; words sharing one
are candidates, and the true Damerau–Levenshtein distance (rapidfuzz) decides. The corrector
prefers the smallest distance, then the more frequent word, and abstains when two candidates
are about equally likely: a wrong "correction" costs more than a missed one. The distance a
correction may span grows with the word (:meth:`SpellingCorrector.allowed_distance`): no
two-edit corrections of short words, which would turn random letters into real words. And a
correction keeps the word's first letter (:meth:`SpellingCorrector.allows`): the first letter of a
misspelling is rarely wrong (Pollock and Zamora, CACM 1984, found it wrong in about 7% of the
misspellings of their corpus: from memory), while a new first letter is how one real word turns into
another ("tower" and "power", "silk" and "milk", "vacation" and "aviation"). A title word the
dictionary has never seen is more often a real word than a typo once the titles are real.

Known words, lexicon keys (abbreviations such as "mgr", Spanish titles, qualifier words),
numbers and words shorter than ``min_length`` are never changed.
"""
from __future__ import annotations

import os
import zlib
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd
from rapidfuzz.distance import DamerauLevenshtein

from ..io.artefact import load_artefact, save_artefact
from .title_lexicon import title_lexicon

ARTEFACT_KIND = "spelling_corrector"
PREFIX_LENGTH = 7  # deletes are taken from this many leading letters only
AMBIGUITY_RATIO = 3.0  # the best candidate must be this many times as frequent as the runner-up
SHORT_WORD = 4  # words shorter than this are never corrected
LONG_WORD = 8   # words this long may be corrected by two edits; shorter ones by one


def _deletes(word: str, distance: int) -> set[str]:
    """``word`` and every string made by deleting up to ``distance`` characters from it."""
    found = {word}
    frontier = {word}
    for _ in range(distance):
        frontier = {w[:i] + w[i + 1:] for w in frontier if len(w) > 1 for i in range(len(w))}
        found |= frontier
    return found


def _inflections(word: str) -> tuple[str, ...]:
    """Singular and plural forms of ``word``: a word whose plural is known is itself known."""
    forms = [word + "s", word + "es"]
    if word.endswith("y"):
        forms.append(word[:-1] + "ies")
    if word.endswith("s"):
        forms.append(word[:-1])
        if word.endswith("es"):
            forms.append(word[:-2])
        if word.endswith("ies"):
            forms.append(word[:-3] + "y")
    return tuple(forms)



def _stable_hash(text: str) -> int:
    """CRC-32 of the text: the same in every process (Python's ``hash`` of a string is salted per
    process, so an index built with it is wrong after the corrector moves to a Dask worker).
    A collision only adds a candidate, which the distance check then rejects."""
    return zlib.crc32(text.encode("utf-8"))

class SpellingCorrector:
    """Correct misspelled title words against a vocabulary of known words with frequencies.

    Parameters
    ----------
    max_distance : int, default 2
        Largest Damerau–Levenshtein distance a correction may span.
    min_length : int, default 4
        Words shorter than this are never corrected.
    use_lexicon : bool, default True
        Also know every word the title lexicons write (so "certified" from "cna" is known) and
        never touch a lexicon key ("mgr", "enfermera", "nights").
    keep_first_letter : bool, default True
        Only correct to words with the same first letter (see the module's notes).

    Attributes
    ----------
    vocabulary_ : dict[str, int]
        Known words and their frequencies.

    Examples
    --------
    >>> corrector = SpellingCorrector().fit({"nursing": 40, "assistants": 25, "cashiers": 9})
    >>> corrector.correct(["nursnig", "asistants", "mgr"])
    (['nursing', 'assistants', 'mgr'], [('nursnig', 'nursing'), ('asistants', 'assistants')])
    """

    def __init__(self, max_distance: int = 2, min_length: int = 4, use_lexicon: bool = True,
                 keep_first_letter: bool = True):
        self.max_distance = max_distance
        self.min_length = min_length
        self.use_lexicon = use_lexicon
        self.keep_first_letter = keep_first_letter

    # ------------------------------------------------------------------ fitting
    def fit(self, vocabulary) -> "SpellingCorrector":
        """Learn the known words.

        Parameters
        ----------
        vocabulary : Mapping[str, int] or pandas.Series
            Word -> frequency (a Series is read as index -> value).

        Returns
        -------
        self
        """
        self._check_params()
        counts = _as_counts(vocabulary)
        protected: frozenset = frozenset()
        if self.use_lexicon:
            lex = title_lexicon()
            for word in lex.output_words():
                counts.setdefault(word, 1)
            protected = lex.key_words
        self.vocabulary_ = counts
        self.protected_ = protected
        targets = sorted(w for w in counts if w.isalpha() and len(w) >= self.min_length)
        self.targets_ = np.array(targets, dtype=object)
        self._target_counts = np.array([counts[w] for w in targets], dtype=np.int64)
        self._build_index(targets)
        self._cache: dict[str, str] = {}
        return self

    def _check_params(self) -> None:
        if not isinstance(self.max_distance, (int, np.integer)) or not 1 <= self.max_distance <= 3:
            raise ValueError(f"max_distance must be an integer from 1 to 3, got {self.max_distance!r}")
        if not isinstance(self.min_length, (int, np.integer)) or self.min_length < 1:
            raise ValueError(f"min_length must be a positive integer, got {self.min_length!r}")
        if not isinstance(self.keep_first_letter, (bool, np.bool_)):
            raise ValueError(f"keep_first_letter must be True or False, got {self.keep_first_letter!r}")

    def _build_index(self, targets: list[str]) -> None:
        # Hashes of the deletes in one sorted int64 array (ids beside it) instead of a dict of
        # strings: a 50,000-word vocabulary then takes tens of megabytes, not hundreds.
        hashes: list[int] = []
        ids: list[int] = []
        for index, word in enumerate(targets):
            deletes = _deletes(word[:PREFIX_LENGTH], self.max_distance)
            hashes.extend(map(_stable_hash, deletes))
            ids.extend([index] * len(deletes))
        hashes_array = np.array(hashes, dtype=np.int64)
        order = np.argsort(hashes_array, kind="stable")
        self._hashes = hashes_array[order]
        self._ids = np.array(ids, dtype=np.int32)[order]

    # ------------------------------------------------------------------ correcting
    def known(self, token: str) -> bool:
        """Whether ``token`` (or its singular/plural) is a vocabulary word or a lexicon key."""
        self._check_fitted()
        vocabulary = self.vocabulary_
        return token in vocabulary or token in self.protected_ or any(f in vocabulary for f in _inflections(token))

    def correct_token(self, token: str) -> str:
        """Return the correction of ``token``, or ``token`` itself when it needs none or is unsure."""
        self._check_fitted()
        if not isinstance(token, str):
            raise TypeError(f"correct_token: token must be a str, got {type(token).__name__}")
        word = token.lower()
        if len(word) < self.min_length or not word.isascii() or not word.isalpha() or self.known(word):
            return token
        if word not in self._cache:
            self._cache[word] = self._lookup(word)
        fixed = self._cache[word]
        return token if fixed == word else fixed

    def correct(self, tokens) -> tuple[list[str], list[tuple[str, str]]]:
        """Correct each token; return the tokens and the ``(from, to)`` pairs that changed."""
        out, changes = [], []
        for token in tokens:
            fixed = self.correct_token(token)
            out.append(fixed)
            if fixed != token:
                changes.append((token, fixed))
        return out, changes

    def candidates(self, token: str) -> pd.DataFrame:
        """Vocabulary words within ``max_distance`` of ``token``: columns word, distance, count."""
        rows = self.nearest(token)
        return pd.DataFrame({"word": pd.Series([r[2] for r in rows], dtype=object),
                             "distance": pd.Series([r[0] for r in rows], dtype="int64"),
                             "count": pd.Series([r[1] for r in rows], dtype="int64")})

    def nearest(self, token: str) -> list[tuple[int, int, str]]:
        """``candidates`` as ``(distance, count, word)`` tuples in the same order, without a DataFrame:
        for loops over many words (a dictionary build checks every rare word)."""
        self._check_fitted()
        word = token.lower()
        rows = [(d, -self.vocabulary_[w], w) for d, w in self._within(word, self.max_distance)]
        return [(d, -c, w) for d, c, w in sorted(rows)]

    def _within(self, word: str, limit: int):
        """``(distance, vocabulary word)`` for each word at most ``limit`` edits from ``word``."""
        for candidate in self._candidate_words(word):
            distance = DamerauLevenshtein.distance(word, candidate, score_cutoff=limit)
            if distance <= limit:
                yield distance, candidate

    def _candidate_words(self, word: str) -> list[str]:
        deletes = _deletes(word[:PREFIX_LENGTH], self.max_distance)
        wanted = np.fromiter(map(_stable_hash, deletes), dtype=np.int64, count=len(deletes))
        lo = np.searchsorted(self._hashes, wanted, side="left")
        hi = np.searchsorted(self._hashes, wanted, side="right")
        hits = [self._ids[a:b] for a, b in zip(lo, hi) if b > a]
        if not hits:
            return []
        ids = np.unique(np.concatenate(hits))
        return [w for w in self.targets_[ids] if abs(len(w) - len(word)) <= self.max_distance]

    def allowed_distance(self, length: int) -> int:
        """Edits a correction of a word of ``length`` letters may span: the evidence must grow
        with the word. Two edits turn most four-letter strings into some word ("hbsz" -> "host"),
        so: none up to 3 letters, one from 4 to 7, two from 8 (never more than ``max_distance``)."""
        limit = 0 if length < SHORT_WORD else 1 if length < LONG_WORD else 2
        return min(limit, self.max_distance)

    def allows(self, word: str, candidate: str) -> bool:
        """Whether ``candidate`` may replace ``word`` at all, before distances and frequencies: with
        ``keep_first_letter``, only when both begin with the same letter."""
        return not self.keep_first_letter or word[:1] == candidate[:1]

    def near_known(self, token: str) -> bool:
        """Whether ``token`` is known, or a vocabulary word lies within the edits its length allows,
        whatever the first letters: a misspelling of some word, even where ``correct_token`` would
        not choose one (a first letter changed, two readings alike)."""
        self._check_fitted()
        word = token.lower()
        if self.known(word):
            return True
        if len(word) < self.min_length or not word.isascii() or not word.isalpha():
            return False
        return next(self._within(word, self.allowed_distance(len(word))), None) is not None

    def _lookup(self, word: str) -> str:
        scored = [(distance, -self.vocabulary_[candidate], candidate)
                  for distance, candidate in self._within(word, self.allowed_distance(len(word)))
                  if self.allows(word, candidate)]
        best = min((s[0] for s in scored), default=None)
        top = sorted(s for s in scored if s[0] == best)
        if not top:
            return word
        if len(top) > 1 and -top[0][1] < AMBIGUITY_RATIO * -top[1][1]:
            return word  # two about equally likely readings: leave the word alone
        return top[0][2]

    def _check_fitted(self) -> None:
        if not hasattr(self, "vocabulary_"):
            raise ValueError("SpellingCorrector is not fitted; call fit(vocabulary) first")

    # ------------------------------------------------------------------ persistence
    def tables(self, prefix: str = "") -> dict[str, pd.DataFrame]:
        """The vocabulary as a table (word, count), for an artefact."""
        self._check_fitted()
        words = sorted(self.vocabulary_)  # sorted: the dict's order follows set iteration, which varies by process
        return {f"{prefix}vocabulary": pd.DataFrame({"token": words, "count": [self.vocabulary_[w] for w in words]})}

    def arrays(self, prefix: str = "") -> dict[str, np.ndarray]:
        """The delete index as plain arrays, so loading does not rebuild it."""
        self._check_fitted()
        return {f"{prefix}hashes": self._hashes, f"{prefix}ids": self._ids}

    @classmethod
    def restore(cls, tables: dict, arrays: dict, params: dict, prefix: str = "") -> "SpellingCorrector":
        """A fitted corrector from ``tables()``, ``arrays()`` and ``get_params()``: the vocabulary is read
        and the delete index taken as saved (fitting again would give the same arrays)."""
        self = cls(**params)
        self._check_params()
        table = tables[f"{prefix}vocabulary"]
        counts = dict(zip(table["token"].astype(str), table["count"].astype("int64").tolist()))
        self.vocabulary_ = counts
        self.protected_ = title_lexicon().key_words if self.use_lexicon else frozenset()
        targets = sorted(w for w in counts if w.isalpha() and len(w) >= self.min_length)
        self.targets_ = np.array(targets, dtype=object)
        self._target_counts = np.array([counts[w] for w in targets], dtype=np.int64)
        self._hashes = np.asarray(arrays[f"{prefix}hashes"], dtype=np.int64)
        self._ids = np.asarray(arrays[f"{prefix}ids"], dtype=np.int32)
        self._cache = {}
        return self

    def save(self, directory: str | os.PathLike) -> Path:
        """Save the vocabulary, the delete index and the parameters (Parquet + .npy, no pickle)."""
        return save_artefact(directory, ARTEFACT_KIND, self.tables(), arrays=self.arrays(), meta=self.get_params())

    @classmethod
    def load(cls, directory: str | os.PathLike) -> "SpellingCorrector":
        art = load_artefact(directory, ARTEFACT_KIND)
        if "hashes" not in art.arrays:  # saved before the index was: build it
            table = art.tables["vocabulary"]
            return cls(**art.meta).fit(dict(zip(table["token"].astype(str), table["count"].astype(int))))
        return cls.restore(art.tables, art.arrays, art.meta)

    def get_params(self) -> dict:
        return {"max_distance": int(self.max_distance), "min_length": int(self.min_length),
                "use_lexicon": bool(self.use_lexicon), "keep_first_letter": bool(self.keep_first_letter)}


def _as_counts(vocabulary) -> dict[str, int]:
    if isinstance(vocabulary, pd.Series):
        items = zip(vocabulary.index, vocabulary.to_numpy())
    elif isinstance(vocabulary, Mapping):
        items = vocabulary.items()
    else:
        raise TypeError(f"vocabulary must be a mapping or a pandas Series of word -> count, "
                        f"got {type(vocabulary).__name__}")
    counts: dict[str, int] = {}
    for word, count in items:
        if not isinstance(word, str):
            raise TypeError(f"vocabulary: words must be str, got {type(word).__name__} ({word!r})")
        if isinstance(count, (bool, np.bool_)) or not isinstance(count, (int, float, np.integer, np.floating)) \
                or not count >= 0 or float(count) != int(count):
            raise ValueError(f"vocabulary: count for {word!r} must be a non-negative whole number, got {count!r}")
        key = word.strip().lower()
        if key:
            counts[key] = counts.get(key, 0) + int(count)
    return counts


# ---------------------------------------------------------------------------- measuring
_LETTERS = "abcdefghijklmnopqrstuvwxyz"


def make_misspellings(vocabulary, *, per_word: int = 3, min_length: int = 5, seed: int = 0) -> pd.DataFrame:
    """Deterministic single-edit misspellings of vocabulary words, for measuring a corrector.

    Each misspelling is one insertion, deletion, substitution or transposition of adjacent
    letters (the four single-error types of Damerau, 1964). Misspellings that are themselves
    vocabulary words, or singular/plural forms of one, are left out: no corrector without
    context can tell them from the real word.

    Parameters
    ----------
    vocabulary : Mapping[str, int], pandas.Series or iterable of str
    per_word : int
        Attempts per word (duplicates and real words are dropped).
    min_length : int
        Only words this long are misspelled, so every misspelling keeps at least
        ``min_length - 1`` letters.
    seed : int

    Returns
    -------
    pandas.DataFrame
        Columns ``misspelling``, ``word``, ``edit`` (insertion | deletion | substitution | transposition).
    """
    words = vocabulary.index if isinstance(vocabulary, pd.Series) else vocabulary
    known = {str(w) for w in words}
    rng = np.random.default_rng(seed)
    rows, seen = [], set()
    for word in sorted(w for w in known if w.isascii() and w.isalpha() and len(w) >= min_length):
        for _ in range(per_word):
            edit = ("insertion", "deletion", "substitution", "transposition")[rng.integers(4)]
            wrong = _edit(word, edit, rng)
            if wrong == word or wrong in known or any(f in known for f in _inflections(wrong)) or wrong in seen:
                continue
            seen.add(wrong)
            rows.append((wrong, word, edit))
    return pd.DataFrame(rows, columns=["misspelling", "word", "edit"])


def _edit(word: str, edit: str, rng) -> str:
    at = int(rng.integers(len(word)))
    if edit == "insertion":
        return word[:at] + _LETTERS[rng.integers(26)] + word[at:]
    if edit == "deletion":
        return word[:at] + word[at + 1:]
    if edit == "substitution":
        letter = _LETTERS[rng.integers(25)]
        letter = "z" if letter == word[at] else letter  # 25 draws + swap: never the same letter
        return word[:at] + letter + word[at + 1:]
    at = min(at, len(word) - 2)
    return word[:at] + word[at + 1] + word[at] + word[at + 2:]


def correction_scores(corrector: SpellingCorrector, misspellings: pd.DataFrame) -> dict[str, float]:
    """Precision (right fixes / fixes made) and recall (right fixes / misspellings) of ``corrector``."""
    fixed = [corrector.correct_token(w) for w in misspellings["misspelling"]]
    made = sum(f != w for f, w in zip(fixed, misspellings["misspelling"]))
    right = sum(f == w for f, w in zip(fixed, misspellings["word"]))
    total = len(misspellings)
    return {"misspellings": total, "corrections": made, "right": right,
            "precision": right / made if made else float("nan"), "recall": right / total if total else float("nan")}
