"""Search the whole classification as a coder types: codes, official titles and dictionary titles.

Every keystroke is one query, so the search must stay fast over 100,000 titles. The typed text is
read twice, as typed (a half word is not an abbreviation yet) and through the project's title
normalizer (so "sr whse assoc" finds "warehouse associate"). Each word is looked up in a sorted
vocabulary of the titles' words: words it starts (a prefix) and, for words of three letters or
more, words within rapidfuzz's similarity 80 (a typo). A title is found when every typed word
reaches one of its words; titles reached by prefixes alone rank above those that needed a typo,
and among them the more of the title typed, the higher. Only when nothing is found so does a
rapidfuzz scan over all titles run. Matches are gathered per code (best title first, then
records). A query that starts with a digit is read as a code and matched by prefix.
"""
from __future__ import annotations

import bisect
import re

import numpy as np
import pandas as pd
from rapidfuzz import fuzz, process

from ..coding.dictionary import TitleDictionary
from ..normalize.title import normalize_title

_CODE_QUERY = re.compile(r"^\s*\d")
_FOLD = re.compile(r"[^a-z0-9]+")
MIN_SHARE = 0.1           # smallest share of a title's records for its code to be offered
TYPO_SIMILARITY = 80      # rapidfuzz ratio at which a typed word stands for a vocabulary word
_TYPOS_PER_WORD = 8


def parent_group(code: str) -> str:
    """The parent group a code sits in: the SOC major group ("29-1141" -> "29-0000"), the ISCO-08
    major group for all-digit codes ("2221" -> "2"), else the code's first two characters."""
    code = str(code)
    if re.match(r"^\d{2}-\d{4}", code):
        return f"{code[:2]}-0000"
    return code[:1] if code.isdigit() else code[:2]


