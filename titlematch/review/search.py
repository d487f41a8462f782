"""Search the whole classification as a coder types: codes, official titles and dictionary titles.

The typed text goes through the project's title normalizer (so "sr whse assoc" finds
"warehouse associate"), then rapidfuzz's WRatio ranks every official and dictionary title in one
vectorized pass; matches are gathered per code (best similarity, then records). A query that
starts with a digit is read as a code and matched by prefix.
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
MIN_SHARE = 0.1          # smallest share of a title's records for its code to be offered
_MAX_PREFIX_KEYS = 5_000  # beyond this the typed words are too short to narrow anything
_FOLD = re.compile(r"[^a-z0-9]+")


def parent_group(code: str) -> str:
    """SOC-style parent group: the major group's code ("29-1141" -> "29-0000"); other code
    schemes fall back to the code's first two characters."""
    code = str(code)
    return f"{code[:2]}-0000" if re.match(r"^\d{2}-\d{4}", code) else code[:2]


class ClassificationSearch:
    """Index of a dictionary's catalogue (codes, official titles) and its title keys.

    ``search(text)`` returns up to ``limit`` codes as dicts: ``code, title, group, matched,
    similarity, records``.
    """

    def __init__(self, dictionary: TitleDictionary, *, group_titles: dict[str, str] | None = None):
        catalogue = dictionary.catalogue
        self.titles = dict(zip(catalogue["code"].astype(str), catalogue["title"].astype(str)))
        self.group_titles = dict(group_titles or {})
        entries = dictionary.entries[["key", "code", "count"]]
        # records per code (official titles count 1 each: the classification lists them once)
        self.code_records = entries.groupby("code", sort=False)["count"].sum().astype("int64").to_dict()
        # every searchable text once, with the codes it stands for, most records first
        by_key = entries.sort_values(["key", "count", "code"], ascending=[True, False, True])
        official = pd.DataFrame({"key": dictionary.official["key"].astype(str),
                                 "code": dictionary.official["code"].astype(str), "count": 0})
        texts = pd.concat([by_key, official], ignore_index=True)
        texts = texts.groupby(["key", "code"], sort=False, as_index=False)["count"].sum()
        # a code counts for a title when it holds a real share of its records (or is its official
        # title): production noise puts stray codes on common titles, which would crowd the list
        share = texts["count"] / texts.groupby("key")["count"].transform("sum").clip(lower=1)
        official_pairs = set(zip(official["key"], official["code"]))
        is_official = np.array([pair in official_pairs for pair in zip(texts["key"], texts["code"])], dtype=bool)
        keep = (share >= MIN_SHARE).to_numpy() | is_official
        texts = texts[keep].sort_values(["key", "count", "code"], ascending=[True, False, True])
        grouped = texts.groupby("key", sort=True)
        self.keys: list[str] = list(grouped.groups.keys())
        codes = grouped["code"].agg(list)
        counts = grouped["count"].agg(list)
        self.key_codes: list[list[tuple[str, int]]] = [list(zip(codes[k], counts[k])) for k in self.keys]
        # word-prefix index, so a half-typed title ("regis nur") finds its titles before fuzzy scoring
        words = sorted({w for k in self.keys for w in k.split()})
        self._words = words
        postings: dict[str, list[int]] = {}
        for i, k in enumerate(self.keys):
            for w in set(k.split()):
                postings.setdefault(w, []).append(i)
        self._postings = [np.asarray(postings[w], dtype=np.int64) for w in words]
        self.codes_sorted = sorted(self.titles)

    def _row(self, code: str, matched: str, similarity: float, records: int | None = None) -> dict:
        group = parent_group(code)
        return {"code": code, "title": self.titles.get(code, ""), "group": group,
                "group_title": self.group_titles.get(group, self.titles.get(group, "")), "matched": matched,
                "similarity": round(float(similarity), 1),
                "records": int(self.code_records.get(code, 0) if records is None else records)}

    def search(self, text: str, limit: int = 12) -> list[dict]:
        text = str(text or "")[:200]
        if not text.strip():
            return []
        if _CODE_QUERY.match(text):
            prefix = text.strip()
            start = bisect.bisect_left(self.codes_sorted, prefix)
            found = []
            for code in self.codes_sorted[start:start + limit]:
                if not code.startswith(prefix):
                    break
                found.append(self._row(code, code, 100.0 if code == prefix else 90.0))
            return found
        folded = _FOLD.sub(" ", text.casefold()).strip()
        key = normalize_title(text).key or folded
        if not key:
            return []
        scored: dict[int, float] = {}
        # the words as typed (a half word is not an abbreviation yet) and as normalized
        found = [p for p in (self._prefix_keys(folded.split()), self._prefix_keys(key.split())) if p is not None]
        prefixed = np.unique(np.concatenate(found)) if found else None
        if prefixed is not None and len(prefixed):
            # every typed word starts a word of the title: rank above fuzzy look-alikes, the more of
            # the title typed the higher (90 + 10 x typed letters / title letters)
            typed = sum(len(w) for w in folded.split())
            for i in prefixed.tolist():
                letters = len(self.keys[i]) - self.keys[i].count(" ")
                scored[i] = 90.0 + 10.0 * min(1.0, typed / max(letters, 1))
        for _, similarity, i in process.extract(key, self.keys, scorer=fuzz.WRatio, limit=limit * 4,
                                                score_cutoff=50, processor=None):
            scored[i] = max(scored.get(i, 0.0), similarity)
        hits = [(self.keys[i], s, i) for i, s in scored.items()]
        best: dict[str, tuple[float, int, str]] = {}
        for matched, similarity, index in hits:
            for code, count in self.key_codes[index]:
                if code not in self.titles and self.titles:
                    continue
                old = best.get(code)
                if old is None or (similarity, -len(matched), count) > (old[0], -len(old[2]), old[1]):
                    best[code] = (similarity, count, matched)
        # ties (a title inside a longer one scores 100 too) go to the closer title, then more records
        ranked = sorted(best.items(), key=lambda kv: (-kv[1][0], -fuzz.ratio(key, kv[1][2]),
                                                      -self.code_records.get(kv[0], 0), kv[0]))
        return [self._row(code, matched, similarity) for code, (similarity, _, matched) in ranked[:limit]]

    def _prefix_keys(self, words: list[str]) -> np.ndarray | None:
        """Ids of titles in which every typed word starts some word; None if the words are too short."""
        result = None
        for word in words:
            if len(word) < 2:
                continue
            start = bisect.bisect_left(self._words, word)
            stop = bisect.bisect_left(self._words, word + "\uffff", lo=start)
            if stop - start > 400:
                return None
            ids = np.unique(np.concatenate(self._postings[start:stop])) if stop > start else np.empty(0, np.int64)
            result = ids if result is None else np.intersect1d(result, ids, assume_unique=True)
            if len(result) > _MAX_PREFIX_KEYS:
                return None
        return result

    def evidence(self, key: str, code: str, limit: int = 3) -> list[dict]:
        """Dictionary titles recorded under ``code`` that look most like ``key``, with their records:
        what a candidate rests on. The title itself comes first when the dictionary has it."""
        entries = self._by_code().get(code)
        if entries is None:
            return []
        keys, counts = entries
        hits = process.extract(key, keys, scorer=fuzz.WRatio, limit=limit, processor=None)
        out = [{"title": keys[i], "records": int(counts[i]), "similarity": round(float(s), 1)} for _, s, i in hits]
        return sorted(out, key=lambda e: (e["title"] != key, -e["similarity"], -e["records"]))

    def _by_code(self) -> dict[str, tuple[list[str], np.ndarray]]:
        if not hasattr(self, "_code_index"):
            index: dict[str, tuple[list[str], np.ndarray]] = {}
            for key, pairs in zip(self.keys, self.key_codes):
                for code, count in pairs:
                    if count:
                        index.setdefault(code, ([], []))
                        index[code][0].append(key)
                        index[code][1].append(count)
            self._code_index = {c: (k, np.asarray(n, dtype=np.int64)) for c, (k, n) in index.items()}
        return self._code_index
