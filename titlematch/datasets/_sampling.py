"""Vectorized sampling helpers for the invented demo scenario (``titlematch.datasets.scenario``)."""
from __future__ import annotations

import zlib

import numpy as np

LETTERS = "abcdefghijklmnopqrstuvwxyz"


def split_alternatives(text: str) -> list[str]:
    return [part for part in text.split("|") if part]


def rank_weights(n: int, exponent: float = 1.1) -> np.ndarray:
    """Zipf-like weights for alternatives listed from the most to the least frequent."""
    return 1.0 / np.arange(1, n + 1) ** exponent


def stable_int(*parts: object) -> int:
    """A hash that does not change between runs (Python's ``hash`` is salted)."""
    return zlib.crc32("\x1f".join(map(str, parts)).encode("utf-8"))


class GroupSampler:
    """Draw one item per record from weighted groups (item lists per group id), vectorized.

    Each item's key is ``group + cumulative share within the group``; ``searchsorted(keys, group + u)``
    then picks an item of that group with the right probability for a uniform ``u``.
    """

    def __init__(self, groups: np.ndarray, items: np.ndarray, weights: np.ndarray):
        order = np.lexsort((np.arange(len(groups)), groups))
        groups, self.items, weights = groups[order], items[order], weights[order].astype(float)
        totals = np.bincount(groups, weights=weights)
        cumulative = np.cumsum(weights)
        starts = np.searchsorted(groups, groups, side="left")
        before = np.where(starts > 0, cumulative[starts - 1], 0.0)
        share = (cumulative - before) / totals[groups]
        share[np.r_[groups[1:] != groups[:-1], True]] = 1.0
        self.keys = groups + share
        self.present = np.zeros(int(groups.max()) + 1 if len(groups) else 0, dtype=bool)
        self.present[groups] = True

    def draw(self, rng: np.random.Generator, group: np.ndarray) -> np.ndarray:
        position = np.searchsorted(self.keys, group + rng.random(len(group)), side="right")
        return self.items[np.minimum(position, len(self.items) - 1)]


class StringPool:
    """Interned strings with per-record integer ids; transformations run once per distinct pair."""

    def __init__(self, strings: list[str]):
        self.strings: list[str] = []
        self.index: dict[str, int] = {}
        for text in strings:
            self.intern(text)

    def intern(self, text: str) -> int:
        found = self.index.get(text)
        if found is None:
            found = self.index[text] = len(self.strings)
            self.strings.append(text)
        return found

    def apply(self, ids: np.ndarray, mask: np.ndarray, params: np.ndarray, function, span: int) -> None:
        """``ids[mask] = intern(function(text, param))`` computed per distinct (id, param) pair."""
        if not mask.any():
            return
        pairs = ids[mask].astype(np.int64) * span + params[mask]
        distinct, inverse = np.unique(pairs, return_inverse=True)
        results = np.fromiter((self.intern(function(self.strings[int(pair // span)], int(pair % span)))
                               for pair in distinct), dtype=np.int64, count=len(distinct))
        ids[mask] = results[inverse]

    def lookup(self, ids: np.ndarray) -> np.ndarray:
        return np.asarray(self.strings, dtype=object)[ids]



def draw_weighted(rng: np.random.Generator, weights: np.ndarray, n: int) -> np.ndarray:
    cumulative = np.cumsum(weights)
    return np.minimum(np.searchsorted(cumulative / cumulative[-1], rng.random(n), side="right"),
                      len(weights) - 1)


def misspell(text: str, param: int) -> str:
    """One edit operation (deletion, insertion, substitution, transposition) at a letter."""
    letters = [i for i, ch in enumerate(text) if ch.isalpha()]
    if len(letters) < 4:
        return text
    code = stable_int(text, param)
    at = letters[code % len(letters)]
    operation = (code >> 8) % 4
    letter = LETTERS[(code >> 12) % 26]
    if operation == 0:
        result = text[:at] + text[at + 1:]
    elif operation == 1:
        result = text[:at] + letter + text[at:]
    elif operation == 2 or at + 1 >= len(text) or not text[at + 1].isalpha():
        if letter == text[at]:
            letter = LETTERS[(LETTERS.index(letter) + 1) % 26]
        result = text[:at] + letter + text[at + 1:]
    else:
        result = text[:at] + text[at + 1] + text[at] + text[at + 2:]
    return result if result != text else text[:at] + text[at + 1:]


def identifiers(prefix: str, n: int) -> np.ndarray:
    """``prefix`` + 7-digit running number from 1."""
    return np.char.add(prefix, np.char.zfill(np.arange(1, n + 1).astype(str), 7)).astype(object)


def objects(values) -> np.ndarray:
    return np.asarray(values, dtype=object)


def choose(rng: np.random.Generator, options, n: int, weights=None) -> np.ndarray:
    options = objects(list(options))
    if weights is None:
        return options[rng.integers(len(options), size=n)]
    weights = np.asarray(weights, dtype=float)
    return options[draw_weighted(rng, weights, n)]


