"""Benchmark: title normalization speed and spelling-correction quality.

Builds a pool of about 30,000 distinct titles from the O*NET-SOC 2019 official titles (O*NET
Database, USDOL/ETA, CC BY 4.0) written the way forms write them (abbreviations, seniority,
levels, shifts, branch numbers, capitalisation), samples ``--rows`` titles from it with
heavy repetition (a Zipf-like draw: a few titles are very common, most are rare), and times
``normalize_titles`` against a plain pandas lower/replace pipeline on the same rows, one core (CPU time).
Then measures the spelling corrector on single-edit misspellings of the O*NET title words.

    python benchmarks/bench_normalize.py            # 1,000,000 rows
    python benchmarks/bench_normalize.py --rows 200000
"""
from __future__ import annotations

import argparse
import time
from collections import Counter

import _common  # noqa: F401  (first: the same numpy memory setting for titlematch and its peer)
import numpy as np
import pandas as pd

from titlematch.io.lexicon import load_lexicon
from titlematch.normalize.spelling import SpellingCorrector, correction_scores, make_misspellings
from titlematch.normalize.title import _normalize_cached, normalize_titles
from titlematch.normalize.title_lexicon import tokenize

SENIORITY = ["Sr.", "Senior", "Jr", "Lead", "Head", "Trainee"]
SUFFIXES = ["I", "II", "III", "2", "Level 2", "- Nights", "2nd Shift", "(PT)", "PT", "Full Time", "PRN",
            "- Temp", "Seasonal", "#12", "Store 45", "- Weekends", "On Call"]


def _shorthand() -> dict[str, str]:
    """Word -> abbreviation, from the lexicon read backwards (first abbreviation wins)."""
    table = load_lexicon("title_abbreviations")
    found = {}
    for abbreviation, expansion in zip(table["abbreviation"], table["expansion"]):
        if " " not in expansion and "&" not in abbreviation and "/" not in abbreviation:
            found.setdefault(expansion, abbreviation)
    return found


def title_pool(size: int = 30_000, seed: int = 1) -> list[str]:
    """About ``size`` distinct synthetic titles written from the official titles."""
    rng = np.random.default_rng(seed)
    shorthand = _shorthand()
    official = [t.split(",")[0] for t in load_lexicon("onet_soc_2019_titles")["title"]]
    pool: set[str] = set()
    while len(pool) < size:
        words = official[rng.integers(len(official))].split()
        words = [w[:-1] if w.endswith("s") and k == len(words) - 1 else w for k, w in enumerate(words)]
        words = [shorthand.get(w.lower(), w) if rng.random() < 0.4 else w for w in words]
        if rng.random() < 0.3:
            words.insert(0, SENIORITY[rng.integers(len(SENIORITY))])
        if rng.random() < 0.5:
            words.append(SUFFIXES[rng.integers(len(SUFFIXES))])
        text = " ".join(words)
        case = rng.integers(3)
        pool.add(text.upper() if case == 0 else text.lower() if case == 1 else text)
    return sorted(pool)


def sample_rows(pool: list[str], rows: int, seed: int = 2) -> pd.Series:
    rng = np.random.default_rng(seed)
    weights = 1.0 / np.arange(1, len(pool) + 1) ** 1.1
    order = rng.permutation(len(pool))
    picks = rng.choice(len(pool), size=rows, p=weights / weights.sum())
    return pd.Series(np.array(pool, dtype=object)[order][picks], name="title")


def time_it(function, *args) -> tuple[float, object]:
    """CPU seconds of one call (the machine may be shared, so wall time would overstate it)."""
    start = time.process_time()
    result = function(*args)
    return time.process_time() - start, result


def plain_pandas(titles: pd.Series) -> pd.Series:
    return titles.str.lower().str.replace(r"[^a-z0-9]+", " ", regex=True).str.strip()


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000, help="titles to normalize (default 1,000,000)")
    parser.add_argument("--pool", type=int, default=30_000, help="distinct titles in the pool (default 30,000)")
    args = parser.parse_args(argv)

    pool = title_pool(args.pool)
    titles = sample_rows(pool, args.rows)
    distinct = titles.nunique()
    _normalize_cached.cache_clear()  # time cold: nothing normalized before this run
    seconds, found = time_it(normalize_titles, titles)
    baseline, _ = time_it(plain_pandas, titles)
    print(f"rows {args.rows:,}  distinct {distinct:,}  "
          f"(top title {titles.value_counts().iloc[0]:,} rows)")
    print(f"normalize_titles     {seconds:7.2f} s  {args.rows / seconds:12,.0f} titles/s")
    print(f"pandas lower/replace {baseline:7.2f} s  {args.rows / baseline:12,.0f} titles/s")
    print(f"ratio (normalize_titles time / pandas time) {seconds / baseline:.2f}")
    print(f"empty keys {int(found['empty'].sum()):,}; multi-role rows {int(found['roles'].str.contains('|', regex=False).sum()):,}")

    official = load_lexicon("onet_soc_2019_titles")["title"]
    vocabulary = Counter(w for title in official for w in tokenize(title)[0])
    fit_seconds, corrector = time_it(SpellingCorrector().fit, dict(vocabulary))
    misspellings = make_misspellings(vocabulary, seed=0)
    scores = correction_scores(corrector, misspellings)
    print(f"spelling: vocabulary {len(corrector.vocabulary_):,} words, fit {fit_seconds:.2f} s; "
          f"{scores['misspellings']:,} single-edit misspellings of O*NET title words")
    print(f"spelling precision {scores['precision']:.3f}  recall {scores['recall']:.3f}")
    letters = "abcdefghijklmnopqrstuvwxyz"
    suffixes = [""] + [f"q{letter}" for letter in letters] + [f"x{letter}" for letter in letters[:13]]
    big = {f"{w}{s}": c for s in suffixes for w, c in vocabulary.items()}  # about 50,000 words
    big_seconds, _ = time_it(SpellingCorrector().fit, big)
    print(f"spelling: fit on {len(big):,} words {big_seconds:.2f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
