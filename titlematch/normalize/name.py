"""Establishment-name normalizer: a comparable key plus legal form, trade name and branch.

Pipeline for one name:

1. fold to ASCII (unidecode), lowercase, ``&`` -> ``and``, apostrophes dropped;
2. tokenize; runs of single letters are joined (``L.L.C.``, ``L L C`` -> ``llc``) and
   remembered as *marked*, like a word that follows a comma: a mark is what lets an
   ambiguous legal form such as ``SpA`` (also the English word *spa*) be taken out;
3. split at ``dba`` / ``d/b/a`` / ``t/a`` / ``aka`` / ``trading as`` / ``doing business as``
   into the legal name (the key) and the trade name;
4. from the end of each part, repeatedly take out a branch number (``#12``, ``Store 12``,
   ``No. 12``, ``Branch 12``, ``Location 12``) and a legal form (lexicon
   ``legal_forms.csv``); a bare trailing number is kept (``Studio 54``), so is a number
   inside the name (``Route 66 Diner``, ``7-Eleven``, ``3M``); nothing is taken out when
   it would leave the name empty;
5. drop a leading ``The`` (and a trailing ``, The``), expand business abbreviations
   (lexicon ``business_abbreviations.csv``).

A branch word goes with its number, so ``Walgreens Store #12`` gives key ``walgreens``;
the price is that ``Dollar Store #5`` gives ``dollar`` (compare it with a fuzzy scorer, not
exactly). Leading zeros of branch numbers are dropped (``Store 0012`` -> ``12``).

``Unit 12`` is deliberately *not* a branch: ``unit`` is an address word (USPS secondary
unit designator) and a name carrying it is usually an address that leaked into the name
field, so it stays in the key where a reviewer can see it.

Example
-------
>>> n = normalize_name("Baxter & Lowe Mfg., L.L.C. dba Blue Heron Cafe #12")
>>> (n.key, n.legal_form, n.trade_name, n.branch)
('baxter and lowe manufacturing', 'llc', 'blue heron cafe', '12')
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from functools import lru_cache
from typing import Iterable, NamedTuple

import pandas as pd
from unidecode import unidecode

from titlematch.io.lexicon import load_lexicon
from ._missing import is_missing
from ._series import as_series

__all__ = ["NormalizedName", "normalize_name", "normalize_names", "legal_form_table"]

# Words that announce a branch number when they stand right before it.
_BRANCH_WORDS = frozenset({"store", "branch", "location", "loc", "no", "nr", "number", "num"})
_BRANCH_NUMBER = re.compile(r"^(?:\d+[a-z]?|[a-z]\d+)$")
_WORD = re.compile(r"#|,|[a-z0-9]+")
# Single-token dba markers.  "ta" only counts when written as letters (t/a, T.A.),
# "aka" only with a name on both sides (it is also a word, e.g. a restaurant "Aka").
_DBA_TOKENS = {"dba": "dba", "ta": "dba", "aka": "aka"}
_DBA_PHRASES = {
    ("doing", "business", "as"): "dba",
    ("trading", "as"): "dba",
    ("also", "known", "as"): "aka",
}
_DBA_PHRASE_STARTS = frozenset(p[0] for p in _DBA_PHRASES)
_FILLERS = frozenset({"the", "and"})


@dataclass(frozen=True)
class NormalizedName:
    """Result of :func:`normalize_name`.

    ``key`` is the normalized legal name (the trade name when only a trade name was
    given); ``tokens`` are the words of ``key``; ``empty`` is true when the input held no
    word at all.
    """

    key: str
    trade_name: str = ""
    legal_form: str = ""
    branch: str = ""
    tokens: tuple[str, ...] = ()
    empty: bool = False


class _Token(NamedTuple):  # a tuple: made once per word of every name, cheaper than a frozen dataclass
    text: str
    marked: bool = False   # joined from single letters, or follows a comma
    letters: bool = False  # joined from two or more single letters
    hashed: bool = False   # preceded by '#'


# --------------------------------------------------------------------------- lexicons
def _tokenize(folded: str) -> list[_Token]:
    """Split folded text into tokens, joining runs of single letters (``s a de c v``)."""
    raw: list[_Token] = []
    comma = hashed = False
    for match in _WORD.finditer(folded):
        word = match.group()
        if word == ",":
            comma = True
            continue
        if word == "#":
            hashed = True
            continue
        raw.append(_Token(word, marked=comma, hashed=hashed))
        comma = hashed = False
    return _join_single_letters(raw)


def _join_single_letters(tokens: list[_Token]) -> list[_Token]:
    if not any(len(t.text) == 1 and t.text.isalpha() for t in tokens):
        return list(tokens)  # no run to join (most names): the loop below would copy them
    out: list[_Token] = []
    run: list[_Token] = []

    def flush() -> None:
        if len(run) >= 2:
            first = run[0]
            out.append(_Token("".join(t.text for t in run), True, True, first.hashed))
        else:
            out.extend(run)
        run.clear()

    for token in tokens:
        single = len(token.text) == 1 and token.text.isalpha()
        if not single or token.hashed:  # '#' ends a run of letters ("a # b c" -> a, bc)
            flush()
        if single:
            run.append(token)
        else:
            out.append(token)
    flush()
    return out


# Written-out markers are rewritten before tokenizing, so that the letters of "d.b.a." do not
# run into a following initial ("d.b.a. M&P" must not read as "dbam and p").
_MARKER_SPELLINGS = [
    (re.compile(r"(?<![a-z0-9])d\s*[./]\s*b\s*[./]\s*a(?![a-z0-9])\.?"), " dba "),
    (re.compile(r"(?<![a-z0-9])a\s*[./]\s*k\s*[./]\s*a(?![a-z0-9])\.?"), " aka "),
    (re.compile(r"(?<![a-z0-9])t\s*[./]\s*a(?![a-z0-9])\.?"), " trading as "),
    (re.compile(r"\(\s*the\s*\)"), ", the "),  # "Heron Group (The)"
]


def _fold(text: str) -> str:
    folded = unidecode(text).lower()
    folded = folded.replace("&", " and ").replace("'", "").replace("`", "")
    if "." in folded or "/" in folded or "(" in folded:  # every marker spelling holds one of them
        for pattern, replacement in _MARKER_SPELLINGS:
            folded = pattern.sub(replacement, folded)
    return folded


@lru_cache(maxsize=1)
def legal_form_table() -> dict[tuple[str, ...], tuple[str, bool]]:
    """Return ``{token tuple: (canonical legal form, ambiguous)}`` built from the lexicon.

    A tuple is ambiguous when any of its written spellings is flagged ambiguous; such a
    form is only taken out when written with dots or spaces, or after a comma.
    """
    table: dict[tuple[str, ...], tuple[str, bool]] = {}
    for row in load_lexicon("legal_forms").itertuples(index=False):
        key = tuple(t.text for t in _tokenize(_fold(row.variant)))
        ambiguous = row.ambiguous.strip().lower() == "yes"
        if key in table:
            canonical, was_ambiguous = table[key]
            if canonical != row.canonical:
                raise ValueError(f"legal_forms.csv: {row.variant!r} reads as {key} which is already {canonical!r}")
            ambiguous = ambiguous or was_ambiguous
        table[key] = (row.canonical, ambiguous)
    return table


@lru_cache(maxsize=1)
def _longest_legal_form() -> int:
    return max(len(k) for k in legal_form_table())


@lru_cache(maxsize=1)
def _legal_form_ends() -> frozenset[str]:
    """The last word of every legal form: a name ending otherwise has none to take out."""
    return frozenset(k[-1] for k in legal_form_table())


@lru_cache(maxsize=1)
def _abbreviations() -> dict[str, str]:
    table = load_lexicon("business_abbreviations")
    return dict(zip(table["abbreviation"].str.lower(), table["expansion"].str.lower()))


# --------------------------------------------------------------------------- stages
def _split_dba(tokens: list[_Token]) -> list[list[_Token]]:
    """Split at dba/aka markers that have a name on their right (aka: on both sides)."""
    parts: list[list[_Token]] = [[]]
    i = 0
    while i < len(tokens):
        kind, width = _dba_marker(tokens, i)
        if kind == "dba" and i + width == len(tokens) and parts[-1]:
            break  # a dangling "Acme d/b/a" carries no trade name
        if kind and i + width < len(tokens) and (kind == "dba" or parts[-1]):
            parts.append([])
            i += width
            continue
        parts[-1].append(tokens[i])
        i += 1
    return parts


def _dba_marker(tokens: list[_Token], i: int) -> tuple[str, int]:
    token = tokens[i]
    kind = _DBA_TOKENS.get(token.text)
    if kind and (token.text != "ta" or token.letters):
        return kind, 1
    if token.text not in _DBA_PHRASE_STARTS:
        return "", 0
    for phrase, phrase_kind in _DBA_PHRASES.items():
        if tuple(t.text for t in tokens[i:i + len(phrase)]) == phrase:
            return phrase_kind, len(phrase)
    return "", 0


def _has_word(tokens: list[_Token]) -> bool:
    return any(t.text not in _FILLERS for t in tokens)


def _take_branch(tokens: list[_Token]) -> str:
    """Remove a trailing branch number from ``tokens`` (in place); return it or ""."""
    if not tokens or not _BRANCH_NUMBER.match(tokens[-1].text):
        return ""
    start = len(tokens) - 1
    while start > 0 and tokens[start - 1].text in _BRANCH_WORDS:
        start -= 1
    if start == len(tokens) - 1 and not tokens[-1].hashed:
        return ""
    if not _has_word(tokens[:start]):
        return ""
    number = tokens[-1].text.lstrip("0") or "0"
    del tokens[start:]
    return number


def _take_legal_form(tokens: list[_Token]) -> str:
    """Remove the longest legal form ending ``tokens`` (in place); return its canonical form."""
    if not tokens or tokens[-1].text not in _legal_form_ends():
        return ""
    table = legal_form_table()
    longest = _longest_legal_form()
    for width in range(min(longest, len(tokens) - 1), 0, -1):
        tail = tokens[-width:]
        found = table.get(tuple(t.text for t in tail))
        if found is None:
            continue
        canonical, ambiguous = found
        if ambiguous and not tail[0].marked:
            continue
        rest = tokens[:-width]
        while rest and rest[-1].text == "and":  # "Smith & Co" -> "smith"
            rest = rest[:-1]
        if not _has_word(rest):
            continue
        del tokens[len(rest):]
        return canonical
    return ""


def _clean_part(tokens: list[_Token]) -> tuple[list[str], str, str]:
    """Strip branch numbers and legal forms from the end of one part; expand abbreviations."""
    tokens = list(tokens)
    legal_form = branch = ""
    changed = True
    while changed:
        changed = False
        found_branch = _take_branch(tokens)
        if found_branch:
            branch = branch or found_branch
            changed = True
        found_form = _take_legal_form(tokens)
        if found_form:
            legal_form = legal_form or found_form
            changed = True
        if len(tokens) > 1 and tokens[-1].text == "the" and tokens[-1].marked:  # "Heron Cafe, The"
            tokens.pop()
            changed = True
    while len(tokens) > 1 and tokens[0].text == "the":
        tokens = tokens[1:]
    return _expand(tokens), legal_form, branch


def _expand(tokens: list[_Token]) -> list[str]:
    words = [t.text for t in tokens]
    joined: list[str] = []
    for word in words:  # "co op" / "co-op" -> "coop" before the abbreviation lookup
        if word == "op" and joined and joined[-1] == "co":
            joined[-1] = "coop"
        else:
            joined.append(word)
    abbreviations = _abbreviations()
    expanded = [abbreviations.get(w, w) for w in joined]
    if not any(len(w) == 1 and w.isalpha() for w in expanded):
        return expanded  # no run of single letters to join
    return [t.text for t in _join_single_letters([_Token(w) for w in expanded])]


# --------------------------------------------------------------------------- public API

def _normalize_text(text: str) -> NormalizedName:
    parts = _split_dba(_tokenize(_fold(text)))
    cleaned = [_clean_part(p) for p in parts]
    legal_words, legal_form, branch = cleaned[0]
    trade_words: list[str] = []
    for words, form, part_branch in cleaned[1:]:
        if words and not trade_words:
            trade_words = words
        legal_form = legal_form or form
        branch = part_branch or branch  # the store number belongs to the trade name
    key_words = legal_words or trade_words
    if not key_words:
        return NormalizedName(key="", empty=True)
    return NormalizedName(
        key=" ".join(key_words),
        trade_name=" ".join(trade_words),
        legal_form=legal_form,
        branch=branch,
        tokens=tuple(key_words),
        empty=False,
    )


def normalize_name(text: str | None) -> NormalizedName:
    """Normalize one establishment name.

    Parameters
    ----------
    text : str or None
        The name as written. ``None`` (or a float NaN) gives an empty result.

    Returns
    -------
    NormalizedName
        ``key``, ``trade_name``, ``legal_form``, ``branch``, ``tokens``, ``empty``.

    Raises
    ------
    TypeError
        When ``text`` is neither a string nor missing.

    Example
    -------
    >>> normalize_name("The Heron Group, Inc.").key
    'heron group'
    """
    if is_missing(text):
        return NormalizedName(key="", empty=True)
    if not isinstance(text, str):
        raise TypeError(f"normalize_name: text must be a string, got {type(text).__name__}: {text!r}")
    return _normalize_text(text)


def normalize_names(values: Iterable[object]) -> pd.DataFrame:
    """Normalize many names; each distinct value is normalized once.

    Parameters
    ----------
    values : Series, list or other iterable
        Names; missing values (None, NaN) give ``empty=True``, other non-strings are
        converted with ``str``. Never raises on a value.

    Returns
    -------
    DataFrame
        Index of ``values`` (a RangeIndex for a plain iterable) and columns
        ``key, trade_name, legal_form, branch, empty``.

    Example
    -------
    >>> normalize_names(["Acme Mfg Co", None])["key"].tolist()
    ['acme manufacturing', '']
    """
    series = as_series(values, "normalize_names", "normalize_name")
    results: dict[object, NormalizedName] = {}
    rows = []
    for value in series.to_numpy(dtype=object):
        if is_missing(value):
            rows.append(NormalizedName(key="", empty=True))
            continue
        text = value if isinstance(value, str) else str(value)
        if text not in results:
            results[text] = _normalize_text(text)
        rows.append(results[text])
    columns = ["key", "trade_name", "legal_form", "branch", "empty"]
    frame = pd.DataFrame(
        {c: [getattr(r, c) for r in rows] for c in columns}, index=series.index, columns=columns
    )
    frame["empty"] = frame["empty"].astype(bool)
    return frame
