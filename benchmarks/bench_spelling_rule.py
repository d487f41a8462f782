"""Benchmark: the length-proportional spelling rule against the rule before it, on ESCO labels.

The corrector now spans at most one edit in words of 4 to 7 letters and two from 8 letters. The
peer is the same corrector
with the earlier rule (two edits for any word of 4 letters or more), run in the same process on
the same words. Vocabulary: the words of the ESCO occupation labels of the benchmark split
(``../shared/reference/esco/occupation_labels_dev.csv``, a benchmark file only, never shipped);
misspellings: single edits (the four kinds of Damerau 1964) and double edits, seeded; nonsense:
random 4-6 letter strings, seeded. Prints precision and recall of corrections, and the share of
random strings that either rule turns into a real word.

    python benchmarks/bench_spelling_rule.py
"""
from __future__ import annotations

import argparse
from collections import Counter
from pathlib import Path

import _common  # noqa: F401  (first: the same numpy memory setting for titlematch and its peer)
import numpy as np
import pandas as pd

from titlematch.normalize.spelling import SpellingCorrector, _edit, correction_scores, make_misspellings
from titlematch.normalize.title_lexicon import tokenize

ESCO = Path(__file__).resolve().parents[2] / "shared" / "reference" / "esco" / "occupation_labels_dev.csv"
EDITS = ("insertion", "deletion", "substitution", "transposition")


class EarlierRule(SpellingCorrector):
    """The peer: two edits for every word of four letters or more."""

    def allowed_distance(self, length: int) -> int:
        return self.max_distance


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--labels", default=str(ESCO))
    parser.add_argument("--seed", type=int, default=3)
    args = parser.parse_args()
    labels = pd.read_csv(args.labels, dtype=str, keep_default_na=False)["label"]
    vocab = Counter(w for t in labels for w in tokenize(t)[0] if w.isalpha())
    rng = np.random.default_rng(args.seed)
    one = make_misspellings(vocab, per_word=2, min_length=4, seed=args.seed)
    words = sorted(w for w in vocab if len(w) >= 5)
    two = []
    for w in rng.choice(words, min(1500, len(words)), replace=False):
        wrong = _edit(_edit(w, "substitution", rng), EDITS[rng.integers(4)], rng)
        if wrong != w and wrong not in vocab:
            two.append((wrong, w, len(w)))
    two = pd.DataFrame(two, columns=["misspelling", "word", "letters"])
    letters = np.array(list("abcdefghijklmnopqrstuvwxyz"))
    nonsense = [s for s in ("".join(rng.choice(letters, rng.integers(4, 7))) for _ in range(2000)) if s not in vocab]
    print(f"ESCO label words: {len(vocab):,}; single-edit misspellings {len(one):,}; double-edit {len(two):,}; "
          f"random strings {len(nonsense):,}")
    for name, corrector in (("earlier rule (peer)", EarlierRule().fit(vocab)), ("length rule", SpellingCorrector().fit(vocab))):
        s1 = correction_scores(corrector, one)
        short = correction_scores(corrector, two[two["letters"] < 8])
        long = correction_scores(corrector, two[two["letters"] >= 8])
        fake = np.mean([corrector.correct_token(s) != s for s in nonsense])
        print(f"{name:>20}: 1 edit P {s1['precision']:.3f} R {s1['recall']:.3f} | 2 edits, 5-7 letters "
              f"P {short['precision']:.3f} R {short['recall']:.3f} | 2 edits, 8+ letters P {long['precision']:.3f} "
              f"R {long['recall']:.3f} | random strings made words {fake:.3f}")


if __name__ == "__main__":
    main()
