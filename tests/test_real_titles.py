"""Real titles: built from ESCO's past labels, titlematch codes the new labels better than the protocol's peer.

ESCO v1.0 occupation labels (European Commission), dev half, split by the protocol in
../shared/reference/README.md (benchmarks/_esco.py). To stay quick the test keeps the ISCO-08 major
groups 2 and 7 (professionals; craft and related trades: about 140 unit groups); the peer is the
protocol's TF-IDF word 1-2-grams + char_wb 2-4-grams into LogisticRegression(C=10), fitted in the same
test on the same past records. Quality only: speed is in benchmarks/bench_real_titles.py.
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

from titlematch.coding.classification import Classification
from titlematch.coding.coder import TitleCoder
from titlematch.confidence.calibration import calibrate

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "benchmarks"))
import _esco  # noqa: E402


def _subset(data: dict, pattern: str = r"^[27]") -> dict:
    return {k: v[v["code"].str.match(pattern)].reset_index(drop=True) for k, v in data.items()}


def test_new_real_titles_are_coded_better_than_by_the_peer():
    data = _subset(_esco.split(_esco.load_labels()))
    isco = Classification.builtin("isco08")
    leaves = isco.leaves()
    coder = TitleCoder().fit(data["past"][["title", "year"]], data["past"]["code"],
                             classification=leaves[leaves["code"].str.match(r"^[27]")])
    model = calibrate(coder, data["gold"], min_accuracy=0.9, n_boot=50).model
    coded = coder.code(data["new"][["title"]], confidence=model)
    truth = data["new"]["code"].to_numpy()
    ours = float(np.mean(coded["code"].to_numpy() == truth))
    peer = _esco.run_peer(data)
    theirs = float(np.mean(peer["new"]["code"].to_numpy() == truth))
    # The floor: about 86% right on this subset when measured (the full dev half: benchmarks/RESULTS.md).
    assert ours >= 0.83, ours
    # Measured on this subset: titlematch 0.875, the peer 0.861 on 2,227 new labels (0.868 before the
    # corrector kept first letters, 0.862 before the code-profile features; the full dev half: +3.1
    # points, benchmarks/RESULTS.md). Both are deterministic (fixed seeds, fixed folds).
    assert ours > theirs, (ours, theirs)
    # codes come out as the classification writes them, and their parent groups with them
    assert set(coded["code"]) <= set(leaves["code"])
    assert (coded["parent_code"] == isco.parent_of(coded["code"])).all()
    right = coded["code"].to_numpy() == truth
    accepted = coded["decision"].to_numpy() == "accept"
    assert right[accepted].mean() >= 0.85  # asked for 0.9 on the gold sample; new records hold it within sampling


def test_real_words_in_real_titles_are_not_corrected_into_other_words():
    # ESCO's labels are written with care: a word new to the dictionary is mostly a real word. The
    # corrector built as the dictionary builds it (titlematch.coding.candidates._corrector) trusts
    # words seen once in the past labels and keeps first letters (titlematch.normalize.spelling).
    from collections import Counter

    from titlematch.coding.candidates import _corrector
    from titlematch.coding.dictionary import TitleDictionary
    from titlematch.normalize.spelling import SpellingCorrector
    from titlematch.normalize.title_lexicon import tokenize

    data = _esco.split(_esco.load_labels())
    dictionary = TitleDictionary().fit(data["past"][["title", "code", "year"]], Classification.builtin("isco08"))
    corrector = _corrector(dictionary)
    # seen once in the past labels, real words all: left as they are (they were "corrected" to
    # captain, power, milk and mattress when words seen once did not count)
    once = dictionary.vocabulary
    for word in ("chaplain", "tower", "silk", "mayoress"):
        assert once.get(word) == 1, word
        assert corrector.correct_token(word) == word
    words = Counter(w for title in data["new"]["title"] for w in tokenize(title.lower())[0]
                    if w.isalpha() and len(w) >= corrector.min_length)
    unseen = [w for w in words if w not in once.index]
    changed = [w for w in unseen if corrector.correct_token(w) != w]
    # measured: 128 of the 561 words of the new labels that no past label uses (22.8%); 145 with
    # first letters free ("pottery" to "lottery", "vacation" to "aviation")
    assert len(unseen) > 400 and len(changed) / len(unseen) <= 0.25, (len(changed), len(unseen))
    free = SpellingCorrector(keep_first_letter=False).fit(corrector.vocabulary_)
    assert sum(free.correct_token(w) != w for w in unseen) > len(changed)
    assert all(corrector.correct_token(w)[0] == w[0] for w in changed)
