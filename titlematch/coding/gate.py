"""Titles that name no occupation, found before any code is trusted.

Detection only: each title gets a ``title_flag`` (empty when nothing is wrong) and the router
(:func:`titlematch.confidence.routing.route`) refers every flagged record, whatever its
confidence. Three kinds of title are flagged, because a confidence model calibrated on real
titles has never seen them and can be confidently wrong about them:

* a whole-title non-answer, vague or not-working answer (``lexicons/title_non_answers.csv``:
  "refused", "don't know", "see above", "retired" ...);
* a title with letters of a script none of the dictionary's source titles used (the
  normalizer transliterates it, and the transliteration lands near unrelated titles);
* a title none of whose words, as written or as corrected, is a dictionary or lexicon word, or
  a misspelling of one (``near``: within the edits the corrector allows, whatever the first letter,
  so a typo the corrector leaves alone is no reason to refer).

Where the classification itself has a code for insufficient information (its official title
is a ``residual-code-title`` phrase of the same lexicon), that code is offered as a candidate.
"""
from __future__ import annotations

import unicodedata
from functools import lru_cache

import numpy as np
import pandas as pd

from ..io.lexicon import load_lexicon
from ..normalize.title_lexicon import tokenize

FLAG_COLUMN = "title_flag"
LATIN = "LATIN"


def fold_phrase(text: str) -> str:
    """The words of ``text`` as the title normalizer tokenizes them, joined by single spaces."""
    return " ".join(tokenize(text)[0])


@lru_cache(maxsize=1)
def _answers() -> tuple[dict[str, str], frozenset[str]]:
    table = load_lexicon("title_non_answers")
    residual = table["kind"] == "residual-code-title"
    kinds = {fold_phrase(p): k for p, k in zip(table.loc[~residual, "phrase"], table.loc[~residual, "kind"])}
    kinds.pop("", None)
    return kinds, frozenset(fold_phrase(p) for p in table.loc[residual, "phrase"])


def answer_kind(title: str) -> str:
    """``"non-answer"``, ``"vague"`` or ``"not-working"`` when the whole title is such an answer, else ``""``."""
    return _answers()[0].get(fold_phrase(title), "")


def _script(ch: str) -> str:
    if ch.isascii():
        return LATIN
    name = unicodedata.name(ch, "")
    # Latin letters with marks, and a few letter-like signs written in Latin text (ª, µ)
    if LATIN in name or name.startswith(("MODIFIER", "FEMININE", "MASCULINE", "MICRO")):
        return LATIN
    return name.split(" ", 1)[0] or "UNKNOWN"


def scripts_of(text: str) -> set[str]:
    """Unicode scripts of the letters of ``text``, by the first word of each letter's name
    (``ARABIC``, ``CYRILLIC``, ``CJK``, ``HANGUL`` ...); every ASCII letter is ``LATIN``."""
    if text.isascii():
        return {LATIN} if any(c.isalpha() for c in text) else set()
    return {_script(c) for c in text if c.isalpha()}


def scripts_of_titles(titles: pd.Series) -> list[str]:
    """Sorted scripts used by any title of ``titles`` (for the dictionary's provenance)."""
    found = {LATIN}
    text = titles.fillna("").astype(str)
    for title in text[~text.map(str.isascii)].unique():
        found |= scripts_of(title)
    return sorted(found)


def residual_codes(catalogue: pd.DataFrame) -> list[str]:
    """Codes whose official title says the information is insufficient to code (none in SOC 2018)."""
    if not len(catalogue):
        return []
    phrases = _answers()[1]
    folded = catalogue["title"].fillna("").astype(str).map(fold_phrase)
    return sorted(catalogue.loc[folded.map(lambda t: any(p in t for p in phrases)), "code"].astype(str))


def title_flags(titles, keys, corrected, *, known_words, known_scripts, near=None) -> np.ndarray:
    """One flag per title: ``""`` or the reason it must go to a person.

    ``titles`` as written, ``keys`` normalized, ``corrected`` after spelling correction (aligned);
    ``known_words`` the words of the dictionary and the lexicons; ``known_scripts`` the scripts of
    the dictionary's source titles; ``near`` (optional) tells whether a word is a misspelling of a
    known one (``SpellingCorrector.near_known``), asked only of titles with no known word.
    """
    flags = []
    known_scripts = set(known_scripts) | {LATIN}
    for title, key, fixed in zip(titles, keys, corrected):
        title = "" if not isinstance(title, str) else title
        kind = answer_kind(title) if title else ""
        if kind:
            flags.append(f"{kind}: {fold_phrase(title)!r}")
            continue
        unseen = scripts_of(title) - known_scripts
        if unseen:
            flags.append(f"script not in the dictionary: {', '.join(sorted(unseen))}")
        elif key and not any(w in known_words for w in set(key.split()) | set(fixed.split()) if w.isalpha()) \
                and not (near is not None and any(near(w) for w in key.split() if w.isalpha())):
            flags.append("no dictionary word")
        else:
            flags.append("")
    return np.asarray(flags, dtype=object)