class ClassificationSearch:
    """Index of a dictionary's catalogue (codes, official titles) and its title keys.

    ``search(text)`` returns up to ``limit`` codes as dicts: ``code, title, group, group_title,
    matched, similarity, records``.
    """

    def __init__(self, dictionary: TitleDictionary, *, group_titles: dict[str, str] | None = None):
        catalogue = dictionary.catalogue
        self.titles = dict(zip(catalogue["code"].astype(str), catalogue["title"].astype(str)))
        self.group_titles = dict(group_titles or {})
        entries = dictionary.entries[["key", "code", "count"]]
        self.code_records = entries.groupby("code", sort=False)["count"].sum().astype("int64").to_dict()
        self._pair_records = dict(zip(zip(entries["key"], entries["code"]), entries["count"].astype("int64")))
        official = pd.DataFrame({"key": dictionary.official["key"].astype(str),
                                 "code": dictionary.official["code"].astype(str), "count": 0})
        texts = pd.concat([entries, official], ignore_index=True)
        texts = texts.groupby(["key", "code"], sort=False, as_index=False)["count"].sum()
        # a code counts for a title when it holds a real share of its records (or is its official
        # title): production noise puts stray codes on common titles, which would crowd the list
        share = texts["count"] / texts.groupby("key")["count"].transform("sum").clip(lower=1)
        official_pairs = pd.MultiIndex.from_frame(official[["key", "code"]])
        is_official = pd.MultiIndex.from_frame(texts[["key", "code"]]).isin(official_pairs)
        texts = texts[(share >= MIN_SHARE).to_numpy() | is_official]
        texts = texts.sort_values(["key", "count", "code"], ascending=[True, False, True])
        # one slice per title of the sorted (key, code, count) arrays: no per-group pandas objects
        key_of = texts["key"].to_numpy(dtype=object)
        code_of = texts["code"].to_numpy(dtype=object)
        count_of = texts["count"].to_numpy(dtype=np.int64)
        starts = np.flatnonzero(np.r_[True, key_of[1:] != key_of[:-1]]) if len(key_of) else np.empty(0, np.int64)
        stops = np.r_[starts[1:], len(key_of)].astype(np.int64)
        self.keys: list[str] = key_of[starts].tolist()
        code_list, count_list = code_of.tolist(), count_of.tolist()
        self.key_codes: list[list[tuple[str, int]]] = [list(zip(code_list[a:b], count_list[a:b]))
                                                       for a, b in zip(starts.tolist(), stops.tolist())]
        self._key_ids = {k: i for i, k in enumerate(self.keys)}
        self._records = np.add.reduceat(count_of, starts) if len(starts) else np.empty(0, np.int64)
        self._letters = np.array([len(k) - k.count(" ") for k in self.keys], dtype=np.float64)
        # sorted vocabulary of title words with the titles holding each (an inverted index)
        pairs = pd.DataFrame({"word": pd.Series(self.keys).str.split(), "id": np.arange(len(self.keys))})
        pairs = pairs.explode("word").dropna().drop_duplicates().sort_values(["word", "id"])
        self._words: list[str] = pairs["word"].drop_duplicates().tolist()
        bounds = np.flatnonzero(np.r_[True, pairs["word"].to_numpy()[1:] != pairs["word"].to_numpy()[:-1], True])
        ids = pairs["id"].to_numpy(dtype=np.int64)
        self._postings = [ids[a:b] for a, b in zip(bounds[:-1], bounds[1:])]
        self.codes_sorted = sorted(self.titles)
        self._code_index: dict | None = None

    def _row(self, code: str, matched: str, similarity: float) -> dict:
        group = parent_group(code)
        return {"code": code, "title": self.titles.get(code, ""), "group": group,
                "group_title": self.group_titles.get(group, self.titles.get(group, "")), "matched": matched,
                "similarity": round(float(similarity), 1), "records": int(self.code_records.get(code, 0))}

    # ------------------------------------------------------------------ finding titles
    def _word_ids(self, word: str) -> tuple[np.ndarray, np.ndarray]:
        """Vocabulary ids the typed word reaches: by prefix, and by a typo (three letters or more)."""
        start = bisect.bisect_left(self._words, word)
        stop = bisect.bisect_left(self._words, word + "\uffff", lo=start)
        prefixed = np.arange(start, stop)
        typos = np.empty(0, dtype=np.int64)
        if len(word) >= 3:
            found = process.extract(word, self._words, scorer=fuzz.ratio, score_cutoff=TYPO_SIMILARITY,
                                    limit=_TYPOS_PER_WORD)
            typos = np.setdiff1d(np.array([i for _, _, i in found], dtype=np.int64), prefixed)
        return prefixed, typos

    def _titles_of(self, word_ids: np.ndarray) -> np.ndarray:
        if not len(word_ids):
            return np.empty(0, dtype=np.int64)
        return np.unique(np.concatenate([self._postings[i] for i in word_ids]))

    def _match(self, words: list[str]) -> tuple[np.ndarray, np.ndarray]:
        """Titles every word reaches by prefix, and those it reaches allowing typos."""
        exact = loose = None
        for word in words:
            prefixed, typos = self._word_ids(word)
            by_prefix = self._titles_of(prefixed)
            by_any = np.union1d(by_prefix, self._titles_of(typos)) if len(typos) else by_prefix
            exact = by_prefix if exact is None else np.intersect1d(exact, by_prefix, assume_unique=True)
            loose = by_any if loose is None else np.intersect1d(loose, by_any, assume_unique=True)
        empty = np.empty(0, dtype=np.int64)
        return (empty, empty) if exact is None else (exact, loose)

    def search(self, text: str, limit: int = 12) -> list[dict]:
        text = str(text or "")[:200]
        if not text.strip():
            return []
        if _CODE_QUERY.match(text):
            return self._codes_starting(text.strip(), limit)
        typed = _FOLD.sub(" ", text.casefold()).split()
        normalized = normalize_title(text).key.split()
        if not typed and not normalized:
            return []
        scores = np.zeros(len(self.keys))
        letters = sum(len(w) for w in typed)
        for words in (typed, normalized):
            if not words:
                continue
            exact, loose = self._match(words)
            # 90-100 for titles reached by prefixes, 80-90 with a typo; the more of the title typed the higher
            share = np.minimum(1.0, letters / self._letters)
            scores[loose] = np.maximum(scores[loose], 80.0 + 10.0 * share[loose])
            scores[exact] = np.maximum(scores[exact], 90.0 + 10.0 * share[exact])
        for words in (typed, normalized):  # the whole title typed, or its abbreviation ("rn")
            exact_id = self._key_ids.get(" ".join(words))
            if exact_id is not None:
                scores[exact_id] = 100.0
        found = np.flatnonzero(scores)
        if not len(found):  # nothing reached word by word: one similarity pass over every title
            query = " ".join(normalized or typed)
            for _, similarity, i in process.extract(query, self.keys, scorer=fuzz.QRatio, limit=limit * 4,
                                                    score_cutoff=50):
                scores[i] = 0.8 * similarity
            found = np.flatnonzero(scores)
        order = found[np.lexsort((-self._records[found], -scores[found]))][:limit * 4]
        best: dict[str, tuple[float, str]] = {}
        for i in order:
            for code, _ in self.key_codes[i]:
                if code in best or (self.titles and code not in self.titles):
                    continue
                best[code] = (float(scores[i]), self.keys[i])
        ranked = sorted(best.items(), key=lambda kv: (-kv[1][0], -self.code_records.get(kv[0], 0), kv[0]))
        return [self._row(code, matched, score) for code, (score, matched) in ranked[:limit]]

    def _codes_starting(self, prefix: str, limit: int) -> list[dict]:
        start = bisect.bisect_left(self.codes_sorted, prefix)
        found = []
        for code in self.codes_sorted[start:start + limit]:
            if not code.startswith(prefix):
                break
            found.append(self._row(code, code, 100.0 if code == prefix else 90.0))
        return found

    # ------------------------------------------------------------------ evidence for a candidate
    def evidence(self, key: str, code: str, limit: int = 3) -> list[dict]:
        """Dictionary titles recorded under ``code`` that look most like ``key``, with their records:
        what a candidate rests on. The title itself comes first when the dictionary has it."""
        out = []
        exact = self._pair_records.get((key, code), 0)
        if exact:  # the title itself, however small its share: "operator" was coded so N times
            out.append({"title": key, "records": int(exact), "similarity": 100.0})
        entries = self._by_code().get(code)
        if entries is not None:
            keys, counts = entries
            scorer = fuzz.WRatio if len(keys) <= 2_000 else fuzz.ratio  # WRatio's partial pass is costly
            for _, similarity, i in process.extract(key, keys, scorer=scorer, limit=limit + 1, processor=None):
                if keys[i] != key and len(out) < limit:
                    out.append({"title": keys[i], "records": int(counts[i]), "similarity": round(float(similarity), 1)})
        return out

    def _by_code(self) -> dict[str, tuple[list[str], np.ndarray]]:
        if self._code_index is None:
            index: dict[str, tuple[list[str], list[int]]] = {}
            for key, pairs in zip(self.keys, self.key_codes):
                for code, count in pairs:
                    if count:
                        keys, counts = index.setdefault(code, ([], []))
                        keys.append(key)
                        counts.append(count)
            self._code_index = {c: (k, np.asarray(n, dtype=np.int64)) for c, (k, n) in index.items()}
        return self._code_index
